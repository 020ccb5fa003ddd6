"""The two-lines test of a U-shaped (or inverted U-shaped) relation (Simonsohn 2018).

Simonsohn, U. (2018). Two lines: a valid alternative to the invalid testing of U-shaped
relationships with quadratic regressions. Advances in Methods and Practices in Psychological
Science 1(4):538-555. A quadratic term does not show a U: it is significant for many monotone
relations. The two-lines test instead fits two lines that meet at a break point and asks whether
both slopes are significant with opposite signs.

The steps, as in the paper and its reference R code (version 0.52):

1. **Direction.** A quadratic regression ``y ~ x + x**2`` is fitted only to ask whether the
   relation starts rising (slope at the lowest x above 0: look for an inverted U, a maximum) or
   falling (look for a U, a minimum).
2. **Flexible fit.** The paper fits a penalised cubic regression spline (R mgcv ``gam``, basis
   ``cr``, smoothness by GCV). Here it is scipy's cubic smoothing spline
   (``scipy.interpolate.make_smoothing_spline``) fitted to the mean y at each distinct x,
   weighted by the number of observations there, with the penalty chosen by generalised
   cross-validation on the raw observations over a fixed grid; standard errors of the fitted
   values are the Bayesian ones mgcv reports (``sigma**2 * A_jj / w_j`` with ``A`` the smoother's
   hat matrix; Wahba 1983, J R Stat Soc B 45:133-150). The flexible fit only locates the break,
   so the two smoothers' small differences move the break a little, not the logic.
3. **Flat region.** Among observations strictly inside the 10th-90th percentile of x, the most
   extreme fitted value is found; the flat region is the x values whose fitted value is within one
   standard error of it (``fit + se > max`` for a maximum, ``fit - se < min`` for a minimum).
4. **Robin Hood break point.** Two lines are fitted with the break at the median of the flat
   region, giving test statistics ``z1`` and ``z2`` of the two slopes. The break is then moved to
   the ``z2 / (z1 + z2)`` quantile of the flat region: towards the stronger line's side, so the
   weaker line gets more observations and more power.
5. **Interrupted regression** at that break: ``y = a + b1 xlow + b2 xhigh + c high`` with
   ``xlow = x - xc`` below the break (else 0), ``xhigh = x - xc`` above it (else 0) and ``high``
   the above-break indicator. It is fitted twice, once with the break point in the first line
   (for ``b1``) and once in the second (for ``b2``). Standard errors are heteroskedasticity-robust
   HC3 (HC1 when HC3 cannot be computed), with normal (z) p-values, as in the reference code.
6. **Verdict.** A U (or inverted U) iff both slopes are significant at 0.05, two-sided, with
   opposite signs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

ALPHA = 0.05
#: The break point is searched among observations strictly inside these x quantiles.
MIDDLE_QUANTILES = (0.1, 0.9)
#: Smoothing penalties tried, on x rescaled to [0, 1] (log-spaced).
LAMBDA_GRID = tuple(float(v) for v in np.logspace(-9, 1, 41))
#: A smoothing spline needs this many distinct x values (scipy's minimum is 5).
MIN_DISTINCT_X = 5
#: More distinct x values than this are pooled into this many neighbouring groups for the
#: flexible fit (per-stimulus scores stay far below it).
MAX_SMOOTH_POINTS = 300

INVERTED_U = "inverted_u"
U_SHAPE = "u"


@dataclass(frozen=True)
class Line:
    """One of the two lines: slope, robust SE, z, p and the line's value at the break."""

    slope: float
    se: float
    z: float
    p: float
    at_break: float
    n: int


@dataclass(frozen=True)
class SmoothFit:
    """The flexible fit at each distinct x: fitted values and their standard errors."""

    x: np.ndarray
    fit: np.ndarray
    se: np.ndarray
    lam: float
    edf: float


@dataclass(frozen=True)
class TwoLinesResult:
    """Outcome of :func:`two_lines`.

    Attributes
    ----------
    available : bool
        False when the data cannot be tested; ``reason`` says why.
    shape : str
        ``"inverted_u"`` (looked for a maximum) or ``"u"`` (a minimum).
    break_point : float
        The Robin Hood break point used for the reported lines.
    first_break : float
        The median of the flat region (the first break tried).
    flat : tuple of float
        Lowest and highest x of the flat region.
    line1, line2 : Line
        The lines below and above the break.
    significant : bool
        Both slopes significant with opposite signs (a U or inverted U).
    verdict : str
        One plain sentence.
    se_type : str
        ``"HC3"`` or ``"HC1"``.
    smooth : SmoothFit or None
        The flexible fit (for plots).
    """

    available: bool
    reason: str = ""
    n: int = 0
    shape: str = ""
    break_point: float = math.nan
    first_break: float = math.nan
    flat: tuple[float, float] = (math.nan, math.nan)
    line1: Line | None = None
    line2: Line | None = None
    significant: bool = False
    verdict: str = ""
    se_type: str = "HC3"
    smooth: SmoothFit | None = None


