"""Tests of runner.data.stats: t intervals, principal axis factoring and difficulty scores."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps

from runner.data.stats import (
    DIFFICULTY_VARIABLES,
    difficulty_scores,
    mean_ci,
    principal_axis_factoring,
    stimulus_table,
    t_critical,
)

# ------------------------------------------------------------------------------------------
# t distribution and mean_ci
# ------------------------------------------------------------------------------------------


def test_mean_ci_worked_example() -> None:
    """x = [2, 4, 4, 5, 7, 8] gives mean 5 and 95% interval (2.70080, 7.29920).

    Source: scipy.stats.t.interval(0.95, 5, loc=5, scale=sem).
    """
    mean, low, high = mean_ci([2, 4, 4, 5, 7, 8])
    assert mean == pytest.approx(5.0)
    assert low == pytest.approx(2.70080, abs=5e-6)
    assert high == pytest.approx(7.29920, abs=5e-6)


@pytest.mark.parametrize("n", [2, 3, 7, 30, 200])
@pytest.mark.parametrize("confidence", [0.80, 0.95, 0.99])
def test_mean_ci_matches_scipy_interval(n: int, confidence: float) -> None:
    """mean_ci equals scipy's t interval for random samples of several sizes and coverages.

    Source: scipy.stats.t.interval(confidence, n - 1, loc=mean, scale=scipy.stats.sem(x)).
    """
    x = np.random.default_rng(n).lognormal(8.5, 0.4, size=n)
    ref_low, ref_high = sps.t.interval(confidence, n - 1, loc=x.mean(), scale=sps.sem(x))
    mean, low, high = mean_ci(x, confidence)
    assert mean == pytest.approx(x.mean(), rel=1e-12)
    assert low == pytest.approx(ref_low, rel=1e-9)
    assert high == pytest.approx(ref_high, rel=1e-9)


@pytest.mark.parametrize(("df", "table_value"), [(5, 2.571), (9, 2.262), (29, 2.045)])
def test_t_critical_matches_nist_table_through_mean_ci(df: int, table_value: float) -> None:
    """The 95% half-width of mean_ci divided by the standard error is the tabled t value.

    Source: NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.6.7.2 (upper critical
    values of Student's t, alpha = 0.025 one-sided), tabled to 3 decimals.
    """
    x = np.arange(df + 1, dtype=float) ** 1.5
    mean, _, high = mean_ci(x, 0.95)
    sem = x.std(ddof=1) / math.sqrt(x.size)
    assert (high - mean) / sem == pytest.approx(table_value, abs=5e-4)
    assert t_critical(0.95, df) == pytest.approx(table_value, abs=5e-4)


def test_mean_ci_drops_missing_values() -> None:
    """pandas NA and NaN are left out before the interval is computed.

    Source: scipy.stats.t.interval on the same values without the missing ones.
    """
    values = pd.array([2, 4, pd.NA, 4, 5, 7, 8], dtype="Int64")
    with_nan = [2.0, np.nan, 4.0, 4.0, 5.0, 7.0, 8.0]
    ref = mean_ci([2, 4, 4, 5, 7, 8])
    assert mean_ci(values) == pytest.approx(ref)
    assert mean_ci(with_nan) == pytest.approx(ref)


@pytest.mark.parametrize(
    ("values", "expected_mean"),
    [([], math.nan), ([np.nan], math.nan), ([3.5], 3.5), ([np.nan, 3.5], 3.5)],
)
def test_mean_ci_small_samples_give_nan_bounds(values: list[float], expected_mean: float) -> None:
    """With fewer than two values the bounds are NaN (and the mean too when there is none).

    Source: common practice (no published source): a spread needs two observations.
    """
    mean, low, high = mean_ci(values)
    assert math.isnan(low) and math.isnan(high)
    if math.isnan(expected_mean):
        assert math.isnan(mean)
    else:
        assert mean == expected_mean


@pytest.mark.parametrize(
    ("confidence", "df"), [(0.0, 5), (1.0, 5), (1.5, 5), (0.95, 0), (0.95, -2)]
)
def test_t_critical_rejects_bad_arguments(confidence: float, df: float) -> None:
    """Coverage outside (0, 1) and non-positive degrees of freedom are refused."""
    with pytest.raises(ValueError):
        t_critical(confidence, df)


# ------------------------------------------------------------------------------------------
# Principal axis factoring
# ------------------------------------------------------------------------------------------

L_TRUE = np.array([0.8, 0.7, 0.6, 0.5])


def _one_factor_r(loadings: np.ndarray) -> np.ndarray:
    R = np.outer(loadings, loadings)
    np.fill_diagonal(R, 1.0)
    return R


def test_paf_recovers_exact_one_factor_loadings() -> None:
    """R = l l^T with unit diagonal and l = (0.8, 0.7, 0.6, 0.5) gives back l and h = l^2.

    Source: the standard iterated principal axis factoring algorithm;
    an exact one-factor matrix is its fixed point. factor_analyzer is not a valid reference.
    """
    result = principal_axis_factoring(_one_factor_r(L_TRUE), 1, tol=1e-13, max_iter=10_000)
    assert result.converged
    np.testing.assert_allclose(result.loadings[:, 0], L_TRUE, atol=1e-8)
    np.testing.assert_allclose(result.communalities, L_TRUE**2, atol=1e-8)
    assert result.notes == ()


def test_paf_default_tolerance_is_close_and_converges() -> None:
    """With the default tol=1e-6 the loadings are within 1e-4 and the run settles early.

    Source: the standard iterated principal axis factoring algorithm (fixed point l).
    """
    result = principal_axis_factoring(_one_factor_r(L_TRUE))
    assert result.converged and result.iterations < 500
    np.testing.assert_allclose(result.loadings[:, 0], L_TRUE, atol=1e-4)


def test_paf_recovers_two_factor_structure() -> None:
    """An exact two-factor matrix R = L L^T + diag(1 - h) gives back L L^T (up to rotation).

    Source: the common factor model identity behind iterated principal axis factoring
    (loadings are defined up to an orthogonal rotation, so L L^T is compared).
    """
    L = np.array([[0.8, 0.1], [0.7, 0.2], [0.6, 0.0], [0.1, 0.7], [0.2, 0.6], [0.0, 0.8]])
    R = L @ L.T
    np.fill_diagonal(R, 1.0)
    result = principal_axis_factoring(R, 2, tol=1e-14, max_iter=20_000)
    assert result.converged
    np.testing.assert_allclose(result.loadings @ result.loadings.T, L @ L.T, atol=1e-6)
    assert np.all(result.loadings.sum(axis=0) > 0)


def test_paf_signs_loadings_so_their_sum_is_positive() -> None:
    """Reversing a variable keeps the loading sum positive and flips only that loading's sign.

    Source: common practice (no published source): the sign of a factor is arbitrary, so a
    convention fixes it.
    """
    flip = np.diag([1.0, -1.0, 1.0, 1.0])
    result = principal_axis_factoring(
        flip @ _one_factor_r(L_TRUE) @ flip, tol=1e-13, max_iter=10_000
    )
    assert result.loadings.sum() > 0
    np.testing.assert_allclose(result.loadings[:, 0], L_TRUE * np.diag(flip), atol=1e-8)


def test_paf_singular_matrix_uses_pseudo_inverse_and_says_so() -> None:
    """Two identical variables make R singular: the run completes and the notes say so.

    Source: common practice (no published source).
    """
    base = _one_factor_r(np.array([0.8, 0.8, 0.6, 0.5]))
    base[0, 1] = base[1, 0] = 1.0
    result = principal_axis_factoring(base)
    assert np.all(np.isfinite(result.loadings))
    assert any("singular" in note for note in result.notes)
    assert any("pseudo-inverse" in note for note in result.notes)


def test_paf_reports_when_it_does_not_settle() -> None:
    """A single step is not enough at a tight tolerance: converged is False and a note says so."""
    result = principal_axis_factoring(_one_factor_r(L_TRUE), tol=1e-15, max_iter=1)
    assert not result.converged
    assert result.iterations == 1
    assert any("did not settle" in note for note in result.notes)


@pytest.mark.parametrize(
    ("R", "n_factors", "fragment"),
    [
        (np.ones((2, 3)), 1, "square"),
        (np.array([[1.0, np.nan], [np.nan, 1.0]]), 1, "NaN"),
        (np.array([[1.0, 0.2], [0.5, 1.0]]), 1, "symmetric"),
        (np.eye(3), 0, "n_factors"),
        (np.eye(3), 4, "n_factors"),
    ],
)
def test_paf_rejects_bad_input(R: np.ndarray, n_factors: int, fragment: str) -> None:
    """Non-square, non-finite, asymmetric matrices and out-of-range factor counts are refused."""
    with pytest.raises(ValueError, match=fragment):
        principal_axis_factoring(R, n_factors)


# ------------------------------------------------------------------------------------------
# Difficulty scores
# ------------------------------------------------------------------------------------------


def _trials_from_latent(n_stimuli: int, seed: int = 3) -> tuple[pd.DataFrame, np.ndarray]:
    """Three participants per stimulus; error, RT and rating all rise with a latent hardness."""
    rng = np.random.default_rng(seed)
    hardness = np.linspace(-1.5, 1.5, n_stimuli)
    rows = []
    for s, d in enumerate(hardness):
        for p in range(3):
            p_correct = 1 / (1 + np.exp(2.0 * d))
            outcome = "correct" if rng.uniform() < p_correct else rng.choice(["wrong", "unsure"])
            rows.append(
                {
                    "participant": f"P{p}",
                    "stimulus": f"s{s:02d}.png",
                    "outcome": outcome,
                    "rt_ms": float(np.exp(8.5 + 0.4 * d + rng.normal(0, 0.1))),
                    "rating": int(np.clip(round(5 + 2 * d + rng.normal(0, 0.5)), 1, 9)),
                    "nodes": 20 + 30 * (s % 5),
                }
            )
    return pd.DataFrame(rows), hardness


def test_difficulty_score_tracks_latent_hardness() -> None:
    """Scores rise with the hardness that generated the data, all loadings are positive.

    Source: common practice (no published source): a simulation with known truth.
    """
    trials, hardness = _trials_from_latent(40)
    result = difficulty_scores(trials, factors=["nodes"])
    assert result.available, result.reason
    assert list(result.loadings.index) == list(DIFFICULTY_VARIABLES)
    assert (result.loadings > 0).all()
    scores = result.scores["score"].to_numpy()
    known = np.isfinite(scores)
    # A stimulus nobody answered with a number has no response time and so no score.
    assert known.sum() >= 35
    assert np.corrcoef(scores[known], hardness[known])[0, 1] > 0.9
    assert "nodes" in result.scores.columns


def test_difficulty_regression_scores_have_textbook_moments() -> None:
    """Regression scores have mean 0 and variance l^T inv(R) l (their squared multiple correlation).

    Source: from memory (Thurstone regression factor scores; their variance equals the squared
    multiple correlation of the factor with the variables).
    """
    trials, _ = _trials_from_latent(25, seed=11)
    result = difficulty_scores(trials)
    table = result.scores.dropna(subset=["score"])
    z = table[list(DIFFICULTY_VARIABLES)].to_numpy(dtype=float)
    R = np.corrcoef(z, rowvar=False)
    lam = result.loadings.to_numpy()
    scores = table["score"].to_numpy()
    assert scores.mean() == pytest.approx(0.0, abs=1e-12)
    assert scores.var(ddof=1) == pytest.approx(lam @ np.linalg.solve(R, lam), rel=1e-9)


def test_stimulus_table_counts_unsure_and_missing_as_not_correct() -> None:
    """Error share: unsure and unanswered count as not correct; unscored trials are left out.

    Source: common practice (no published source); hand count.
    """
    trials = pd.DataFrame(
        {
            "participant": ["A", "B", "C", "D", "A", "B"],
            "stimulus": ["x", "x", "x", "x", "y", "y"],
            "outcome": ["correct", "unsure", "unanswered", "unscored", "wrong", "correct"],
            "rt_ms": [1000.0, 2000.0, np.nan, 500.0, 3000.0, 5000.0],
            "rating": pd.array([2, 5, pd.NA, 3, 6, 4], dtype="Int64"),
        }
    )
    table = stimulus_table(trials)
    assert table.loc["x", "error_share"] == pytest.approx(2 / 3)
    assert table.loc["x", "rt_ms"] == pytest.approx(1000.0)  # only the correct answer counts
    assert table.loc["x", "rating"] == pytest.approx((2 + 5 + 3) / 3)
    assert table.loc["y", "error_share"] == pytest.approx(0.5)
    assert table.loc["y", "rt_ms"] == pytest.approx(4000.0)
    assert table.loc["x", "n_trials"] == 4 and table.loc["x", "n_participants"] == 4


def test_difficulty_not_enough_stimuli() -> None:
    """Two stimuli are too few: no crash, available is False and the reason names the minimum."""
    trials, _ = _trials_from_latent(2)
    result = difficulty_scores(trials)
    assert not result.available
    assert "at least 3" in result.reason
    assert result.scores["score"].isna().all()
    assert result.loadings.empty


def test_difficulty_flat_measure_is_reported() -> None:
    """A rating that never varies gives a 'does not vary' result naming the rating."""
    trials, _ = _trials_from_latent(10)
    trials["rating"] = 5
    result = difficulty_scores(trials)
    assert not result.available
    assert "rating" in result.reason and "does not vary" in result.reason
