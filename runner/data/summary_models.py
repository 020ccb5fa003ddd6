"""The pilot report's models in one place: compute, tables, facts, figures and report sections.

:func:`compute_models` runs the robust difficulty score (:mod:`runner.data.difficulty`), the
models of what drives it (:mod:`runner.data.drivers`) and the load curves
(:mod:`runner.data.load_curve`); the other functions turn the result into the summary's CSV
tables, ``facts.json`` entries, PNG figures and report sections. Everything is plain data
(DataFrames and dicts), so another report can render it.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from runner.data import plots
from runner.data.difficulty import RobustDifficulty, difficulty_facts, robust_difficulty
from runner.data.drivers import DriversResult, difficulty_drivers, drivers_facts
from runner.data.load_curve import LoadResult, PhysioTable, load_facts, load_relations
from runner.data.plots_load import best_model_fit, load_curve

MODELS_CSV = "difficulty_models.csv"
PREDICTIONS_CSV = "difficulty_best_model.csv"
#: Key of the best-model figure in :func:`write_model_figures`'s result.
BEST_MODEL = "best_model"
MIXED_CSV = "difficulty_mixed.csv"
LOAD_BINS_CSV = "load_bins.csv"
LOAD_TESTS_CSV = "load_twolines.csv"
_SAFE = re.compile(r"[^A-Za-z0-9_-]+")


@dataclass(frozen=True)
class SummaryModels:
    """The three analyses of issue 14's pilot report."""

    difficulty: RobustDifficulty
    drivers: DriversResult
    load: LoadResult


def compute_models(
    trials: pd.DataFrame,
    *,
    factors: Sequence[str] = (),
    physio: PhysioTable | None = None,
    features: Sequence[str] | None = None,
) -> SummaryModels:
    """Difficulty score, its drivers and the load curves of the trials to summarise."""
    difficulty = robust_difficulty(trials, factors=factors)
    return SummaryModels(
        difficulty=difficulty,
        drivers=difficulty_drivers(trials, difficulty.scores, features=features),
        load=load_relations(trials, difficulty.scores, physio=physio),
    )


def json_ready(value: Any) -> Any:
    """Nested dicts and lists with numpy scalars made plain and NaN or infinity made None."""
    if isinstance(value, Mapping):
        return {str(k): json_ready(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_ready(v) for v in value]
    if value is None or value is pd.NA:
        return None
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def models_facts(models: SummaryModels) -> dict[str, Any]:
    """``facts.json`` entries: ``difficulty``, ``drivers`` and ``load``."""
    return json_ready(
        {
            "difficulty": difficulty_facts(models.difficulty),
            "drivers": drivers_facts(models.drivers),
            "load": load_facts(models.load),
        }
    )


def model_tables(models: SummaryModels) -> dict[str, pd.DataFrame]:
    """CSV file name -> table, for the tables there is something to write in."""
    tables: dict[str, pd.DataFrame] = {}
    if models.drivers.available:
        tables[MODELS_CSV] = models.drivers.models
        tables[PREDICTIONS_CSV] = models.drivers.predictions.reset_index()
        if models.drivers.mixed.available:
            tables[MIXED_CSV] = models.drivers.mixed.coefficients
    if models.load.available:
        tables[LOAD_BINS_CSV] = models.load.bins
        tables[LOAD_TESTS_CSV] = models.load.tests
    return tables


def _stem(name: str) -> str:
    return _SAFE.sub("_", name).strip("_") or "measure"


def write_model_figures(
    models: SummaryModels, out_dir: Path, *, stem: Callable[[str], str] = _stem
) -> dict[str, Path]:
    """Write ``difficulty_best_model.png`` and ``load_<measure>.png`` per related measure.

    Returns
    -------
    dict
        :data:`BEST_MODEL` or the measure name -> path written.
    """
    out: dict[str, Path] = {}
    dr = models.drivers
    if dr.available:
        best = dr.models.iloc[0]
        fig = best_model_fit(
            dr.predictions, predictors=str(best["predictors"]), cv_rmse=float(best["cv_rmse"])
        )
        out[BEST_MODEL] = plots.save_png(fig, Path(out_dir) / "difficulty_best_model.png")
    load = models.load
    if not load.available:
        return out
    for name, res in load.results.items():
        rows = load.bins[load.bins["measure"] == name]
        fig = load_curve(rows, res, measure=name, units=load.units.get(name, ""))
        out[name] = plots.save_png(fig, Path(out_dir) / f"load_{stem(name)}.png")
    return out
