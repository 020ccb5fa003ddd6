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
    physio: pd.DataFrame | None = None,
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
    physio : pd.DataFrame, optional
        Per-trial physiology for the protocol's ``physio_valid_share_below`` exclusion rule.

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
    judged = judge_sessions(sessions, physio=physio)
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
    )
    return SummaryResult(len(sessions), len(trials), factors, written, reasons)
