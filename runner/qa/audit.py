"""Audit a finished session from its journal (and, optionally, the lab's XDF recording).

The journal is the single source of truth of a session, so the audit reads only it, the frozen
protocol and trial table next to it, the stimulus files it names, and (when given) the recording.
It answers, for a lab assistant after each participant:

* **Integrity.** Does every journal line chain to the one before it? A truncated, edited,
  removed, added or reordered line is named by its line number. A torn last line (a crash while
  writing) is a warning when the lines before it chain correctly.
* **Completeness.** Was every scheduled trial completed exactly once, or is the rest journaled as
  aborted? Several attempts (resumes) are followed: a trial interrupted in one attempt and
  completed in a later one is fine.
* **Stimuli.** Are the stimulus files, the frozen protocol and the frozen trial table unchanged
  since the session (content hashes)?
* **Timing.** Requested against actual durations, late flips, fixation jitter and the
  response-time distribution.
* **Responses.** Answers and ratings complete and consistent with the journaled key presses.
* **Recording.** With an XDF file, the marker check of :mod:`runner.qa.recording`.

Errors make the audit fail (exit 1); warnings are facts to note in the analysis. Nothing here
imports pygame or pylsl.
"""

from __future__ import annotations

import csv
import dataclasses
import functools
import hashlib
import json
import math
import os
from collections import Counter, defaultdict
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from runner.errors import InputFileError, JournalError, Problem, ProtocolError, RecordingError
from runner.qa.recording import (
    DEFAULT_MAX_GAP_S,
    DEFAULT_RESIDUAL_LIMIT_MS,
    Recording,
    RecordingReport,
    check_recording,
)
from runner.session.events import JOURNAL_ONLY_EVENTS, MARKED_EVENTS
from runner.session.journal import GENESIS, HASH_CHARS, JOURNAL_FORMAT, JOURNAL_NAME
from runner.session.records import TRIALS_NAME

__all__ = [
    "AUDIT_FORMAT",
    "Attempt",
    "ChainCheck",
    "HashCache",
    "SessionAudit",
    "audit_session",
    "audit_sessions",
    "format_audits",
    "verify_chain",
]

AUDIT_FORMAT = "trialdeck-audit/1"
FROZEN_PROTOCOL = "protocol.yaml"
FROZEN_TABLE = "trial_table.csv"
HASH_CHUNK = 1 << 20

# A flip that lands more than half a refresh interval after its requested time missed its frame;
# the presenter counts late flips the same way (runner.present.screen.LATE_FRACTION).
LATE_FRACTION = 0.5
# A realised duration more than half a frame away from its whole-frame request is off by a frame.
DURATION_TOLERANCE_FRAMES = 0.5
# Responses faster than this (divided by the pilot speed) are flagged as possible anticipations
# or a stuck key. No published floor exists for counting tasks; 200 ms is common practice for
# simple reaction times, and counting the stops on a route takes far longer.
ANTICIPATION_MS = 200.0
PERCENTILES = (5.0, 50.0, 95.0)
MS = 1000.0
MAX_LISTED = 8  # trials or lines named in one sentence before "and N more"

ATTEMPT_STARTS = frozenset({"session_start", "session_resume"})
# Events that do not, by themselves, make an attempt "begun" (so a session_start written right
# after a session_resume belongs to the same attempt).
ATTEMPT_NEUTRAL = frozenset(
    {"session_start", "session_resume", "recorder_connected", "recorder_lost", "warning"}
)
KNOWN_EVENTS = MARKED_EVENTS | JOURNAL_ONLY_EVENTS | {"header"}
CLEAN_END = "completed"
ABORTED = "aborted"


# --------------------------------------------------------------------------------------------
# Small helpers


def _display(path: Path) -> str:
    """A path as problem lines show it: relative to the working folder when inside it."""
    try:
        rel = os.path.relpath(path)
    except ValueError:
        return str(path)
    return str(path) if rel.startswith("..") else rel


def _num(x: Any) -> float | None:
    """``x`` as a finite float, or None (journals are data from disk: never trust a type)."""
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        return None
    v = float(x)
    return v if math.isfinite(v) else None


def _int(x: Any) -> int | None:
    return x if isinstance(x, int) and not isinstance(x, bool) else None


def _listing(items: Sequence[Any], limit: int = MAX_LISTED) -> str:
    shown = ", ".join(str(i) for i in items[:limit])
    return shown if len(items) <= limit else f"{shown} and {len(items) - limit} more"


def _ranges(nums: Iterable[int]) -> str:
    """1, 2, 3, 5, 7, 8 -> '1-3, 5, 7-8'."""
    out: list[str] = []
    xs = sorted(set(nums))
    i = 0
    while i < len(xs):
        j = i
        while j + 1 < len(xs) and xs[j + 1] == xs[j] + 1:
            j += 1
        out.append(str(xs[i]) if i == j else f"{xs[i]}-{xs[j]}")
        i = j + 1
    return _listing(out)


def _plural(n: int, word: str, many: str | None = None) -> str:
    return f"{n} {word}" if n == 1 else f"{n} {many or word + 's'}"


def _percentile(sorted_xs: Sequence[float], q: float) -> float:
    """Linear-interpolation percentile of an already sorted list (numpy's default method)."""
    if len(sorted_xs) == 1:
        return sorted_xs[0]
    pos = (len(sorted_xs) - 1) * q / 100.0
    lo = math.floor(pos)
    hi = min(lo + 1, len(sorted_xs) - 1)
    return sorted_xs[lo] + (sorted_xs[hi] - sorted_xs[lo]) * (pos - lo)


def _stats(values: Iterable[float]) -> dict[str, float | int] | None:
    xs = sorted(values)
    if not xs:
        return None
    out: dict[str, float | int] = {"n": len(xs), "min": xs[0], "max": xs[-1]}
    for q in PERCENTILES:
        out[f"p{q:g}"] = _percentile(xs, q)
    return out


