"""Tests of runner.data.twolines: the two-lines test against its reference R code's output."""

from __future__ import annotations

import numpy as np
import pytest

from runner.data.twolines import (
    INVERTED_U,
    U_SHAPE,
    interrupted_regression,
    smooth_fit,
    two_lines,
)

# Simonsohn's two-lines app 0.52 R code (twolines() and reg2(), run without their plotting) in
# R 4.2.2 with mgcv 1.8-41, sandwich 3.0-2 and lmtest 0.9-40, on the data of _inverted_u(),
# _monotone() and _u_shape() written to CSV with 17 significant digits. Keys: break point xc, median of the flat region,
# flat region bounds, then b, robust (HC3) SE, z and p of each line.
R_INVERTED_U = {
    "xc": 5.0,
    "midflat": 5.0,
    "flat": (4.25, 5.75),
    "line1": (0.605010913299076, 0.0623468139194675, 9.70395879540147, 2.90022218493778e-22),
    "line2": (-0.586407256555116, 0.0637345704246731, -9.20077208723297, 3.55386917127834e-20),
    "at_break": (4.42109378449992, 4.4496442722302),
}
R_MONOTONE = {
    "xc": 8.5,
    "midflat": 8.625,
    "flat": (8.5, 8.75),
    "line1": (0.309232102408026, 0.0313792812403948, 9.85465855763291, 6.54387320556783e-23),
    "line2": (0.243831480573186, 0.388700292199696, 0.627299452730836, 0.530462962101961),
    "at_break": (3.0385199382108, 3.28103743952596),
}
# A U whose Robin Hood step moves the break off the flat region's median (5.625 -> 5.25).
R_U_SHAPE = {
    "xc": 5.25,
    "midflat": 5.625,
    "flat": (4.75, 6.5),
    "line1": (-0.500608527138578, 0.0450386060266904, -11.1150981636046, 1.05934065510976e-28),
    "line2": (0.347723344638043, 0.0627464208447796, 5.54172397335988, 2.99508167708407e-08),
    "at_break": (-0.11287112949017, -0.056808235002565),
}
# reg2(f, xc = 4.5) on the inverted-U data: b1, se1, z1, p1, b2, se2, z2, p2.
R_REG2_AT_4_5 = (
    6.30158560008275e-01,
    7.66421587813563e-02,
    8.22208781730670e00,
    1.99990657063029e-16,
    -5.02637109178099e-01,
    5.46915381749342e-02,
    -9.19039994030492e00,
    3.91383460146210e-20,
)


def _x() -> np.ndarray:
    return np.repeat(np.arange(40) / 4.0, 5)


def _inverted_u() -> tuple[np.ndarray, np.ndarray]:
    """An inverted U with its peak at x = 5 plus normal noise (numpy's frozen RandomState)."""
    x = _x()
    return x, 1.0 + 1.2 * x - 0.12 * x**2 + np.random.RandomState(2018).normal(0, 1.0, x.size)


def _monotone() -> tuple[np.ndarray, np.ndarray]:
    """A rising straight line plus normal noise: the control without a U."""
    x = _x()
    return x, 0.5 + 0.3 * x + np.random.RandomState(2019).normal(0, 1.0, x.size)


def _u_shape() -> tuple[np.ndarray, np.ndarray]:
    """A U with its trough near x = 5.6 plus normal noise (numpy's frozen RandomState)."""
    x = _x()
    return x, 3.0 - 1.0 * x + 0.09 * x**2 + np.random.RandomState(2020).normal(0, 0.8, x.size)


@pytest.mark.parametrize(
    ("data", "ref", "shape"),
    [
        (_inverted_u, R_INVERTED_U, INVERTED_U),
        (_monotone, R_MONOTONE, INVERTED_U),
        (_u_shape, R_U_SHAPE, U_SHAPE),
    ],
)
def test_two_lines_matches_reference_r_code(data, ref, shape) -> None:
    """Break point, flat region, slopes, robust z and p equal the reference R code's output.

    Source: Simonsohn 2018 (AMPPS 1(4):538-555), two-lines app 0.52 R code run in R 4.2.2 with
    mgcv, sandwich (vcovHC HC3) and lmtest (coeftest) on the same data (values above). The
    flexible fit here is scipy's smoothing spline, not mgcv's; on these data both give the same
    flat region.
    """
    x, y = data()
    res = two_lines(x, y)
    assert res.available and res.shape == shape and res.se_type == "HC3"
    assert res.first_break == pytest.approx(ref["midflat"])
    assert res.flat == pytest.approx(ref["flat"])
    assert res.break_point == pytest.approx(ref["xc"])
    for line, (b, se, z, p) in ((res.line1, ref["line1"]), (res.line2, ref["line2"])):
        assert line is not None
        assert line.slope == pytest.approx(b, rel=1e-9)
        assert line.se == pytest.approx(se, rel=1e-9)
        assert line.z == pytest.approx(z, rel=1e-9)
        assert line.p == pytest.approx(p, rel=1e-6)
    assert (res.line1.at_break, res.line2.at_break) == pytest.approx(ref["at_break"], rel=1e-9)


