"""EEG: epochs with MNE (filter, bad channels, reference, rejection) and band power.

Memory: a one-hour, 64-channel recording at 1 kHz is about 0.9 GB as float32 and 1.8 GB as
float64, and MNE filters only float64. So the recording is never copied whole: each trial's span
(the epoch plus half the filter's length on each side) is cut out, converted to float64 volts and
filtered with MNE's own FIR filter (:func:`mne.filter.filter_data`, the function ``Raw.filter``
uses), a few spans at a time. With that padding every epoch sample is exactly what filtering the
whole recording would give (the FIR filter only looks half its length either way); a test
compares with :class:`mne.Epochs` on a filtered :class:`mne.io.RawArray`. Bad channels, the
reference and rejection are then applied by MNE to the epochs (:class:`mne.EpochsArray`).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np
import scipy.fft
from scipy.signal import welch

from runner.errors import RecordingError

if TYPE_CHECKING:
    import mne

#: Frequency bands (Hz), lower edge included, upper edge excluded: theta 4-8 and alpha 8-13 Hz
#: are the conventional bands of the workload literature (Gevins & Smith 2003; Klimesch 1999
#: uses individually adjusted bands around the same ranges; from memory).
DEFAULT_BANDS: dict[str, tuple[float, float]] = {"theta": (4.0, 8.0), "alpha": (8.0, 13.0)}

#: Channel groups (10-20 names) for frontal theta and parietal alpha: frontal theta rises and
#: alpha falls with load (Gevins et al. 1998, Human Factors 40:79-91; Smith et al. 2001, Human
#: Factors 43:366-380; checked, abstracts; reviewed in Gevins & Smith 2003, Theoretical Issues in
#: Ergonomics Science 4:113-131). That alpha's drop is clearest over parietal sites, and Klimesch
#: 1999 (Brain Research Reviews 29:169-195), are from memory. Channel lists: common practice.
DEFAULT_GROUPS: dict[str, list[str]] = {
    "frontal": ["Fz", "F3", "F4", "FCz"],
    "parietal": ["Pz", "P3", "P4", "POz"],
}

#: Scale from a stream's unit to volts.
UNIT_TO_VOLTS: dict[str, float] = {
    "V": 1.0,
    "mV": 1e-3,
    "uV": 1e-6,
    "µV": 1e-6,
    "microvolts": 1e-6,
    "nV": 1e-9,
}

#: Robust z-scores use the MAD scaled to a standard deviation (1.4826; Iglewicz & Hoaglin 1993,
#: from memory).
MAD_TO_SD = 1.4826

#: Smallest spread (log10 units) of the channels' log variances used for robust z-scores: when
#: all channels are alike, a channel must still differ in variance by more than a factor
#: 10 ** (0.1 * bad_channel_z) (about 3 at z = 5) to be bad (common practice, no source).
MIN_LOG_VAR_SPREAD = 0.1

#: Welch segment length (s) for band power: 1 s gives 1 Hz resolution, five bins in the 4-8 Hz
#: theta band; epochs shorter than this use one segment of their own length (common practice,
#: no source).
WELCH_SEGMENT_S = 1.0

#: Bytes of float64 data filtered or transformed at once (bounds memory; no effect on results).
CHUNK_BYTES = 64 * 2**20

REASON_OUTSIDE = "outside_recording"
REASON_MISSING = "missing_data"


@dataclass(frozen=True)
class EEGSettings:
    """How EEG is filtered, referenced and cleaned.

    Attributes
    ----------
    reference : "average", a channel name or a list of names
        Average reference over the good channels (common practice), or the protocol's choice.
    reject_peak_to_peak_uv : float
        An epoch whose peak-to-peak amplitude on any good channel exceeds this (uV) is dropped
        (MNE's ``reject``; 150 uV is common practice, no source).
    flat_uv : float
        An epoch whose peak-to-peak amplitude on any good channel is below this (uV) is dropped
        (MNE's ``flat``); a channel below it in most epochs is a flat (bad) channel (common
        practice, no source).
    bad_channel_z : float
        A channel whose log variance has a robust z-score over this (in absolute value) against
        the other channels is bad (common practice, no source).
    l_freq, h_freq : float or None
        Band-pass edges (Hz) of MNE's default FIR filter; None leaves that side open (common
        practice for band power up to the alpha band, no source).
    """

    reference: str | list[str] = "average"
    reject_peak_to_peak_uv: float = 150.0
    flat_uv: float = 1.0
    bad_channel_z: float = 5.0
    l_freq: float | None = 1.0
    h_freq: float | None = 40.0


@dataclass
class EEGEpochs:
    """Epochs of the kept trials, which requested onsets were kept, and why others were not.

    ``epochs`` holds the kept onsets in their requested order (``np.flatnonzero(kept)``), in
    volts, with the bad channels removed. ``drop_reasons`` has one tuple per requested onset:
    empty when kept, else ``outside_recording``, ``missing_data`` (NaN in the span), or
    ``amplitude:<channel>`` / ``flat:<channel>`` from MNE's rejection.
    """

    epochs: mne.Epochs
    kept: np.ndarray
    drop_reasons: list[tuple[str, ...]]
    bad_channels: list[str]
    filter_pad_s: float = field(default=0.0)


def _fir(srate: float, settings: EEGSettings) -> np.ndarray | None:
    """The FIR filter MNE designs by default for this band-pass (None when there is none)."""
    if settings.l_freq is None and settings.h_freq is None:
        return None
    import mne

    return np.asarray(
        mne.filter.create_filter(None, srate, settings.l_freq, settings.h_freq, verbose=False)
    )


def _keep_rows(x: np.ndarray, keep: np.ndarray) -> np.ndarray:
    """``x[keep]`` without a second copy of ``x``: rows are moved forward in place."""
    rows = np.flatnonzero(keep)
    if rows.size == x.shape[0]:
        return x
    for j, r in enumerate(rows):
        if j != r:
            x[j] = x[r]
    return x[: rows.size]


def _ptp(x: np.ndarray) -> np.ndarray:
    """Peak-to-peak amplitude per epoch and channel, one channel at a time."""
    out = np.empty(x.shape[:2])
    for c in range(x.shape[1]):
        out[:, c] = np.ptp(x[:, c, :], axis=-1)
    return out


def _subtract_reference(x: np.ndarray, ref_idx: list[int]) -> None:
    """Subtract the mean of the reference channels from every channel, in place.

    The same arithmetic as :func:`mne.set_eeg_reference`, without its copy of the data.
    """
    ref = x[:, ref_idx[0], :].copy()
    for c in ref_idx[1:]:
        ref += x[:, c, :]
    ref /= len(ref_idx)
    for c in range(x.shape[1]):
        x[:, c, :] -= ref


def _filter(block: np.ndarray, srate: float, settings: EEGSettings) -> np.ndarray:
    """MNE's default zero-phase FIR band-pass, in place on a float64 array (..., n_times)."""
    if settings.l_freq is None and settings.h_freq is None:
        return block
    import mne

    return mne.filter.filter_data(
        block, srate, settings.l_freq, settings.h_freq, copy=False, verbose=False
    )