def file_sha256(path: Path) -> str:
    """sha256 of a file's bytes (the same digest the session header stores)."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        while chunk := fh.read(HASH_CHUNK):
            digest.update(chunk)
    return digest.hexdigest()


class HashCache:
    """sha256 of files, remembered by (path, size, modification time) for one audit run.

    Sessions of one study share their stimuli, so auditing many sessions hashes each file once.
    """

    def __init__(self) -> None:
        self._known: dict[tuple[str, int, int], str] = {}

    def sha256(self, path: Path) -> str:
        st = path.stat()
        key = (str(path), st.st_size, st.st_mtime_ns)
        found = self._known.get(key)
        if found is None:
            found = self._known[key] = file_sha256(path)
        return found


# --------------------------------------------------------------------------------------------
# The hash chain


@dataclass
class ChainCheck:
    """What :func:`verify_chain` found.

    ``records`` holds every line that parsed as a JSON object, with its 1-based line number,
    including lines after a break (the other checks still read them, and say so).
    ``intact_lines`` counts the lines before the first break.
    """

    path: Path
    line_count: int
    intact_lines: int
    records: list[tuple[int, dict[str, Any]]]
    problems: list[Problem] = field(default_factory=list)
    torn_line: int | None = None

    @property
    def broken(self) -> bool:
        return any(p.severity == "error" for p in self.problems)


@dataclass
class _Line:
    n: int
    obj: dict[str, Any] | None  # None: not a JSON object
    seq: int | None
    prev: str | None
    h: str | None
    self_ok: bool


# The tail every journal line ends with: ,"h":"<32 hex digits>"}
HASH_TAIL_START = b',"h":"'
HASH_TAIL = len(HASH_TAIL_START) + HASH_CHARS + len(b'"}')


def _self_hash(raw: bytes, prev: str) -> tuple[str, bool] | None:
    """(stored hash, whether it matches) for a raw line, or None without a hash field.

    The rule is the journal's (:func:`runner.session.journal.line_hash`): sha256 over the
    previous hash and the line's text without its ``h`` field, first 32 hex digits. It is
    applied to the bytes directly, which is the same as hashing the UTF-8 text.
    """
    if len(raw) < HASH_TAIL or not raw.endswith(b'"}'):
        return None
    if raw[-HASH_TAIL : -HASH_CHARS - 2] != HASH_TAIL_START:
        return None
    h = raw[-HASH_CHARS - 2 : -2].decode("ascii", errors="replace")
    body = raw[:-HASH_TAIL] + b"}"
    digest = hashlib.sha256(prev.encode("utf-8") + body).hexdigest()[:HASH_CHARS]
    return h, digest == h


def _line_of(n: int, raw: bytes, obj: Any) -> _Line:
    if not isinstance(obj, dict):
        return _Line(n, None, None, None, None, False)
    prev = obj.get("prev") if isinstance(obj.get("prev"), str) else None
    found = None if prev is None else _self_hash(raw, prev)
    if found is None:
        return _Line(n, obj, _int(obj.get("seq")), prev, None, False)
    return _Line(n, obj, _int(obj.get("seq")), prev, found[0], found[1])


def _parse_one(raw: bytes) -> Any:
    try:
        return json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError):
        return None


def _parse_whole(raws: list[bytes]) -> list[Any] | None:
    """The whole file parsed as one JSON array (several times faster than line by line).

    None when that fails or does not give one value per line (a damaged line).
    """
    if not raws:
        return None
    try:
        whole = json.loads(b"[" + b",".join(raws) + b"]")
    except (UnicodeDecodeError, json.JSONDecodeError):
        return None
    return whole if isinstance(whole, list) and len(whole) == len(raws) else None


def _fast_chain(raws: list[bytes], whole: list[Any]) -> list[tuple[int, dict[str, Any]]] | None:
    """The records of an intact journal, or None at the first line that needs a closer look.

    This is the common case, kept to one tight loop; any doubt sends the file to the
    line-by-line walk of :func:`verify_chain`, which names what is wrong.
    """
    sha = hashlib.sha256
    prev, prev_b = GENESIS, GENESIS.encode("ascii")
    out: list[tuple[int, dict[str, Any]]] = []
    try:
        for i, (raw, obj) in enumerate(zip(raws, whole, strict=True)):
            h = obj["h"]
            h_b = h.encode("ascii")
            if (
                obj["seq"] != i
                or obj["prev"] != prev
                or not raw.endswith(b',"h":"' + h_b + b'"}')
                or sha(prev_b + raw[:-HASH_TAIL] + b"}").hexdigest()[:HASH_CHARS] != h
            ):
                return None
            out.append((i + 1, obj))
            prev, prev_b = h, h_b
    except (KeyError, TypeError, AttributeError, UnicodeEncodeError):
        return None
    return out


def _parse_lines(raws: list[bytes], whole: list[Any] | None) -> list[_Line]:
    """Every line on its own, reusing the whole-file parse when its values line up."""
    if whole is not None:
        lines = [
            _line_of(n, raw, obj)
            for n, (raw, obj) in enumerate(zip(raws, whole, strict=True), start=1)
        ]
        if all(ln.h is not None and ln.obj is not None and ln.obj.get("h") == ln.h for ln in lines):
            return lines
    return [_line_of(n, raw, _parse_one(raw)) for n, raw in enumerate(raws, start=1)]


def verify_chain(path: Path) -> ChainCheck:
    """Check every line of a journal and name each break in the hash chain by its line number.

    Each line carries ``seq`` (0, 1, 2, ...), ``prev`` (the previous line's hash) and ``h`` (its
    own hash over ``prev`` and its text). A line whose own hash does not match was changed after
    it was written. A line whose ``seq`` or ``prev`` does not follow the line before it marks a
    removed, added or moved line; two neighbouring lines that would chain if exchanged are named
    as swapped. A last line without its newline is a torn write (warning).

    Parameters
    ----------
    path : Path
        The ``journal.jsonl`` file.

    Returns
    -------
    ChainCheck

    Raises
    ------
    JournalError
        The file does not exist or cannot be read.
    """
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise JournalError(
            f"there is no journal at {path}; check that the session folder is the one that holds "
            "journal.jsonl (…/sub-<participant>/ses-<session>/)."
        ) from None
    except OSError as exc:
        raise JournalError(f"the journal {path} cannot be read: {exc.strerror}.") from None
    name = _display(path)
    raws = data.split(b"\n")
    torn_raw: bytes | None = None
    if raws and raws[-1] == b"":
        raws.pop()
    elif raws:
        torn_raw = raws.pop()
    problems: list[Problem] = []
    first_break: int | None = None

    def err(n: int, message: str) -> None:
        nonlocal first_break
        problems.append(Problem("error", name, n, 0, message))
        if first_break is None or n < first_break:
            first_break = n

    if not raws and torn_raw is None:
        err(0, "the journal is empty; the session never started writing it.")

    whole = _parse_whole(raws)
    records = None if whole is None else _fast_chain(raws, whole)
    if records is None:
        records = _walk(_parse_lines(raws, whole), err)
    torn_line: int | None = None
    if torn_raw is not None:
        torn_line = len(raws) + 1
        problems.append(
            Problem(
                "warning",
                name,
                torn_line,
                0,
                f"line {torn_line}, the last one, is incomplete ({len(torn_raw)} bytes without "
                "an end of line): the program stopped while writing it (crash or power loss). "
                "The lines before it are kept; a resume cuts it off.",
            )
        )
    if records and records[0][0] == 1 and records[0][1].get("event") == "header":
        fmt = records[0][1].get("format")
        if fmt != JOURNAL_FORMAT:
            err(
                1,
                f"line 1 is a header of format {fmt!r}, not {JOURNAL_FORMAT!r}; this "
                "trialdeck cannot audit it.",
            )
    elif raws:
        err(1, "line 1 is not a journal header; this is not a trialdeck session journal.")
    problems.sort(key=lambda p: (p.line, p.severity != "error"))
    intact = len(raws) if first_break is None else first_break - 1
    return ChainCheck(
        path, len(raws) + (torn_raw is not None), intact, records, problems, torn_line
    )


def _walk(lines: list[_Line], err: Any) -> list[tuple[int, dict[str, Any]]]:
    """Follow the chain line by line, calling ``err(line, message)`` at each break."""
    last_seq, last_h = -1, GENESIS
    i = 0
    while i < len(lines):
        ln = lines[i]
        if ln.obj is None:
            err(ln.n, f"line {ln.n} is not a complete JSON line (it was cut short or edited).")
            i += 1
            continue
        if ln.h is None or ln.seq is None:
            err(
                ln.n,
                f"line {ln.n} has no integrity fields (seq, prev, h); it was not written "
                "by trialdeck or was edited.",
            )
            i += 1
            continue
        if not ln.self_ok:
            err(
                ln.n,
                f"line {ln.n} was changed after it was written (its hash does not match its text).",
            )
        expected = last_seq + 1
        if ln.seq == expected and ln.prev == last_h:
            last_seq, last_h = ln.seq, ln.h
            i += 1
            continue
        nxt = lines[i + 1] if i + 1 < len(lines) else None
        if (
            nxt is not None
            and nxt.h is not None
            and nxt.seq == expected
            and nxt.prev == last_h
            and ln.seq == expected + 1
            and ln.prev == nxt.h
        ):
            err(ln.n, f"lines {ln.n} and {nxt.n} are in the wrong order (they were swapped).")
            if not nxt.self_ok:
                err(
                    nxt.n,
                    f"line {nxt.n} was changed after it was written (its hash does not "
                    "match its text).",
                )
            last_seq, last_h = ln.seq, ln.h
            i += 2
            continue
        if ln.seq > expected:
            missing = ln.seq - expected
            err(
                ln.n,
                f"{_plural(missing, 'line is', 'lines are')} missing before line {ln.n} "
                f"(entry {expected}{'' if missing == 1 else f' to {ln.seq - 1}'} was removed).",
            )
            last_seq, last_h = ln.seq, ln.h
        elif ln.seq < expected:
            # A repeated or moved-back line: report it and keep following the original chain.
            err(
                ln.n,
                f"line {ln.n} repeats or moves an earlier entry (number {ln.seq}, expected "
                f"{expected}); a line was added or moved here.",
            )
        else:
            err(
                ln.n,
                f"line {ln.n} does not follow line {ln.n - 1} (its link to the previous "
                "line does not match); lines from elsewhere were put here.",
            )
            last_seq, last_h = ln.seq, ln.h
        i += 1

    return [(ln.n, ln.obj) for ln in lines if ln.obj is not None]


# --------------------------------------------------------------------------------------------
# Attempts (a session resumed after a crash or an abort has several)


@dataclass
class Attempt:
    """One run of the engine inside a session journal: from a start or resume line to its end."""

    index: int
    start_line: int
    start_t: float | None
    kind: str  # "session_start" or "session_resume"
    end_line: int | None = None
    end_t: float | None = None
    status: str | None = None  # session_end status; None: no closing line (crash)
    started: list[int] = field(default_factory=list)
    completed: list[int] = field(default_factory=list)
    begun: bool = False

    @property
    def interrupted_trials(self) -> list[int]:
        done = set(self.completed)
        return [t for t in self.started if t not in done]

    def as_dict(self) -> dict[str, Any]:
        return {
            "index": self.index,
            "kind": self.kind,
            "start_line": self.start_line,
            "start_t": self.start_t,
            "end_line": self.end_line,
            "end_t": self.end_t,
            "status": self.status,
            "trials_completed": len(self.completed),
            "interrupted_trials": self.interrupted_trials,
        }


# The lines that shape attempts; the rest (flips, answers...) cannot start or end one.
ATTEMPT_EVENTS = (
    "session_start",
    "session_resume",
    "page_onset",
    "block_start",
    "trial_start",
    "trial_end",
    "abort",
    "session_end",
)


def _attempts(records: list[tuple[int, dict[str, Any]]]) -> list[Attempt]:
    attempts: list[Attempt] = []
    cur: Attempt | None = None
    for n, rec in records:
        ev = rec.get("event")
        if ev in ATTEMPT_STARTS and (cur is None or cur.begun or cur.status is not None):
            cur = Attempt(len(attempts) + 1, n, _num(rec.get("t")), str(ev))
            attempts.append(cur)
            continue
        if cur is None:
            if ev == "header":
                continue
            # Lines before any start line: treat them as a first attempt of their own.
            cur = Attempt(1, n, _num(rec.get("t")), "none")
            attempts.append(cur)
        if ev not in ATTEMPT_NEUTRAL:
            cur.begun = True
        if ev == "trial_start" and _int(rec.get("trial")) is not None:
            cur.started.append(rec["trial"])
        elif ev == "trial_end":
            t = _trial_of_end(rec)
            if t is not None:
                cur.completed.append(t)
        elif ev == "session_end":
            cur.end_line, cur.end_t = n, _num(rec.get("t"))
            cur.status = str(rec.get("status") or "unknown")
    return attempts


def _trial_of_end(rec: dict[str, Any]) -> int | None:
    row = rec.get("record")
    if isinstance(row, dict) and _int(row.get("trial")) is not None:
        return row["trial"]
    return _int(rec.get("trial"))


# --------------------------------------------------------------------------------------------
# The audit of one session


class _Index:
    """The journal's event lines in order, and grouped by event name (one pass, for speed)."""

    def __init__(self, events: list[tuple[int, dict[str, Any]]]):
        self.events = events
        self.by: dict[str, list[tuple[int, dict[str, Any]]]] = defaultdict(list)
        for item in events:
            self.by[str(item[1].get("event"))].append(item)

    def of(self, *names: str) -> list[tuple[int, dict[str, Any]]]:
        """Lines of the given events, in journal order."""
        if len(names) == 1:
            return self.by.get(names[0], [])
        return sorted((x for name in names for x in self.by.get(name, [])), key=lambda x: x[0])


