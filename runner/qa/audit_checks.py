"""The audit's checks of one session: completeness, files, responses, recording.

The timing check is :mod:`runner.qa.audit_timing`.

Each check reads the journal's event lines (:class:`runner.qa.audit_facts.EventIndex`), adds
problems to a :class:`runner.qa.audit_facts.Findings` and its measurements to ``facts``.
"""

from __future__ import annotations

import csv
import dataclasses
from collections import Counter, defaultdict
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from runner.contract.events import STATUS_ABORTED, STATUS_COMPLETED
from runner.contract.hashing import HashCache
from runner.contract.layout import FROZEN_PROTOCOL, FROZEN_TABLE, TRIALS_NAME, display_path
from runner.contract.line import as_int, num
from runner.errors import ProtocolError, RecordingError
from runner.journal.frozen import frozen_protocol, frozen_text
from runner.journal.timeline import session_timeline
from runner.journal.trials import (
    PROCESS_STARTS,
    STIMULI_ACCEPTED,
    Attempt,
    stimulus_hashes_now,
    trial_of_end,
)
from runner.qa.audit_facts import (
    CompletedTrial,
    EventIndex,
    Findings,
    Numbered,
    listing,
    plural,
    ranges,
    stats,
)
from runner.recording import Recording, RecordingReport, check_recording
from runner.recording.check import sequence_mismatch
from runner.recording.dejitter import dejitter
from runner.recording.identity import compare_identity
from runner.recording.photodiode import find_photodiode_stream, light_onsets, measure_latency

# Responses faster than this (divided by the pilot speed) are flagged as possible anticipations
# or a stuck key. No published floor exists for counting tasks; 200 ms is common practice for
# simple reaction times, and counting the stops on a route takes far longer.
ANTICIPATION_MS = 200.0
CLEAN_END = STATUS_COMPLETED
ABORTED = STATUS_ABORTED


@dataclass(frozen=True)
class Mismatch:
    """A trial record value that disagrees with the journal's key presses (or the scale)."""

    trial: int
    line: int
    what: str
    journaled: Any
    recorded: Any


