"""Cardiac measures: R-peaks (NeuroKit2), heart rate per window, HRV per block or rest.

Every measure is computed over an explicit window and carries flags; a measure whose window is
shorter than its published minimum (:data:`MIN_WINDOW_S`) is None with a flag, never a number.
NeuroKit2 itself returns values for any window length, so these checks are ours.
All times are seconds on the recorder's clock.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.signal import welch

#: Shortest window (s) for each measure.
#: - hr: common practice, no source (a mean rate needs a couple of beats).
#: - rmssd 10 s and sdnn 30 s: Munoz et al. (2015), "Validity of (ultra-)short recordings for
#:   heart rate variability measurements", PLoS ONE 10:e0138921 (checked, abstract); Shaffer and
#:   Ginsberg (2017), Front. Public Health 5:258, review ultra-short limits (from memory).
#: - hf 60 s and lf 120 s: Task Force of the ESC and NASPE (1996), Circulation 93:1043-1065
#:   ("about 1 min" for HF and "about 2 min" for LF; from memory).
MIN_WINDOW_S: dict[str, float] = {"hr": 2.0, "rmssd": 10.0, "sdnn": 30.0, "hf": 60.0, "lf": 120.0}

#: Frequency bands (Hz) of the Task Force (1996): LF 0.04-0.15, HF 0.15-0.4.
LF_BAND = (0.04, 0.15)
HF_BAND = (0.15, 0.4)

#: RR intervals outside this range (ms; 30-200 beats per minute) are artefacts, not beats
#: (common practice, no source).
RR_RANGE_MS = (300.0, 2000.0)

#: An RR interval differing from the window's median by more than this share is ectopic or an
#: artefact (the 20 % rule, Malik et al. 1989; from memory).
ECTOPIC_SHARE = 0.2

#: A window in which more than this share of intervals are artefacts is not measured (common
#: practice, no source).
MAX_ARTEFACT_SHARE = 0.2

#: A pause longer than this (s) between beats, or between the window's edges and its first or
#: last beat, means beats are missing (common practice, no source).
MAX_BEAT_GAP_S = 3.0

#: The RR series is resampled at this rate (Hz) for spectral analysis (4 Hz is common practice,
#: from memory) with a cubic spline.
RESAMPLE_HZ = 4.0

#: Welch segments last this long (s) at most: two cycles of the lowest LF frequency (0.04 Hz),
#: so the LF band is resolved (common practice, no source).
WELCH_SEGMENT_S = 2.0 / LF_BAND[0]

FLAG_TOO_FEW_BEATS = "too_few_beats"
FLAG_BEATS_MISSING = "beats_missing"
FLAG_ARTEFACT_SHARE_HIGH = "ectopic_share_high"
FLAG_RR_IMPLAUSIBLE = "rr_implausible"


@dataclass(frozen=True)
class HeartRate:
    """Mean heart rate over a window; None when flagged. ``beats`` counts beats in the window."""

    bpm: float | None
    beats: int
    flags: tuple[str, ...]


@dataclass(frozen=True)
class HRV:
    """Heart-rate variability over a window; a measure is None when its window is too short.

    ``window_s`` is the window's length (end - start); ``beats`` counts beats in it.
    """

    window_s: float
    beats: int
    rmssd_ms: float | None
    sdnn_ms: float | None
    hf_ms2: float | None
    lf_ms2: float | None
    flags: tuple[str, ...]


def r_peaks(ecg: np.ndarray, srate: float) -> np.ndarray:
    """Sample indices of R-peaks found by NeuroKit2 (``ecg_clean`` then ``ecg_peaks``).

    Both use NeuroKit2's default "neurokit" method; NeuroKit2's artefact correction is off so
    the indices are the detected peaks. NaN samples (gaps in the stream) are bridged linearly
    before filtering; no peak can be found inside such a gap.
    """
    import neurokit2 as nk

    signal = np.asarray(ecg, dtype=np.float64)
    finite = np.isfinite(signal)
    if finite.sum() < 2:
        return np.zeros(0, dtype=np.int64)
    if not finite.all():
        index = np.arange(signal.size)
        signal = np.interp(index, index[finite], signal[finite])
    cleaned = nk.ecg_clean(signal, sampling_rate=srate, method="neurokit")
    _, info = nk.ecg_peaks(cleaned, sampling_rate=srate, method="neurokit", correct_artifacts=False)
    return np.asarray(info["ECG_R_Peaks"], dtype=np.int64)


def beats_from_rr(rr_ms: np.ndarray, times: np.ndarray) -> np.ndarray:
    """Beat times (s) from a device's RR-interval stream.

    Each value's time stamp is taken as the time of the beat that ends its interval. Devices
    that send several values in one packet give them one time stamp; such values are spread
    back from the stamp by their own intervals, so successive beats within a packet are exactly
    their RR apart. Time stamps count as one packet when they lie within 1 ms of each other.
    """
    rr = np.asarray(rr_ms, dtype=np.float64) / 1000.0
    t = np.asarray(times, dtype=np.float64)
    if rr.shape != t.shape or rr.ndim != 1:
        raise ValueError("rr_ms and times must be 1-D arrays of the same length")
    if t.size == 0:
        return t.copy()
    packet = np.concatenate(([0], np.cumsum(np.diff(t) > 1e-3)))
    # Seconds from each value's beat to its packet's last beat: the sum of the later intervals
    # in the same packet, a cumulative sum from the end restarted at each packet.
    rev_rr, rev_packet = rr[::-1], packet[::-1]
    summed = np.cumsum(rev_rr) - rev_rr
    first = np.concatenate(([True], rev_packet[1:] != rev_packet[:-1]))
    restart = summed[first][np.cumsum(first) - 1]
    later = (summed - restart)[::-1]
    last_time = t[np.flatnonzero(np.concatenate((packet[1:] != packet[:-1], [True])))]
    return last_time[packet] - later


def _rr_artefacts(rr_ms: np.ndarray) -> np.ndarray:
    """Intervals outside :data:`RR_RANGE_MS` or more than 20 % away from the median."""
    low, high = RR_RANGE_MS
    centre = float(np.median(rr_ms))
    return (rr_ms < low) | (rr_ms > high) | (np.abs(rr_ms - centre) > ECTOPIC_SHARE * centre)


def heart_rate(beat_times: np.ndarray, start: float, end: float) -> HeartRate:
    """Time-weighted mean heart rate between start and end (s).

    The instantaneous rate during an interval between two beats is 60 / interval; the mean
    weights each interval by how much of it lies in the window, so short windows (one trial)
    are measured without rounding to whole beats. Flags: ``hr_window_too_short``,
    ``beats_missing`` (the window is not bracketed by beats, or a pause over
    :data:`MAX_BEAT_GAP_S`), ``rr_implausible`` (an interval outside :data:`RR_RANGE_MS`).
    """
    bt = np.asarray(beat_times, dtype=np.float64)
    inside = int(np.count_nonzero((bt >= start) & (bt <= end)))
    if end - start < MIN_WINDOW_S["hr"]:
        return HeartRate(None, inside, ("hr_window_too_short",))
    first = int(np.searchsorted(bt, start, side="right")) - 1
    last = int(np.searchsorted(bt, end, side="left"))
    if first < 0 or last >= bt.size:
        return HeartRate(None, inside, (FLAG_BEATS_MISSING,))
    span = bt[first : last + 1]
    intervals = np.diff(span)
    if intervals.size == 0 or np.max(intervals) > MAX_BEAT_GAP_S:
        return HeartRate(None, inside, (FLAG_BEATS_MISSING,))
    low, high = RR_RANGE_MS
    rr_ms = intervals * 1000.0
    if np.any((rr_ms < low) | (rr_ms > high)):
        return HeartRate(None, inside, (FLAG_RR_IMPLAUSIBLE,))
    overlap = np.minimum(span[1:], end) - np.maximum(span[:-1], start)
    bpm = float(np.sum(overlap * 60.0 / intervals) / np.sum(overlap))
    return HeartRate(bpm, inside, ())


def rmssd_sdnn(rr_ms: np.ndarray, normal: np.ndarray | None = None) -> tuple[float, float]:
    """RMSSD and SDNN (ms) of an RR series (Task Force 1996 definitions).

    RMSSD = sqrt(mean((RR[i+1] - RR[i])^2)) over successive pairs of normal intervals;
    SDNN = standard deviation (N - 1 denominator) of the normal intervals.
    """
    rr = np.asarray(rr_ms, dtype=np.float64)
    ok = np.ones(rr.shape, dtype=bool) if normal is None else np.asarray(normal, dtype=bool)
    pairs = ok[1:] & ok[:-1]
    diffs = np.diff(rr)[pairs]
    rmssd = float(np.sqrt(np.mean(diffs**2))) if diffs.size else float("nan")
    sdnn = float(np.std(rr[ok], ddof=1)) if ok.sum() > 1 else float("nan")
    return rmssd, sdnn


def band_powers(
    beat_times: np.ndarray, rr_ms: np.ndarray, bands: dict[str, tuple[float, float]]
) -> dict[str, float]:
    """Power (ms^2) of the RR series in each band.

    The RR series (each interval placed at the beat that ends it) is resampled at
    :data:`RESAMPLE_HZ` with a cubic spline, then Welch's method (Hann window, segments of at
    most :data:`WELCH_SEGMENT_S`, half overlap, linear detrend) gives the spectrum, which is
    integrated over each band with the trapezoid rule.
    """
    t = np.asarray(beat_times, dtype=np.float64)
    rr = np.asarray(rr_ms, dtype=np.float64)
    grid = np.arange(t[0], t[-1], 1.0 / RESAMPLE_HZ)
    series = CubicSpline(t, rr)(grid)
    nperseg = min(grid.size, int(round(WELCH_SEGMENT_S * RESAMPLE_HZ)))
    freqs, psd = welch(series, fs=RESAMPLE_HZ, window="hann", nperseg=nperseg, detrend="linear")
    out: dict[str, float] = {}
    for name, (low, high) in bands.items():
        sel = (freqs >= low) & (freqs <= high)
        out[name] = float(np.trapezoid(psd[sel], freqs[sel])) if sel.sum() > 1 else float("nan")
    return out


def hrv(beat_times: np.ndarray, start: float, end: float) -> HRV:
    """RMSSD, SDNN, HF and LF power between start and end (s).

    Uses the beats with start <= t <= end. Intervals outside :data:`RR_RANGE_MS` or more than
    20 % from the window's median are left out (RMSSD uses only successive normal pairs; the
    spectrum is resampled over the normal intervals). Flags: ``too_few_beats``,
    ``beats_missing`` (a pause over :data:`MAX_BEAT_GAP_S`), ``ectopic_share_high`` (more than
    :data:`MAX_ARTEFACT_SHARE` left out) make every measure None; ``<measure>_window_too_short``
    makes that measure None.
    """
    bt = np.asarray(beat_times, dtype=np.float64)
    window_s = float(end - start)
    inside = bt[(bt >= start) & (bt <= end)]
    flags: list[str] = []

    def empty(*why: str) -> HRV:
        return HRV(window_s, int(inside.size), None, None, None, None, tuple(why))

    if inside.size < 3:
        return empty(FLAG_TOO_FEW_BEATS)
    edges = np.concatenate(([inside[0] - start], np.diff(inside), [end - inside[-1]]))
    if np.max(edges) > MAX_BEAT_GAP_S:
        return empty(FLAG_BEATS_MISSING)
    rr = np.diff(inside) * 1000.0
    artefact = _rr_artefacts(rr)
    if np.mean(artefact) > MAX_ARTEFACT_SHARE:
        return empty(FLAG_ARTEFACT_SHARE_HIGH)

    rmssd, sdnn = rmssd_sdnn(rr, ~artefact)
    values: dict[str, float | None] = {"rmssd": rmssd, "sdnn": sdnn, "hf": None, "lf": None}
    wanted = {
        name: band
        for name, band in (("hf", HF_BAND), ("lf", LF_BAND))
        if window_s >= MIN_WINDOW_S[name]
    }
    if wanted:
        normal = ~artefact
        powers = band_powers(inside[1:][normal], rr[normal], wanted)
        values.update(powers)
    for name in ("rmssd", "sdnn", "hf", "lf"):
        if window_s < MIN_WINDOW_S[name]:
            values[name] = None
            flags.append(f"{name}_window_too_short")
        else:
            value = values[name]
            if value is not None and not np.isfinite(value):
                values[name] = None
                flags.append(f"{name}_undefined")
    return HRV(
        window_s=window_s,
        beats=int(inside.size),
        rmssd_ms=values["rmssd"],
        sdnn_ms=values["sdnn"],
        hf_ms2=values["hf"],
        lf_ms2=values["lf"],
        flags=tuple(flags),
    )
