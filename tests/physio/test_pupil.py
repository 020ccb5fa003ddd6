"""Pupil cleaning and per-trial measures on synthetic traces with known blinks and dilation."""

from __future__ import annotations

import numpy as np
import pytest

from runner.errors import RecordingError
from runner.physio.pupil import (
    PupilSettings,
    baseline_value,
    clean_pupil,
    trial_pupil,
)

SRATE = 500.0
BASE_MM = 4.0
PEAK_MM = 0.3
T_MAX = 0.93  # s, latency of the peak of the pupil response function
N_HL = 10.1  # shape of the pupil response function


def _response(t: np.ndarray) -> np.ndarray:
    """Pupil response to an event at t = 0, peak PEAK_MM at T_MAX.

    The shape h(t) = t^n exp(-n t / t_max) is the pupil response function of Hoeks and Levelt
    (1993), Behavior Research Methods 25:16-26 (n = 10.1, t_max = 930 ms; from memory).
    """
    out = np.zeros_like(t)
    pos = t > 0
    h = (t[pos] / T_MAX) ** N_HL * np.exp(-N_HL * (t[pos] / T_MAX - 1.0))
    out[pos] = PEAK_MM * h
    return out


def _trace(
    seconds: float = 10.0, onset: float = 3.0, noise: float = 0.002, seed: int = 0
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Times, noisy recorded size, and the noise-free truth (baseline plus response)."""
    rng = np.random.default_rng(seed)
    t = 100.0 + np.arange(int(seconds * SRATE)) / SRATE
    truth = BASE_MM + _response(t - (100.0 + onset))
    return t, truth + noise * rng.standard_normal(t.size), truth


def _blink(t: np.ndarray, size: np.ndarray, start: float, end: float) -> None:
    """Zero the samples from start to end, with the eyelid's 20 ms fall and rise around them."""
    size[(t >= start) & (t < end)] = 0.0
    fall = (t >= start - 0.02) & (t < start)
    size[fall] *= np.linspace(1.0, 0.3, fall.sum())
    rise = (t >= end) & (t < end + 0.02)
    size[rise] *= np.linspace(0.3, 1.0, rise.sum())


def test_blinks_are_found_with_their_margins() -> None:
    """Each blink is removed from its eyelid fall minus the margin to its rise plus the margin.

    Source: common practice for blink margins (Mathot et al. 2018, Behav Res Methods 50:94-106,
    interpolate blinks with margins); the blink times are set by the test.
    """
    t, size, _ = _trace()
    blinks = [(101.0, 101.15), (105.2, 105.45)]
    for start, end in blinks:
        _blink(t, size, start, end)
    settings = PupilSettings()
    clean = clean_pupil(t, size, settings)
    assert len(clean.blinks) == 2
    for (start, end), (found_start, found_end) in zip(blinks, clean.blinks, strict=True):
        assert found_start == pytest.approx(start - 0.02 - settings.margin_before_s, abs=2 / SRATE)
        assert found_end == pytest.approx(end + 0.02 + settings.margin_after_s, abs=2 / SRATE)
    assert clean.interpolated.sum() == (~clean.valid).sum()
    assert np.isfinite(clean.size).all()


def test_interpolation_equals_numpy_interp_over_the_gap() -> None:
    """Samples in a blink are the straight line between the good samples around it.

    Source: numpy.interp on the same gap (linear interpolation).
    """
    t, size, _ = _trace()
    _blink(t, size, 104.0, 104.2)
    clean = clean_pupil(t, size)
    gap = np.flatnonzero(clean.interpolated)
    before, after = gap[0] - 1, gap[-1] + 1
    assert clean.valid[before] and clean.valid[after]
    expected = np.interp(t[gap], [t[before], t[after]], [size[before], size[after]])
    np.testing.assert_allclose(clean.size[gap], expected, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(clean.size[clean.valid], size[clean.valid])


def test_speed_outliers_are_dropouts_even_inside_the_size_range() -> None:
    """A sudden step (a half-closed lid) is caught by the speed rule though its size is plausible.

    Source: Kret and Sjak-Shie (2019), Behav Res Methods 51:1336-1342, dilation-speed outliers
    (median plus a multiple of the MAD; from memory).
    """
    t, size, _ = _trace()
    step = (t >= 106.0) & (t < 106.1)
    size[step] = 2.5
    clean = clean_pupil(t, size)
    assert not clean.valid[step].any()
    assert clean.interpolated[step].all()


def test_baseline_mean_and_peak_change_are_recovered() -> None:
    """Baseline, mean and peak change and peak latency match the known dilation, blink or not.

    Source: subtractive baseline correction (Mathot et al. 2018, Behav Res Methods 50:94-106);
    the dilation is the Hoeks and Levelt (1993) pupil response function with a known peak.
    """
    onset = 3.0
    t, size, truth = _trace(onset=onset)
    _blink(t, size, 103.3, 103.45)  # a blink early in the stimulus window, away from the peak
    clean = clean_pupil(t, size)
    baseline = (100.0 + onset - 0.5, 100.0 + onset)
    window = (100.0 + onset, 100.0 + onset + 3.0)
    result = trial_pupil(clean, baseline, window)
    in_window = (t >= window[0]) & (t < window[1])
    assert result.flags == ()
    assert result.baseline == pytest.approx(BASE_MM, abs=0.002)
    assert result.peak_change == pytest.approx(PEAK_MM, abs=0.01)
    assert result.peak_latency_s == pytest.approx(T_MAX, abs=0.05)
    assert result.mean_change == pytest.approx(np.mean(truth[in_window] - BASE_MM), abs=0.005)
    assert result.valid_share + result.interpolated_share == pytest.approx(1.0)
    assert result.interpolated_share == pytest.approx(np.mean(clean.interpolated[in_window]))


def test_gaps_longer_than_the_maximum_stay_missing_and_flag_the_trial() -> None:
    """A 1.5 s dropout is not interpolated; a window mostly inside it is flagged, not measured.

    Source: common practice (no published source): only short gaps are interpolated.
    """
    t, size, _ = _trace()
    size[(t >= 104.0) & (t < 105.5)] = np.nan
    clean = clean_pupil(t, size)
    assert np.isnan(clean.size[(t >= 104.0) & (t < 105.5)]).all()
    result = trial_pupil(clean, (103.0, 103.5), (104.0, 105.0))
    assert "too_little_data" in result.flags
    assert result.mean_change is None and result.peak_change is None and result.baseline is None


def test_too_much_interpolation_in_the_window_is_flagged() -> None:
    """A window more than half interpolated is flagged and its measures are None.

    Source: common practice (no published source).
    """
    t, size, _ = _trace()
    _blink(t, size, 105.1, 105.35)
    clean = clean_pupil(t, size)
    result = trial_pupil(clean, (104.0, 104.5), (105.0, 105.5))
    assert result.interpolated_share > 0.5
    assert result.flags == ("too_much_interpolated",)
    assert result.mean_change is None and result.peak_latency_s is None


def test_implausible_baseline_is_flagged_against_the_session() -> None:
    """A baseline far below the session's other baselines is flagged; without them it is not.

    Source: Mathot et al. (2018), Behav Res Methods 50:94-106 (inspect the baseline
    distribution, exclude implausibly small baselines); robust z over 3.5 (Iglewicz and
    Hoaglin 1993; from memory).
    """
    t, size, _ = _trace()
    low = (t >= 102.5) & (t < 103.0)
    size[low] = 2.2  # a plausible size in mm, yet far from this participant's other baselines
    clean = clean_pupil(t, size)
    rng = np.random.default_rng(5)
    session = BASE_MM + 0.1 * rng.standard_normal(40)
    flagged = trial_pupil(clean, (102.5, 103.0), (103.0, 106.0), session_baselines=session)
    assert flagged.flags == ("baseline_implausible",)
    assert flagged.baseline is None and flagged.mean_change is None
    alone = trial_pupil(clean, (102.5, 103.0), (103.0, 106.0))
    assert alone.flags == ()
    assert alone.baseline == pytest.approx(baseline_value(clean, (102.5, 103.0)))


def test_baseline_outside_the_plausible_range_is_flagged() -> None:
    """A baseline outside the plausible size range is implausible even without a session.

    Source: common practice (a human pupil is about 2 to 8 mm; from memory).
    """
    t, size, _ = _trace()
    settings = PupilSettings(size_range=(1.5, 9.0))
    clean = clean_pupil(t, size, PupilSettings(size_range=None))
    result = trial_pupil(clean, (102.0, 102.5), (103.0, 104.0), PupilSettings(size_range=(5, 9)))
    assert result.flags == ("baseline_implausible",)
    assert trial_pupil(clean, (102.0, 102.5), (103.0, 104.0), settings).flags == ()


def test_arbitrary_units_without_a_size_range() -> None:
    """Arbitrary-unit traces (pupil area in thousands) are cleaned by zeros and speed alone.

    Source: common practice (no published source).
    """
    t, size, _ = _trace()
    size *= 1000.0
    _blink(t, size, 104.0, 104.2)
    clean = clean_pupil(t, size, PupilSettings(size_range=None))
    result = trial_pupil(clean, (102.5, 103.0), (103.0, 106.0), PupilSettings(size_range=None))
    assert len(clean.blinks) == 1
    assert result.flags == ()
    assert result.peak_change == pytest.approx(PEAK_MM * 1000.0, rel=0.05)


def test_windows_without_samples_give_no_data() -> None:
    """A window outside the recording gives the no_data flag and no numbers.

    Source: common practice (no published source).
    """
    t, size, _ = _trace()
    result = trial_pupil(clean_pupil(t, size), (10.0, 10.5), (10.5, 12.0))
    assert result.flags == ("no_data",)
    assert result.baseline is None and result.valid_share == 0.0


def test_mismatched_or_unordered_times_raise_recording_error() -> None:
    """Times and sizes of different lengths, or times that do not increase, are refused.

    Source: common practice (no published source).
    """
    t, size, _ = _trace(seconds=1.0)
    with pytest.raises(RecordingError):
        clean_pupil(t[:-1], size)
    with pytest.raises(RecordingError):
        clean_pupil(t[::-1], size)