def check_completion(
    header: dict[str, Any],
    ix: EventIndex,
    attempts: list[Attempt],
    out: Findings,
    facts: dict[str, Any],
) -> dict[int, CompletedTrial]:
    """Every scheduled trial completed once, or the rest journaled as aborted.

    Returns the completed trials by trial number.
    """
    schedule = header["schedule"] if isinstance(header.get("schedule"), list) else []
    planned: dict[int, dict[str, Any]] = {}
    for s in schedule:
        if isinstance(s, dict) and as_int(s.get("trial")) is not None:
            planned[s["trial"]] = s
    if header and not planned:
        out.error(
            "the journal header holds no trial schedule, so completeness cannot be checked.",
            1,
            code="no-schedule",
        )
    ends: dict[int, list[Numbered]] = defaultdict(list)
    for n, rec in ix.of("trial_end"):
        t = trial_of_end(rec)
        row = rec.get("record")
        if t is None or not isinstance(row, dict):
            out.error(
                f"line {n} closes a trial but holds no trial record.",
                n,
                code="trial-without-record",
            )
            continue
        ends[t].append((n, row))

    completed: dict[int, CompletedTrial] = {}
    for t, found in sorted(ends.items()):
        if t not in planned:
            out.error(
                f"trial {t} was completed (line {found[0][0]}) but is not in the "
                "session's schedule.",
                found[0][0],
                code="unscheduled-trial",
            )
            continue
        if len(found) > 1:
            lines = ", ".join(str(n) for n, _ in found)
            out.error(
                f"trial {t} was completed {len(found)} times (lines {lines}); each trial "
                "must be completed once. Analyse the last completion or exclude the trial.",
                found[1][0],
                code="trial-repeated",
            )
        n, row = found[-1]
        completed[t] = CompletedTrial(n, row)
        want = planned[t].get("stimulus")
        if want is not None and row.get("stimulus") != want:
            out.error(
                f"trial {t} showed {row.get('stimulus')!r} but the schedule planned {want!r}.",
                n,
                code="wrong-stimulus",
            )

    missing = [t for t in planned if t not in completed]
    last = attempts[-1] if attempts else None
    status = last.status if last else None
    aborts = ix.of("abort")
    aborted_at: int | None = aborts[-1][0] if aborts else None
    events = ix.events
    if missing:
        rng = ranges(missing)
        if last is None:
            out.error(
                f"the session never started: none of its {len(planned)} scheduled trials were run.",
                1,
                code="session-not-started",
            )
        elif status is None:
            n = events[-1][0] if events else 1
            out.error(
                f"the session stopped without its closing line (a crash, power loss or a killed "
                f"program after line {n}); {plural(len(missing), 'scheduled trial')} "
                f"({rng}) {'was' if len(missing) == 1 else 'were'} not completed. Resume the "
                "session to run them.",
                n,
                code="session-interrupted",
            )
        elif status == ABORTED:
            out.warning(
                f"the session was aborted by the experimenter (line {aborted_at or last.end_line}"
                f"); {plural(len(missing), 'scheduled trial')} ({rng}) "
                f"{'was' if len(missing) == 1 else 'were'} not run.",
                aborted_at or last.end_line or 0,
                code="session-aborted",
            )
        elif status == CLEAN_END:
            what = plural(len(missing), "scheduled trial")
            verb = "has" if len(missing) == 1 else "have"
            out.error(
                f"the session says it completed, but {what} ({rng}) {verb} no result.",
                last.end_line or 0,
                code="trials-missing",
            )
        else:
            out.error(
                f"the session ended with status {status!r} (line {last.end_line}); "
                f"{plural(len(missing), 'scheduled trial')} ({rng}) "
                f"{'was' if len(missing) == 1 else 'were'} not completed. Resume the session "
                "to run them.",
                last.end_line or 0,
                code="session-incomplete",
            )
    elif last is not None and status is None:
        out.warning(
            "every trial was completed, but the journal has no closing session_end "
            "line (the program stopped before the end screen).",
            events[-1][0] if events else 0,
            code="no-session-end",
        )

    # Attempts before the last: each must have stopped (else a second program wrote into the
    # same journal), and its interrupted trials must be completed later.
    resumed: list[dict[str, Any]] = []
    for a in attempts:
        later_done = {t for b in attempts if b.index > a.index for t in b.completed}
        for t in a.interrupted_trials:
            if t in later_done:
                resumed.append({"trial": t, "interrupted_in": a.index})
        if a is not last and a.status == CLEAN_END:
            out.warning(
                f"attempt {a.index} (line {a.start_line}) completed, yet the journal "
                "continues with another attempt.",
                a.start_line,
                code="attempt-after-end",
            )
    for b in attempts[1:]:
        if b.kind != "session_resume":
            out.warning(
                f"line {b.start_line} starts the session again without a resume line; "
                "an earlier attempt is in the same journal.",
                b.start_line,
                code="restart-without-resume",
            )
        repeated = sorted(
            set(b.started) & {t for x in attempts[: b.index - 1] for t in x.completed}
        )
        if repeated:
            out.error(
                f"attempt {b.index} (line {b.start_line}) ran trials already completed "
                f"before it: {ranges(repeated)}.",
                b.start_line,
                code="trial-rerun",
            )
    facts["trials"] = {
        "scheduled": len(planned),
        "completed": len(completed),
        "missing": sorted(missing),
        "final_status": status,
        "attempts": len(attempts),
        "interrupted_then_completed": resumed,
    }
    return completed


# --------------------------------------------------------------------------------------------
# Files: stimuli, frozen protocol and trial table


