"""R-peaks, heart rate and HRV against NeuroKit2, hand-computed examples and window minimums."""

from __future__ import annotations

import neurokit2 as nk
import numpy as np
import pytest

from runner.physio.cardiac import (
    MIN_WINDOW_S,
    beats_from_rr,
    heart_rate,
    hrv,
    r_peaks,
    rmssd_sdnn,
)

HF_AMP_MS, HF_HZ = 40.0, 0.25
LF_AMP_MS, LF_HZ = 30.0, 0.10


def _modulated_rr(seconds: float, seed: int = 0) -> np.ndarray:
    """RR intervals (whole ms) of a heart whose period swings at 0.25 Hz (HF) and 0.1 Hz (LF)."""
    rng = np.random.default_rng(seed)
    rr: list[float] = []
    t = 0.0
    while t < seconds:
        value = (
            850.0
            + HF_AMP_MS * np.sin(2 * np.pi * HF_HZ * t)
            + LF_AMP_MS * np.sin(2 * np.pi * LF_HZ * t)
            + 3.0 * rng.standard_normal()
        )
        rr.append(float(np.round(value)))
        t += rr[-1] / 1000.0
    return np.array(rr)


def _peaks(rr_ms: np.ndarray) -> np.ndarray:
    """Peak sample indices at 1000 Hz for RR intervals in whole ms (first beat at 2 s)."""
    return (2000 + np.concatenate(([0], np.cumsum(rr_ms)))).astype(np.int64)


def test_r_peaks_give_the_simulated_heart_rate_and_agree_with_neurokit_processing() -> None:
    """R-peaks on ECG synthesised at 72 bpm give 72 bpm and match ecg_process's peaks.

    Source: neurokit2.ecg_simulate (known heart rate) and neurokit2.ecg_process (its own
    pipeline's R-peaks on the same signal). ecg_process also corrects artefacts, which moves
    a few peaks by some milliseconds; trialdeck keeps the detected peaks, hence 90 % identical
    and none more than 10 ms apart.
    """
    srate = 500
    ecg = nk.ecg_simulate(duration=60, sampling_rate=srate, heart_rate=72, random_state=42)
    peaks = r_peaks(ecg, srate)
    bpm = 60.0 / np.mean(np.diff(peaks) / srate)
    assert bpm == pytest.approx(72.0, abs=1.5)
    _, info = nk.ecg_process(ecg, sampling_rate=srate)
    theirs = np.asarray(info["ECG_R_Peaks"])
    assert peaks.size == theirs.size
    assert np.mean(peaks == theirs) >= 0.9
    assert np.max(np.abs(peaks - theirs)) <= 0.010 * srate


def test_r_peaks_bridge_missing_samples() -> None:
    """A short run of NaN samples (a dropped packet) does not stop peak detection elsewhere.

    Source: neurokit2.ecg_simulate (known heart rate 60 bpm).
    """
    srate = 500
    ecg = nk.ecg_simulate(duration=30, sampling_rate=srate, heart_rate=60, random_state=3)
    ecg[5000:5050] = np.nan
    peaks = r_peaks(ecg, srate)
    assert 60.0 / np.median(np.diff(peaks) / srate) == pytest.approx(60.0, abs=2.0)


def test_heart_rate_is_the_time_weighted_mean_of_instantaneous_rates() -> None:
    """Half a window at 75 bpm (0.8 s beats) and half at 60 bpm (1 s beats) averages 67.5 bpm.

    Source: hand computation (instantaneous rate 60 / RR, weighted by time in the window).
    """
    beats = np.concatenate((np.arange(0.0, 4.01, 0.8), 4.0 + np.arange(1.0, 5.01, 1.0)))
    result = heart_rate(beats, 0.0, 8.0)
    assert result.flags == ()
    assert result.bpm == pytest.approx((4.0 * 75.0 + 4.0 * 60.0) / 8.0)
    assert result.beats == beats[beats <= 8.0].size


