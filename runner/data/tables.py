"""**Contract.** How trialdeck writes its own tables (CSV) and facts (JSON).

* Missing values are **empty cells** in every CSV trialdeck writes for analysis (trials.csv, the
  summary's tables, exclusions.csv), so pandas and R's ``read.csv`` both read them as missing
  in numeric columns. BIDS files (``_events.tsv``) keep ``n/a``, which BIDS requires.
* Numbers are rounded by column kind (:func:`digits_for`): times in ms to 3 decimals (1 us),
  times in s to 6 decimals (1 us), shares to 4 decimals, other floats to 6 significant digits.
  Counts and flags are whole numbers; flags are 0 or 1.
* Labels (participant, session, block, stimulus) are text: ``007`` is written ``007``. Read them
  as text: ``pd.read_csv(path, dtype={"participant": str, "session": str})`` in pandas,
  ``read.csv(path, colClasses = c(participant = "character", session = "character"))`` in R.
* Time columns name their unit: ``_ms``, ``_s``; ``onset_lsl`` is in seconds on the LSL clock.

docs/analysis.md ("Table conventions") says the same for users.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from pathlib import Path
from typing import IO, Any

import numpy as np
import pandas as pd

from runner.contract.outputs import replace_file

__all__ = [
    "LABEL_COLUMNS",
    "NA",
    "digits_for",
    "read_table",
    "round_facts",
    "round_table",
    "round_value",
    "write_table",
]

#: The missing-value marker of trialdeck's own CSV tables (BIDS files use ``n/a``).
NA = ""
#: Columns that hold labels: always text, never numbers.
LABEL_COLUMNS = ("participant", "session", "block", "stimulus", "study", "mode", "part")
MS_DECIMALS = 3
S_DECIMALS = 6
SHARE_DECIMALS = 4
SIGNIFICANT = 6


def digits_for(column: str) -> tuple[str, int]:
    """How a float column is rounded: ``("decimals", n)`` or ``("significant", n)``."""
    name = column.lower()
    if name.endswith("_ms") or "_ms_" in name:
        return ("decimals", MS_DECIMALS)
    if name.endswith("_s") or name.endswith("_lsl") or "_s_" in name:
        return ("decimals", S_DECIMALS)
    if name.startswith("share_") or name.endswith("_share") or name.startswith("p_correct"):
        return ("decimals", SHARE_DECIMALS)
    return ("significant", SIGNIFICANT)


def round_value(value: float, column: str) -> float:
    """One float rounded as :func:`digits_for` says (NaN and infinities unchanged)."""
    if not math.isfinite(value):
        return value
    how, n = digits_for(column)
    if how == "decimals":
        return round(value, n)
    return float(f"{value:.{n}g}")


def round_table(table: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``table`` with every float column (and a float index) rounded by its kind."""
    out = table.copy()
    for column in out.columns:
        if pd.api.types.is_float_dtype(out[column].dtype):
            how, n = digits_for(str(column))
            values = out[column].to_numpy(dtype=float)
            if how == "decimals":
                out[column] = np.round(values, n)
            else:
                out[column] = [round_value(v, str(column)) for v in values]
    return out


def write_table(
    table: pd.DataFrame, target: Path | IO[str], *, index: bool = False, round_numbers: bool = True
) -> None:
    """Write ``table`` as CSV by the conventions above (empty cell for missing, rounded numbers,
    ``\\n`` line ends). ``target`` is a path (replaced whole) or an open text file."""
    data = round_table(table) if round_numbers else table
    # Flags are 0 or 1: R's read.csv reads pandas' "True"/"False" as text.
    flags = [c for c in data.columns if pd.api.types.is_bool_dtype(data[c])]
    if flags:
        data = data.astype({c: int for c in flags})
    if isinstance(target, Path):
        with replace_file(target) as fh:
            data.to_csv(fh, na_rep=NA, lineterminator="\n", index=index)
    else:
        data.to_csv(target, na_rep=NA, lineterminator="\n", index=index)


def round_facts(value: Any, key: str = "") -> Any:
    """``value`` (a JSON-ready structure) with every float rounded by its key's kind."""
    if isinstance(value, Mapping):
        # A generic key (min, median, ...) takes its parent's kind: duration_s.median is seconds.
        return {
            k: round_facts(v, str(k) if digits_for(str(k))[0] == "decimals" or not key else key)
            for k, v in value.items()
        }
    if isinstance(value, (list, tuple)):
        return [round_facts(v, key) for v in value]
    if isinstance(value, (float, np.floating)):
        return round_value(float(value), key)
    return value


def read_table(path: str | Path, **kwargs: Any) -> pd.DataFrame:
    """Read a CSV table trialdeck wrote, with its labels kept as text.

    The same as ``pd.read_csv(path, dtype={label: str for each label column present})``: empty
    cells are missing values, numbers are numbers, and a participant ``007`` stays ``"007"``.
    Extra keyword arguments go to :func:`pandas.read_csv`.
    """
    header = pd.read_csv(path, nrows=0)
    dtype = {c: str for c in LABEL_COLUMNS if c in header.columns}
    dtype.update(kwargs.pop("dtype", None) or {})
    return pd.read_csv(path, dtype=dtype, **kwargs)
