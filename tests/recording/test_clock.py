"""The clock model: offset plus drift per segment, robust to delayed markers and clock resets."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from runner.recording.clock import fit_clock, split_at_resets

HOUR = 3600.0


def _markers(rng, *, n=900, drift_ppm=20.0, offset_s=3 * HOUR, noise_ms=0.3, late=0.05):
    """Markers over one hour: recorder = presenter * (1 + drift) + offset + noise (+ delays)."""
    p = np.sort(rng.uniform(1000.0, 1000.0 + HOUR, n))
    truth = p + offset_s + drift_ppm * 1e-6 * (p - p[0])
    r = truth + rng.normal(0.0, noise_ms / 1000, n)
    delayed = rng.random(n) < late
    r[delayed] += rng.uniform(0.02, 0.2, delayed.sum())  # network or recorder delays
    return p, r, truth, delayed


@pytest.mark.parametrize("drift_ppm", [-50.0, -20.0, 0.0, 20.0, 50.0])
def test_drift_and_offset_are_recovered_over_an_hour(drift_ppm):
    """At +/-50 ppm over an hour with 5 % delayed markers, mapped times stay within 0.5 ms.

    Source: scipy.stats.siegelslopes (repeated medians) on the same pairs as the outside
    reference for the slope; the generating line is known.
    """
    rng = np.random.default_rng(100 + int(drift_ppm))
    p, r, truth, delayed = _markers(rng, drift_ppm=drift_ppm)
    model = fit_clock(p, r)
    assert len(model.segments) == 1
    seg = model.main
    ref = stats.siegelslopes(r - p, p - p[0])
    assert seg.drift_ppm == pytest.approx(ref.slope * 1e6, abs=0.5)
    assert seg.drift_ppm == pytest.approx(drift_ppm, abs=0.5)
    mapped = np.array([model.to_recorder(t) for t in p])
    assert np.max(np.abs(mapped - truth)) * 1000 < 0.5
    # Every delayed marker of 20 ms or more is set aside, and no punctual one is.
    assert set(model.outliers) == set(np.flatnonzero(delayed))


def test_a_constant_offset_would_be_wrong_by_tens_of_ms():
    """At 20 ppm a median offset misses the ends of an hour by over 30 ms; the model does not.

    Source: common practice (no published source): 20 ppm x 3600 s = 72 ms end to end.
    """
    rng = np.random.default_rng(3)
    p, r, truth, _ = _markers(rng, late=0.0)
    constant = p + np.median(r - p)
    assert np.max(np.abs(constant - truth)) * 1000 > 30
    model = fit_clock(p, r)
    assert np.max(np.abs(np.array([model.to_recorder(t) for t in p]) - truth)) * 1000 < 0.5


def test_a_clock_reset_splits_the_pairs_into_two_segments():
    """A presenter reboot (local_clock restarts) gives two segments, each mapped on its own line.

    Source: common practice (no published source); pyxdf likewise splits clock offsets at resets.
    """
    rng = np.random.default_rng(11)
    p1, r1, t1, _ = _markers(rng, n=300, drift_ppm=15.0, late=0.0)
    p2 = np.sort(rng.uniform(40.0, 40.0 + 1800.0, 200))  # after the reboot: small clock values
    t2 = p2 + (r1[-1] + 120.0 - p2[0]) + 15e-6 * (p2 - p2[0])
    r2 = t2 + rng.normal(0.0, 0.0003, len(p2))
    p, r = np.concatenate([p1, p2]), np.concatenate([r1, r2])
    assert [len(ix) for ix in split_at_resets(p, r)] == [300, 200]
    model = fit_clock(p, r)
    assert len(model.segments) == 2
    for seg, ps, ts in zip(model.segments, (p1, p2), (t1, t2), strict=True):
        mapped = np.asarray(seg.to_recorder(ps))
        assert np.max(np.abs(mapped - ts)) * 1000 < 0.5
    fitted = np.array([model.fitted(i, t) for i, t in enumerate(p)])
    assert np.max(np.abs(fitted - np.concatenate([t1, t2]))) * 1000 < 0.5


def test_one_pair_gives_an_offset_without_drift():
    """With a single matched marker the model is its offset, and drift is reported as zero."""
    model = fit_clock([10.0], [5010.25])
    assert model.main.drift_ppm == 0.0
    assert model.to_recorder(11.0) == pytest.approx(5011.25)


def test_theil_sen_agrees_with_scipy():
    """The Theil-Sen start line equals scipy's on data with outliers.

    Source: scipy.stats.theilslopes as the reference implementation.
    """
    from runner.recording.clock import theil_sen

    rng = np.random.default_rng(21)
    x = np.sort(rng.uniform(0, 100, 200))
    y = 0.3 * x + 2 + rng.normal(0, 0.1, 200)
    y[::17] += 40
    ref = stats.theilslopes(y, x)
    slope, intercept = theil_sen(x, y)
    assert slope == pytest.approx(ref.slope, rel=1e-12)
    assert intercept == pytest.approx(ref.intercept, rel=1e-12)


def test_no_pairs_is_refused():
    """An empty or unequal pairing is a caller's error."""
    with pytest.raises(ValueError):
        fit_clock([], [])
    with pytest.raises(ValueError):
        fit_clock([1.0, 2.0], [1.0])
