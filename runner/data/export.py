"""Analysis-ready exports derived from session journals: a pooled trials table and BIDS events.

Everything here is derived from a session's ``journal.jsonl`` and the frozen protocol text in its
header (design principle 1); nothing is read from the per-session ``trials.csv``. The parts:

* :mod:`runner.data.sessions`: reading sessions (:class:`ExportSession`);
* :mod:`runner.data.pooled`: the pooled ``trials.csv`` and the sessions table;
* :mod:`runner.data.bids_rows` and :mod:`runner.data.bids`: BIDS events rows, files, sidecars;
* :mod:`runner.data.origins`: time zero of the events (session start or first EEG sample).

Both outputs are documented column by column in docs/analysis.md. This module runs the export
(:func:`export_sessions`) and re-exports the parts' public names.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from runner.contract.outputs import prepare_output_folder, replace_file
from runner.data.bids import (
    BIDS_IGNORE,
    DATATYPES,
    DEFAULT_DATATYPE,
    POOLED_NAME,
    bids_events,
    dataset_files,
    events_paths,
    events_sidecar,
    events_tsv,
    task_label,
    write_bids_events,
)
from runner.data.bids_rows import (
    BIDS_COLUMNS,
    EVENT_COLUMNS,
    ROW_COLUMNS,
    ROW_KINDS,
    TRIAL_COLUMNS,
    EventRow,
    EventRows,
    event_rows,
)
from runner.data.exclusions import EXCLUSIONS_NAME, judge_sessions
from runner.data.origins import Origin, recording_origin, session_origin
from runner.data.pooled import (
    factor_union,
    level_orders,
    pooled_columns,
    pooled_rows,
    pooled_trials,
    rating_points,
    sessions_table,
    write_pooled_trials,
)
from runner.data.pooling import check_alike, header_of
from runner.data.sessions import (
    EXPORT_EVENTS,
    SUMMARY_EVENTS,
    ExportSession,
    check_unique,
    find_session_folders,
    in_workers,
    load_session,
    load_sessions,
    worker_count,
)
from runner.data.tables import write_table
from runner.errors import StorageError, UsageError

#: The command an export folder's marker names.
EXPORT_COMMAND = "trialdeck export"

__all__ = [
    "BIDS_COLUMNS",
    "DATATYPES",
    "DEFAULT_DATATYPE",
    "EVENT_COLUMNS",
    "EXPORT_COMMAND",
    "EXPORT_EVENTS",
    "ROW_COLUMNS",
    "ROW_KINDS",
    "SUMMARY_EVENTS",
    "TRIAL_COLUMNS",
    "EventRow",
    "EventRows",
    "ExportResult",
    "ExportSession",
    "Origin",
    "bids_events",
    "event_rows",
    "events_paths",
    "events_sidecar",
    "events_tsv",
    "export_sessions",
    "factor_union",
    "find_session_folders",
    "level_orders",
    "load_session",
    "load_sessions",
    "pooled_columns",
    "pooled_rows",
    "pooled_trials",
    "rating_points",
    "recording_origin",
    "session_origin",
    "sessions_table",
    "task_label",
    "write_bids_events",
    "write_pooled_trials",
]


@dataclass
class ExportResult:
    """What :func:`export_sessions` wrote."""

    pooled: Path
    events: list[tuple[Path, Path]]
    origins: list[Origin]
    sessions: list[ExportSession]
    n_trials: int
    other_files: list[Path] = field(default_factory=list)
    exclusions: Path | None = None
    excluded: dict[tuple[str, str], list[str]] = field(default_factory=dict)


def export_sessions(
    paths: Iterable[str | Path],
    out: str | Path,
    *,
    task: str | None = None,
    datatype: str = DEFAULT_DATATYPE,
    recordings: Sequence[str | Path] | None = None,
    allow_truncated: bool = False,
    workers: int | None = None,
    force: bool = False,
    pool_unlike: bool = False,
    physio: pd.DataFrame | None = None,
) -> ExportResult:
    """Export sessions: the pooled ``trials.csv`` and BIDS events of each session under ``out``.

    Parameters
    ----------
    paths : iterable of str or Path
        Session folders, or folders above them.
    out : str or Path
        The export folder (a BIDS dataset root; an existing ``dataset_description.json`` is
        kept, and ``trials.csv`` is added to ``.bidsignore``).
    task : str, optional
        BIDS task label; default the study id with non-alphanumerics removed.
    datatype : {"beh", "eeg"}
        The datatype folder of the events files.
    recordings : sequence of path, optional
        One XDF recording per session, in session order: onsets then count from the first
        sample of its EEG stream. Default: from the session start.
    allow_truncated : bool
        Read the intact part of a truncated recording instead of refusing it (as audit does).
    workers : int, optional
        Worker processes that read sessions and write their events files side by side. Default:
        one per processor (at most :data:`runner.data.sessions.MAX_WORKERS`) from
        :data:`runner.data.sessions.PARALLEL_MIN_SESSIONS`
        sessions on, else none (everything in this process). Workers are forked, so only where
        the platform forks and this process runs no other thread; otherwise everything runs
        here. The files are the same either way.
    force : bool
        Write into an existing folder that is neither empty nor an earlier export's (see
        :func:`runner.contract.outputs.prepare_output_folder`; a session folder, or a folder
        holding sessions, is refused even so).
    pool_unlike : bool
        Pool sessions that differ in speed, mode or protocol (refused by default, before
        anything is written: :func:`runner.data.pooling.check_alike`).
    physio : pd.DataFrame, optional
        Per-trial physiology for the protocol's ``physio_valid_share_below`` exclusion rule.

    The protocols' exclusion rules (:func:`runner.data.exclusions.judge_sessions`, the same as
    the summary's) leave excluded sessions out of the pooled ``trials.csv``; their BIDS events
    are written all the same (each session's own record), and ``exclusions.csv`` lists every
    judged session with each rule's value.

    Returns
    -------
    ExportResult

    Raises
    ------
    UsageError
        Bad labels or datatype, or a recording count that differs from the session count.
    UnlikeSessionsError
        The sessions differ in speed, mode or protocol and ``pool_unlike`` is False.
    OutputRefused
        The folder is not empty and not an earlier export's (without ``force``), is or holds a
        session folder, or has a link where a file goes.
    InputFileError, JournalError, RecordingError, StorageError
        See :func:`load_sessions`, :func:`recording_origin` and the writers.
    """
    if datatype not in DATATYPES:
        raise UsageError(
            f"the datatype {datatype!r} is not supported; use one of {', '.join(DATATYPES)}."
        )
    out = Path(out)
    folders = find_session_folders(paths)
    if recordings and len(recordings) != len(folders):
        raise UsageError(
            f"{len(recordings)} recording(s) were given for {len(folders)} session(s); give "
            "one --recording per session, in the same order as the session folders."
        )
    if not pool_unlike:
        check_alike([header_of(f) for f in folders], verb="export")
    target = prepare_output_folder(out, EXPORT_COMMAND, force=force, what="export")
    sessions: list[ExportSession] = []
    origins: list[Origin] = []
    events: list[tuple[Path, Path]] = []
    seen: dict[tuple[str, str, str], Path] = {}
    jobs = [
        _Job(folder, out, task, datatype, recordings[i] if recordings else None, allow_truncated)
        for i, folder in enumerate(folders)
    ]
    workers = worker_count(len(jobs), workers)
    # Each session is read, its events written, then its journal lines let go, so memory stays
    # at one session's worth per process however many are exported.
    for session, origin, written in _run_jobs(jobs, workers, seen):
        sessions.append(session)
        origins.append(origin)
        events.append(written)
    judged = judge_sessions(sessions, physio=physio)
    kept = [s for s in sessions if judged.keeps(s)]
    pooled = write_pooled_trials(kept, out / POOLED_NAME)
    exclusions: Path | None = None
    try:
        others = dataset_files(out, sessions)
        if any(s.protocol.exclusions is not None for s in sessions):
            exclusions = out / EXCLUSIONS_NAME
            write_table(judged.table, exclusions)
            others += _bids_ignore(out, EXCLUSIONS_NAME)
    except OSError as exc:
        raise StorageError(f"cannot write the dataset files in {out}: {exc.strerror}.") from None
    done = [pooled, *([exclusions] if exclusions else []), *others]
    target.finish([*done, *(p for pair in events for p in pair)])
    return ExportResult(
        pooled=pooled,
        events=events,
        origins=origins,
        sessions=sessions,
        n_trials=sum(len(s.trials) for s in kept),
        other_files=others,
        exclusions=exclusions,
        excluded=judged.reasons(),
    )


def _bids_ignore(out: Path, name: str) -> list[Path]:
    """Add ``name`` to the dataset's ``.bidsignore`` (trialdeck's own tables are not BIDS)."""
    ignore = out / BIDS_IGNORE
    lines = ignore.read_text(encoding="utf-8").splitlines() if ignore.is_file() else []
    if name in lines:
        return []
    with replace_file(ignore) as fh:
        fh.write("\n".join([*lines, name]) + "\n")
    return [ignore]


@dataclass(frozen=True)
class _Job:
    """One session to export (picklable, for a worker process)."""

    folder: Path
    out: Path
    task: str | None
    datatype: str
    recording: str | Path | None
    allow_truncated: bool = False


def _load(job: _Job) -> ExportSession:
    # With a recording every marker payload is needed to match the recorder's clock.
    return load_session(job.folder, decode=None if job.recording is not None else EXPORT_EVENTS)


def _write(job: _Job, session: ExportSession) -> tuple[ExportSession, Origin, tuple[Path, Path]]:
    if job.recording is not None:
        origin = recording_origin(session, job.recording, allow_truncated=job.allow_truncated)
    else:
        origin = session_origin(session)
    label = task_label(session.study, job.task)
    written = write_bids_events(session, job.out, task=label, datatype=job.datatype, origin=origin)
    session.release()
    return session, origin, written


def _export_one(job: _Job) -> tuple[ExportSession, Origin, tuple[Path, Path]]:
    """Read one session and write its events files (in a worker process)."""
    return _write(job, _load(job))


def _run_jobs(
    jobs: list[_Job], workers: int, seen: dict[tuple[str, str, str], Path]
) -> Iterator[tuple[ExportSession, Origin, tuple[Path, Path]]]:
    """Export each session, in order; two sessions with the same labels are refused."""
    if workers <= 1:
        for job in jobs:
            session = _load(job)
            check_unique(session, seen)  # before its files could overwrite the other's
            yield _write(job, session)
        return
    for done in in_workers(_export_one, jobs, workers):
        check_unique(done[0], seen)
        yield done