def test_verdict_is_u_only_for_the_inverted_u() -> None:
    """Both slopes significant with opposite signs for the inverted U and the U, not the control.

    Source: Simonsohn 2018, the two-lines test's decision rule (reference R code: u.sig).
    """
    assert two_lines(*_inverted_u()).significant
    u = two_lines(*_u_shape())
    assert (
        u.significant and u.verdict.startswith("Both slopes are significant") and "a U" in u.verdict
    )
    monotone = two_lines(*_monotone())
    assert not monotone.significant and "No inverted U" in monotone.verdict


def test_interrupted_regression_at_fixed_break_matches_reg2() -> None:
    """Both lines' slopes, HC3 SEs, z and p at a break of 4.5 equal the reference reg2().

    Source: two-lines app 0.52 R code, reg2(y ~ x, xc = 4.5) in R 4.2.2 (sandwich HC3).
    """
    x, y = _inverted_u()
    line1, line2, se_type = interrupted_regression(x, y, 4.5)
    got = (line1.slope, line1.se, line1.z, line1.p, line2.slope, line2.se, line2.z, line2.p)
    assert se_type == "HC3"
    np.testing.assert_allclose(got, R_REG2_AT_4_5, rtol=1e-8)


def test_interrupted_regression_matches_statsmodels_hc3() -> None:
    """Line 1's slope and SE equal statsmodels OLS with HC3 on the hand-built design.

    Source: statsmodels OLS(y, X).fit(cov_type="HC3") with X = [1, xlow, xhigh, high].
    """
    import statsmodels.api as sm

    x, y = _inverted_u()
    xc = 6.0
    X = np.column_stack(
        [np.ones_like(x), np.where(x <= xc, x - xc, 0), np.where(x > xc, x - xc, 0)]
    )
    X = np.column_stack([X, (x > xc).astype(float)])
    ref = sm.OLS(y, X).fit(cov_type="HC3")
    line1, _, _ = interrupted_regression(x, y, xc)
    assert line1.slope == pytest.approx(ref.params[1], rel=1e-12)
    assert line1.se == pytest.approx(ref.bse[1], rel=1e-12)


def test_smooth_fit_is_scipy_weighted_smoothing_spline_of_means() -> None:
    """The fitted values are scipy's weighted smoothing spline of the means at each x.

    Source: scipy.interpolate.make_smoothing_spline(u, means, w=counts, lam) at the chosen
    penalty, with u = x rescaled to [0, 1].
    """
    from scipy.interpolate import make_smoothing_spline

    x, y = _inverted_u()
    x = np.concatenate([x, [0.0, 0.0, 9.75]])
    y = np.concatenate([y, [0.5, -0.5, 2.0]])
    fit = smooth_fit(x, y)
    xs, inverse, counts = np.unique(x, return_inverse=True, return_counts=True)
    means = np.bincount(inverse, weights=y) / counts
    u = (xs - xs[0]) / (xs[-1] - xs[0])
    ref = make_smoothing_spline(u, means, w=counts.astype(float), lam=fit.lam)(u)
    np.testing.assert_allclose(fit.fit, ref, rtol=1e-8, atol=1e-10)
    assert 2.0 < fit.edf < len(xs) and np.all(fit.se > 0)


def test_too_few_distinct_values_is_not_tested() -> None:
    """Four distinct x values cannot carry a smoothing spline: not available, with a reason."""
    x = np.repeat([1.0, 2.0, 3.0, 4.0], 10)
    res = two_lines(x, x * 2.0 + np.sin(np.arange(x.size)))
    assert not res.available and "distinct" in res.reason


def test_many_distinct_values_are_pooled_for_the_smoother() -> None:
    """3,000 distinct x values: the smoother works on 300 groups and the inverted U is found.

    Source: synthetic inverted U with its peak at x = 5 (numpy's frozen RandomState);
    Simonsohn 2018's decision rule.
    """
    from runner.data.twolines import MAX_SMOOTH_POINTS

    x = np.linspace(0.0, 10.0, 3000)
    y = 1.0 + 1.2 * x - 0.12 * x**2 + np.random.RandomState(7).normal(0, 1.0, x.size)
    res = two_lines(x, y)
    assert res.smooth is not None and res.smooth.x.size == MAX_SMOOTH_POINTS
    assert res.significant and 3.5 < res.break_point < 6.5
