"""EEG epochs and band power against MNE's own epoching, scipy.signal.welch and Parseval."""

from __future__ import annotations

import mne
import numpy as np
import pytest
from scipy.signal import welch

from runner.errors import RecordingError
from runner.physio.eeg import (
    DEFAULT_BANDS,
    EEGSettings,
    band_power,
    group_log_power,
    make_epochs,
)

SRATE = 250.0
FIRST_TIME = 1000.0
NAMES = ["Fz", "F3", "F4", "Cz", "Pz", "P3", "P4", "Oz"]
TMIN, TMAX = -0.2, 1.0


def _recording(seconds: float = 120.0, seed: int = 0) -> np.ndarray:
    """Eight channels of white noise, 10 uV standard deviation, float32 microvolts."""
    rng = np.random.default_rng(seed)
    return (10.0 * rng.standard_normal((len(NAMES), int(seconds * SRATE)))).astype(np.float32)


def _onsets(seconds: float = 120.0) -> np.ndarray:
    """Onsets every 5 s, the first 0.5 s in (its filter span is cut by the recording's start)."""
    return FIRST_TIME + np.concatenate(([0.5], np.arange(5.0, seconds - 5.0, 5.0)))


def _mne_reference(
    data_uv: np.ndarray,
    onsets: np.ndarray,
    settings: EEGSettings,
    bads: list[str] | None = None,
) -> mne.Epochs:
    """MNE's own path: whole RawArray, Raw.filter, mne.Epochs, reference, rejection."""
    info = mne.create_info(NAMES, SRATE, ch_types="eeg")
    raw = mne.io.RawArray(data_uv.astype(np.float64) * 1e-6, info, verbose=False)
    raw.info["bads"] = list(bads or [])
    raw.filter(settings.l_freq, settings.h_freq, verbose=False)
    samples = np.round((onsets - FIRST_TIME) * SRATE).astype(int)
    events = np.column_stack((samples, np.zeros_like(samples), np.ones_like(samples)))
    epochs = mne.Epochs(
        raw,
        events,
        tmin=TMIN,
        tmax=TMAX,
        baseline=None,
        flat={"eeg": settings.flat_uv * 1e-6},
        preload=True,
        verbose=False,
    )
    epochs.set_eeg_reference(settings.reference, verbose=False)
    if settings.reference != "average":
        epochs.info["bads"] += list(settings.reference)
    epochs.drop_bad(reject={"eeg": settings.reject_peak_to_peak_uv * 1e-6}, verbose=False)
    return epochs


def _good(epochs: mne.Epochs) -> list[str]:
    """Channels not marked bad."""
    return [ch for ch in epochs.ch_names if ch not in epochs.info["bads"]]


def test_epochs_equal_mne_epoching_of_the_same_events() -> None:
    """Epochs filtered from padded spans equal MNE's epochs of the whole filtered recording.

    Source: MNE-Python (mne.io.RawArray, Raw.filter, mne.Epochs, set_eeg_reference) on the same
    samples and events.
    """
    data = _recording()
    onsets = _onsets()
    result = make_epochs(data, NAMES, SRATE, FIRST_TIME, onsets, TMIN, TMAX)
    expected = _mne_reference(data, onsets, EEGSettings())
    assert result.bad_channels == []
    assert result.kept.all()
    assert len(expected) == onsets.size
    np.testing.assert_allclose(result.epochs.times, expected.times)
    np.testing.assert_allclose(result.epochs.get_data(), expected.get_data(), rtol=0, atol=1e-12)


def test_epochs_with_a_channel_reference_equal_mne() -> None:
    """A protocol's reference channel gives the same epochs as MNE's set_eeg_reference.

    Source: MNE-Python (Epochs.set_eeg_reference with ref_channels=["Cz"]).
    """
    data = _recording(seed=1)
    onsets = _onsets()
    settings = EEGSettings(reference=["Cz"])
    result = make_epochs(data, NAMES, SRATE, FIRST_TIME, onsets, TMIN, TMAX, settings)
    expected = _mne_reference(data, onsets, settings)
    assert "Cz" not in result.epochs.ch_names
    np.testing.assert_allclose(
        result.epochs.get_data(), expected.get_data(picks=_good(expected)), rtol=0, atol=1e-12
    )


