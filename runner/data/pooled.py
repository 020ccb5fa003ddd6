"""The pooled trials table of many sessions, the sessions table, and what the summary needs.

``trials.csv`` of an export holds every completed trial of every session, one row each, in one
fixed column order (:func:`pooled_columns`, from the registry :mod:`runner.contract.columns`).
When a trial was completed more than once (an interrupted attempt before a resume), the last
completion counts, as in the per-session table.
"""

from __future__ import annotations

import csv
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from runner.contract.columns import (
    CONTEXT_COLUMNS,
    CONTRACT_COLUMNS,
    ENGINE_COLUMNS,
    INTEGER_COLUMNS,
    PILOT_COLUMNS,
    TEXT_COLUMNS,
    TIME_SUFFIX,
)
from runner.contract.events import VALUES_FIELD
from runner.contract.outputs import replace_file
from runner.data.sessions import ExportSession
from runner.errors import InputFileError, StorageError
from runner.protocol.model import BlocksStep
from runner.session.records import csv_cell

__all__ = [
    "factor_union",
    "level_orders",
    "pooled_columns",
    "pooled_rows",
    "pooled_trials",
    "rating_points",
    "sessions_table",
    "write_pooled_trials",
]

DEFAULT_RATING_POINTS = 9  # the protocol's default scale, used when no session is given


def pooled_columns(sessions: Sequence[ExportSession]) -> list[str]:
    """The pooled table's columns: one documented order for any set of sessions.

    The per-session contract columns, trialdeck's extra columns, the trial tables' own columns
    (in first-seen order across sessions), ``sim_rt_ms`` when any session is a pilot, then
    ``study`` and ``mode``.
    """
    cols = list(CONTRACT_COLUMNS) + list(ENGINE_COLUMNS)
    taken = set(cols) | set(PILOT_COLUMNS) | set(CONTEXT_COLUMNS)
    for s in sessions:
        for c in s.table_columns:
            if c not in taken:
                taken.add(c)
                cols.append(c)
    if any(s.pilot for s in sessions):
        cols += list(PILOT_COLUMNS)
    return cols + list(CONTEXT_COLUMNS)


def pooled_rows(sessions: Sequence[ExportSession]) -> tuple[list[str], list[list[Any]]]:
    """Columns and raw values (None for missing) of the pooled table, sessions in given order.

    A value is the trial record's own field, else the trial table's value
    (:func:`runner.session.records.record_value`); ``study`` and ``mode`` are the session's.
    """
    cols = pooled_columns(sessions)
    rows: list[list[Any]] = []
    for s in sessions:
        context = dict(zip(CONTEXT_COLUMNS, (s.study, s.mode), strict=True))
        for rec in s.trials:
            # The same precedence as record_value, for every column at once.
            merged = {**(rec.get(VALUES_FIELD) or {}), **rec, **context}
            rows.append([merged.get(c) for c in cols])
    return cols, rows


def write_pooled_trials(sessions: Sequence[ExportSession], path: str | Path) -> Path:
    """Write the pooled ``trials.csv`` (empty cell = none, as in the per-session table).

    Raises
    ------
    StorageError
        If the file cannot be written.
    """
    path = Path(path)
    cols, rows = pooled_rows(sessions)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        with replace_file(path) as fh:
            writer = csv.writer(fh, lineterminator="\n")
            writer.writerow(cols)
            # Text is most cells and stays as it is; csv_cell formats the rest.
            writer.writerows(
                [
                    v if type(v) is str else "" if v is None else csv_cell(v, c)
                    for v, c in zip(row, cols, strict=True)
                ]
                for row in rows
            )
    except OSError as exc:
        raise StorageError(f"cannot write {path}: {exc.strerror or exc}.") from None
    return path


def _numeric_if_possible(series: pd.Series) -> pd.Series:
    present = series.dropna()
    if present.empty:
        return series
    converted = pd.to_numeric(present.astype(str), errors="coerce")
    if converted.isna().any():
        return series
    out = pd.to_numeric(series.astype("string"), errors="coerce")
    if (out.dropna() % 1 == 0).all():
        return out.astype("Int64")
    return out.astype(float)


def pooled_trials(sessions: Sequence[ExportSession]) -> pd.DataFrame:
    """The pooled table as a typed DataFrame (for the summary and users' scripts).

    Counts and ratings are nullable integers, times floats; a trial-table column becomes
    numeric when every value in it is a number (so ``nodes`` sorts 20, 50, 110).
    """
    cols, rows = pooled_rows(sessions)
    table = pd.DataFrame(rows, columns=cols, dtype=object)
    for c in INTEGER_COLUMNS:
        table[c] = pd.to_numeric(table[c], errors="coerce").astype("Int64")
    for c in cols:
        if c.endswith(TIME_SUFFIX) or c == "onset_lsl":
            table[c] = pd.to_numeric(table[c], errors="coerce").astype(float)
    for c in TEXT_COLUMNS:
        table[c] = table[c].astype("string")
    known = set(CONTRACT_COLUMNS) | set(ENGINE_COLUMNS) | set(PILOT_COLUMNS) | set(CONTEXT_COLUMNS)
    for c in cols:
        if c not in known:
            table[c] = _numeric_if_possible(table[c])
    return table


def sessions_table(sessions: Sequence[ExportSession]) -> pd.DataFrame:
    """One row per session: participant, session, started_wall, duration_s, n_trials, aborted,
    pilot, status, study.

    ``duration_s`` adds up the attempts (session start or resume to session end); ``aborted``
    is true unless the session's last status is ``completed``.
    """
    return pd.DataFrame(
        [
            {
                "participant": s.participant,
                "session": s.session,
                "started_wall": str(s.header.get("wall_clock_start", "")),
                "duration_s": round(s.duration_s, 3),
                "n_trials": len(s.trials),
                "aborted": s.status != "completed",
                "pilot": s.pilot,
                "status": s.status,
                "study": s.study,
            }
            for s in sessions
        ],
        columns=[
            "participant",
            "session",
            "started_wall",
            "duration_s",
            "n_trials",
            "aborted",
            "pilot",
            "status",
            "study",
        ],
    )


def level_orders(sessions: Sequence[ExportSession]) -> dict[str, list[Any]]:
    """Block level orders the protocols list (``blocks.levels``), per block factor."""
    orders: dict[str, list[Any]] = {}
    for s in sessions:
        for step in s.protocol.sequence:
            if isinstance(step, BlocksStep) and step.blocks.levels:
                orders.setdefault(step.blocks.by, list(step.blocks.levels))
    return orders


def rating_points(sessions: Sequence[ExportSession]) -> int:
    """The protocols' number of rating points (they must agree).

    Raises
    ------
    InputFileError
        If the sessions' protocols use different scales.
    """
    points = sorted({s.protocol.rating.points for s in sessions})
    if len(points) > 1:
        raise InputFileError(
            "the sessions use rating scales of different lengths ("
            + ", ".join(str(p) for p in points)
            + " points); summarise them separately."
        )
    return points[0] if points else DEFAULT_RATING_POINTS


def factor_union(sessions: Sequence[ExportSession]) -> list[str]:
    """The protocols' factors in first-seen order."""
    out: list[str] = []
    for s in sessions:
        for f in s.factors:
            if f not in out:
                out.append(f)
    return out
