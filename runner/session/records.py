"""trials.csv, derived from the journal (never logged separately).

**Contract.** One row per completed trial, columns in this order: the contract columns
``participant, session, block, trial, stimulus, expected, answer, unsure, correct, rating,
rt_ms, onset_lsl``, then trialdeck's engine columns, then the trial table's own columns, then
``sim_rt_ms`` for pilot sessions (the registry is :mod:`runner.contract.columns`). Empty cells
mean "none" (no answer, unscored, no rating). When a trial was completed more than once (an
interrupted attempt before a resume), the last completion counts.
"""

from __future__ import annotations

import csv
from pathlib import Path
from typing import Any

from runner.contract import columns as registry
from runner.contract.columns import own_table_columns, trials_columns
from runner.contract.events import VALUES_FIELD
from runner.contract.layout import TRIALS_NAME
from runner.contract.outputs import replace_file
from runner.journal.read import JournalRead
from runner.journal.trials import winning_records

__all__ = [
    "CONTRACT_COLUMNS",
    "ENGINE_COLUMNS",
    "EXTRA_COLUMNS",
    "PILOT_COLUMNS",
    "TRIALS_NAME",
    "columns_for",
    "csv_cell",
    "record_value",
    "table_columns",
    "trial_records",
    "write_trials_csv",
]

# The registry's column groups as lists (the form this module has always offered).
CONTRACT_COLUMNS = list(registry.CONTRACT_COLUMNS)
ENGINE_COLUMNS = list(registry.ENGINE_COLUMNS)
EXTRA_COLUMNS = ENGINE_COLUMNS  # the name earlier versions used
PILOT_COLUMNS = list(registry.PILOT_COLUMNS)


def table_columns(header: dict[str, Any]) -> list[str]:
    """The trial table's own columns (other than stimulus and expected), from the journal header."""
    return own_table_columns(header.get("trial_table_columns"))


def trial_records(read: JournalRead) -> list[dict[str, Any]]:
    """Completed trials in session order, one per trial number (the last completion wins)."""
    return winning_records(read.records)


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


def record_value(row: dict[str, Any], column: str) -> Any:
    """A trial record's value of ``column``: its own field, else the trial table's value."""
    if column in row:
        return row[column]
    values = row.get(VALUES_FIELD) or {}
    return values.get(column)


def columns_for(header: dict[str, Any]) -> list[str]:
    """The columns of a session's trials.csv, from its journal header."""
    return trials_columns(table_columns(header), pilot=header.get("mode") == "pilot")


def write_trials_csv(read: JournalRead, folder: Path) -> Path:
    """Write (or rewrite) ``trials.csv`` in ``folder`` from the journal, atomically.

    Raises
    ------
    OutputRefused
        ``trials.csv.tmp`` exists and is a link, a folder or a linked file.
    OSError
        The file cannot be written.
    """
    header = read.header or {}
    columns = columns_for(header)
    path = folder / TRIALS_NAME
    # trials.csv.tmp is created exclusively and never followed: a link there is refused
    # (OutputRefused), a link at trials.csv is replaced, not written through.
    with replace_file(path, durable=True) as fh:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(columns)
        for row in trial_records(read):
            writer.writerow([csv_cell(record_value(row, c), c) for c in columns])
    return path