def test_injected_artefacts_are_rejected_with_reasons_and_counts_match_mne() -> None:
    """A noisy channel is bad; a large pulse and a flat stretch drop exactly their epochs.

    Source: MNE-Python (reject/flat peak-to-peak rejection of mne.Epochs on the same data, with
    the same bad channel marked).
    """
    data = _recording(seed=2)
    onsets = _onsets()
    data[NAMES.index("Oz")] *= 10.0  # 100 uV noise: a bad channel by its log variance
    pulse_trial, flat_trial = 4, 9
    start = int(round((onsets[pulse_trial] - FIRST_TIME + 0.3) * SRATE))
    data[NAMES.index("F3"), start : start + int(0.1 * SRATE)] += 400.0
    centre = int(round((onsets[flat_trial] - FIRST_TIME) * SRATE))
    data[NAMES.index("P4"), centre - 5 * int(SRATE) : centre + 5 * int(SRATE)] = 0.0

    result = make_epochs(data, NAMES, SRATE, FIRST_TIME, onsets, TMIN, TMAX)
    assert result.bad_channels == ["Oz"]
    assert "Oz" not in result.epochs.ch_names
    dropped = {i: r for i, r in enumerate(result.drop_reasons) if r}
    assert dropped == {pulse_trial: ("amplitude:F3",), flat_trial: ("flat:P4",)}
    assert np.flatnonzero(~result.kept).tolist() == [pulse_trial, flat_trial]

    expected = _mne_reference(data, onsets, EEGSettings(), bads=["Oz"])
    assert len(result.epochs) == len(expected)
    np.testing.assert_allclose(
        result.epochs.get_data(),
        expected.get_data(picks=_good(expected)),
        rtol=0,
        atol=1e-12,
    )


def test_epochs_outside_the_recording_or_over_missing_data_are_dropped() -> None:
    """An epoch past the recording's end or over NaN samples is dropped with its reason.

    Source: MNE-Python (mne.Epochs drops epochs that do not fit in the recording).
    """
    data = _recording(seconds=60.0, seed=3)
    onsets = FIRST_TIME + np.array([10.0, 20.0, 30.0, 59.5])
    gap = int(round(20.5 * SRATE))
    data[2, gap : gap + 10] = np.nan
    result = make_epochs(data, NAMES, SRATE, FIRST_TIME, onsets, TMIN, TMAX)
    assert result.drop_reasons == [(), ("missing_data",), (), ("outside_recording",)]
    assert result.kept.tolist() == [True, False, True, False]
    assert len(result.epochs) == 2
    clean = data[:, : int(50 * SRATE)].copy()
    with pytest.warns(RuntimeWarning, match="outside the data range"):
        expected = _mne_reference(clean, onsets[[0, 2, 3]], EEGSettings())
    assert len(expected) == 2  # MNE drops the epoch past the end as well


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [({"units": "furlongs"}, "unit"), ({"settings": EEGSettings(reference=["X1"])}, "X1")],
)
def test_bad_unit_or_reference_raise_recording_error(kwargs: dict, message: str) -> None:
    """An unknown unit or reference channel raises RecordingError naming it.

    Source: common practice (no published source).
    """
    data = _recording(seconds=20.0)
    with pytest.raises(RecordingError, match=message):
        make_epochs(
            data, NAMES, SRATE, FIRST_TIME, FIRST_TIME + np.array([5.0]), TMIN, TMAX, **kwargs
        )