def smooth_fit(x: np.ndarray, y: np.ndarray) -> SmoothFit:
    """Cubic smoothing spline of y on x with GCV-chosen penalty and Bayesian standard errors.

    Parameters
    ----------
    x, y : np.ndarray
        Observations (finite), possibly with repeated x.

    Returns
    -------
    SmoothFit
        Values at the distinct x (sorted); above :data:`MAX_SMOOTH_POINTS` distinct values, at
        the mean x of each group of neighbouring values.

    Raises
    ------
    ValueError
        Fewer than :data:`MIN_DISTINCT_X` distinct x values.
    """
    from scipy.interpolate import make_smoothing_spline

    xs, inverse, counts = np.unique(x, return_inverse=True, return_counts=True)
    if xs.size < MIN_DISTINCT_X:
        raise ValueError(f"a smoothing spline needs {MIN_DISTINCT_X} distinct x values")
    if xs.size > MAX_SMOOTH_POINTS:
        # Neighbouring distinct values are pooled into MAX_SMOOTH_POINTS groups of about equal
        # size (the smoother's hat matrix is square in the number of points).
        group_of = np.zeros(xs.size, dtype=np.intp)
        for g, idx in enumerate(np.array_split(np.arange(xs.size), MAX_SMOOTH_POINTS)):
            group_of[idx] = g
        inverse = group_of[inverse]
        counts = np.bincount(inverse, minlength=MAX_SMOOTH_POINTS)
        xs = np.bincount(inverse, weights=x) / counts
    w = counts.astype(float)
    ybar = np.bincount(inverse, weights=y) / w
    within = float(np.sum((y - ybar[inverse]) ** 2))
    n = y.size
    u = (xs - xs[0]) / (xs[-1] - xs[0])
    eye = np.eye(xs.size)
    best: tuple[float, float, np.ndarray] | None = None
    for lam in LAMBDA_GRID:
        A = make_smoothing_spline(u, eye, w=w, lam=lam)(u)  # column j: response to e_j
        fit = A @ ybar
        rss = within + float(np.sum(w * (ybar - fit) ** 2))
        edf = float(np.trace(A))
        if n - edf <= 0:
            continue
        gcv = n * rss / (n - edf) ** 2
        if best is None or gcv < best[0]:
            best = (gcv, lam, A)
    if best is None:
        raise ValueError("too few observations for the smoothing spline")
    _, lam, A = best
    fit = A @ ybar
    rss = within + float(np.sum(w * (ybar - fit) ** 2))
    edf = float(np.trace(A))
    sigma2 = rss / (n - edf)
    se = np.sqrt(np.clip(sigma2 * np.diag(A) / w, 0.0, None))
    return SmoothFit(x=xs, fit=fit, se=se, lam=lam, edf=edf)


def _robust_fit(y: np.ndarray, X: np.ndarray) -> tuple[np.ndarray, np.ndarray, str]:
    from statsmodels.regression.linear_model import OLS

    model = OLS(y, X)
    for cov in ("HC3", "HC1"):
        with np.errstate(divide="ignore", invalid="ignore"):
            fit = model.fit(cov_type=cov)
        bse = np.asarray(fit.bse, dtype=float)
        if np.all(np.isfinite(bse)):
            return np.asarray(fit.params, dtype=float), bse, cov
    return np.asarray(fit.params, dtype=float), bse, "HC1"


def interrupted_regression(x: np.ndarray, y: np.ndarray, xc: float) -> tuple[Line, Line, str]:
    """The two lines meeting (or jumping) at ``xc``, each slope with a robust z test.

    Returns
    -------
    tuple
        ``(line1, line2, se_type)``.

    Raises
    ------
    ValueError
        If a line has fewer than two distinct x values (its slope is not estimable).
    """
    from scipy.special import ndtr

    below = x <= xc
    above = x >= xc
    if np.unique(x[below]).size < 2 or np.unique(x[above]).size < 2:
        raise ValueError("each line needs two distinct x values")
    d = x - xc
    ones = np.ones_like(x)
    # Line 1 holds the break point: x <= xc.
    X1 = np.column_stack([ones, np.where(below, d, 0.0), np.where(~below, d, 0.0), ~below])
    # Line 2 holds the break point: x >= xc.
    X2 = np.column_stack([ones, np.where(~above, d, 0.0), np.where(above, d, 0.0), above])
    b1, se1, cov1 = _robust_fit(y, X1.astype(float))
    b2, se2, cov2 = _robust_fit(y, X2.astype(float))

    def line(slope: float, se: float, at_break: float, n: int) -> Line:
        z = slope / se if se > 0 else math.nan
        p = float(2.0 * ndtr(-abs(z))) if math.isfinite(z) else math.nan
        return Line(float(slope), float(se), float(z), p, float(at_break), n)

    line1 = line(b1[1], se1[1], b1[0], int(below.sum()))
    line2 = line(b2[2], se2[2], b2[0] + b2[3], int(above.sum()))
    return line1, line2, "HC3" if cov1 == cov2 == "HC3" else "HC1"