def check_files(
    header: dict[str, Any],
    folder: Path,
    out: Findings,
    facts: dict[str, Any],
    cache: HashCache,
    ix: EventIndex | None = None,
) -> None:
    """The frozen copies and the stimulus files against the journal.

    A stimulus is compared with the hash the session last ran with: the header's, or the new
    one of a change accepted at a resume (``ix``'s ``stimuli_changed_accepted`` lines, which
    :func:`check_accepted_stimuli` reports).
    """
    info: dict[str, Any] = {}
    for name, key in ((FROZEN_PROTOCOL, "protocol_text"), (FROZEN_TABLE, "trial_table_text")):
        path = folder / name
        text = header.get(key)
        if not isinstance(text, str):
            continue
        if not path.is_file():
            out.warning(
                f"the frozen copy {name} is missing from the session folder; the "
                "journal header still holds its text.",
                file=display_path(path),
                code="frozen-copy-missing",
            )
            info[name] = "missing"
            continue
        have = path.read_bytes().decode("utf-8-sig", errors="replace")
        if have != text:
            out.error(
                f"the frozen copy {name} differs from the text the session ran with "
                "(journal header); it was edited after the session.",
                file=display_path(path),
                code="frozen-copy-changed",
            )
            info[name] = "changed"
        else:
            info[name] = "unchanged"

    hashes = header.get("stimulus_hashes")
    if isinstance(hashes, dict) and ix is not None:
        hashes = stimulus_hashes_now([header] + [r for _, r in ix.of(STIMULI_ACCEPTED)])
    table_file = header.get("trial_table_file")
    if not isinstance(hashes, dict) or not isinstance(table_file, str):
        facts["files"] = info
        return
    base = Path(table_file).parent
    changed, absent, same = [], [], 0
    for rel, want in hashes.items():
        path = base / str(rel)
        try:
            have = cache.sha256(path)
        except OSError:
            absent.append(str(rel))
            continue
        if have != want:
            changed.append(str(rel))
        else:
            same += 1
    if changed:
        out.error(
            f"{plural(len(changed), 'stimulus file')} changed since the session "
            f"({listing(changed)}, in {base}): participants saw the earlier version. Restore "
            "the files from the study's archive before the next session or analysis.",
            file=display_path(base / changed[0]),
            code="stimulus-changed",
        )
    if absent:
        out.warning(
            f"{plural(len(absent), 'stimulus file')} cannot be found at {base} to check "
            f"({listing(absent)}); audit on the presenter computer, or copy the stimuli to the "
            "same place, to verify them.",
            code="stimulus-not-found",
        )
    info["stimuli"] = {
        "checked": len(hashes),
        "unchanged": same,
        "changed": changed,
        "not_found": absent,
        "folder": str(base),
    }
    facts["files"] = info


# --------------------------------------------------------------------------------------------
# Answers, ratings, response times


def check_responses(
    header: dict[str, Any],
    ix: EventIndex,
    completed: dict[int, CompletedTrial],
    out: Findings,
    facts: dict[str, Any],
) -> None:
    speed = num(header.get("speed")) or 1.0
    points = _rating_points(header)
    answered: dict[int, dict[str, Any]] = {}
    rated: dict[int, dict[str, Any]] = {}
    for _, rec in ix.of("answer", "rating"):
        tr = as_int(rec.get("trial"))
        if tr is None:
            continue
        if rec.get("event") == "answer":
            answered[tr] = rec
        elif rec.get("event") == "rating":
            rated[tr] = rec
    no_answer: list[int] = []
    no_rating: list[int] = []
    timed_out: list[int] = []
    bad: list[Mismatch] = []
    rts: list[float] = []
    fast: list[int] = []
    floor = ANTICIPATION_MS / speed
    for tr, done in sorted(completed.items()):
        n, row = done.line, done.record
        ans, unsure = row.get("answer"), bool(row.get("unsure"))
        t_out = bool(row.get("timed_out"))
        if ans is None and not unsure:
            (timed_out if t_out else no_answer).append(tr)
        ev = answered.get(tr)
        if ev is not None and (ev.get("answer") != ans or bool(ev.get("unsure")) != unsure):
            bad.append(Mismatch(tr, n, "answer", ev.get("answer"), ans))
        rating = row.get("rating")
        if rating is None:
            no_rating.append(tr)
        else:
            rev = rated.get(tr)
            if rev is not None and rev.get("rating") != rating:
                bad.append(Mismatch(tr, n, "rating", rev.get("rating"), rating))
            if points is not None and not (as_int(rating) is not None and 1 <= rating <= points):
                bad.append(Mismatch(tr, n, "rating", f"1..{points}", rating))
        expected = row.get("expected")
        correct = row.get("correct")
        if expected is not None and as_int(ans) is not None and not unsure:
            want = int(ans == expected)
            if correct != want:
                bad.append(Mismatch(tr, n, "correct", want, correct))
        rt = num(row.get("rt_ms"))
        if rt is not None:
            rts.append(rt)
            if rt < floor:
                fast.append(tr)
    first_line = {tr: done.line for tr, done in completed.items()}
    if no_answer:
        out.error(
            f"{plural(len(no_answer), 'completed trial')} ({ranges(no_answer)}) "
            f"{'has' if len(no_answer) == 1 else 'have'} no answer, yet "
            f"{'was' if len(no_answer) == 1 else 'were'} neither marked unsure nor timed "
            "out; the trial record is inconsistent.",
            first_line[no_answer[0]],
            code="answer-missing",
        )
    if timed_out:
        out.warning(
            f"{plural(len(timed_out), 'trial')} ({ranges(timed_out)}) timed out without an answer.",
            first_line[timed_out[0]],
            code="trial-timed-out",
        )
    if no_rating:
        out.warning(
            f"{plural(len(no_rating), 'trial')} ({ranges(no_rating)}) "
            f"{'has' if len(no_rating) == 1 else 'have'} no difficulty rating (the "
            "rating screen timed out).",
            first_line[no_rating[0]],
            code="rating-missing",
        )
    for m in bad:
        out.error(
            f"trial {m.trial}: the trial record's {m.what} is {m.recorded!r}, but the journal's "
            f"key presses give {m.journaled!r}.",
            m.line,
            code="record-mismatch",
        )
    if fast:
        out.warning(
            f"{plural(len(fast), 'response')} came faster than {floor:g} ms after "
            f"stimulus onset (trials {ranges(fast)}): possible anticipations or a "
            "stuck key.",
            first_line[fast[0]],
            code="fast-response",
        )
    early = [(n, as_int(rec.get("trial"))) for n, rec in ix.of("anticipation")]
    early_trials = sorted({tr for _, tr in early if tr is not None})
    if early:
        out.warning(
            f"{plural(len(early), 'key press', 'key presses')} came before stimulus onset (trials "
            f"{ranges(early_trials)}) and {'was' if len(early) == 1 else 'were'} journaled as "
            "anticipations, not responses.",
            early[0][0],
            code="anticipations",
        )
    outcomes = Counter(str(done.record.get("outcome")) for done in completed.values())
    facts["responses"] = {
        "rt_ms": stats(rts),
        "outcomes": dict(sorted(outcomes.items())),
        "no_answer": no_answer,
        "timed_out": timed_out,
        "no_rating": no_rating,
        "fast": fast,
        "anticipation_floor_ms": floor,
        "anticipations": len(early),
        "anticipation_trials": early_trials,
    }


