"""Summarise sessions in one call: read them (or take those an export read), then write the
summary's tables, plots and report (:func:`runner.data.summary.write_summary`)."""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path

from runner.data.pooled import (
    factor_union,
    level_orders,
    pooled_trials,
    rating_points,
    sessions_table,
)
from runner.data.sessions import SUMMARY_EVENTS, ExportSession, load_sessions
from runner.data.summary import write_summary
from runner.errors import InputFileError

__all__ = ["SummaryResult", "summarize_sessions"]


@dataclass
class SummaryResult:
    """What :func:`summarize_sessions` wrote, and from how much."""

    n_sessions: int
    n_trials: int
    factors: list[str]
    paths: list[Path]


def summarize_sessions(
    paths: Iterable[str | Path] | None,
    out_dir: str | Path,
    *,
    sessions: Sequence[ExportSession] | None = None,
    include_practice: bool = False,
    title: str = "Pilot summary",
    force: bool = False,
    physio: str | Path | None = None,
) -> SummaryResult:
    """Summarise sessions: read them from ``paths``, or take ``sessions`` already read.

    Factors, the rating scale and block level orders come from the frozen protocols.

    Parameters
    ----------
    paths : iterable of str or Path, or None
        Session folders, or folders above them; ignored when ``sessions`` is given.
    out_dir : str or Path
        Folder for the tables, plots and report.
    sessions : sequence of ExportSession, optional
        Sessions an export read in the same run (:attr:`runner.data.export.ExportResult.sessions`):
        their journals are not read again.
    include_practice, title, force
        See :func:`write_summary`.
    physio : str or Path, optional
        ``physio_trials.csv`` of ``trialdeck physio`` (or the folder holding it, with its
        ``physio_trials.json`` sidecar beside it); its measures are related to the difficulty
        score (:mod:`runner.data.load_curve`).

    Raises
    ------
    InputFileError
        No completed trials, or see :func:`write_summary`.
    JournalError, StorageError
        See :func:`runner.data.sessions.load_sessions` and :func:`write_summary`.
    """
    if sessions is None:
        if paths is None:
            raise InputFileError("give session folders, or sessions already read, to summarise.")
        sessions = load_sessions(paths, decode=SUMMARY_EVENTS, keep_records=False)
    trials = pooled_trials(sessions)
    if trials.empty:
        raise InputFileError(
            "the sessions hold no completed trials, so there is nothing to summarise; check "
            "the session folders."
        )
    factors = factor_union(sessions)
    physio_table = None
    if physio is not None:
        from runner.data.load_curve import PHYSIO_FILE, read_physio

        physio_path = Path(physio)
        if physio_path.is_dir():
            physio_path = physio_path / PHYSIO_FILE
        physio_table = read_physio(physio_path)
    written = write_summary(
        trials,
        sessions_table(sessions),
        Path(out_dir),
        factors=factors,
        rating_points=rating_points(sessions),
        include_practice=include_practice,
        level_order=level_orders(sessions),
        title=title,
        force=force,
        physio=physio_table,
    )
    return SummaryResult(len(sessions), len(trials), factors, written)
