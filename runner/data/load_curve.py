"""Where load gives way: each measure against the difficulty score, binned and by two lines.

For response time (answered trials), accuracy (scored trials: correct 1, otherwise 0) and each
physiological measure of ``physio_trials.csv`` (columns whose sidecar entry in
``physio_trials.json`` has ``"Kind": "measure"``; see :func:`read_physio`), every trial is paired
with the difficulty score of its stimulus. Then:

* **Binned relation**: stimuli are cut into :data:`N_BINS` bins of equal count by their score
  (quantiles of the per-stimulus scores); per bin, the mean of the measure over its trials with a
  95% interval: t-based (:func:`runner.data.stats.mean_ci`) for continuous measures, Wilson for
  accuracy (a share). Trials of one participant are related, so the intervals are narrower than
  by-participant ones, as for the level tables.
* **Two-lines test** (:mod:`runner.data.twolines`) on the trial-level pairs: the break point,
  both slopes with robust z tests, and whether an inverted U (or U) is shown.
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from runner.data.stats import mean_ci, wilson_interval
from runner.data.twolines import TwoLinesResult, two_lines
from runner.errors import InputFileError

N_BINS = 5
#: The file ``trialdeck physio`` writes (its sidecar has the same stem and ``.json``).
PHYSIO_FILE = "physio_trials.csv"
PHYSIO_KEYS = ("participant", "session", "trial")
MEASURE_KIND = "measure"
RT = "rt_ms"
ACCURACY = "accuracy"

BIN_COLUMNS = (
    "measure",
    "bin",
    "score_low",
    "score_high",
    "score_mean",
    "n_stimuli",
    "n",
    "mean",
    "ci_low",
    "ci_high",
    "interval",
)
TEST_COLUMNS = (
    "measure",
    "units",
    "n",
    "shape",
    "break_point",
    "first_break",
    "flat_low",
    "flat_high",
    "slope1",
    "se1",
    "z1",
    "p1",
    "n1",
    "slope2",
    "se2",
    "z2",
    "p2",
    "n2",
    "significant",
    "se_type",
    "verdict",
    "reason",
)


@dataclass(frozen=True)
class PhysioTable:
    """Per-trial physiology read from ``physio_trials.csv`` and its JSON sidecar."""

    frame: pd.DataFrame
    measures: tuple[str, ...]
    units: dict[str, str] = field(default_factory=dict)
    path: str = ""


@dataclass(frozen=True)
class LoadResult:
    """Outcome of :func:`load_relations`: bin and test tables, and each measure's test."""

    available: bool
    reason: str = ""
    bins: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=BIN_COLUMNS))
    tests: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=TEST_COLUMNS))
    results: dict[str, TwoLinesResult] = field(default_factory=dict)
    units: dict[str, str] = field(default_factory=dict)
    notes: tuple[str, ...] = ()


def read_physio(path: str | Path) -> PhysioTable:
    """Read ``physio_trials.csv`` and its sidecar ``physio_trials.json`` (same folder and stem).

    Parameters
    ----------
    path : str or Path
        The CSV file.

    Returns
    -------
    PhysioTable
        Keys as text (labels such as 007 stay 007); measure columns as floats; the measures are
        the columns described with ``"Kind": "measure"``, in the CSV's order.

    Raises
    ------
    InputFileError
        The file or its sidecar is missing or unreadable, or lacks the key columns.
    """
    path = Path(path)
    sidecar = path.with_suffix(".json")
    try:
        frame = pd.read_csv(path, dtype=str, keep_default_na=False, na_values=["", "n/a"])
        meta = json.loads(sidecar.read_text(encoding="utf-8"))
    except FileNotFoundError as exc:
        raise InputFileError(
            f"Cannot read the physiology table: {exc.filename} does not exist; run "
            "`trialdeck physio` first, or give the path of its physio_trials.csv."
        ) from exc
    except (OSError, ValueError, pd.errors.ParserError) as exc:
        raise InputFileError(
            f"Cannot read the physiology table {str(path)!r} or its sidecar ({exc}); write it "
            "again with `trialdeck physio`."
        ) from exc
    if not isinstance(meta, dict):
        raise InputFileError(
            f"The sidecar {str(sidecar)!r} is not a JSON object of column descriptions; write it "
            "again with `trialdeck physio`."
        )
    missing = [k for k in PHYSIO_KEYS if k not in frame.columns]
    if missing:
        raise InputFileError(
            f"The physiology table {str(path)!r} lacks the key column(s) "
            + ", ".join(repr(m) for m in missing)
            + "; write it again with `trialdeck physio`."
        )
    measures = []
    units: dict[str, str] = {}
    for col in frame.columns:
        entry = meta.get(col)
        if isinstance(entry, dict) and entry.get("Kind") == MEASURE_KIND:
            frame[col] = pd.to_numeric(frame[col], errors="coerce").astype(float)
            measures.append(col)
            units[col] = str(entry.get("Units", ""))
    return PhysioTable(frame=frame, measures=tuple(measures), units=units, path=str(path))