def _rating_points(header: dict[str, Any]) -> int | None:
    """The rating scale's number of points, from the frozen protocol text (None: unreadable)."""
    text = frozen_text(header)
    if text is None:
        return None
    try:
        return int(frozen_protocol(text).rating.points)
    except (ProtocolError, ValueError):  # pydantic's ValidationError is a ValueError
        # An unreadable frozen protocol only skips this one check.
        return None


def check_trials_csv(
    folder: Path,
    completed: dict[int, CompletedTrial],
    out: Findings,
    facts: dict[str, Any],
) -> None:
    path = folder / TRIALS_NAME
    if not path.is_file():
        out.warning(
            f"{TRIALS_NAME} is missing from the session folder; it is derived from the "
            "journal and can be written again from it.",
            file=display_path(path),
            code="trials-csv-missing",
        )
        facts["trials_csv"] = "missing"
        return
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    have = sorted(int(r["trial"]) for r in rows if (r.get("trial") or "").isdigit())
    if have != sorted(completed):
        out.warning(
            f"{TRIALS_NAME} lists {len(rows)} trials but the journal completed "
            f"{len(completed)}; it is out of date with the journal (the journal is the "
            "source of truth).",
            file=display_path(path),
            code="trials-csv-stale",
        )
        facts["trials_csv"] = "out of date"
    else:
        facts["trials_csv"] = "matches the journal"


# --------------------------------------------------------------------------------------------
# Against the recording


def journaled_markers(events: Iterable[tuple[int, dict[str, Any]]]) -> list[tuple[str, float]]:
    """(payload, LSL timestamp) of every marker the journal says it sent."""
    out: list[tuple[str, float]] = []
    for _, rec in events:
        payload, t = rec.get("marker"), num(rec.get("t"))
        if isinstance(payload, str) and t is not None:
            out.append((payload, t))
    return out