def test_heart_rate_flags_short_windows_and_missing_beats() -> None:
    """A short window, missing beats or an implausible interval give a flag and no number.

    Source: common practice (no published source).
    """
    beats = np.arange(0.0, 20.0, 0.8)
    short = heart_rate(beats, 5.0, 5.0 + MIN_WINDOW_S["hr"] / 2)
    assert short.bpm is None and short.flags == ("hr_window_too_short",)
    late = heart_rate(beats, 18.0, 25.0)
    assert late.bpm is None and late.flags == ("beats_missing",)
    paused = np.concatenate((beats, [beats[-1] + 2.5]))
    odd = heart_rate(paused, 17.0, 21.0)
    assert odd.bpm is None and odd.flags == ("rr_implausible",)


def test_rmssd_and_sdnn_of_a_worked_example() -> None:
    """RR 1000, 1100, 900, 1000, 1000 ms: RMSSD sqrt(15000) ms, SDNN sqrt(5000) ms.

    Source: Task Force of the ESC and NASPE (1996), Circulation 93:1043-1065, definitions of
    RMSSD (root mean square of successive differences) and SDNN (standard deviation of NN
    intervals); worked by hand: differences 100, -200, 100, 0; deviations 0, 100, -100, 0, 0.
    """
    rmssd, sdnn = rmssd_sdnn(np.array([1000.0, 1100.0, 900.0, 1000.0, 1000.0]))
    assert rmssd == pytest.approx(np.sqrt(15000.0))
    assert sdnn == pytest.approx(np.sqrt(5000.0))


def test_time_domain_hrv_equals_neurokit_on_the_same_rr_series() -> None:
    """RMSSD and SDNN over a 5-minute window equal NeuroKit2's hrv_time on the same peaks.

    Source: neurokit2.hrv_time (HRV_RMSSD, HRV_SDNN) on the same RR series.
    """
    peaks = _peaks(_modulated_rr(300.0))
    beats = peaks / 1000.0
    result = hrv(beats, beats[0], beats[-1])
    theirs = nk.hrv_time(peaks, sampling_rate=1000)
    assert result.flags == ()
    assert result.rmssd_ms == pytest.approx(float(theirs["HRV_RMSSD"].iloc[0]), rel=1e-9)
    assert result.sdnn_ms == pytest.approx(float(theirs["HRV_SDNN"].iloc[0]), rel=1e-9)


def test_frequency_hrv_recovers_known_power_and_is_close_to_neurokit() -> None:
    """HF and LF power recover the sinusoids' A^2/2 and lie within 15 % of NeuroKit2's values.

    Source: Parseval's theorem (a sinusoid of amplitude A ms has power A^2/2 ms^2) and
    neurokit2.hrv_frequency (normalize=False) on the same peaks. The two differ by method, not
    by error: NeuroKit2 resamples at 100 Hz by quadratic interpolation and uses Welch segments
    of half the series without detrending; trialdeck resamples at 4 Hz by cubic spline and uses
    50 s segments with a linear detrend; the band edges are the same (Task Force 1996).
    """
    peaks = _peaks(_modulated_rr(300.0, seed=1))
    beats = peaks / 1000.0
    result = hrv(beats, beats[0], beats[-1])
    assert result.hf_ms2 is not None and result.lf_ms2 is not None
    assert result.hf_ms2 == pytest.approx(HF_AMP_MS**2 / 2, rel=0.15)
    assert result.lf_ms2 == pytest.approx(LF_AMP_MS**2 / 2, rel=0.15)
    theirs = nk.hrv_frequency(peaks, sampling_rate=1000, normalize=False)
    assert result.hf_ms2 == pytest.approx(float(theirs["HRV_HF"].iloc[0]), rel=0.15)
    assert result.lf_ms2 == pytest.approx(float(theirs["HRV_LF"].iloc[0]), rel=0.15)


