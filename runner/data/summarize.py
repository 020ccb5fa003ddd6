"""Summarise sessions in one call: read them (or take those an export read), then write the
summary's tables, plots and report (:func:`runner.data.summary.write_summary`)."""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from runner.data.exclusions import judge_sessions
from runner.data.pooled import (
    factor_union,
    level_orders,
    pooled_trials,
    rating_points,
    sessions_table,
)
from runner.data.pooling import alike_summary, check_alike
from runner.data.sessions import SUMMARY_EVENTS, ExportSession, load_sessions
from runner.data.summary import write_summary
from runner.errors import InputFileError

__all__ = ["DEFAULT_TITLE", "SummaryResult", "summarize_sessions"]

DEFAULT_TITLE = "Pilot summary"


@dataclass
class SummaryResult:
    """What :func:`summarize_sessions` wrote, and from how much."""

    n_sessions: int
    n_trials: int
    factors: list[str]
    paths: list[Path]
    excluded: dict[tuple[str, str], list[str]] = field(default_factory=dict)


def summarize_sessions(
    paths: Iterable[str | Path] | None,
    out_dir: str | Path,
    *,
    sessions: Sequence[ExportSession] | None = None,
    include_practice: bool = False,
    title: str = DEFAULT_TITLE,
    force: bool = False,
    pool_unlike: bool = False,
    physio: str | Path | pd.DataFrame | None = None,
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
        See :func:`write_summary`. The default title gains the study's name.
    pool_unlike : bool, optional
        Pool sessions that differ in speed, mode or protocol (refused by default,
        :func:`runner.data.pooling.check_alike`).
    physio : str or Path or pd.DataFrame, optional
        ``physio_trials.csv`` of ``trialdeck physio`` (or the folder holding it, with its
        ``physio_trials.json`` sidecar beside it): its measures are related to the difficulty
        score (:mod:`runner.data.load_curve`) and its validity columns serve the protocol's
        ``physio_valid_share_below`` exclusion rule. A DataFrame serves the exclusion rule only.

    The protocols' exclusion rules (:func:`runner.data.exclusions.judge_sessions`) leave
    sessions out of every table, plot and fact but ``exclusions.csv`` and ``facts.json``'s
    ``excluded`` list.

    Raises
    ------
    InputFileError
        No completed trials (or every session excluded), or see :func:`write_summary`.
    UnlikeSessionsError
        The sessions differ in speed, mode or protocol and ``pool_unlike`` is False.
    JournalError, StorageError
        See :func:`runner.data.sessions.load_sessions` and :func:`write_summary`.
    """
    if sessions is None:
        if paths is None:
            raise InputFileError("give session folders, or sessions already read, to summarise.")
        sessions = load_sessions(paths, decode=SUMMARY_EVENTS, keep_records=False)
    headers = [s.header for s in sessions]
    if not pool_unlike:
        check_alike(headers, verb="summarise")
    # One physiology table for both uses: the load curves (a file with its sidecar) and the
    # exclusion rule on validity (its rows).
    physio_table = None
    physio_rows: pd.DataFrame | None = None
    if isinstance(physio, pd.DataFrame):
        physio_rows = physio
    elif physio is not None:
        from runner.data.load_curve import PHYSIO_FILE, read_physio

        physio_path = Path(physio)
        if physio_path.is_dir():
            physio_path = physio_path / PHYSIO_FILE
        physio_table = read_physio(physio_path)
        # Its rows judge validity only where a protocol declares that rule: a table of measures
        # alone need not carry validity columns.
        if any(
            s.protocol.exclusions is not None
            and s.protocol.exclusions.physio_valid_share_below is not None
            for s in sessions
        ):
            physio_rows = physio_table.frame
    judged = judge_sessions(sessions, physio=physio_rows)
    reasons = judged.reasons()
    every = list(sessions)
    sessions = [s for s in every if judged.keeps(s)]
    if every and not sessions:
        raise InputFileError(
            "every session meets one of the protocol's exclusion rules, so nothing is left to "
            "summarise; see the rules under exclusions: in the protocol."
        )
    studies = sorted({s.study for s in every})
    if title == DEFAULT_TITLE and studies:
        title = f"{DEFAULT_TITLE}: {', '.join(studies)}"
    context = {
        "studies": studies,
        "pooling": alike_summary(headers),
        "excluded": [
            {"participant": p, "session": ses, "rules": rules}
            for (p, ses), rules in sorted(reasons.items())
        ],
    }
    trials = pooled_trials(sessions)
    if trials.empty:
        raise InputFileError(
            "the sessions hold no completed trials, so there is nothing to summarise; check "
            "the session folders."
        )
    factors = factor_union(sessions)
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
        exclusions=(
            judged.table if any(s.protocol.exclusions is not None for s in every) else None
        ),
        context=context,
        physio=physio_table,
    )
    return SummaryResult(len(sessions), len(trials), factors, written, reasons)