def check_against_recording(
    header: dict[str, Any],
    events: list[tuple[int, dict[str, Any]]],
    recording: Recording,
    out: Findings,
    facts: dict[str, Any],
    max_gap_s: float,
    residual_limit_ms: float,
) -> RecordingReport | None:
    rec_file = display_path(recording.path)
    markers = header["markers"] if isinstance(header.get("markers"), dict) else {}
    source_id = markers.get("source_id") if isinstance(markers.get("source_id"), str) else None
    name = markers.get("name") if isinstance(markers.get("name"), str) else None
    journaled = journaled_markers(events)
    try:
        report = check_recording(
            recording,
            journaled,
            source_id=source_id,
            name=name,
            max_gap_s=max_gap_s,
            residual_limit_ms=residual_limit_ms,
        )
    except RecordingError as exc:
        out.error(str(exc), file=rec_file, code="unreadable-recording")
        facts["recording"] = {"path": str(recording.path), "error": str(exc)}
        return None
    # Whose recording is it? The marker stream's own identity comes first.
    for sid in report.choice.stream_ids:
        identity = compare_identity(recording.stream(sid).identity, header)
        if identity.known and not identity.matches:
            out.error(
                f"this is not this session's recording: {identity.describe()}; pick that "
                "session's recording (or this session's own).",
                file=rec_file,
                code="recording-identity",
            )
            facts["recording"] = report.as_dict()
            return report
    if sequence_mismatch(report.match):
        m = report.match
        out.error(
            f"the recorded markers do not line up with this session's as a sequence: after the "
            f"clock's offset and drift their times still differ by "
            f"{m.residual_median_abs_ms:.1f} ms at the median ({m.matched} payloads in common); "
            "it is probably another session's recording of the same protocol.",
            file=rec_file,
            code="recording-sequence",
        )
        facts["recording"] = report.as_dict()
        return report
    # A garbage sample left by a closing outlet and notes of the XDF reader are warnings; a
    # restart that split the marker stream (joined by source_id) is information, shown with the
    # recording's facts; everything else the check finds is an error.
    calm = dataclasses.replace(
        report,
        reader_notes=[],
        match=dataclasses.replace(report.match, garbage=[]),
        choice=dataclasses.replace(report.choice, combined=False, coverage=None),
    )
    errors = calm.problems()
    for sentence in errors:
        out.error(sentence, file=rec_file, code="recording-mismatch")
    joined_note = report.choice.note if report.choice.combined else None
    for sentence in report.problems():
        if sentence not in errors and sentence != joined_note:
            out.warning(sentence, file=rec_file, code="recording-mismatch")
    if report.choice.note and not report.choice.combined:
        out.warning(
            f"several marker streams could be this session's: {report.choice.note}",
            file=rec_file,
            code="ambiguous-marker-stream",
        )
    facts["recording"] = report.as_dict()
    return report


def check_photodiode(
    events: list[tuple[int, dict[str, Any]]],
    recording: Recording,
    report: RecordingReport,
    spec: str,
    out: Findings,
    facts: dict[str, Any],
) -> None:
    """Display latency from a recorded light sensor on the photodiode patch (see
    :mod:`runner.recording.photodiode`): each flip that lit the patch, mapped onto the recorder's
    clock (its recorded marker time where there is one), paired with the sensor's light edge."""
    rec_file = display_path(recording.path)
    try:
        stream, channel = find_photodiode_stream(recording, spec)
    except RecordingError as exc:
        out.error(str(exc), file=rec_file, code="photodiode-missing")
        return
    clock = report.match.clock
    if clock is None:
        return
    recorded = report.match.recorded_times()
    flips = [
        (float(r["t"]), bool(r.get("photodiode"))) for _, r in events if r.get("event") == "flip"
    ]
    onsets = [recorded.get(t, clock.to_recorder(t)) for t in light_onsets(flips)]
    times = dejitter(recording.timestamps(stream.stream_id), stream.nominal_srate)
    values = np.asarray(recording.channel(stream.stream_id, channel), dtype=float)
    result = measure_latency(times, values, onsets, stream=stream.name, channel=channel)
    facts["photodiode"] = result.as_dict() | {"sentence": result.describe()}
    lat = result.latency
    if lat.missed or len(lat.extra_edges):
        out.warning(
            f"{result.describe()}: the patch did not light for every onset, or lit without one; "
            "check the sensor's placement and the display's settings (dimming, overdrive).",
            file=rec_file,
            code="photodiode-edges",
        )


# --------------------------------------------------------------------------------------------
# Changed stimuli accepted at a resume


