"""Resuming an interrupted session: what was done, and whether it is safe to go on.

A session can stop early in many ways: a crash, ``kill -9``, a power cut, a confirmed abort,
Ctrl+C. Its journal then holds every trial that ended (each ``trial_end`` line is fsynced), and
at most a torn last line. Resuming re-derives the same schedule, checks that it is the same
protocol, and continues at the first incomplete trial; the trial that was in progress is run
again from its start.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from runner.contract.events import ATTEMPT_STARTS, STATUS_COMPLETED
from runner.contract.hashing import file_sha256
from runner.contract.layout import FROZEN_PROTOCOL, FROZEN_TABLE
from runner.errors import JournalError
from runner.journal.read import JournalRead, read_journal
from runner.journal.trials import completed_trials as _completed
from runner.journal.trials import stimulus_hashes_now
from runner.protocol.load import LoadedProtocol
from runner.protocol.schedule import Schedule


class SessionComplete(JournalError):
    """The session asked to resume already ended as completed."""


class ResumeRefused(JournalError):
    """The resume would not continue the session as it was run (mode, speed or stimuli)."""


# The verb that runs each mode, for the refusal that names the right command.
VERB_OF_MODE = {"live": "run", "pilot": "pilot"}


@dataclass
class ResumePlan:
    """What an interrupted session did, and how it goes on."""

    done: set[int]
    attempt: int  # the number of the attempt about to start (2 for the first resume)
    interrupted: dict[str, Any] = field(default_factory=dict)
    header: dict[str, Any] = field(default_factory=dict)
    # The stimulus hashes the session ran with so far (header, updated by acknowledged changes).
    stimulus_hashes: dict[str, str] = field(default_factory=dict)
    # Changed stimuli the experimenter accepted (--accept-changed-stimuli), journaled on resume.
    accepted_stimuli: list[dict[str, str]] = field(default_factory=list)


def resume_speed(header: dict[str, Any], mode: str, speed: float | None) -> float:
    """The speed a resume runs at: the session's own, from its journal header.

    A resume continues the session in the mode it was started in (a live session cannot be
    finished by ``pilot --resume``, nor a pilot by ``run --resume``) and at its speed: an
    explicit ``--speed`` that differs is refused rather than silently ignored.

    Raises
    ------
    ResumeRefused
        The mode differs, or ``speed`` is given and differs from the journaled one.
    """
    started = header.get("mode")
    if started != mode:
        verb = VERB_OF_MODE.get(str(started))
        how = f"continue it with `trialdeck {verb} --resume`" if verb else "it cannot be resumed"
        raise ResumeRefused(
            f"this session was started as a {started} session, so `{VERB_OF_MODE.get(mode, mode)}"
            f" --resume` cannot continue it; {how}."
        )
    journaled = header.get("speed", 1.0)
    if isinstance(journaled, bool) or not isinstance(journaled, (int, float)) or journaled <= 0:
        raise ResumeRefused("the journal header holds no valid speed, so it cannot be resumed.")
    if speed is not None and float(speed) != float(journaled):
        raise ResumeRefused(
            f"this session runs at --speed {journaled:g}; a resume keeps the session's speed."
            f" Leave out --speed (or give --speed {journaled:g})."
        )
    return float(journaled)


def changed_stimuli(
    journaled: dict[str, str], loaded: LoadedProtocol
) -> tuple[list[dict[str, str]], list[str]]:
    """Stimulus files whose content differs from the journaled hashes.

    ``journaled`` are the hashes the session ran with (:attr:`ResumePlan.stimulus_hashes`).
    Returns the changed files (``{"stimulus", "old", "new"}``, in journal order) and the files
    that can no longer be read.
    """
    base = loaded.table.path.parent
    changed: list[dict[str, str]] = []
    missing: list[str] = []
    for rel, old in journaled.items():
        try:
            new = file_sha256(base / str(rel))
        except OSError:
            missing.append(str(rel))
            continue
        if new != old:
            changed.append({"stimulus": str(rel), "old": str(old), "new": new})
    return changed, missing


def check_stimuli(
    journaled: dict[str, str], loaded: LoadedProtocol, *, accept_changed: bool
) -> list[dict[str, str]]:
    """Refuse to resume with stimuli that differ from those the session started with.

    Returns the changed files when ``accept_changed`` is set (the caller journals them as
    acknowledged); a missing file is always refused, as it cannot be shown.

    Raises
    ------
    ResumeRefused
        A stimulus is missing, or changed without ``accept_changed``.
    """
    changed, missing = changed_stimuli(journaled, loaded)
    base = loaded.table.path.parent
    if missing:
        raise ResumeRefused(
            f"stimulus file {missing[0]} (in {base}) is missing"
            + (f", and {len(missing) - 1} more" if len(missing) > 1 else "")
            + "; restore the files the session started with before resuming."
        )
    if changed and not accept_changed:
        names = ", ".join(c["stimulus"] for c in changed[:5])
        more = f" and {len(changed) - 5} more" if len(changed) > 5 else ""
        raise ResumeRefused(
            f"stimulus files changed since the session started: {names}{more} (in {base}). Restore"
            " the originals, or resume with --accept-changed-stimuli to go on with the new files"
            " (the change is journaled and reported by audit)."
        )
    return changed


def schedule_summary(schedule: Schedule) -> list[dict[str, Any]]:
    """The schedule as written in the journal header (compared on resume)."""
    return [
        {
            "trial": t.trial,
            "part": t.part,
            "block": t.block,
            "row": t.row,
            "stimulus": t.stimulus,
            "fixation_ms": t.fixation_ms,
        }
        for t in schedule.trials
    ]


def completed_trials(read: JournalRead) -> set[int]:
    """Trial numbers with a ``trial_end`` line in the journal."""
    return _completed(read.records)


def describe_interruption(read: JournalRead, torn_bytes: int) -> dict[str, Any]:
    """What the last attempt was doing when it stopped (journaled as ``session_interrupted``)."""
    records = read.records
    last = records[-1]
    starts = [i for i, r in enumerate(records) if r.get("event") in ATTEMPT_STARTS]
    attempt_records = records[starts[-1] :] if starts else records
    ended = {r.get("trial") for r in attempt_records if r.get("event") == "trial_end"}
    in_progress = None
    for r in reversed(attempt_records):
        if r.get("event") == "trial_start":
            if r.get("trial") not in ended:
                in_progress = r.get("trial")
            break
    closing = next((r for r in reversed(attempt_records) if r.get("event") == "session_end"), None)
    return {
        "attempt": len(starts),
        "last_seq": last.get("seq"),
        "last_event": last.get("event"),
        "last_t": last.get("t"),
        "status": closing.get("status") if closing else "killed",
        "trial_in_progress": in_progress,
        "trials_done": len(completed_trials(read)),
        "torn_bytes": torn_bytes,
    }


def plan_resume(path: Path, loaded: LoadedProtocol, schedule: Schedule) -> ResumePlan:
    """Check that the journal at ``path`` can be resumed with this protocol and schedule.

    Raises
    ------
    JournalError
        The journal fails its integrity check, belongs to another protocol or schedule, or the
        session is already complete.
    """
    read = read_journal(path)
    if read.chain_errors:
        raise JournalError(
            f"{path} fails its integrity check ({read.chain_errors[0]}), so it cannot be resumed."
            " Keep the folder as it is and start the participant under another --session label."
        )
    header = read.header
    if header is None:
        raise JournalError(f"{path} has no readable header line; it cannot be resumed.")
    if header.get("protocol_hash") != loaded.content_hash:
        raise JournalError(
            f"the protocol, its trial table or its pages changed since this session started, so"
            f" it cannot be resumed with {loaded.path}. The session's frozen copies are"
            f" {path.parent / FROZEN_PROTOCOL} and {path.parent / FROZEN_TABLE}."
        )
    if header.get("schedule") != schedule_summary(schedule):
        raise JournalError(
            "the schedule derived now differs from the one in the journal, so the session cannot"
            " be resumed (different participant, session or trialdeck version?)."
        )
    starts = [r for r in read.records if r.get("event") in ATTEMPT_STARTS]
    ends = [r for r in read.records if r.get("event") == "session_end"]
    if ends and ends[-1].get("status") == STATUS_COMPLETED and read.records[-1] is ends[-1]:
        raise SessionComplete(
            f"the session at {path.parent} is complete; there is nothing to resume."
        )
    with open(path, "rb") as fh:
        size = fh.seek(0, 2)
    return ResumePlan(
        done=completed_trials(read),
        attempt=len(starts) + 1,
        interrupted=describe_interruption(read, size - read.good_bytes),
        header=header,
        stimulus_hashes=stimulus_hashes_now(read.records),
    )
