"""trials.csv, derived from the journal (never logged separately).

**Contract.** One row per completed trial, columns in this order: the contract columns
``participant, session, block, trial, stimulus, expected, answer, unsure, correct, rating,
rt_ms, onset_lsl``, then trialdeck's extra columns, then the trial table's own columns, then
``sim_rt_ms`` for pilot sessions. Empty cells mean "none" (no answer, unscored, no rating).
When a trial was completed more than once (an interrupted attempt before a resume), the last
completion counts.
"""

from __future__ import annotations

import csv
import os
from pathlib import Path
from typing import Any

from runner.session.journal import JournalRead

TRIALS_NAME = "trials.csv"
CONTRACT_COLUMNS = [
    "participant",
    "session",
    "block",
    "trial",
    "stimulus",
    "expected",
    "answer",
    "unsure",
    "correct",
    "rating",
    "rt_ms",
    "onset_lsl",
]
EXTRA_COLUMNS = [
    "part",
    "outcome",
    "block_index",
    "typing_ms",
    "rating_rt_ms",
    "timed_out",
    "fixation_ms",
    "interrupted",
]
PILOT_COLUMNS = ["sim_rt_ms"]


def table_columns(header: dict[str, Any]) -> list[str]:
    """The trial table's own columns (other than stimulus and expected), from the journal header."""
    cols = header.get("trial_table_columns") or []
    return [c for c in cols if c not in ("stimulus", "expected")]


def trial_records(read: JournalRead) -> list[dict[str, Any]]:
    """Completed trials in session order, one per trial number (the last completion wins)."""
    by_trial: dict[int, dict[str, Any]] = {}
    for rec in read.events("trial_end"):
        row = rec.get("record")
        if isinstance(row, dict) and isinstance(row.get("trial"), int):
            by_trial[row["trial"]] = row
    return [by_trial[k] for k in sorted(by_trial)]


def csv_cell(value: Any, column: str) -> str:
    """One trials.csv cell: empty for none, onset_lsl with 9 decimals, ms with 3, flags as 0/1."""
    if value is None:
        return ""
    if column == "onset_lsl":
        return f"{float(value):.9f}"
    if isinstance(value, bool):
        return str(int(value))
    if isinstance(value, float):
        return f"{value:.3f}" if column.endswith("_ms") else repr(value)
    return str(value)


def columns_for(header: dict[str, Any]) -> list[str]:
    cols = CONTRACT_COLUMNS + EXTRA_COLUMNS + table_columns(header)
    if header.get("mode") == "pilot":
        cols += PILOT_COLUMNS
    return cols


def write_trials_csv(read: JournalRead, folder: Path) -> Path:
    """Write (or rewrite) ``trials.csv`` in ``folder`` from the journal, atomically."""
    header = read.header or {}
    columns = columns_for(header)
    path = folder / TRIALS_NAME
    tmp = folder / (TRIALS_NAME + ".tmp")
    with open(tmp, "w", encoding="utf-8", newline="") as fh:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(columns)
        for row in trial_records(read):
            values = row.get("values") or {}
            writer.writerow([csv_cell(row.get(c, values.get(c)), c) for c in columns])
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)
    return path