def check_accepted_stimuli(ix: EventIndex, out: Findings, facts: dict[str, Any]) -> None:
    """Report each resume that went on with changed stimuli (``--accept-changed-stimuli``)."""
    found: list[dict[str, Any]] = []
    for n, rec in ix.of(STIMULI_ACCEPTED):
        files = [f for f in rec.get("files") or [] if isinstance(f, dict)]
        names = [str(f.get("stimulus")) for f in files]
        attempt = as_int(rec.get("attempt"))
        found.append({"line": n, "attempt": attempt, "files": files})
        out.warning(
            f"at the resume that began attempt {attempt if attempt is not None else '?'} the "
            f"experimenter accepted {plural(len(files), 'changed stimulus file')} "
            f"({listing(names)}): trials before it showed the earlier "
            f"{'version' if len(files) == 1 else 'versions'}, trials after it the new "
            f"{'one' if len(files) == 1 else 'ones'} (old and new hashes are on this line).",
            n,
            code="changed-stimuli-accepted",
        )
    facts["stimuli_accepted"] = found


# --------------------------------------------------------------------------------------------
# Markers sent while no recorder was connected (from the journal alone)


def count_unrecorded_markers(events: Iterable[tuple[int, dict[str, Any]]]) -> dict[str, Any]:
    """Markers journaled while no consumer was connected to the marker stream.

    Each process (the first attempt, each resume) opens its own outlet with no consumer; the
    journal's ``recorder_connected`` and ``recorder_lost`` lines say when that changed.
    """
    connected = False
    ever = False
    sent = 0
    lost: list[tuple[int, int | None]] = []  # (line, trial)
    first_connect: int | None = None
    drops: list[int] = []
    for n, rec in events:
        event = rec.get("event")
        if event in PROCESS_STARTS:
            connected = False
        elif event == "recorder_connected":
            connected = ever = True
            if first_connect is None:
                first_connect = n
        elif event == "recorder_lost":
            connected = False
            drops.append(n)
        if isinstance(rec.get("marker"), str):
            sent += 1
            if not connected:
                lost.append((n, as_int(rec.get("trial"))))
    trials = [t for _, t in lost if t is not None]
    return {
        "sent": sent,
        "without_recorder": len(lost),
        "first_line": lost[0][0] if lost else None,
        "first_trial": min(trials) if trials else None,
        "last_trial": max(trials) if trials else None,
        "recorder": ("never connected" if not ever else "dropped" if drops else "connected"),
        "first_connected_line": first_connect,
        "dropped_lines": drops,
    }


def check_unrecorded_markers(
    events: list[tuple[int, dict[str, Any]]], out: Findings, facts: dict[str, Any]
) -> None:
    """Warn about markers the journal knows no recorder received (audit without a recording)."""
    info = count_unrecorded_markers(events)
    facts["markers"] = info
    n = info["without_recorder"]
    if not n:
        return
    if info["recorder"] == "never connected":
        why = "no recorder ever connected to the marker stream"
    elif info["dropped_lines"]:
        why = (
            "the recorder connected late or dropped out (lost at line "
            f"{listing(info['dropped_lines'])})"
        )
    else:
        why = f"the recorder connected late (at line {info['first_connected_line']})"
    if info["first_trial"] is None:
        where = "none of them in a trial"
    elif info["first_trial"] == info["last_trial"]:
        where = f"trial {info['first_trial']} affected"
    else:
        where = f"trials {info['first_trial']} to {info['last_trial']} affected"
    out.warning(
        f"{n} of {info['sent']} markers were sent while no recorder was connected ({why}; "
        f"{where}): they are in no recording. Give the recording with --recording to check "
        "what it holds.",
        info["first_line"] or 0,
        code="markers-unrecorded",
    )


# --------------------------------------------------------------------------------------------
# The session timeline across attempts


def check_timeline(
    records: list[tuple[int, dict[str, Any]]], out: Findings, facts: dict[str, Any]
) -> None:
    """How each attempt's clock maps onto the session timeline; a restarted clock is noted."""
    timeline = session_timeline([r for _, r in records])
    found: list[dict[str, Any]] = []
    for segment in timeline.segments:
        line = records[segment.first][0]
        found.append({**segment.as_dict(), "first_line": line})
        if not segment.restarted:
            continue
        out.warning(
            f"the clock restarted before the attempt that begins at line {line} (a reboot or"
            " another computer): its times were placed on the session timeline by the"
            f" {segment.bridge} (shifted {segment.offset:+.3f} s). Durations within the attempt"
            " are exact; the gap between attempts is as the wall clock says.",
            line,
            code="clock-restarted",
        )
    facts["timeline"] = found
