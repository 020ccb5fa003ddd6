"""Tests of runner.data.difficulty: omega, the improper-solution fallback and the score's scale."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from synthetic import make_pool

from runner.data.difficulty import (
    METHOD_PAF,
    METHOD_UNIT,
    difficulty_facts,
    omega_total,
    robust_difficulty,
    unit_weighted_scores,
)
from runner.data.stats import difficulty_scores, principal_axis_factoring

# Data: psych::bfi (2800 participants), agreeableness items A2-A5, as printed by
# R 4.2.2 with psych 2.2.9: print(cor(bfi[c("A2","A3","A4","A5")], use="pairwise"), digits=17).
BFI_A2_A5 = np.array(
    [
        [1.0, 0.48509803851903638, 0.33508720783239127, 0.39008358430078127],
        [0.48509803851903638, 1.0, 0.36042829857329450, 0.50414114414624223],
        [0.33508720783239127, 0.36042829857329450, 1.0, 0.30753726452587504],
        [0.39008358430078127, 0.50414114414624223, 0.30753726452587504, 1.0],
    ]
)


def test_omega_formula_matches_psych_on_its_own_loadings() -> None:
    """omega_total of psych's general-factor loadings equals psych's omega.tot on bfi A2-A5.

    Source: R 4.2.2, psych 2.2.9: o <- omega(cor(bfi[c("A2","A3","A4","A5")],
    use="pairwise"), nfactors=1, fm="pa", plot=FALSE); o$omega.tot = 0.730484591961576 and
    o$schmid$sl[, "g"] = 0.636663728466, 0.764775346457, 0.490528792616, 0.637905954961.
    """
    g = np.array([0.636663728466, 0.764775346457, 0.490528792616, 0.637905954961])
    assert omega_total(g, BFI_A2_A5) == pytest.approx(0.730484591961576, abs=1e-9)


def test_omega_from_own_factoring_matches_psych() -> None:
    """Our principal-axis loadings of bfi A2-A5 give psych's loadings and omega total.

    Source: R 4.2.2, psych 2.2.9: fa(R, nfactors=1, fm="pa", min.err=1e-12,
    max.iter=10000)$loadings = 0.635541443783506, 0.767861957448248, 0.489995494954745,
    0.636919511189678; omega(R, nfactors=1, fm="pa")$omega.tot = 0.730484591961576 (psych's
    omega stops its factoring at its default tolerance, so it agrees to about 2e-4).
    """
    paf = principal_axis_factoring(BFI_A2_A5, 1, tol=1e-13, max_iter=10_000)
    ref = np.array([0.635541443783506, 0.767861957448248, 0.489995494954745, 0.636919511189678])
    np.testing.assert_allclose(paf.loadings[:, 0], ref, atol=1e-6)
    assert omega_total(paf.loadings[:, 0], BFI_A2_A5) == pytest.approx(0.730484591961576, abs=5e-4)


def test_omega_model_implied_form_equals_observed_form_for_an_exact_fit() -> None:
    """For R = l l' with unit diagonal both omega forms give (sum l)^2 / ((sum l)^2 + sum u).

    Source: McDonald 1999, Test theory: a unified treatment, eq. 6.20b (omega from one factor).
    """
    lam = np.array([0.8, 0.7, 0.6, 0.5])
    R = np.outer(lam, lam)
    np.fill_diagonal(R, 1.0)
    expected = lam.sum() ** 2 / (lam.sum() ** 2 + (1 - lam**2).sum())
    assert omega_total(lam) == pytest.approx(expected, rel=1e-12)
    assert omega_total(lam, R) == pytest.approx(expected, rel=1e-12)


def _heywood_trials() -> pd.DataFrame:
    """Ten stimuli, one trial each, whose error share drives both RT and rating (synthetic)."""
    error = np.array([0, 0, 0, 0, 0, 1, 1, 1, 1, 1], dtype=float)
    noise = np.array([0.3, -0.3, 0.3, -0.3, 0.1, 0.3, -0.3, 0.2, -0.2, 0.1])
    wobble = np.array([0.02, -0.05, 0.04, 0.0, 0.03, -0.02, 0.05, -0.04, 0.01, 0.0])
    return pd.DataFrame(
        {
            "participant": "P001",
            "stimulus": [f"s{i:02d}.png" for i in range(10)],
            "outcome": np.where(error == 1, "wrong", "correct"),
            "rt_ms": 2000 + 800 * (error + noise),
            "rating": 4 + 2 * (error - noise + wobble),
        }
    )


def test_heywood_case_falls_back_to_unit_weighted_composite() -> None:
    """An improper solution (communality > 1) gives the re-standardised mean of z-scores.

    Source: Dawes 1979, American Psychologist 34(7):571-582 (unit-weighted composites); the
    expected scores are computed here with numpy from the stimulus means (sample SD, n - 1).
    """
    trials = _heywood_trials()
    base = difficulty_scores(trials)
    assert base.communalities.max() > 1.0  # the case this test is about
    result = robust_difficulty(trials)
    assert result.available and result.improper and result.method == METHOD_UNIT
    assert result.omega_total is None
    table = base.scores[["error_share", "rt_ms", "rating"]].to_numpy(dtype=float)
    z = (table - table.mean(axis=0)) / table.std(axis=0, ddof=1)
    composite = z.mean(axis=1)
    expected = (composite - composite.mean()) / composite.std(ddof=1)
    np.testing.assert_allclose(result.scores["score"].to_numpy(), expected, atol=1e-12)
    assert any("unit-weighted" in note for note in result.notes)


def test_proper_solution_keeps_principal_axis_scores_and_reports_omega() -> None:
    """Without a Heywood case the scores are principal-axis factor scores, with omega.

    Source: McDonald 1999 (omega total, computed here from the loadings and the correlation
    matrix of the stimulus means with numpy).
    """
    trials, _ = make_pool(6, 90)
    main = trials[trials["part"] == "main"]
    base = difficulty_scores(main)
    assert base.communalities.max() < 1.0  # the case this test is about
    result = robust_difficulty(main)
    assert result.method == METHOD_PAF and not result.improper
    pd.testing.assert_series_equal(result.scores["score"], base.scores["score"])
    values = base.scores[["error_share", "rt_ms", "rating"]].dropna().to_numpy(dtype=float)
    R = np.corrcoef(values, rowvar=False)
    lam = base.loadings.to_numpy()
    assert result.omega_total == pytest.approx(1 - (1 - lam**2).sum() / R.sum(), rel=1e-12)
    facts = difficulty_facts(result)
    assert facts["method"] == METHOD_PAF and facts["score_sd"] == "sample (n - 1)"


def test_unit_weighted_scores_honour_directions_and_sample_sd() -> None:
    """A measure marked -1 counts reversed, and the composite has sample SD 1.

    Source: common practice (no published source): z-scores with the n - 1 standard deviation.
    """
    values = np.array([[1.0, 5.0], [2.0, 4.0], [3.0, 3.0], [4.0, 1.0]])
    scores = unit_weighted_scores(values, [1.0, -1.0])
    assert scores.std(ddof=1) == pytest.approx(1.0)
    assert np.all(np.diff(scores) > 0)


def test_unavailable_score_is_passed_through() -> None:
    """Too few stimuli: no score, no method, the same reason as the plain score."""
    trials = _heywood_trials().head(2)
    result = robust_difficulty(trials)
    assert not result.available and result.method == "" and "at least 3" in result.reason