def test_band_power_equals_scipy_welch_on_the_same_samples() -> None:
    """Band power is the mean of scipy.signal.welch's PSD over the band's frequencies.

    Source: scipy.signal.welch (Hann window, 1 s segments, half overlap, density scaling).
    """
    rng = np.random.default_rng(4)
    x = rng.standard_normal((3, 4, 600)) * 1e-5
    bands = {"theta": (4.0, 8.0), "alpha": (8.0, 13.0), "beta": (13.0, 30.0)}
    power = band_power(x, SRATE, bands)
    freqs, psd = welch(x, fs=SRATE, nperseg=int(SRATE))
    for b, (low, high) in enumerate(bands.values()):
        sel = (freqs >= low) & (freqs < high)
        np.testing.assert_allclose(power[..., b], psd[..., sel].mean(axis=-1), rtol=1e-12)


def test_band_power_of_a_sinusoid_follows_parseval() -> None:
    """A 10 Hz sinusoid of amplitude A puts A^2/2 of power in alpha and none in theta.

    Source: Parseval's theorem (mean power of A sin(wt) is A^2/2), band power = mean PSD x width.
    """
    amplitude = 20e-6
    t = np.arange(int(4 * SRATE)) / SRATE
    x = (amplitude * np.sin(2 * np.pi * 10.0 * t))[None, None, :]
    power = band_power(x, SRATE, DEFAULT_BANDS)
    alpha_bins = 5  # 8, 9, 10, 11, 12 Hz at 1 Hz resolution
    assert power[0, 0, 1] * alpha_bins * 1.0 == pytest.approx(amplitude**2 / 2, rel=1e-3)
    assert power[0, 0, 0] < 1e-6 * power[0, 0, 1]


def test_group_log_power_is_log10_of_the_group_mean_in_uv2() -> None:
    """Group power is log10 of the mean over the group's present channels, in uV^2/Hz.

    Source: Parseval's theorem: a 6 Hz sinusoid of 10 uV has 50 uV^2 spread over the four
    1 Hz theta bins (mean PSD 12.5 uV^2/Hz); a silent channel halves the group mean.
    """
    t = np.arange(int(4 * SRATE)) / SRATE
    x = np.zeros((1, 3, t.size))
    x[0, 0] = 10e-6 * np.sin(2 * np.pi * 6.0 * t)
    x[0, 1] = 10e-6 * np.sin(2 * np.pi * 6.0 * t)
    x[0, 2] = 1e-12 * np.sin(2 * np.pi * 6.0 * t)
    power = band_power(x, SRATE, DEFAULT_BANDS)
    groups = {"frontal": ["Fz", "F3"], "mixed": ["Fz", "Pz"], "gone": ["Oz"]}
    out = group_log_power(power, ["Fz", "F3", "Pz"], groups, DEFAULT_BANDS)
    assert out["theta_frontal"][0] == pytest.approx(np.log10(12.5), abs=1e-3)
    assert out["theta_mixed"][0] == pytest.approx(np.log10(12.5 / 2), abs=1e-3)
    assert np.isnan(out["alpha_gone"][0])


def test_every_epoch_dropped_is_a_result_not_a_warning() -> None:
    """When every epoch exceeds the amplitude limit, all are dropped with reasons, silently.

    Source: MNE-Python (Epochs.drop_bad peak-to-peak rejection); warnings are errors here.
    """
    data = _recording(seconds=40.0, seed=6) * 50.0  # 500 uV noise: every epoch over 150 uV
    onsets = FIRST_TIME + np.array([10.0, 20.0, 30.0])
    result = make_epochs(data, NAMES, SRATE, FIRST_TIME, onsets, TMIN, TMAX)
    assert len(result.epochs) == 0
    assert not result.kept.any()
    assert all(reasons and reasons[0].startswith("amplitude:") for reasons in result.drop_reasons)


def test_onsets_out_of_order_are_refused() -> None:
    """Onsets must increase (one epoch per trial, in trial order).

    Source: common practice (no published source).
    """
    data = _recording(seconds=40.0)
    with pytest.raises(ValueError, match="increasing"):
        make_epochs(data, NAMES, SRATE, FIRST_TIME, FIRST_TIME + np.array([20.0, 10.0]), TMIN, TMAX)