def _key_text(values: pd.Series) -> np.ndarray:
    """Key values as text, a whole number written as a float (3.0) read as 3."""
    codes, uniques = pd.factorize(values, use_na_sentinel=False)
    text = (
        pd.Series(uniques.astype(str))
        .str.strip()
        .str.replace(r"^(-?\d+)\.0+$", r"\1", regex=True)
        .to_numpy()
    )
    return text[codes]


def _joint_keys(trials: pd.DataFrame, frame: pd.DataFrame) -> tuple[pd.Index, pd.Index]:
    """One integer per (participant, session, trial), shared by the two tables."""
    left = np.zeros(len(trials), dtype=np.int64)
    right = np.zeros(len(frame), dtype=np.int64)
    for k in PHYSIO_KEYS:
        both = np.concatenate([_key_text(trials[k]), _key_text(frame[k])])
        codes, uniques = pd.factorize(both)
        left = left * len(uniques) + codes[: len(trials)]
        right = right * len(uniques) + codes[len(trials) :]
    return pd.Index(left), pd.Index(right)


def _bins(
    measure: str,
    stim_score: pd.Series,
    x: np.ndarray,
    y: np.ndarray,
    stimuli: np.ndarray,
    *,
    share: bool,
    n_bins: int,
) -> list[dict[str, object]]:
    scored = stim_score.dropna()
    k = min(n_bins, int(scored.size))
    if k < 1:
        return []
    labels = pd.qcut(scored.rank(method="first"), k, labels=False)
    rows: list[dict[str, object]] = []
    bin_of = labels.reindex(stimuli).to_numpy(dtype=float)
    for b in range(k):
        members = scored[labels == b]
        sel = (bin_of == b) & np.isfinite(y)
        values = y[sel]
        if share:
            mean = values.mean() if values.size else math.nan
            low, high = wilson_interval(int(values.sum()), int(values.size))
            interval = "wilson"
        else:
            mean, low, high = mean_ci(values)
            interval = "t"
        rows.append(
            {
                "measure": measure,
                "bin": b + 1,
                "score_low": float(members.min()),
                "score_high": float(members.max()),
                "score_mean": float(x[sel].mean()) if sel.any() else math.nan,
                "n_stimuli": int(members.size),
                "n": int(values.size),
                "mean": float(mean),
                "ci_low": float(low),
                "ci_high": float(high),
                "interval": interval,
            }
        )
    return rows


def _test_row(measure: str, units: str, res: TwoLinesResult) -> dict[str, object]:
    row: dict[str, object] = {c: None for c in TEST_COLUMNS}
    row.update(measure=measure, units=units, n=res.n, reason=res.reason or None)
    if res.available and res.line1 is not None and res.line2 is not None:
        row.update(
            shape=res.shape,
            break_point=res.break_point,
            first_break=res.first_break,
            flat_low=res.flat[0],
            flat_high=res.flat[1],
            slope1=res.line1.slope,
            se1=res.line1.se,
            z1=res.line1.z,
            p1=res.line1.p,
            n1=res.line1.n,
            slope2=res.line2.slope,
            se2=res.line2.se,
            z2=res.line2.z,
            p2=res.line2.p,
            n2=res.line2.n,
            significant=res.significant,
            se_type=res.se_type,
            verdict=res.verdict,
        )
    return row