def _bad_channels(x: np.ndarray, ch_names: list[str], settings: EEGSettings) -> list[str]:
    """Flat channels and channels whose log variance is a robust outlier among the channels.

    Each channel's statistics are medians over epochs (its typical epoch), so an artefact in a
    few epochs is left to epoch rejection rather than condemning the channel.
    """
    n_ch = x.shape[1]
    flat_v = settings.flat_uv * 1e-6
    log_var = np.empty(n_ch)
    flat = np.zeros(n_ch, dtype=bool)
    for c in range(n_ch):
        chan = x[:, c, :]
        flat[c] = float(np.median(np.ptp(chan, axis=-1))) < flat_v
        var = float(np.median(np.var(chan, axis=-1)))
        log_var[c] = np.log10(var) if var > 0 else -np.inf
    bad = flat.copy()
    live = ~flat & np.isfinite(log_var)
    if live.sum() >= 3:
        centre = float(np.median(log_var[live]))
        spread = MAD_TO_SD * float(np.median(np.abs(log_var[live] - centre)))
        spread = max(spread, MIN_LOG_VAR_SPREAD)
        bad[live] = np.abs(log_var[live] - centre) / spread > settings.bad_channel_z
    return [ch_names[c] for c in np.flatnonzero(bad)]


def make_epochs(
    data: np.ndarray,
    ch_names: list[str],
    srate: float,
    first_time: float,
    onsets: np.ndarray,
    tmin: float,
    tmax: float,
    settings: EEGSettings = EEGSettings(),
    *,
    units: str = "uV",
) -> EEGEpochs:
    """Filtered, referenced, artefact-checked epochs around each onset (recorder seconds).

    Parameters
    ----------
    data : array (n_channels, n_samples)
        EEG as recorded (any float dtype; float32 is not copied whole), in ``units``.
    ch_names : list of str
        Channel names, one per row of ``data``.
    srate : float
        Sampling rate (Hz).
    first_time : float
        Recorder time (s) of sample 0.
    onsets : array of float
        Onsets (recorder s), increasing; each epoch runs from onset + tmin to onset + tmax.
    tmin, tmax : float
        Epoch limits (s) relative to the onset, as in :class:`mne.Epochs`.
    settings : EEGSettings
        Filter, reference and rejection settings.
    units : str
        Unit of ``data``: one of :data:`UNIT_TO_VOLTS`.

    Returns
    -------
    EEGEpochs

    Raises
    ------
    RecordingError
        If the unit is unknown, the shapes disagree or a reference channel does not exist.
    """
    import mne

    if units not in UNIT_TO_VOLTS:
        raise RecordingError(
            f"the EEG stream's unit {units!r} is not known; use one of {sorted(UNIT_TO_VOLTS)}"
        )
    scale = UNIT_TO_VOLTS[units]
    if data.ndim != 2 or data.shape[0] != len(ch_names):
        raise RecordingError(
            f"the EEG data has shape {data.shape} for {len(ch_names)} channel names"
        )
    onsets = np.asarray(onsets, dtype=np.float64)
    if onsets.size > 1 and not np.all(np.diff(onsets) > 0):
        raise ValueError("onsets must be strictly increasing")
    if tmax <= tmin:
        raise ValueError(f"tmax ({tmax}) must be after tmin ({tmin})")
    refs = [settings.reference] if isinstance(settings.reference, str) else settings.reference
    if refs != ["average"]:
        unknown = [r for r in refs if r not in ch_names]
        if unknown:
            raise RecordingError(f"the EEG reference channel(s) {unknown} are not in the recording")

    n_ch, n_samples = data.shape
    first = int(round(tmin * srate))
    last = int(round(tmax * srate))
    n_times = last - first + 1
    h = _fir(srate, settings)
    pad = (h.size - 1) // 2 if h is not None else 0
    centre = np.round((onsets - first_time) * srate).astype(np.int64)

    reasons: list[tuple[str, ...]] = [()] * onsets.size
    inside = (centre + first >= 0) & (centre + last < n_samples)
    for i in np.flatnonzero(~inside):
        reasons[i] = (REASON_OUTSIDE,)
    todo = np.flatnonzero(inside)

    x = np.empty((todo.size, n_ch, n_times), dtype=np.float64)
    finite = np.ones(todo.size, dtype=bool)
    span_len = n_times + 2 * pad
    n_fft = scipy.fft.next_fast_len(span_len, real=True)
    h_fft = scipy.fft.rfft(h, n_fft) if h is not None else None
    per_chunk = max(1, CHUNK_BYTES // (8 * n_ch * span_len))
    for lo in range(0, todo.size, per_chunk):
        batch = todo[lo : lo + per_chunk]
        starts = centre[batch] + first - pad
        full = np.flatnonzero((starts >= 0) & (starts + span_len <= n_samples))
        block = np.empty((full.size, n_ch, span_len), dtype=np.float64)
        for r, j in enumerate(full):
            block[r] = data[:, starts[j] : starts[j] + span_len]
        block *= scale
        ok = np.isfinite(block).all(axis=(1, 2))
        finite[lo + full] = ok
        if ok.any():
            spans = block[ok] if not ok.all() else block
            if h is None or h_fft is None:
                x[lo + full[ok]] = spans
            else:
                # The FIR filter MNE designs, applied as MNE applies it (zero phase, centred),
                # keeping only the samples whose whole filter support is real data. A circular
                # FFT convolution of length >= the span is exact for those samples.
                spectrum = scipy.fft.rfft(spans, n_fft, axis=-1)
                spectrum *= h_fft
                x[lo + full[ok]] = scipy.fft.irfft(spectrum, n_fft, axis=-1)[
                    ..., h.size - 1 : span_len
                ]
                del spectrum
        del block
        # Spans cut by the recording's start or end: filtered by MNE itself, which pads the
        # edges of a segment that starts or ends with the recording as it pads the recording's.
        for j in np.flatnonzero(~np.isin(np.arange(batch.size), full)):
            s0 = max(0, int(starts[j]))
            s1 = min(n_samples, int(starts[j]) + span_len)
            s1 = min(n_samples, max(s1, s0 + 2 * pad + 1))
            s0 = max(0, min(s0, s1 - (2 * pad + 1)))
            seg = np.asarray(data[:, s0:s1], dtype=np.float64) * scale
            if not np.isfinite(seg).all():
                finite[lo + j] = False
                continue
            seg = _filter(seg, srate, settings)
            offset = int(centre[batch[j]]) + first - s0
            x[lo + j] = seg[:, offset : offset + n_times]
    for i in todo[~finite]:
        reasons[i] = (REASON_MISSING,)
    x = _keep_rows(x, finite)
    usable = todo[finite]

    bads = _bad_channels(x, list(ch_names), settings) if usable.size else []
    good = [c for c in range(n_ch) if ch_names[c] not in bads]
    # Flat epochs are found before referencing (an average reference would lift a flat channel
    # off zero), as MNE's ``flat`` rule: peak-to-peak below the threshold on any good channel.
    flat_v = settings.flat_uv * 1e-6
    ptp = _ptp(x)
    flat_rows = np.zeros(usable.size, dtype=bool)
    if good:
        flat_rows = np.asarray((ptp[:, good] < flat_v).any(axis=1), dtype=bool)
    for k in np.flatnonzero(flat_rows):
        reasons[usable[k]] = tuple(f"flat:{ch_names[c]}" for c in good if ptp[k, c] < flat_v)
    x = _keep_rows(x, ~flat_rows)
    usable = usable[~flat_rows]

    ref_idx = good if refs == ["average"] else [ch_names.index(r) for r in refs]
    if usable.size and ref_idx:
        _subtract_reference(x, ref_idx)

    info = mne.create_info(list(ch_names), srate, ch_types="eeg", verbose=False)
    events = np.column_stack(
        (
            centre[usable],
            np.zeros(usable.size, dtype=np.int64),
            np.ones(usable.size, dtype=np.int64),
        )
    )
    if not usable.size:
        # MNE cannot build an empty EpochsArray: build one zero epoch and drop it.
        x = np.zeros((1, n_ch, n_times))
        events = np.array([[0, 0, 1]], dtype=np.int64)
    epochs = mne.EpochsArray(
        x,
        info,
        events=events,
        tmin=first / srate,
        event_id={"trial": 1},
        baseline=None,
        verbose=False,
    )
    # The data are referenced above; an empty list tells MNE so without changing them.
    mne.set_eeg_reference(epochs, ref_channels=[], copy=False, verbose=False)
    # A reference channel is now zero (or mirrors the others): rejection ignores it and it
    # leaves the epochs with the bad channels.
    extra = [] if refs == ["average"] else [r for r in refs if r not in bads]
    epochs.info["bads"] = list(bads) + extra
    if not usable.size:
        epochs.drop([0], reason="NO_USABLE_EPOCHS", verbose=False)
    else:
        ptp = _ptp(x)
        with warnings.catch_warnings():
            # Dropping every epoch is a result here (each reason is returned), not a warning.
            warnings.filterwarnings("ignore", "All epochs were dropped", RuntimeWarning)
            epochs.drop_bad(
                reject={"eeg": settings.reject_peak_to_peak_uv * 1e-6},
                flat={"eeg": flat_v},
                verbose=False,
            )
    kept = np.zeros(onsets.size, dtype=bool)
    for row, i in enumerate(usable):
        log = epochs.drop_log[row]
        if not log:
            kept[i] = True
        else:
            reasons[i] = tuple(
                f"{'flat' if ptp[row, ch_names.index(ch)] < flat_v else 'amplitude'}:{ch}"
                for ch in log
            )
    if epochs.info["bads"]:
        epochs.drop_channels(list(epochs.info["bads"]))
    return EEGEpochs(
        epochs=epochs,
        kept=kept,
        drop_reasons=reasons,
        bad_channels=list(bads),
        filter_pad_s=pad / srate,
    )


def band_power(
    epoch_data: np.ndarray, srate: float, bands: dict[str, tuple[float, float]]
) -> np.ndarray:
    """Mean Welch PSD in each band: (n_epochs, n_channels, n_bands), V^2/Hz.

    :func:`scipy.signal.welch` with a Hann window of :data:`WELCH_SEGMENT_S` (or the whole
    epoch if shorter), half overlap, constant detrend and density scaling; the band's value is
    the mean PSD over the frequencies f with low <= f < high (NaN if no frequency falls in it).
    Epochs are transformed a few at a time to bound memory.
    """
    x = np.asarray(epoch_data)
    if x.ndim != 3:
        raise ValueError("epoch_data must have shape (n_epochs, n_channels, n_times)")
    n_ep, n_ch, n_t = x.shape
    nperseg = min(n_t, int(round(WELCH_SEGMENT_S * srate)))
    out = np.empty((n_ep, n_ch, len(bands)), dtype=np.float64)
    per_chunk = max(1, CHUNK_BYTES // (8 * 2 * n_ch * max(n_t, 1)))
    freqs = np.fft.rfftfreq(nperseg, d=1.0 / srate)
    selections = [(freqs >= low) & (freqs < high) for low, high in bands.values()]
    for lo in range(0, n_ep, per_chunk):
        _, psd = welch(x[lo : lo + per_chunk], fs=srate, window="hann", nperseg=nperseg, axis=-1)
        for b, sel in enumerate(selections):
            out[lo : lo + per_chunk, :, b] = psd[..., sel].mean(axis=-1) if sel.any() else np.nan
    return out


def group_log_power(
    power: np.ndarray,
    ch_names: list[str],
    groups: dict[str, list[str]],
    bands: dict[str, tuple[float, float]],
) -> dict[str, np.ndarray]:
    """log10 of the mean band power (uV^2/Hz) over each group's channels, per epoch.

    Keys are ``"<band>_<group>"`` (``theta_frontal``). Channels of a group that are not in
    ``ch_names`` (absent or removed as bad) are skipped; a group with none left gives NaN.
    """
    out: dict[str, np.ndarray] = {}
    for g_name, members in groups.items():
        idx = [ch_names.index(ch) for ch in members if ch in ch_names]
        for b, b_name in enumerate(bands):
            key = f"{b_name}_{g_name}"
            if not idx:
                out[key] = np.full(power.shape[0], np.nan)
                continue
            mean_uv2 = power[:, idx, b].mean(axis=1) * 1e12
            with np.errstate(divide="ignore"):
                out[key] = np.log10(mean_uv2)
    return out