@dataclass
class SessionAudit:
    """Everything the audit found about one session folder.

    ``problems`` are :class:`runner.errors.Problem` lines (errors and warnings); ``facts`` holds
    the measurements behind them (JSON-ready) for the details section and ``--json``.
    """

    folder: Path
    journal: Path
    study: str
    participant: str
    session: str
    mode: str
    problems: list[Problem]
    facts: dict[str, Any]
    recording: RecordingReport | None = None

    @property
    def errors(self) -> list[Problem]:
        return [p for p in self.problems if p.severity == "error"]

    @property
    def warnings(self) -> list[Problem]:
        return [p for p in self.problems if p.severity == "warning"]

    @property
    def ok(self) -> bool:
        return not self.errors

    def label(self) -> str:
        return f"{self.study} sub-{self.participant} ses-{self.session}"

    def summary_line(self) -> str:
        """One line: verdict, counts, and the headline figures."""
        verdict = "SOUND" if self.ok else "PROBLEMS"
        f = self.facts
        trials = f.get("trials", {})
        parts = [
            f"{self.label()} ({self.mode}): {verdict}",
            f"{_plural(len(self.errors), 'error')}, {_plural(len(self.warnings), 'warning')}",
            f"{trials.get('completed', 0)} of {trials.get('scheduled', 0)} trials",
        ]
        timing = f.get("timing", {})
        if "late_flips" in timing:
            parts.append(f"{_plural(timing['late_flips'], 'late flip')}")
        if self.recording is not None:
            m = self.recording.match
            total = m.matched + len(m.missing)
            parts.append(f"markers {m.matched}/{total} recorded")
        return "; ".join(parts)

    def as_dict(self) -> dict[str, Any]:
        return {
            "format": AUDIT_FORMAT,
            "folder": str(self.folder),
            "journal": str(self.journal),
            "study": self.study,
            "participant": self.participant,
            "session": self.session,
            "mode": self.mode,
            "ok": self.ok,
            "summary": self.summary_line(),
            "problems": [p.as_dict() for p in self.problems],
            "facts": self.facts,
            "recording": None if self.recording is None else self.recording.as_dict(),
        }


