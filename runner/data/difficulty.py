"""The difficulty score made robust: an improper-solution fallback, stated scaling and omega.

:func:`runner.data.stats.difficulty_scores` factors three per-stimulus measures (error share,
mean response time, mean rating) by principal axis factoring. This module wraps it:

* **Scaling.** Every standardisation uses the *sample* standard deviation (divisor n - 1), the
  same as the correlation matrix's. Principal-axis scores are regression-method (Thurstone)
  factor scores ``Z @ inv(R) @ loadings`` and keep their own scale: their variance across stimuli
  is the squared multiple correlation of the factor with the measures (below 1). The fallback
  composite is re-standardised to mean 0 and sample SD 1.
* **Improper solutions.** A one-factor solution is improper (a Heywood case) when a communality
  reaches 1 (a loading of 1 or more in absolute value): that measure would have no unique
  variance. With three measures the one-factor model is just identified (three loadings for
  three correlations), so any common-factor estimator (minimum residual, maximum likelihood)
  reproduces the same correlations and the same improper solution; another factoring method
  cannot repair it. The score then falls back to the **unit-weighted composite**: the mean of the
  measures' z-scores, each counted in the direction "higher = harder", re-standardised. Unit
  weights are the robust choice when the weights cannot be estimated well (Dawes 1979, American
  Psychologist 34(7):571-582; Grice 2001, Psychological Methods 6(4):430-450, on factor-score
  indeterminacy and simple sum scores).
* **Reliability.** McDonald's omega total of the three measures from the one-factor loadings
  (McDonald 1999, Test theory: a unified treatment, ch. 6), computed as psych's ``omega`` does:
  ``omega_t = 1 - sum(1 - h2) / sum(R)``, the share of the sum score's variance that is common.
  It is reported for the principal-axis solution; for an improper one it is not (a communality of
  1 or more makes it meaningless).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from runner.data.stats import (
    DIFFICULTY_VARIABLES,
    DifficultyResult,
    difficulty_scores,
)

#: The score's standardisations use the sample standard deviation (divisor n - 1).
SCORE_DDOF = 1
#: A communality at or above this is an improper (Heywood) solution.
HEYWOOD_COMMUNALITY = 1.0 - 1e-6

METHOD_PAF = "principal_axis"
METHOD_UNIT = "unit_weighted"

# Direction of each measure: all three grow with difficulty.
_DIRECTION = {"error_share": 1.0, "rt_ms": 1.0, "rating": 1.0}


@dataclass(frozen=True)
class RobustDifficulty(DifficultyResult):
    """A :class:`DifficultyResult` with the method used, omega and the scaling.

    Attributes
    ----------
    method : str
        ``"principal_axis"`` (regression-method factor scores) or ``"unit_weighted"`` (the
        fallback composite); empty when no score is available.
    improper : bool
        The principal-axis solution was a Heywood case (a communality of 1 or more).
    omega_total : float or None
        McDonald's omega total of the measures (None when improper or unavailable).
    score_ddof : int
        Divisor offset of every standard deviation used (1: sample SD).
    """

    method: str = ""
    improper: bool = False
    omega_total: float | None = None
    score_ddof: int = SCORE_DDOF


def omega_total(loadings: np.ndarray, R: np.ndarray | None = None) -> float:
    """McDonald's omega total of a one-factor solution.

    Parameters
    ----------
    loadings : np.ndarray
        One-factor loadings, shape (p,), on standardised variables.
    R : np.ndarray, optional
        The observed correlation matrix. With it, omega is ``1 - sum(1 - l**2) / sum(R)`` (the
        unique variance's share of the observed sum-score variance, as R psych's ``omega``
        reports ``omega.tot``); without it, the model-implied form
        ``(sum l)**2 / ((sum l)**2 + sum(1 - l**2))``. Both agree when the model fits exactly.

    Returns
    -------
    float

    Raises
    ------
    ValueError
        If the loadings are not finite or the total variance is not positive.
    """
    lam = np.asarray(loadings, dtype=float).ravel()
    if lam.size == 0 or not np.all(np.isfinite(lam)):
        raise ValueError("omega needs finite loadings")
    unique = float(np.sum(1.0 - lam**2))
    if R is None:
        common = float(lam.sum()) ** 2
        total = common + unique
    else:
        total = float(np.asarray(R, dtype=float).sum())
    if not total > 0:
        raise ValueError("the total variance of the sum score is not positive")
    return 1.0 - unique / total


def _zscores(values: np.ndarray) -> np.ndarray:
    return (values - values.mean(axis=0)) / values.std(axis=0, ddof=SCORE_DDOF)


def unit_weighted_scores(values: np.ndarray, directions: Sequence[float]) -> np.ndarray:
    """The unit-weighted composite: mean of signed z-scores, re-standardised (sample SD).

    Parameters
    ----------
    values : np.ndarray
        Shape (n, p): one row per stimulus, one column per measure, no missing values.
    directions : sequence of float
        +1 or -1 per measure, so that a higher signed value means harder.

    Returns
    -------
    np.ndarray
        Shape (n,), mean 0 and sample standard deviation 1 (all zeros if the composite is
        constant).
    """
    z = _zscores(np.asarray(values, dtype=float)) * np.asarray(directions, dtype=float)
    composite = z.mean(axis=1)
    sd = composite.std(ddof=SCORE_DDOF)
    centred = composite - composite.mean()
    return centred / sd if sd > 0 else centred


def robust_difficulty(trials: pd.DataFrame, *, factors: Sequence[str] = ()) -> RobustDifficulty:
    """Difficulty score per stimulus with a fallback for improper solutions, and omega.

    Parameters
    ----------
    trials : pd.DataFrame
        Pooled trials table, already limited to the trials to analyse.
    factors : sequence of str, optional
        Trial-table columns to carry into the score table.

    Returns
    -------
    RobustDifficulty
        As :func:`runner.data.stats.difficulty_scores`, plus ``method``, ``improper`` and
        ``omega_total``. When the principal-axis solution is improper, ``score`` is the
        unit-weighted composite and ``notes`` says so.
    """
    base = difficulty_scores(trials, factors=factors)
    if not base.available:
        return RobustDifficulty(
            scores=base.scores,
            loadings=base.loadings,
            available=False,
            reason=base.reason,
            communalities=base.communalities,
            notes=base.notes,
        )
    variables = list(DIFFICULTY_VARIABLES)
    improper = bool(np.any(base.communalities.to_numpy(dtype=float) >= HEYWOOD_COMMUNALITY))
    scores = base.scores.copy()
    notes = list(base.notes)
    if not improper:
        complete = scores.dropna(subset=variables)
        R = np.corrcoef(complete[variables].to_numpy(dtype=float), rowvar=False)
        omega = omega_total(base.loadings.to_numpy(dtype=float), R)
        return RobustDifficulty(
            scores=scores,
            loadings=base.loadings,
            available=True,
            communalities=base.communalities,
            notes=tuple(notes),
            method=METHOD_PAF,
            omega_total=omega if math.isfinite(omega) else None,
        )
    complete = scores.dropna(subset=variables)
    values = complete[variables].to_numpy(dtype=float)
    scores["score"] = np.nan
    scores.loc[complete.index, "score"] = unit_weighted_scores(
        values, [_DIRECTION[v] for v in variables]
    )
    notes.append(
        "The one-factor solution is improper (a communality of 1 or more), so the score is the "
        "unit-weighted composite instead: the mean of the three measures' z-scores, "
        "re-standardised. With three measures any common-factor method gives the same improper "
        "solution, and unit weights are the robust choice when weights cannot be estimated."
    )
    return RobustDifficulty(
        scores=scores,
        loadings=base.loadings,
        available=True,
        communalities=base.communalities,
        notes=tuple(notes),
        method=METHOD_UNIT,
        improper=True,
        omega_total=None,
    )


def difficulty_facts(result: RobustDifficulty) -> dict[str, object]:
    """JSON-ready facts of the score: method, improper flag, omega, scaling, loadings."""
    return {
        "available": result.available,
        "reason": result.reason or None,
        "method": result.method or None,
        "improper": result.improper,
        "omega_total": result.omega_total,
        "score_sd": "sample (n - 1)",
        "loadings": {k: float(v) for k, v in result.loadings.items()},
        "communalities": {k: float(v) for k, v in result.communalities.items()},
        "n_stimuli_scored": int(result.scores["score"].notna().sum()),
        "notes": list(result.notes),
    }