@pytest.mark.parametrize(
    ("seconds", "measured", "flagged"),
    [
        (8.0, (), ("rmssd", "sdnn", "hf", "lf")),
        (15.0, ("rmssd",), ("sdnn", "hf", "lf")),
        (45.0, ("rmssd", "sdnn"), ("hf", "lf")),
        (90.0, ("rmssd", "sdnn", "hf"), ("lf",)),
        (150.0, ("rmssd", "sdnn", "hf", "lf"), ()),
    ],
)
def test_windows_too_short_give_flags_not_numbers(
    seconds: float, measured: tuple[str, ...], flagged: tuple[str, ...]
) -> None:
    """Each HRV measure is None with a flag when its window is under its published minimum.

    Source: Munoz et al. (2015), PLoS ONE 10:e0138921 (RMSSD from 10 s, SDNN from 30 s; checked,
    abstract) and the Task Force of the ESC and NASPE (1996), Circulation 93:1043-1065 (HF about
    1 min, LF about 2 min; from memory).
    """
    beats = _peaks(_modulated_rr(200.0)) / 1000.0
    result = hrv(beats, beats[0], beats[0] + seconds)
    values = {
        "rmssd": result.rmssd_ms,
        "sdnn": result.sdnn_ms,
        "hf": result.hf_ms2,
        "lf": result.lf_ms2,
    }
    assert all(values[name] is not None for name in measured)
    assert all(values[name] is None for name in flagged)
    assert result.flags == tuple(f"{name}_window_too_short" for name in flagged)
    assert result.window_s == pytest.approx(seconds)


def test_a_missed_beat_is_left_out_and_many_artefacts_void_the_window() -> None:
    """One missed beat (a double interval) is excluded; a window of artefacts is not measured.

    Source: Task Force (1996): HRV is computed on normal-to-normal intervals; the 20 % rule
    for ectopic intervals (Malik et al. 1989; from memory).
    """
    rr = np.full(80, 800.0)
    rr[::2] += 20.0
    clean = hrv(_peaks(rr) / 1000.0, 2.0, 2.0 + rr.sum() / 1000.0)
    missed = rr.copy()
    missed[40] = missed[40] + missed[41]
    missed = np.delete(missed, 41)
    with_gap = hrv(_peaks(missed) / 1000.0, 2.0, 2.0 + missed.sum() / 1000.0)
    assert with_gap.flags == clean.flags == ("lf_window_too_short",)
    assert with_gap.rmssd_ms == pytest.approx(20.0)
    assert clean.rmssd_ms == pytest.approx(20.0)
    noisy = rr.copy()
    noisy[::3] = 1300.0
    void = hrv(_peaks(noisy) / 1000.0, 2.0, 2.0 + noisy.sum() / 1000.0)
    assert void.flags == ("ectopic_share_high",)
    assert void.rmssd_ms is None and void.hf_ms2 is None


def test_a_pause_without_beats_flags_the_window() -> None:
    """A 4 s stretch without beats (a detached electrode) flags beats_missing, no numbers.

    Source: common practice (no published source).
    """
    beats = np.concatenate((np.arange(0.0, 30.0, 0.8), np.arange(34.0, 80.0, 0.8)))
    result = hrv(beats, 0.0, 75.0)
    assert result.flags == ("beats_missing",)
    assert result.rmssd_ms is None


def test_beats_from_a_device_rr_stream_with_packets() -> None:
    """Beats sent one per stamp keep their stamps; a packet's beats are spread back by RR.

    Source: common practice (no published source): an RR value ends at its beat.
    """
    true_beats = 10.0 + np.cumsum(np.array([0.0, 0.8, 0.82, 0.79, 0.81, 0.8, 0.78]))
    rr_ms = np.diff(true_beats) * 1000.0
    one_each = beats_from_rr(rr_ms, true_beats[1:])
    np.testing.assert_allclose(one_each, true_beats[1:])
    stamps = true_beats[1:].copy()
    stamps[0:3] = true_beats[3]  # three values sent together with the third beat
    stamps[3:5] = true_beats[5]  # two values sent together with the fifth beat
    np.testing.assert_allclose(beats_from_rr(rr_ms, stamps), true_beats[1:], atol=1e-9)
