"""Small statistics for the pilot summary: t-based confidence intervals and a difficulty factor.

Everything here is numpy, pandas and scipy (the t distribution). The pieces are:

* :func:`t_critical` and :func:`mean_ci`: the two-sided Student t interval of a mean.
* :func:`principal_axis_factoring`: iterated principal axis factoring of a correlation matrix.
* :func:`difficulty_scores`: one difficulty score per stimulus, the first principal-axis factor of
  error share, response time and rating, computed over participants.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from runner.errors import InputFileError

DEFAULT_CONFIDENCE = 0.95

# A column whose standard deviation is below this (in its own units) carries no information.
_MIN_STD = 1e-12
# Fewer stimuli than this cannot give a correlation matrix worth factoring.
MIN_STIMULI_FOR_DIFFICULTY = 3

DIFFICULTY_VARIABLES = ("error_share", "rt_ms", "rating")
# Outcomes that count towards the accuracy of a stimulus; "unscored" trials have no expected answer.
_SCORED_OUTCOMES = ("correct", "wrong", "unsure", "unanswered")
# Response time is taken from trials that gave a number, as in the level summary.
_ANSWERED_OUTCOMES = ("correct", "wrong")


# --------------------------------------------------------------------------------------------
# Student t distribution and the confidence interval of a mean
# --------------------------------------------------------------------------------------------


# Summaries ask for the same few (confidence, df) pairs many times, one per group.
@functools.lru_cache(maxsize=4096)
def t_critical(confidence: float, df: float) -> float:
    """Two-sided critical value of Student's t: the quantile at ``(1 + confidence) / 2``.

    Parameters
    ----------
    confidence : float
        Coverage of the two-sided interval, strictly between 0 and 1 (0.95 for a 95% interval).
    df : float
        Degrees of freedom, > 0.

    Returns
    -------
    float
        The positive value c with P(-c <= T <= c) = confidence: scipy's inverse of the t
        distribution function (``scipy.special.stdtrit``, which ``scipy.stats.t.ppf`` calls;
        importing it alone takes a third of the time ``scipy.stats`` takes).
    """
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must be strictly between 0 and 1, got {confidence!r}")
    if not df > 0:
        raise ValueError(f"degrees of freedom must be positive, got {df!r}")
    from scipy.special import stdtrit  # imported when first needed: it takes a while

    return float(stdtrit(df, (1.0 + confidence) / 2.0))


def mean_ci(
    values: Iterable[float] | np.ndarray | pd.Series, confidence: float = DEFAULT_CONFIDENCE
) -> tuple[float, float, float]:
    """Mean and two-sided t-based confidence interval, ignoring missing values.

    The interval is ``mean +/- t_critical(confidence, n - 1) * s / sqrt(n)`` with ``s`` the sample
    standard deviation (n - 1 in the denominator).

    Parameters
    ----------
    values : iterable of float
        The observations; NaN and pandas NA are dropped first.
    confidence : float, optional
        Coverage of the interval, default 0.95.

    Returns
    -------
    tuple of float
        ``(mean, low, high)``. With no values all three are NaN; with one value the bounds are NaN
        because the spread cannot be estimated.
    """
    if isinstance(values, np.ndarray) and values.dtype.kind in "fiu":
        x = values.astype(float, copy=False).ravel()
    else:
        series = values if isinstance(values, pd.Series) else pd.Series(list(values), dtype=object)
        x = pd.to_numeric(series, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    x = x[np.isfinite(x)]
    n = x.size
    if n == 0:
        return (math.nan, math.nan, math.nan)
    mean = float(x.mean())
    if n < 2:
        return (mean, math.nan, math.nan)
    sem = float(x.std(ddof=1)) / math.sqrt(n)
    half = t_critical(confidence, n - 1) * sem
    return (mean, mean - half, mean + half)


# --------------------------------------------------------------------------------------------
# Iterated principal axis factoring
# --------------------------------------------------------------------------------------------


def wilson_interval(
    successes: int, n: int, confidence: float = DEFAULT_CONFIDENCE
) -> tuple[float, float]:
    """Wilson score interval of a proportion (Wilson 1927), NaN for n == 0.

    Unlike the normal-approximation interval it stays inside [0, 1] and does not collapse to a
    point at 0% or 100%, which pilots with few trials per level often reach.
    """
    if n <= 0:
        return (math.nan, math.nan)
    from scipy.special import ndtri  # the standard normal quantile

    z = float(ndtri((1.0 + confidence) / 2.0))
    p = successes / n
    denom = 1.0 + z * z / n
    centre = (p + z * z / (2 * n)) / denom
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / denom
    return (max(0.0, centre - half), min(1.0, centre + half))


@dataclass(frozen=True)
class PAFResult:
    """Outcome of :func:`principal_axis_factoring`.

    Attributes
    ----------
    loadings : np.ndarray
        Shape (p, n_factors); each column's sum is non-negative.
    communalities : np.ndarray
        Shape (p,); row sums of squared loadings. Values above 1 (a Heywood case) are kept and
        reported in ``notes``.
    iterations : int
        Number of eigendecompositions done.
    converged : bool
        Whether the total communality changed by less than ``tol`` within ``max_iter`` steps.
    eigenvalues : np.ndarray
        The leading eigenvalues of the final reduced correlation matrix.
    notes : tuple of str
        Plain sentences about anything unusual (singular matrix, Heywood case, no convergence).
    """

    loadings: np.ndarray
    communalities: np.ndarray
    iterations: int
    converged: bool
    eigenvalues: np.ndarray = field(default_factory=lambda: np.empty(0))
    notes: tuple[str, ...] = ()


def _check_correlation_matrix(R: np.ndarray, n_factors: int) -> np.ndarray:
    R = np.asarray(R, dtype=float)
    if R.ndim != 2 or R.shape[0] != R.shape[1] or R.shape[0] < 1:
        raise ValueError(f"a correlation matrix must be square, got shape {R.shape}")
    if not np.all(np.isfinite(R)):
        raise ValueError("the correlation matrix holds NaN or infinite entries")
    if not np.allclose(R, R.T, atol=1e-10):
        raise ValueError("the correlation matrix is not symmetric")
    if not 1 <= n_factors <= R.shape[0]:
        raise ValueError(f"n_factors must be between 1 and {R.shape[0]}, got {n_factors!r}")
    return (R + R.T) / 2.0


def principal_axis_factoring(
    R: np.ndarray,
    n_factors: int = 1,
    *,
    tol: float = 1e-6,
    max_iter: int = 500,
) -> PAFResult:
    """Iterated principal axis factoring of a correlation matrix.

    The diagonal of ``R`` starts as the squared multiple correlations ``1 - 1 / diag(inv(R))``.
    Each step eigendecomposes the reduced matrix, takes ``loadings = vectors * sqrt(values)`` for
    the ``n_factors`` largest eigenvalues (negative ones clipped to 0), and puts the row sums of
    squared loadings back on the diagonal. It stops when the total communality changes by less
    than ``tol``. Each loading column is then signed so that its sum is non-negative.

    Parameters
    ----------
    R : np.ndarray
        Symmetric correlation matrix, shape (p, p), unit diagonal.
    n_factors : int, optional
        Number of factors to extract, default 1.
    tol : float, optional
        Stop when the total communality changes by less than this, default 1e-6.
    max_iter : int, optional
        Upper bound on the number of steps, default 500.

    Returns
    -------
    PAFResult
        Loadings, communalities, iteration count, convergence flag and notes.

    Raises
    ------
    ValueError
        If ``R`` is not a finite symmetric square matrix or ``n_factors`` is out of range.
    """
    R = _check_correlation_matrix(R, n_factors)
    notes: list[str] = []
    p = R.shape[0]
    # A singular R (for example more variables than observations, or two identical variables)
    # has no inverse; the pseudo-inverse still gives usable starting communalities.
    if np.linalg.matrix_rank(R) < p:
        inv = np.linalg.pinv(R)
        notes.append(
            "The correlation matrix is singular, so the starting communalities use a "
            "pseudo-inverse; treat the loadings with care."
        )
    else:
        inv = np.linalg.inv(R)
    with np.errstate(divide="ignore", invalid="ignore"):
        h = 1.0 - 1.0 / np.diag(inv)
    # Squared multiple correlations lie in [0, 1]; the pseudo-inverse can stray outside.
    h = np.clip(np.nan_to_num(h, nan=1.0, posinf=1.0, neginf=0.0), 0.0, 1.0)

    reduced = R.copy()
    total = float(h.sum())
    converged = False
    iterations = 0
    loadings = np.zeros((p, n_factors))
    values = np.zeros(n_factors)
    for iterations in range(1, max_iter + 1):  # noqa: B007 - the count is reported
        np.fill_diagonal(reduced, h)
        eigvals, eigvecs = np.linalg.eigh(reduced)
        order = np.argsort(eigvals)[::-1][:n_factors]
        values = eigvals[order]
        loadings = eigvecs[:, order] * np.sqrt(np.clip(values, 0.0, None))
        h = (loadings**2).sum(axis=1)
        new_total = float(h.sum())
        if abs(new_total - total) < tol:
            total = new_total
            converged = True
            break
        total = new_total

    signs = np.where(loadings.sum(axis=0) < 0, -1.0, 1.0)
    loadings = loadings * signs
    if not converged:
        notes.append(
            f"Principal axis factoring did not settle within {max_iter} steps; the loadings are "
            "the last estimate."
        )
    if np.any(h > 1.0 + 1e-9):
        notes.append(
            "A communality exceeds 1 (a Heywood case): one variable is almost fully explained, "
            "often because there are too few observations."
        )
    return PAFResult(
        loadings=loadings,
        communalities=h,
        iterations=iterations,
        converged=converged,
        eigenvalues=values,
        notes=tuple(notes),
    )


# --------------------------------------------------------------------------------------------
# Difficulty scores per stimulus
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class DifficultyResult:
    """Outcome of :func:`difficulty_scores`.

    Attributes
    ----------
    scores : pd.DataFrame
        One row per stimulus (index ``stimulus``) with ``n_trials``, ``n_participants``, the three
        input variables, the requested factor columns and ``score`` (NaN when not available).
    loadings : pd.Series
        Loading of each input variable on the difficulty factor (empty when not available).
    available : bool
        False when there was not enough data; ``reason`` then says why.
    reason : str
        Plain sentence, empty when ``available``.
    communalities : pd.Series
        Communality of each input variable.
    notes : tuple of str
        Notes from the factoring (singular matrix, Heywood case).
    """

    scores: pd.DataFrame
    loadings: pd.Series
    available: bool
    reason: str = ""
    communalities: pd.Series = field(default_factory=lambda: pd.Series(dtype=float))
    notes: tuple[str, ...] = ()


def stimulus_table(trials: pd.DataFrame, *, factors: Sequence[str] = ()) -> pd.DataFrame:
    """Aggregate trials per stimulus over participants: error share, mean RT and mean rating.

    ``error_share`` is 1 minus the share of correct answers among scored trials, so an "unsure"
    or a missing answer counts as not correct; trials without an expected answer are left out.
    ``rt_ms`` is the mean response time of trials answered with a number (correct or wrong);
    ``rating`` is the mean difficulty rating of trials that have one.

    Parameters
    ----------
    trials : pd.DataFrame
        Pooled trials table (one row per trial, contract columns).
    factors : sequence of str, optional
        Trial-table columns to carry along (their first value per stimulus).

    Returns
    -------
    pd.DataFrame
        Indexed by ``stimulus``, sorted by stimulus.
    """
    _require_columns(trials, ("participant", "stimulus", "outcome", "rt_ms", "rating", *factors))
    outcome = trials["outcome"].astype(str)
    scored = outcome.isin(_SCORED_OUTCOMES)
    answered = outcome.isin(_ANSWERED_OUTCOMES)
    work = pd.DataFrame(
        {
            "stimulus": trials["stimulus"].astype(str),
            "participant": trials["participant"].astype(str),
            "scored": scored.astype(float),
            "is_correct": (outcome == "correct").astype(float),
            "rt_answered": pd.to_numeric(trials["rt_ms"], errors="coerce")
            .astype(float)
            .where(answered),
            "rating": pd.to_numeric(trials["rating"], errors="coerce").astype(float),
        }
    )
    grouped = work.groupby("stimulus", sort=True)
    n_scored = grouped["scored"].sum()
    n_correct = grouped["is_correct"].sum()
    table = pd.DataFrame(
        {
            "n_trials": grouped.size(),
            "n_participants": grouped["participant"].nunique(),
            "error_share": 1.0 - n_correct / n_scored.where(n_scored > 0),
            "rt_ms": grouped["rt_answered"].mean(),
            "rating": grouped["rating"].mean(),
        }
    )
    if factors:
        firsts = trials.assign(stimulus=trials["stimulus"].astype(str)).groupby(
            "stimulus", sort=True
        )[list(factors)]
        table = table.join(firsts.first())
    table.index.name = "stimulus"
    return table


def difficulty_scores(trials: pd.DataFrame, *, factors: Sequence[str] = ()) -> DifficultyResult:
    """One difficulty score per stimulus: the first principal-axis factor of three measures.

    The measures are aggregated per stimulus over participants (see :func:`stimulus_table`):
    error share, mean response time of answered trials and mean rating. Each is z-standardised
    across stimuli, their correlation matrix is factored with :func:`principal_axis_factoring`
    (one factor), and regression-method factor scores ``Z @ inv(R) @ loadings`` are computed.
    The loadings' sum is made positive, so with the usual pattern (more errors, slower answers and
    higher ratings go together) a higher score means a harder stimulus. Aggregating per stimulus
    rather than per trial keeps one trial's lapse from dominating, at the cost of needing several
    stimuli; stimuli missing any measure are left out of the factoring (their score is NaN).

    Parameters
    ----------
    trials : pd.DataFrame
        Pooled trials table, already limited to the trials to analyse.
    factors : sequence of str, optional
        Trial-table columns to carry into the score table.

    Returns
    -------
    DifficultyResult
        ``available`` is False (with ``reason``) when fewer than three stimuli have all measures,
        or a measure does not vary across them.
    """
    table = stimulus_table(trials, factors=factors)
    table["score"] = np.nan
    variables = list(DIFFICULTY_VARIABLES)
    complete = table.dropna(subset=variables)

    def unavailable(reason: str) -> DifficultyResult:
        return DifficultyResult(
            scores=table, loadings=pd.Series(dtype=float), available=False, reason=reason
        )

    if len(complete) < MIN_STIMULI_FOR_DIFFICULTY:
        return unavailable(
            f"Not enough data for a difficulty score: {len(complete)} stimuli have error share, "
            f"response time and rating, and at least {MIN_STIMULI_FOR_DIFFICULTY} are needed."
        )
    values = complete[variables].to_numpy(dtype=float)
    std = values.std(axis=0, ddof=1)
    flat = [name for name, s in zip(variables, std, strict=True) if not s > _MIN_STD]
    if flat:
        return unavailable(
            "Not enough data for a difficulty score: "
            + ", ".join(flat)
            + " does not vary across stimuli."
        )
    z = (values - values.mean(axis=0)) / std
    R = np.corrcoef(z, rowvar=False)
    paf = principal_axis_factoring(R, 1)
    # Regression (Thurstone) weights; a singular R takes the pseudo-inverse, as in the factoring.
    weights = np.linalg.pinv(R) @ paf.loadings
    table.loc[complete.index, "score"] = (z @ weights)[:, 0]
    return DifficultyResult(
        scores=table,
        loadings=pd.Series(paf.loadings[:, 0], index=variables, name="loading"),
        available=True,
        communalities=pd.Series(paf.communalities, index=variables, name="communality"),
        notes=paf.notes,
    )


def _require_columns(table: pd.DataFrame, columns: Sequence[str]) -> None:
    missing = [c for c in columns if c not in table.columns]
    if missing:
        raise InputFileError(
            "The trials table lacks the column(s) "
            + ", ".join(repr(c) for c in missing)
            + "; export trials.csv again from the session journals or check the factor names."
        )
