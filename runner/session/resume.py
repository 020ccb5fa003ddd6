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
from runner.contract.layout import FROZEN_PROTOCOL, FROZEN_TABLE
from runner.errors import JournalError
from runner.journal.read import JournalRead, read_journal
from runner.journal.trials import completed_trials as _completed
from runner.protocol.load import LoadedProtocol
from runner.protocol.schedule import Schedule


class SessionComplete(JournalError):
    """The session asked to resume already ended as completed."""


@dataclass
class ResumePlan:
    """What an interrupted session did, and how it goes on."""

    done: set[int]
    attempt: int  # the number of the attempt about to start (2 for the first resume)
    interrupted: dict[str, Any] = field(default_factory=dict)


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
    )
