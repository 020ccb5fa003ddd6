"""**Contract.** The one registry of column names trialdeck writes.

trials.csv (one per session) has, in this order: the contract columns :data:`CONTRACT_COLUMNS`,
trialdeck's engine columns :data:`ENGINE_COLUMNS`, the trial table's own columns, then
:data:`PILOT_COLUMNS` for pilot sessions. The pooled export table adds :data:`CONTEXT_COLUMNS`
at the end. BIDS ``_events.tsv`` files have :data:`BIDS_COLUMNS`, :data:`EVENT_ROW_COLUMNS`,
:data:`EVENT_TRIAL_COLUMNS`, then the trial table's own columns.

Because the table's own columns are written next to these, a trial table may not use any of
them (:data:`RESERVED_TABLE_COLUMNS`): ``trialdeck check`` refuses such a column.
"""

from __future__ import annotations

# The columns every trials.csv begins with. ``stimulus`` and ``expected`` come from the table.
CONTRACT_COLUMNS = (
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
)
# Columns the session engine writes into each trial record after the contract columns.
ENGINE_COLUMNS = (
    "part",
    "outcome",
    "block_index",
    "typing_ms",
    "rating_rt_ms",
    "timed_out",
    "fixation_ms",
    "interrupted",
)
# Written by the simulated participant of a pilot, last.
PILOT_COLUMNS = ("sim_rt_ms",)
# The pooled export table's context columns, after everything else.
CONTEXT_COLUMNS = ("study", "mode")
# The trial table's required columns (part of the contract columns).
TABLE_REQUIRED = ("stimulus", "expected")
# Keys of a trial record (the trial_end line's ``record``) that are not columns.
RECORD_KEYS = ("values",)

# BIDS events: BIDS columns first (onset and duration must lead), then trialdeck's own.
BIDS_COLUMNS = ("onset", "duration", "trial_type", "value", "response_time", "stim_file")
# Columns that belong to the row (the event), then columns shared by every row of one trial.
EVENT_ROW_COLUMNS = ("event", "trial", "key", "label", "timed_out", "attempt")
EVENT_TRIAL_COLUMNS = (
    "block",
    "part",
    "stimulus",
    "expected",
    "answer",
    "unsure",
    "correct",
    "outcome",
    "rating",
    "completed",
)
EVENT_COLUMNS = EVENT_ROW_COLUMNS + EVENT_TRIAL_COLUMNS

# Typed columns of the pooled table (see runner.data.pooled.pooled_trials).
INTEGER_COLUMNS = (
    "expected",
    "answer",
    "unsure",
    "correct",
    "rating",
    "trial",
    "block_index",
    "timed_out",
    "interrupted",
)
TEXT_COLUMNS = ("participant", "session", "block", "stimulus", "part", "outcome", "study", "mode")
TIME_SUFFIX = "_ms"

# Every name trialdeck itself writes into trials.csv, the pooled table and events.tsv.
WRITTEN_COLUMNS = frozenset(
    CONTRACT_COLUMNS
    + ENGINE_COLUMNS
    + PILOT_COLUMNS
    + CONTEXT_COLUMNS
    + RECORD_KEYS
    + BIDS_COLUMNS
    + EVENT_COLUMNS
)
# What a trial table may not name a column: everything above but its own required columns.
RESERVED_TABLE_COLUMNS = WRITTEN_COLUMNS - frozenset(TABLE_REQUIRED)


def trials_columns(table_columns: list[str] | tuple[str, ...], *, pilot: bool) -> list[str]:
    """The columns of a session's trials.csv, in contract order.

    ``table_columns`` are the trial table's header; its required columns are already among the
    contract columns.
    """
    cols = list(CONTRACT_COLUMNS + ENGINE_COLUMNS)
    cols += [c for c in table_columns if c not in TABLE_REQUIRED]
    if pilot:
        cols += PILOT_COLUMNS
    return cols


def own_table_columns(header_columns: object) -> list[str]:
    """The trial table's own columns (not stimulus or expected), from a journal header's list."""
    if not isinstance(header_columns, (list, tuple)):
        return []
    return [str(c) for c in header_columns if c not in TABLE_REQUIRED]


def level_key(text: str) -> tuple[int, float, str]:
    """Sort key of factor levels: numeric levels numerically ('20' < '110'), then the others
    alphabetically (the order of block levels, sidecar levels and summary rows)."""
    try:
        return (0, float(text), text)
    except ValueError:
        return (1, 0.0, text)