def load_relations(
    trials: pd.DataFrame,
    scores: pd.DataFrame,
    *,
    physio: PhysioTable | None = None,
    n_bins: int = N_BINS,
) -> LoadResult:
    """Relate response time, accuracy and each physiological measure to the difficulty score.

    Parameters
    ----------
    trials : pd.DataFrame
        Pooled trials table (the trials the score was computed from).
    scores : pd.DataFrame
        Per-stimulus table with ``score`` (index ``stimulus``).
    physio : PhysioTable, optional
        Per-trial physiology; joined to the trials on participant, session and trial.
    n_bins : int, optional
        Number of score bins, default 5.

    Returns
    -------
    LoadResult
        ``available`` False (with ``reason``) when there is no difficulty score.
    """
    if "score" not in scores.columns or scores["score"].notna().sum() == 0:
        return LoadResult(False, "No difficulty score, so nothing to relate the measures to.")
    stim_score = scores["score"].astype(float)
    stim_score.index = stim_score.index.astype(str)
    stimuli = trials["stimulus"].astype(str).to_numpy()
    x = stim_score.reindex(stimuli).to_numpy(dtype=float)
    outcome = trials["outcome"].astype(str).to_numpy()
    rt = pd.to_numeric(trials["rt_ms"], errors="coerce").astype(float).to_numpy()
    series: list[tuple[str, str, np.ndarray, bool]] = [
        (RT, "ms", np.where(np.isin(outcome, ("correct", "wrong")), rt, np.nan), False),
        (
            ACCURACY,
            "share correct",
            np.where(
                np.isin(outcome, ("correct", "wrong", "unsure", "unanswered")),
                (outcome == "correct").astype(float),
                np.nan,
            ),
            True,
        ),
    ]
    notes: list[str] = []
    units = {RT: "ms", ACCURACY: "share correct"}
    if physio is not None:
        frame = physio.frame
        keys, pkeys = _joint_keys(trials, frame)
        if pkeys.has_duplicates:
            raise InputFileError(
                f"The physiology table {physio.path!r} has more than one row for a trial "
                "(participant, session, trial); write it again with `trialdeck physio`."
            )
        matched = int(keys.isin(pkeys).sum())
        notes.append(f"Physiology matched {matched} of {len(trials)} trials.")
        for m in physio.measures:
            values = pd.Series(frame[m].to_numpy(dtype=float), index=pkeys)
            series.append((m, physio.units.get(m, ""), values.reindex(keys).to_numpy(), False))
            units[m] = physio.units.get(m, "")
    bin_rows: list[dict[str, object]] = []
    test_rows: list[dict[str, object]] = []
    results: dict[str, TwoLinesResult] = {}
    for name, unit, y, share in series:
        bin_rows.extend(_bins(name, stim_score, x, y, stimuli, share=share, n_bins=n_bins))
        res = two_lines(x, y)
        results[name] = res
        test_rows.append(_test_row(name, unit, res))
    return LoadResult(
        True,
        bins=pd.DataFrame(bin_rows, columns=BIN_COLUMNS),
        tests=pd.DataFrame(test_rows, columns=TEST_COLUMNS),
        results=results,
        units=units,
        notes=tuple(notes),
    )


def load_facts(result: LoadResult) -> dict[str, object]:
    """JSON-ready facts: one entry per measure with the two-lines outcome."""
    return {
        "available": result.available,
        "reason": result.reason or None,
        "notes": list(result.notes),
        "measures": result.tests.to_dict(orient="records"),
    }


def measure_names(result: LoadResult) -> Sequence[str]:
    """The measures related to the score, in table order."""
    return list(result.results)
