"""Attempts and winning trial records: what a journal's lines say about the session's runs.

A session resumed after a crash or an abort has several attempts, each from a ``session_start``
or ``session_resume`` line to its ``session_end`` (or to the last line: a crash). A trial
completed more than once (an interrupted attempt before a resume) counts with its last
completion: its *winning* record.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field
from typing import Any

from runner.contract.events import (
    ATTEMPT_STARTS,
    RECORD_FIELD,
    STATUS_COMPLETED,
    STATUS_INCOMPLETE,
)
from runner.contract.line import as_int as _int
from runner.contract.line import num as _num

__all__ = [
    "ATTEMPT_EVENTS",
    "STIMULI_ACCEPTED",
    "Attempt",
    "attempts",
    "completed_trials",
    "session_facts",
    "session_span",
    "stimulus_hashes_now",
    "trial_of_end",
    "winning_records",
]

# Events that do not, by themselves, make an attempt "begun" (so a session_start written right
# after a session_resume belongs to the same attempt).
ATTEMPT_NEUTRAL = frozenset(
    {"session_start", "session_resume", "recorder_connected", "recorder_lost", "warning"}
)
# Lines a resuming process writes before its session_resume (runner.session.run).
PROCESS_STARTS = frozenset({"clock_epoch", "session_interrupted"})
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


def trial_of_end(rec: dict[str, Any]) -> int | None:
    """The trial number a ``trial_end`` line closes (from its record, else its own field)."""
    row = rec.get(RECORD_FIELD)
    if isinstance(row, dict) and _int(row.get("trial")) is not None:
        return row["trial"]
    return _int(rec.get("trial"))


def winning_records(records: Iterable[dict[str, Any]]) -> list[dict[str, Any]]:
    """Completed trials' records in trial order, one per trial number (the last completion wins)."""
    by_trial: dict[int, dict[str, Any]] = {}
    for rec in records:
        if rec.get("event") != "trial_end":
            continue
        row = rec.get(RECORD_FIELD)
        if isinstance(row, dict) and _int(row.get("trial")) is not None:
            by_trial[row["trial"]] = row
    return [by_trial[k] for k in sorted(by_trial)]


def completed_trials(records: Iterable[dict[str, Any]]) -> set[int]:
    """Trial numbers with a ``trial_end`` line."""
    return {
        rec["trial"]
        for rec in records
        if rec.get("event") == "trial_end" and _int(rec.get("trial")) is not None
    }


def session_span(records: Iterable[dict[str, Any]]) -> tuple[str, float]:
    """Last session status, and the summed length of the attempts (start or resume to end).

    The status is ``"incomplete"`` when the last attempt has no ``session_end`` line (a crash).
    """
    status, total, _ = session_facts(records)
    return status, total


def session_facts(records: Iterable[dict[str, Any]]) -> tuple[str, float, list[dict[str, Any]]]:
    """:func:`session_span` and :func:`winning_records` in one pass over the lines."""
    status = STATUS_INCOMPLETE
    total = 0.0
    start: float | None = None
    last_t: float | None = None
    by_trial: dict[int, dict[str, Any]] = {}
    for rec in records:
        t = rec.get("t")
        event = rec.get("event")
        if event == "trial_end":
            row = rec.get(RECORD_FIELD)
            if isinstance(row, dict) and _int(row.get("trial")) is not None:
                by_trial[row["trial"]] = row
        if not isinstance(t, (int, float)):
            continue
        if event in PROCESS_STARTS:
            # A resuming process's first lines: the attempt before it ended at its last line
            # (its time after that is downtime, and may be on a restarted clock).
            if start is not None and last_t is not None:
                total += last_t - start
            start = None
        elif event in ATTEMPT_STARTS:
            if start is not None and last_t is not None:
                total += last_t - start
            start = float(t)
            status = STATUS_INCOMPLETE
        elif event == "session_end":
            status = str(rec.get("status", STATUS_COMPLETED))
            if start is not None:
                total += float(t) - start
                start = None
        last_t = float(t)
    if start is not None and last_t is not None:
        total += last_t - start
    return status, total, [by_trial[k] for k in sorted(by_trial)]


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


def attempts(records: Iterable[tuple[int, dict[str, Any]]]) -> list[Attempt]:
    """The attempts of a session, from its numbered lines ``(line, record)`` in journal order."""
    found: list[Attempt] = []
    cur: Attempt | None = None
    for n, rec in records:
        ev = rec.get("event")
        if ev not in ATTEMPT_EVENTS:
            continue
        if ev in ATTEMPT_STARTS and (cur is None or cur.begun or cur.status is not None):
            cur = Attempt(len(found) + 1, n, _num(rec.get("t")), str(ev))
            found.append(cur)
            continue
        if cur is None:
            # Lines before any start line: treat them as a first attempt of their own.
            cur = Attempt(1, n, _num(rec.get("t")), "none")
            found.append(cur)
        if ev not in ATTEMPT_NEUTRAL:
            cur.begun = True
        if ev == "trial_start" and _int(rec.get("trial")) is not None:
            cur.started.append(rec["trial"])
        elif ev == "trial_end":
            t = trial_of_end(rec)
            if t is not None:
                cur.completed.append(t)
        elif ev == "session_end":
            cur.end_line, cur.end_t = n, _num(rec.get("t"))
            cur.status = str(rec.get("status") or "unknown")
    return found


#: The journal event that acknowledges changed stimuli at a resume (``--accept-changed-stimuli``).
STIMULI_ACCEPTED = "stimuli_changed_accepted"


def stimulus_hashes_now(records: Iterable[dict[str, Any]]) -> dict[str, str]:
    """The stimulus hashes the session runs with after its last line.

    Those of the header (``stimulus_hashes``), updated by every acknowledged change
    (:data:`STIMULI_ACCEPTED` lines, each listing ``files`` with ``stimulus``, ``old``, ``new``).
    """
    out: dict[str, str] = {}
    for rec in records:
        event = rec.get("event")
        if event == "header" and isinstance(rec.get("stimulus_hashes"), dict):
            out.update({str(k): str(v) for k, v in rec["stimulus_hashes"].items()})
        elif event == STIMULI_ACCEPTED and isinstance(rec.get("files"), list):
            for f in rec["files"]:
                if isinstance(f, dict) and isinstance(f.get("stimulus"), str):
                    out[f["stimulus"]] = str(f.get("new"))
    return out