class _Findings:
    def __init__(self, file: str):
        self.file = file
        self.items: list[Problem] = []

    def error(self, message: str, line: int = 0, file: str | None = None) -> None:
        self.items.append(Problem("error", file or self.file, line, 0, message))

    def warning(self, message: str, line: int = 0, file: str | None = None) -> None:
        self.items.append(Problem("warning", file or self.file, line, 0, message))


def _journal_path(folder: Path) -> Path:
    folder = Path(folder)
    if folder.is_file() and folder.name == JOURNAL_NAME:
        return folder
    path = folder / JOURNAL_NAME
    if not folder.is_dir():
        raise InputFileError(
            f"{folder} is not a folder; give the session folder (…/sub-<participant>/"
            "ses-<session>/) that holds journal.jsonl."
        )
    if not path.is_file():
        raise InputFileError(
            f"{folder} holds no journal.jsonl, so it is not a session folder; give the folder "
            "…/sub-<participant>/ses-<session>/ that trialdeck wrote."
        )
    return path


def audit_session(
    folder: str | Path,
    *,
    recording: Recording | None = None,
    max_gap_s: float = DEFAULT_MAX_GAP_S,
    residual_limit_ms: float = DEFAULT_RESIDUAL_LIMIT_MS,
    hashes: HashCache | None = None,
) -> SessionAudit:
    """Audit one session folder (see the module docstring for what is checked).

    Parameters
    ----------
    folder : str or Path
        The session folder ``<out>/<study>/sub-<participant>/ses-<session>/`` (or its
        ``journal.jsonl``).
    recording : Recording, optional
        A recording read with :func:`runner.qa.recording.read_recording`; the session's marker
        stream is chosen in it by the journal header's source_id and stream name.
    max_gap_s, residual_limit_ms : float
        Passed to :func:`runner.qa.recording.check_recording`.
    hashes : HashCache, optional
        Shared between sessions so each stimulus file is hashed once.

    Returns
    -------
    SessionAudit

    Raises
    ------
    InputFileError
        ``folder`` is not a session folder.
    JournalError
        The journal cannot be read at all.
    """
    path = _journal_path(Path(folder))
    folder = path.parent
    chain = verify_chain(path)
    out = _Findings(_display(path))
    out.items.extend(chain.problems)
    records = chain.records
    header = records[0][1] if records and records[0][1].get("event") == "header" else {}
    facts: dict[str, Any] = {
        "journal": {
            "lines": chain.line_count,
            "intact_lines": chain.intact_lines,
            "chain_ok": not chain.broken,
            "torn_line": chain.torn_line,
        }
    }
    if chain.broken:
        facts["journal"]["note"] = (
            "the checks below also read the lines after the break, which cannot be trusted"
        )
    events = [(n, r) for n, r in records if r is not header]
    ix = _Index(events)
    unknown = Counter({k: len(v) for k, v in ix.by.items() if k not in KNOWN_EVENTS})
    if unknown:
        facts["journal"]["unknown_events"] = dict(sorted(unknown.items()))

    attempts = _attempts(ix.of(*ATTEMPT_EVENTS))
    facts["attempts"] = [a.as_dict() for a in attempts]
    completed = _check_completion(header, ix, attempts, out, facts)
    _check_files(header, folder, out, facts, hashes or HashCache())
    _check_timing(header, ix, out, facts)
    _check_responses(header, ix, completed, out, facts)
    _check_trials_csv(folder, completed, out, facts)

    report: RecordingReport | None = None
    if recording is not None:
        report = _check_against_recording(
            header, events, recording, out, facts, max_gap_s, residual_limit_ms
        )
    order = {"error": 0, "warning": 1}
    problems = sorted(
        out.items, key=lambda p: (order.get(p.severity, 2), p.file != out.file, p.line)
    )
    return SessionAudit(
        folder=folder,
        journal=path,
        study=str(header.get("study", "?")),
        participant=str(header.get("participant", "?")),
        session=str(header.get("session", "?")),
        mode=str(header.get("mode", "?")),
        problems=problems,
        facts=facts,
        recording=report,
    )


