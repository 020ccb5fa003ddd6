"""Reading sessions for export and summary: one :class:`ExportSession` per session folder.

Everything is derived from a session's ``journal.jsonl`` and the frozen protocol text in its
header (design principle 1); nothing is read from the per-session ``trials.csv``. The journal is
read and verified by :func:`runner.journal.read.read_journal`.
"""

from __future__ import annotations

import csv
import io
import multiprocessing
import os
import threading
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from functools import partial
from pathlib import Path
from typing import Any

from runner.contract.columns import own_table_columns
from runner.contract.events import MARKER_FIELD
from runner.contract.layout import JOURNAL_NAME, is_label
from runner.errors import InputFileError, JournalError
from runner.journal.frozen import protocol_from_header
from runner.journal.read import JournalRead, read_journal
from runner.journal.timeline import session_timeline
from runner.journal.trials import session_facts
from runner.protocol.model import Protocol

__all__ = [
    "EXPORT_EVENTS",
    "SUMMARY_EVENTS",
    "ExportSession",
    "find_session_folders",
    "load_session",
    "load_sessions",
]

# Lines the BIDS events need decoded (fields beyond event, t and trial); every other line, flips
# included, is verified and read from its lead fields only (runner.contract.line.LEAD_FIELDS).
EXPORT_EVENTS = frozenset(
    {
        "trial_start",
        "trial_end",
        "decision",
        "answer",
        "rating",
        "block_start",
        "rest_start",
        "session_start",
        "session_resume",
        "session_end",
        "abort",
        "clock_epoch",
    }
)
# Worker processes pay off from this many sessions on (starting them takes a moment).
PARALLEL_MIN_SESSIONS = 16
MAX_WORKERS = 4

# Lines the summary needs decoded (the header is always decoded).
SUMMARY_EVENTS = frozenset({"trial_end", "session_start", "session_resume", "session_end"})


@dataclass
class ExportSession:
    """One session as read from its journal.

    ``trials`` are the completed trials' records (the ``record`` of each ``trial_end`` line, the
    last completion of each trial number, in trial order). ``status`` is the last
    ``session_end`` status, or ``"incomplete"`` when the journal has none (a crash).
    """

    folder: Path
    read: JournalRead = field(repr=False)
    header: dict[str, Any] = field(repr=False)
    protocol: Protocol = field(repr=False)
    trials: list[dict[str, Any]] = field(repr=False)
    status: str
    duration_s: float
    table_rows: list[dict[str, str]] = field(default_factory=list, repr=False)
    start_lsl: float | None = None

    def release(self) -> None:
        """Drop the journal lines (keeping header, trials and facts) to free memory.

        Exporting hundreds of sessions keeps only one session's lines in memory at a time;
        after this, :func:`event_rows` and :meth:`markers` have nothing left to read.
        """
        self.read = JournalRead(path=self.read.path, header=self.header, records=[self.header])

    @property
    def participant(self) -> str:
        return str(self.header.get("participant", ""))

    @property
    def session(self) -> str:
        return str(self.header.get("session", ""))

    @property
    def study(self) -> str:
        return str(self.header.get("study", self.protocol.study))

    @property
    def mode(self) -> str:
        return str(self.header.get("mode", "live"))

    @property
    def pilot(self) -> bool:
        return self.mode == "pilot"

    @property
    def factors(self) -> list[str]:
        return list(self.protocol.trials.factors)

    @property
    def table_columns(self) -> list[str]:
        """The trial table's own columns other than stimulus and expected, in table order."""
        return own_table_columns(self.header.get("trial_table_columns"))

    @property
    def start_t(self) -> float:
        """``t`` of the first ``session_start`` line (presenter LSL clock, seconds)."""
        if self.start_lsl is not None:
            return self.start_lsl
        raise JournalError(
            f"{self.read.path} has no session_start line, so its events have no origin; "
            "the session did not start."
        )

    def markers(self, *, on_timeline: bool = False) -> list[tuple[str, float]]:
        """Every marker the session sent, as ``(payload, LSL timestamp)`` from the journal.

        With ``on_timeline`` the times are on the session timeline
        (:func:`runner.journal.timeline.session_timeline`): the same unless an attempt ran on a
        restarted clock.
        """
        records = self.read.records
        timeline = session_timeline(records) if on_timeline else None
        return [
            (str(r[MARKER_FIELD]), timeline.at(i, float(r["t"])) if timeline else float(r["t"]))
            for i, r in enumerate(records)
            if MARKER_FIELD in r and "t" in r
        ]


def find_session_folders(paths: Iterable[str | Path]) -> list[Path]:
    """Session folders named by ``paths``: a folder holding a journal, or any folder above some.

    Parameters
    ----------
    paths : iterable of str or Path
        Session folders, or folders to search (for example ``sessions/courier-hops``).

    Returns
    -------
    list of Path
        Folders holding a ``journal.jsonl``, in the order given (found ones sorted by path),
        without duplicates.

    Raises
    ------
    InputFileError
        If a path does not exist or holds no session journal.
    """
    found: list[Path] = []
    seen: set[Path] = set()
    for raw in paths:
        path = Path(raw)
        if not path.is_dir():
            raise InputFileError(
                f"{path} is not a folder; give session folders (holding {JOURNAL_NAME}) or a "
                "folder above them."
            )
        if (path / JOURNAL_NAME).is_file():
            folders = [path]
        else:
            folders = sorted(p.parent for p in path.rglob(JOURNAL_NAME))
        if not folders:
            raise InputFileError(
                f"there is no session journal ({JOURNAL_NAME}) in or under {path}; check the "
                "folder name."
            )
        for folder in folders:
            key = folder.resolve()
            if key not in seen:
                seen.add(key)
                found.append(folder)
    return found