def two_lines(x: np.ndarray, y: np.ndarray) -> TwoLinesResult:
    """Run the two-lines test (module docstring) on paired observations.

    Parameters
    ----------
    x, y : array-like
        Predictor and outcome; pairs with a missing value are dropped.

    Returns
    -------
    TwoLinesResult
        ``available`` False (with ``reason``) when there are too few distinct x values, no flat
        region inside the middle of x, or a line without two distinct x values.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    ok = np.isfinite(x) & np.isfinite(y)
    x, y = x[ok], y[ok]
    n = int(x.size)
    if np.unique(x).size < MIN_DISTINCT_X:
        return TwoLinesResult(
            False,
            f"Not tested: {np.unique(x).size} distinct difficulty values; the flexible fit needs "
            f"at least {MIN_DISTINCT_X}.",
            n=n,
        )
    # 1. Direction from the quadratic's slope at the lowest x.
    Q = np.column_stack([np.ones(n), x, x**2])
    coef, *_ = np.linalg.lstsq(Q, y, rcond=None)
    rising = coef[1] + 2.0 * coef[2] * x.min() > 0
    shape = INVERTED_U if rising else U_SHAPE
    # 2-3. Flexible fit and flat region in the middle of x.
    try:
        smooth = smooth_fit(x, y)
    except ValueError as exc:
        return TwoLinesResult(False, f"Not tested: {exc}.", n=n, shape=shape)
    fit_at = np.interp(x, smooth.x, smooth.fit)
    se_at = np.interp(x, smooth.x, smooth.se)
    lo, hi = np.quantile(x, MIDDLE_QUANTILES)
    middle = (x > lo) & (x < hi)
    if not middle.any():
        return TwoLinesResult(
            False, "Not tested: no observation lies inside the middle of x.", n=n, shape=shape
        )
    fm, sm_, xm = fit_at[middle], se_at[middle], x[middle]
    if rising:
        most = fm.max()
        flat = fm + sm_ > most
    else:
        most = fm.min()
        flat = fm - sm_ < most
    xflat = xm[flat]
    if xflat.size == 0:  # the extreme itself always qualifies unless its SE is 0
        xflat = xm[fm == most]
    # 4. Robin Hood.
    first = float(np.median(xflat))
    try:
        l1, l2, _ = interrupted_regression(x, y, first)
        z1, z2 = abs(l1.z), abs(l2.z)
        share = z2 / (z1 + z2) if (z1 + z2) > 0 and math.isfinite(z1 + z2) else 0.5
        xc = float(np.quantile(xflat, share))
        line1, line2, se_type = interrupted_regression(x, y, xc)
    except ValueError as exc:
        return TwoLinesResult(
            False, f"Not tested: {exc} around the break.", n=n, shape=shape, smooth=smooth
        )
    significant = line1.slope * line2.slope < 0 and line1.p < ALPHA and line2.p < ALPHA
    return TwoLinesResult(
        True,
        n=n,
        shape=shape,
        break_point=xc,
        first_break=first,
        flat=(float(xflat.min()), float(xflat.max())),
        line1=line1,
        line2=line2,
        significant=bool(significant),
        verdict=_verdict(shape, line1, line2, bool(significant), xc),
        se_type=se_type,
        smooth=smooth,
    )


def _verdict(shape: str, line1: Line, line2: Line, significant: bool, xc: float) -> str:
    def describe(line: Line) -> str:
        direction = "rises" if line.slope > 0 else "falls"
        sig = "significant" if line.p < ALPHA else "not significant"
        return f"{direction} (b = {line.slope:.3g}, z = {line.z:.2f}, p = {line.p:.3g}, {sig})"

    what = "an inverted U" if line1.slope > 0 else "a U"
    if significant:
        head = f"Both slopes are significant with opposite signs: {what}, breaking at {xc:.3g}."
    else:
        head = (
            f"No {'inverted U' if shape == INVERTED_U else 'U'} shown: the two slopes are not "
            "both significant with opposite signs."
        )
    return f"{head} Below the break the relation {describe(line1)}; above it, {describe(line2)}."