def audit_sessions(
    folders: Sequence[str | Path],
    *,
    recording: Recording | None = None,
    max_gap_s: float = DEFAULT_MAX_GAP_S,
    residual_limit_ms: float = DEFAULT_RESIDUAL_LIMIT_MS,
) -> list[SessionAudit]:
    """Audit several session folders, hashing shared stimulus files once.

    Parameters
    ----------
    folders : sequence of str or Path
    recording : Recording, optional
        One recording checked against every session (each finds its own marker stream).
    max_gap_s, residual_limit_ms : float
        See :func:`audit_session`.

    Returns
    -------
    list of SessionAudit
        In the order of ``folders``.
    """
    cache = HashCache()
    return [
        audit_session(
            f,
            recording=recording,
            max_gap_s=max_gap_s,
            residual_limit_ms=residual_limit_ms,
            hashes=cache,
        )
        for f in folders
    ]


# --------------------------------------------------------------------------------------------
# Completeness


def _check_completion(
    header: dict[str, Any],
    ix: _Index,
    attempts: list[Attempt],
    out: _Findings,
    facts: dict[str, Any],
) -> dict[int, tuple[int, dict[str, Any]]]:
    """Every scheduled trial completed once, or the rest journaled as aborted.

    Returns the completed trials: trial number -> (line, trial record).
    """
    schedule = header.get("schedule") if isinstance(header.get("schedule"), list) else []
    planned: dict[int, dict[str, Any]] = {}
    for s in schedule:
        if isinstance(s, dict) and _int(s.get("trial")) is not None:
            planned[s["trial"]] = s
    if header and not planned:
        out.error(
            "the journal header holds no trial schedule, so completeness cannot be checked.", 1
        )
    ends: dict[int, list[tuple[int, dict[str, Any]]]] = defaultdict(list)
    for n, rec in ix.of("trial_end"):
        t = _trial_of_end(rec)
        row = rec.get("record")
        if t is None or not isinstance(row, dict):
            out.error(f"line {n} closes a trial but holds no trial record.", n)
            continue
        ends[t].append((n, row))

    completed: dict[int, tuple[int, dict[str, Any]]] = {}
    for t, found in sorted(ends.items()):
        if t not in planned:
            out.error(
                f"trial {t} was completed (line {found[0][0]}) but is not in the "
                "session's schedule.",
                found[0][0],
            )
            continue
        if len(found) > 1:
            lines = ", ".join(str(n) for n, _ in found)
            out.error(
                f"trial {t} was completed {len(found)} times (lines {lines}); each trial "
                "must be completed once. Analyse the last completion or exclude the trial.",
                found[1][0],
            )
        n, row = found[-1]
        completed[t] = (n, row)
        want = planned[t].get("stimulus")
        if want is not None and row.get("stimulus") != want:
            out.error(
                f"trial {t} showed {row.get('stimulus')!r} but the schedule planned {want!r}.", n
            )

    missing = [t for t in planned if t not in completed]
    last = attempts[-1] if attempts else None
    status = last.status if last else None
    aborts = ix.of("abort")
    aborted_at: int | None = aborts[-1][0] if aborts else None
    events = ix.events
    if missing:
        rng = _ranges(missing)
        if last is None:
            out.error(
                f"the session never started: none of its {len(planned)} scheduled trials were run.",
                1,
            )
        elif status is None:
            n = events[-1][0] if events else 1
            out.error(
                f"the session stopped without its closing line (a crash, power loss or a killed "
                f"program after line {n}); {_plural(len(missing), 'scheduled trial')} "
                f"({rng}) {'was' if len(missing) == 1 else 'were'} not completed. Resume the "
                "session to run them.",
                n,
            )
        elif status == ABORTED:
            out.warning(
                f"the session was aborted by the experimenter (line {aborted_at or last.end_line}"
                f"); {_plural(len(missing), 'scheduled trial')} ({rng}) "
                f"{'was' if len(missing) == 1 else 'were'} not run.",
                aborted_at or last.end_line or 0,
            )
        elif status == CLEAN_END:
            what = _plural(len(missing), "scheduled trial")
            verb = "has" if len(missing) == 1 else "have"
            out.error(
                f"the session says it completed, but {what} ({rng}) {verb} no result.",
                last.end_line or 0,
            )
        else:
            out.error(
                f"the session ended with status {status!r} (line {last.end_line}); "
                f"{_plural(len(missing), 'scheduled trial')} ({rng}) "
                f"{'was' if len(missing) == 1 else 'were'} not completed. Resume the session "
                "to run them.",
                last.end_line or 0,
            )
    elif last is not None and status is None:
        out.warning(
            "every trial was completed, but the journal has no closing session_end "
            "line (the program stopped before the end screen).",
            events[-1][0] if events else 0,
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
            )
    for b in attempts[1:]:
        if b.kind != "session_resume":
            out.warning(
                f"line {b.start_line} starts the session again without a resume line; "
                "an earlier attempt is in the same journal.",
                b.start_line,
            )
        repeated = sorted(
            set(b.started) & {t for x in attempts[: b.index - 1] for t in x.completed}
        )
        if repeated:
            out.error(
                f"attempt {b.index} (line {b.start_line}) ran trials already completed "
                f"before it: {_ranges(repeated)}.",
                b.start_line,
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


def _check_files(
    header: dict[str, Any], folder: Path, out: _Findings, facts: dict[str, Any], cache: HashCache
) -> None:
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
                file=_display(path),
            )
            info[name] = "missing"
            continue
        have = path.read_bytes().decode("utf-8-sig", errors="replace")
        if have != text:
            out.error(
                f"the frozen copy {name} differs from the text the session ran with "
                "(journal header); it was edited after the session.",
                file=_display(path),
            )
            info[name] = "changed"
        else:
            info[name] = "unchanged"

    hashes = header.get("stimulus_hashes")
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
            f"{_plural(len(changed), 'stimulus file')} changed since the session "
            f"({_listing(changed)}, in {base}): participants saw the earlier version. Restore "
            "the files from the study's archive before the next session or analysis.",
            file=_display(base / changed[0]),
        )
    if absent:
        out.warning(
            f"{_plural(len(absent), 'stimulus file')} cannot be found at {base} to check "
            f"({_listing(absent)}); audit on the presenter computer, or copy the stimuli to the "
            "same place, to verify them.",
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
# Timing


def _check_timing(
    header: dict[str, Any],
    ix: _Index,
    out: _Findings,
    facts: dict[str, Any],
) -> None:
    screen = header.get("screen") if isinstance(header.get("screen"), dict) else {}
    interval = _num(screen.get("interval_s"))
    if interval is None or interval <= 0:
        hz = _num(screen.get("refresh_hz"))
        interval = 1.0 / hz if hz else None
    speed = _num(header.get("speed")) or 1.0
    timing: dict[str, Any] = {
        "interval_ms": None if interval is None else interval * MS,
        "speed": speed,
    }
    facts["timing"] = timing
    if interval is None:
        out.warning(
            "the journal header gives no refresh interval, so flip timing cannot be checked.", 1
        )
        return
    frame_ms = interval * MS

    late: list[tuple[int, float, str, int | None]] = []
    timed = flips = 0
    lateness: list[float] = []
    fix_flip: dict[int, float] = {}
    for n, rec in ix.of("flip"):
        flips += 1
        at = rec.get("at")
        if at is None:
            continue
        t, at = _num(rec.get("t")), _num(at)
        if t is not None and at is not None:
            timed += 1
            d = t - at
            lateness.append(d * MS)
            if d > LATE_FRACTION * interval:
                late.append((n, d * MS, str(rec.get("kind")), _int(rec.get("trial"))))
    timing.update(flips=flips, timed_flips=timed, late_flips=len(late))
    timing["flip_lateness_ms"] = _stats(lateness)
    if late:
        worst = max(late, key=lambda x: x[1])
        onsets = sorted({tr for _, _, k, tr in late if k == "stimulus" and tr is not None})
        late_onsets = f"; stimulus onsets of trials {_ranges(onsets)} were late" if onsets else ""
        out.warning(
            f"{_plural(len(late), 'flip')} of {timed} timed flips missed their frame (more than "
            f"{LATE_FRACTION:g} of a {frame_ms:.2f} ms refresh late; worst {worst[1]:.1f} ms at "
            f"line {worst[0]}, a {worst[2]} screen){late_onsets}. Close other programs on the "
            "presenter computer, and for pilots run without --frames when timing matters.",
            worst[0],
        )

    # Fixation: the requested duration (divided by the pilot speed) became whole frames; the
    # stimulus onset then tells how long the cross was actually shown.
    fixes: dict[int, tuple[int, float | None, int | None]] = {}
    actual: dict[int, tuple[int, float]] = {}
    for n, rec in ix.of("fixation_onset", "stimulus_onset"):
        ev = rec.get("event")
        tr = _int(rec.get("trial"))
        if tr is None:
            continue
        if ev == "fixation_onset":
            fixes[tr] = (n, _num(rec.get("requested_ms")), _int(rec.get("frames")))
            t = _num(rec.get("t"))
            if t is not None:
                fix_flip[tr] = t
        elif ev == "stimulus_onset":
            a = _num(rec.get("fixation_actual_ms"))
            if a is not None:
                actual[tr] = (n, a)
    req, act, err_frames, off = [], [], [], []
    for tr, (_, requested, frames) in fixes.items():
        if tr not in actual:
            continue
        n, a = actual[tr]
        act.append(a)
        if requested is not None:
            req.append(requested / speed)
        if frames is not None:
            e = a - frames * frame_ms
            err_frames.append(e)
            if abs(e) > DURATION_TOLERANCE_FRAMES * frame_ms:
                off.append((tr, n, e))
    timing["fixation"] = {
        "requested_ms": _stats(req),  # already divided by the pilot speed
        "actual_ms": _stats(act),
        "error_vs_frames_ms": _stats(err_frames),
        "off_by_a_frame": len(off),
    }
    if off:
        off.sort(key=lambda x: -abs(x[2]))
        out.warning(
            f"{_plural(len(off), 'fixation')} lasted a frame or more longer or shorter than "
            f"requested (worst trial {off[0][0]}: {off[0][2]:+.1f} ms); trials "
            f"{_ranges([x[0] for x in off])}. Analyses of pre-stimulus baselines should use "
            "the actual durations (trials.csv fixation_ms).",
            off[0][1],
        )

    # Rests and breaks: a rest lasts its whole-frame request; a break lasts at least its minimum.
    rests = []
    for n, rec in ix.of("rest_start", "rest_end", "break_start", "break_end"):
        ev = rec.get("event")
        if ev == "rest_start":
            rests.append([n, _num(rec.get("requested_s")), _int(rec.get("frames")), None])
        elif ev == "rest_end" and rests and rests[-1][3] is None:
            rests[-1][3] = _num(rec.get("actual_s"))
        elif ev == "break_start":
            rests.append([n, _num(rec.get("requested_s")), None, "break"])
        elif ev == "break_end" and rests and rests[-1][3] == "break":
            requested, actual_s = rests[-1][1], _num(rec.get("actual_s"))
            if (
                requested is not None
                and actual_s is not None
                and actual_s < requested / speed - interval
            ):
                out.warning(
                    f"the break at line {rests[-1][0]} lasted {actual_s:.2f} s, less "
                    f"than its minimum of {requested / speed:.2f} s.",
                    rests[-1][0],
                )
            rests[-1][3] = actual_s
    rest_info = []
    for n, requested, frames, actual_s in rests:
        if frames is None or not isinstance(actual_s, float):
            continue
        want_s = frames * interval
        rest_info.append(
            {"line": n, "requested_s": requested, "frames": frames, "actual_s": actual_s}
        )
        if abs(actual_s - want_s) > DURATION_TOLERANCE_FRAMES * interval:
            out.warning(
                f"the rest at line {n} lasted {actual_s:.3f} s instead of "
                f"{want_s:.3f} s ({frames} frames).",
                n,
            )
    timing["rests"] = rest_info

    pushes = [
        v
        for name in MARKED_EVENTS
        for _, r in ix.of(name)
        if (v := _num(r.get("push_us"))) is not None
    ]
    timing["marker_push_us"] = _stats(pushes)


# --------------------------------------------------------------------------------------------
# Answers, ratings, response times


def _check_responses(
    header: dict[str, Any],
    ix: _Index,
    completed: dict[int, tuple[int, dict[str, Any]]],
    out: _Findings,
    facts: dict[str, Any],
) -> None:
    speed = _num(header.get("speed")) or 1.0
    points = _rating_points(header)
    answered: dict[int, dict[str, Any]] = {}
    rated: dict[int, dict[str, Any]] = {}
    for _, rec in ix.of("answer", "rating"):
        tr = _int(rec.get("trial"))
        if tr is None:
            continue
        if rec.get("event") == "answer":
            answered[tr] = rec
        elif rec.get("event") == "rating":
            rated[tr] = rec
    no_answer, no_rating, timed_out, bad = [], [], [], []
    rts: list[float] = []
    fast: list[int] = []
    floor = ANTICIPATION_MS / speed
    for tr, (n, row) in sorted(completed.items()):
        ans, unsure = row.get("answer"), bool(row.get("unsure"))
        t_out = bool(row.get("timed_out"))
        if ans is None and not unsure:
            (timed_out if t_out else no_answer).append(tr)
        ev = answered.get(tr)
        if ev is not None and (ev.get("answer") != ans or bool(ev.get("unsure")) != unsure):
            bad.append((tr, n, "answer", ev.get("answer"), ans))
        rating = row.get("rating")
        if rating is None:
            no_rating.append(tr)
        else:
            rev = rated.get(tr)
            if rev is not None and rev.get("rating") != rating:
                bad.append((tr, n, "rating", rev.get("rating"), rating))
            if points is not None and not (_int(rating) is not None and 1 <= rating <= points):
                bad.append((tr, n, "rating", f"1..{points}", rating))
        expected = row.get("expected")
        correct = row.get("correct")
        if expected is not None and _int(ans) is not None and not unsure:
            want = int(ans == expected)
            if correct != want:
                bad.append((tr, n, "correct", want, correct))
        rt = _num(row.get("rt_ms"))
        if rt is not None:
            rts.append(rt)
            if rt < floor:
                fast.append(tr)
    first_line = {tr: n for tr, (n, _) in completed.items()}
    if no_answer:
        out.error(
            f"{_plural(len(no_answer), 'completed trial')} ({_ranges(no_answer)}) "
            f"{'has' if len(no_answer) == 1 else 'have'} no answer, yet "
            f"{'was' if len(no_answer) == 1 else 'were'} neither marked unsure nor timed "
            "out; the trial record is inconsistent.",
            first_line[no_answer[0]],
        )
    if timed_out:
        out.warning(
            f"{_plural(len(timed_out), 'trial')} ({_ranges(timed_out)}) timed out "
            "without an answer.",
            first_line[timed_out[0]],
        )
    if no_rating:
        out.warning(
            f"{_plural(len(no_rating), 'trial')} ({_ranges(no_rating)}) "
            f"{'has' if len(no_rating) == 1 else 'have'} no difficulty rating (the "
            "rating screen timed out).",
            first_line[no_rating[0]],
        )
    for tr, n, what, journaled, recorded in bad:
        out.error(
            f"trial {tr}: the trial record's {what} is {recorded!r}, but the journal's "
            f"key presses give {journaled!r}.",
            n,
        )
    if fast:
        out.warning(
            f"{_plural(len(fast), 'response')} came faster than {floor:g} ms after "
            f"stimulus onset (trials {_ranges(fast)}): possible anticipations or a "
            "stuck key.",
            first_line[fast[0]],
        )
    outcomes = Counter(str(row.get("outcome")) for _, row in completed.values())
    facts["responses"] = {
        "rt_ms": _stats(rts),
        "outcomes": dict(sorted(outcomes.items())),
        "no_answer": no_answer,
        "timed_out": timed_out,
        "no_rating": no_rating,
        "fast": fast,
        "anticipation_floor_ms": floor,
    }


def _rating_points(header: dict[str, Any]) -> int | None:
    """The rating scale's number of points, from the frozen protocol text (9 by default)."""
    text = header.get("protocol_text")
    return _points_of(text) if isinstance(text, str) else None


@functools.lru_cache(maxsize=32)
def _points_of(text: str) -> int | None:
    # Cached: the sessions of one study share their protocol text, and validating it is the
    # slowest single step of auditing a session.
    try:
        from runner.protocol.model import Protocol
        from runner.protocol.yamlsafe import read_yaml_text

        return int(Protocol.model_validate(read_yaml_text(text).data).rating.points)
    except (ProtocolError, ValueError):  # pydantic's ValidationError is a ValueError
        # An unreadable frozen protocol only skips this one check.
        return None


def _check_trials_csv(
    folder: Path,
    completed: dict[int, tuple[int, dict[str, Any]]],
    out: _Findings,
    facts: dict[str, Any],
) -> None:
    path = folder / TRIALS_NAME
    if not path.is_file():
        out.warning(
            f"{TRIALS_NAME} is missing from the session folder; it is derived from the "
            "journal and can be written again from it.",
            file=_display(path),
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
            file=_display(path),
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
        payload, t = rec.get("marker"), _num(rec.get("t"))
        if isinstance(payload, str) and t is not None:
            out.append((payload, t))
    return out


def _check_against_recording(
    header: dict[str, Any],
    events: list[tuple[int, dict[str, Any]]],
    recording: Recording,
    out: _Findings,
    facts: dict[str, Any],
    max_gap_s: float,
    residual_limit_ms: float,
) -> RecordingReport | None:
    rec_file = _display(recording.path)
    markers = header.get("markers") if isinstance(header.get("markers"), dict) else {}
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
        out.error(str(exc), file=rec_file)
        facts["recording"] = {"path": str(recording.path), "error": str(exc)}
        return None
    # A garbage sample left by a closing outlet, notes of the XDF reader and a restart that split
    # the marker stream are reported as warnings; everything else the check finds is an error.
    calm = dataclasses.replace(
        report,
        reader_notes=[],
        match=dataclasses.replace(report.match, garbage=[]),
        choice=dataclasses.replace(report.choice, combined=False),
    )
    errors = calm.problems()
    for sentence in errors:
        out.error(sentence, file=rec_file)
    for sentence in report.problems():
        if sentence not in errors:
            out.warning(sentence, file=rec_file)
    if report.choice.note and not report.choice.combined:
        out.warning(
            f"several marker streams could be this session's: {report.choice.note}", file=rec_file
        )
    facts["recording"] = report.as_dict()
    return report


# --------------------------------------------------------------------------------------------
# Text output


def _fmt_stats(s: dict[str, Any] | None, unit: str = "ms", digits: int = 1) -> str:
    if not s:
        return "none"
    return (
        f"n {s['n']}, median {s['p50']:.{digits}f} {unit}, 5-95% {s['p5']:.{digits}f}-"
        f"{s['p95']:.{digits}f} {unit}, range {s['min']:.{digits}f}-{s['max']:.{digits}f} {unit}"
    )


def detail_lines(a: SessionAudit) -> list[str]:
    """The details section of one session's audit, as plain indented lines."""
    f = a.facts
    j = f.get("journal", {})
    lines = [f"{a.label()}  ({_display(a.folder)})"]
    chain = "intact" if j.get("chain_ok") else f"broken after line {j.get('intact_lines')}"
    lines.append(
        f"  journal: {j.get('lines')} lines, hash chain {chain}"
        + (f", torn last line {j['torn_line']}" if j.get("torn_line") else "")
    )
    if j.get("unknown_events"):
        listed = ", ".join(f"{k} x{v}" for k, v in j["unknown_events"].items())
        lines.append(f"  events this audit does not know (ignored): {listed}")
    for att in f.get("attempts", []):
        end = att["status"] or "no closing line"
        extra = (
            f", interrupted trials {_ranges(att['interrupted_trials'])}"
            if att["interrupted_trials"]
            else ""
        )
        lines.append(
            f"  attempt {att['index']} from line {att['start_line']} ({att['kind']}): "
            f"{att['trials_completed']} trials completed, ended: {end}{extra}"
        )
    tr = f.get("trials", {})
    lines.append(
        f"  trials: {tr.get('completed', 0)} of {tr.get('scheduled', 0)} completed"
        + (f"; not completed: {_ranges(tr['missing'])}" if tr.get("missing") else "")
    )
    for r in tr.get("interrupted_then_completed", []):
        lines.append(
            f"    trial {r['trial']} was interrupted in attempt {r['interrupted_in']} "
            "and completed later (fine)"
        )
    files = f.get("files", {})
    stim = files.get("stimuli")
    if stim:
        lines.append(
            f"  stimuli: {stim['unchanged']} of {stim['checked']} unchanged in "
            f"{stim['folder']}"
            + (f", changed: {_listing(stim['changed'])}" if stim["changed"] else "")
            + (f", not found: {len(stim['not_found'])}" if stim["not_found"] else "")
        )
    frozen = [f"{k} {v}" for k, v in files.items() if k != "stimuli"]
    if frozen:
        lines.append(f"  frozen copies: {', '.join(frozen)}")
    if "trials_csv" in f:
        lines.append(f"  {TRIALS_NAME}: {f['trials_csv']}")
    t = f.get("timing", {})
    if t.get("interval_ms"):
        lines.append(
            f"  timing: refresh {t['interval_ms']:.3f} ms, speed {t['speed']:g}; "
            f"{t.get('flips', 0)} flips, {t.get('timed_flips', 0)} timed, "
            f"{t.get('late_flips', 0)} late"
        )
        lines.append(f"    flip lateness: {_fmt_stats(t.get('flip_lateness_ms'), digits=2)}")
        fx = t.get("fixation", {})
        lines.append(
            f"    fixation requested: {_fmt_stats(fx.get('requested_ms'))}"
            + (f" (divided by speed {t['speed']:g})" if t["speed"] != 1 else "")
        )
        lines.append(f"    fixation shown:     {_fmt_stats(fx.get('actual_ms'))}")
        lines.append(
            f"    fixation minus whole frames: {_fmt_stats(fx.get('error_vs_frames_ms'), digits=2)}"
        )
        for r in t.get("rests", []):
            lines.append(
                f"    rest at line {r['line']}: {r['frames']} frames, shown {r['actual_s']:.3f} s"
            )
        lines.append(f"    marker push after flip: {_fmt_stats(t.get('marker_push_us'), 'us')}")
    resp = f.get("responses", {})
    if resp:
        lines.append(f"  response times: {_fmt_stats(resp.get('rt_ms'))}")
        oc = ", ".join(f"{k} {v}" for k, v in resp.get("outcomes", {}).items())
        lines.append(f"  outcomes: {oc or 'none'}")
    if a.recording is not None:
        lines.extend(_recording_lines(a.recording))
    elif "recording" in f:
        lines.append(f"  recording: {f['recording'].get('error')}")
    return lines


def _recording_lines(r: RecordingReport) -> list[str]:
    m, ch = r.match, r.choice
    lines = [
        f"  recording {_display(r.path)}: marker stream {', '.join(map(str, ch.stream_ids))}"
        f" of {_plural(len(ch.candidates), 'candidate')}"
    ]
    if ch.note:
        lines.append(f"    {ch.note}")
    lines.append(
        f"    markers: {m.matched} matched, {len(m.missing)} missing, "
        f"{len(m.extra)} extra, {len(m.duplicated)} duplicated, "
        f"{len(m.garbage)} not JSON"
    )
    if m.offset_s is not None:
        drift = f", drift {m.drift_ppm:.2f} ppm" if m.drift_ppm is not None else ""
        lines.append(
            f"    clock offset {m.offset_s:.6f} s; residuals |median| "
            f"{m.residual_median_abs_ms:.3f} ms, p99 {m.residual_p99_abs_ms:.3f} ms, "
            f"max {m.residual_max_abs_ms:.3f} ms{drift}"
        )
    for c in r.coverage:
        rate = (
            f"{c.effective_srate:.2f} Hz measured" if c.effective_srate is not None else "no rate"
        )
        cover = "covers the session" if c.covers_span else "does NOT cover the session"
        gaps = (
            f", {_plural(len(c.gaps), 'gap')} over {c.gap_threshold_s:g} s"
            if c.gaps
            else ", no gaps"
            if c.gap_threshold_s is not None
            else ""
        )
        lines.append(
            f"    stream {c.stream_id} {c.name!r} ({c.type}): nominal "
            f"{c.nominal_srate:g} Hz, {rate}, {c.sample_count} samples, {cover}{gaps}"
        )
    return lines


def format_audits(audits: Sequence[SessionAudit]) -> list[str]:
    """The audit as text: a short summary first, then each problem, then the details."""
    lines = ["Audit summary"]
    bad = sum(not a.ok for a in audits)
    lines.append(
        f"  {len(audits)} session{'s' if len(audits) != 1 else ''} checked: "
        f"{len(audits) - bad} sound, {bad} with problems"
    )
    lines.extend(f"  {a.summary_line()}" for a in audits)
    if any(a.problems for a in audits):
        lines.append("")
        lines.append("Problems")
        for a in audits:
            lines.extend(p.format() for p in a.problems)
    lines.append("")
    lines.append("Details")
    for a in audits:
        lines.extend(detail_lines(a))
    return lines