def load_session(folder: str | Path, *, decode: frozenset[str] | None = None) -> ExportSession:
    """Read one session folder's journal and its frozen protocol.

    A torn last line (a crash mid-write) is tolerated: the intact lines are used. A broken
    integrity chain is not: an edited journal is refused.

    Parameters
    ----------
    folder : str or Path
        The session folder (``.../sub-P01/ses-1``).
    decode : frozenset of str, optional
        Journal events to decode (see :func:`runner.journal.read.read_journal`); default all.

    Returns
    -------
    ExportSession

    Raises
    ------
    JournalError
        If the journal is missing, unreadable, fails its integrity check, or has no protocol.
    """
    folder = Path(folder)
    path = folder / JOURNAL_NAME
    read = read_journal(path, decode=decode)
    if read.chain_errors:
        raise JournalError(
            f"{path} fails its integrity check ({read.chain_errors[0]}); it is not exported. "
            "Run `trialdeck audit` on the session to see what changed."
        )
    if read.header is None:
        raise JournalError(f"{path} has no readable header line, so it cannot be exported.")
    header = read.header
    for key in ("participant", "session"):
        value = str(header.get(key, ""))
        if not is_label(value):
            raise JournalError(
                f"the {key} label {value!r} in {path} is not letters and digits only, so it "
                "cannot name BIDS files."
            )
    protocol = protocol_from_header(header, path)
    table_text = header.get("trial_table_text")
    table_rows = list(csv.DictReader(io.StringIO(table_text))) if table_text else []
    status, duration, trials = session_facts(read.records)
    start = next((float(r["t"]) for r in read.events("session_start") if "t" in r), None)
    return ExportSession(
        folder=folder,
        read=read,
        header=header,
        protocol=protocol,
        trials=trials,
        status=status,
        duration_s=duration,
        table_rows=table_rows,
        start_lsl=start,
    )


def check_unique(session: ExportSession, seen: dict[tuple[str, str, str], Path]) -> None:
    key = (session.study, session.participant, session.session)
    if key in seen:
        raise InputFileError(
            f"{seen[key]} and {session.folder} both hold study {session.study!r}, participant "
            f"{session.participant!r}, session {session.session!r}; give only one of them."
        )
    seen[key] = session.folder


def load_sessions(
    paths: Iterable[str | Path],
    *,
    decode: frozenset[str] | None = None,
    keep_records: bool = True,
    workers: int | None = None,
) -> list[ExportSession]:
    """Find and read every session under ``paths`` (see :func:`find_session_folders`).

    Parameters
    ----------
    paths : iterable of str or Path
        Session folders, or folders above them.
    decode : frozenset of str, optional
        Passed to :func:`load_session`.
    keep_records : bool, optional
        Keep every session's journal lines (default); False releases them after reading
        (:meth:`ExportSession.release`), which is all the summary needs.
    workers : int, optional
        Worker processes reading sessions side by side (see :func:`worker_count`); used only
        when ``keep_records`` is False.

    Raises
    ------
    InputFileError
        If no session is found, or two folders hold the same study, participant and session
        (they would be counted twice and their event files would collide).
    JournalError
        If a journal cannot be exported (see :func:`load_session`).
    """
    folders = find_session_folders(paths)
    seen: dict[tuple[str, str, str], Path] = {}
    if not keep_records:
        workers = worker_count(len(folders), workers)
        if workers > 1:
            sessions = []
            for session in in_workers(partial(_load_released, decode=decode), folders, workers):
                check_unique(session, seen)
                sessions.append(session)
            return sessions
    sessions = []
    for folder in folders:
        session = load_session(folder, decode=decode)
        check_unique(session, seen)
        if not keep_records:
            session.release()
        sessions.append(session)
    return sessions


def _load_released(folder: Path, *, decode: frozenset[str] | None) -> ExportSession:
    session = load_session(folder, decode=decode)
    session.release()
    return session


def _processors() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1


def can_fork() -> bool:
    """Whether worker processes can be forked safely: the platform forks, and this process runs
    no other thread (a fork copies only the calling thread, so locks held by others would stay
    locked in the workers). Forked workers need no re-import of the caller's main module."""
    return "fork" in multiprocessing.get_all_start_methods() and threading.active_count() == 1


def worker_count(n_sessions: int, workers: int | None) -> int:
    """Worker processes for ``n_sessions``: ``workers`` if given, else one per processor (at
    most :data:`MAX_WORKERS`) from :data:`PARALLEL_MIN_SESSIONS` sessions on; 1 (no workers)
    when there is a single session or forking is not safe (:func:`can_fork`)."""
    if workers is None:
        workers = min(_processors(), MAX_WORKERS) if n_sessions >= PARALLEL_MIN_SESSIONS else 1
    if n_sessions <= 1 or not can_fork():
        return 1
    return max(1, workers)


def in_workers(func: Callable[[Any], Any], items: Iterable[Any], workers: int) -> Iterator[Any]:
    """``func`` of each item in forked worker processes; results in the order of ``items``.

    The first error raised by ``func`` (in item order) is raised here; the work not yet
    started is cancelled.
    """
    pool = ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("fork"))
    try:
        futures = [pool.submit(func, item) for item in items]
        for future in futures:
            yield future.result()
    finally:
        pool.shutdown(wait=True, cancel_futures=True)
