"""Pupil size: blink and dropout cleaning, subtractive baseline, per-trial change.

Practice follows Mathot, Fabius, Van Heusden and Van der Stigchel (2018), "Safe and sensible
preprocessing and baseline correction of pupil-size data", Behavior Research Methods 50:94-106:
subtractive (not divisive) baseline correction, and a check of the distribution of baselines so
that trials whose baseline was caught in a blink (implausibly small) are not used. The cleaning
steps (dropouts, implausible sizes, speed outliers, margins, interpolation over short gaps) are
common practice; each number below says where it comes from. docs/physio.md explains why MNE's
own pupil interpolation and baseline correction are not used.

All times are seconds on the recorder's clock; sizes are in the stream's unit (mm or arbitrary).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from runner.errors import RecordingError

#: Scale that turns a median absolute deviation into a standard-deviation estimate for normal
#: data (1 / Phi^-1(3/4)); used for robust z-scores (Iglewicz & Hoaglin 1993, from memory).
MAD_TO_SD = 1.4826

#: Fewest session baselines needed before a baseline is judged against the others.
MIN_SESSION_BASELINES = 5

FLAG_NO_DATA = "no_data"
FLAG_BASELINE_MISSING = "baseline_missing"
FLAG_BASELINE_IMPLAUSIBLE = "baseline_implausible"
FLAG_TOO_MUCH_INTERPOLATED = "too_much_interpolated"
FLAG_TOO_LITTLE_DATA = "too_little_data"


@dataclass(frozen=True)
class PupilSettings:
    """How pupil traces are cleaned and measured.

    Attributes
    ----------
    size_range : (low, high) or None
        Plausible pupil sizes in the stream's unit; samples outside are dropouts. The default is
        for diameters in mm (a human pupil is about 2 to 8 mm; from memory). Use None for
        arbitrary units, where only zeros, NaN and speed outliers mark dropouts.
    velocity_mad_k : float
        A sample whose dilation speed (the larger of its speeds to its two neighbours) exceeds
        the median speed plus this many median absolute deviations is a dropout. The speed rule
        and the multiplier 16 follow Kret and Sjak-Shie (2019), "Preprocessing pupil size data:
        guidelines and code", Behavior Research Methods 51:1336-1342 (rule checked; 16 is the
        default of a package implementing it, the paper's own value from memory).
    margin_before_s, margin_after_s : float
        Samples this long before and after each dropout are removed too: the eyelid distorts the
        measured size around a blink (common practice; the values are from memory, no source).
    max_gap_s : float
        Gaps up to this long (from the last good sample before to the first good one after) are
        interpolated linearly; longer gaps stay NaN. Blinks rarely last longer than about 0.4 s
        (common practice, from memory).
    baseline_s : float
        Length of the baseline window that ends at the end of fixation (the pipeline builds the
        window; common practice, no source).
    max_interpolated_share : float
        A trial whose baseline or stimulus window is more than this share interpolated is
        flagged (common practice, no source).
    min_data_share : float
        A trial whose stimulus window has less than this share of usable samples (recorded or
        interpolated) is flagged (common practice, no source).
    baseline_z : float
        A baseline whose robust z-score against the session's baselines is larger than this in
        absolute value is implausible (Mathot et al. 2018 recommend checking the baseline
        distribution; 3.5 is the modified z-score cut-off of Iglewicz and Hoaglin 1993, from
        memory).
    """

    size_range: tuple[float, float] | None = (1.5, 9.0)
    velocity_mad_k: float = 16.0
    margin_before_s: float = 0.05
    margin_after_s: float = 0.1
    max_gap_s: float = 0.5
    baseline_s: float = 0.5
    max_interpolated_share: float = 0.5
    min_data_share: float = 0.5
    baseline_z: float = 3.5


@dataclass(frozen=True)
class CleanPupil:
    """A pupil trace after dropout removal and interpolation.

    ``size`` holds recorded values where ``valid``, interpolated values where ``interpolated``
    and NaN elsewhere (gaps too long to interpolate, or at the ends of the recording).
    ``valid`` is False for dropouts and for the margins around them. ``blinks`` lists each
    removed stretch, margins included, as (first removed sample's time, last one's time).
    """

    times: np.ndarray
    size: np.ndarray
    valid: np.ndarray
    interpolated: np.ndarray
    blinks: list[tuple[float, float]]


@dataclass(frozen=True)
class PupilTrial:
    """One trial's pupil measures; a flagged trial's measures are None, never numbers.

    ``baseline`` is in the stream's unit; ``mean_change`` and ``peak_change`` are size minus
    baseline (same unit); ``peak_latency_s`` is from the start of the stimulus window.
    ``valid_share`` and ``interpolated_share`` are shares of the stimulus window's samples.
    """

    baseline: float | None
    mean_change: float | None
    peak_change: float | None
    peak_latency_s: float | None
    valid_share: float
    interpolated_share: float
    flags: tuple[str, ...]


def _runs(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start indices and exclusive end indices of the runs of True in ``mask``."""
    edges = np.diff(np.concatenate(([0], mask.astype(np.int8), [0])))
    return np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)


def _speed_outliers(times: np.ndarray, size: np.ndarray, good: np.ndarray, k: float) -> np.ndarray:
    """Samples whose dilation speed is a robust outlier (Kret & Sjak-Shie 2019 rule)."""
    step = np.abs(np.diff(size)) / np.diff(times)
    step[~(good[1:] & good[:-1])] = np.nan
    before = np.concatenate(([np.nan], step))
    after = np.concatenate((step, [np.nan]))
    both = np.vstack((before, after))
    has = np.isfinite(both).any(axis=0)
    speed = np.full(size.shape, np.nan)
    speed[has] = np.nanmax(both[:, has], axis=0)
    finite = speed[np.isfinite(speed)]
    if finite.size == 0:
        return np.zeros(size.shape, dtype=bool)
    centre = float(np.median(finite))
    spread = float(np.median(np.abs(finite - centre)))
    if spread == 0.0:
        # A quantised or noise-free trace: fall back to the mean absolute deviation.
        spread = float(np.mean(np.abs(finite - centre)))
    if spread == 0.0:
        return np.zeros(size.shape, dtype=bool)
    with np.errstate(invalid="ignore"):
        return speed > centre + k * spread


def clean_pupil(
    times: np.ndarray, size: np.ndarray, settings: PupilSettings = PupilSettings()
) -> CleanPupil:
    """Detect blinks and dropouts, widen them by margins and interpolate short gaps.

    Parameters
    ----------
    times : array of float
        Sample times in recorder seconds, increasing.
    size : array of float
        Pupil size per sample; 0, NaN and values outside ``settings.size_range`` are dropouts.
    settings : PupilSettings
        Thresholds, margins and the longest gap to interpolate.

    Returns
    -------
    CleanPupil
        The cleaned trace with per-sample masks and the removed stretches.

    Raises
    ------
    RecordingError
        If times and sizes differ in length or the times do not increase.
    """
    t = np.asarray(times, dtype=np.float64)
    x = np.asarray(size, dtype=np.float64)
    if t.ndim != 1 or t.shape != x.shape:
        raise RecordingError(
            f"the pupil stream has {t.size} time stamps for {x.size} samples; they must match"
        )
    n = t.size
    if n == 0:
        empty = np.zeros(0, dtype=bool)
        return CleanPupil(t, x, empty, empty.copy(), [])
    if n > 1 and not np.all(np.diff(t) > 0):
        raise RecordingError("the pupil stream's time stamps do not increase")

    with np.errstate(invalid="ignore"):
        bad = ~np.isfinite(x) | (x <= 0)
        if settings.size_range is not None:
            low, high = settings.size_range
            bad |= (x < low) | (x > high)
    if n > 2:
        bad |= _speed_outliers(t, x, ~bad, settings.velocity_mad_k)

    # Widen every dropout by the margins (on the time axis, so uneven sampling is fine).
    starts, ends = _runs(bad)
    if starts.size:
        lo = np.searchsorted(t, t[starts] - settings.margin_before_s, side="left")
        hi = np.searchsorted(t, t[ends - 1] + settings.margin_after_s, side="right")
        cover = np.zeros(n + 1, dtype=np.int64)
        np.add.at(cover, lo, 1)
        np.add.at(cover, hi, -1)
        bad = np.cumsum(cover[:n]) > 0

    valid = ~bad
    starts, ends = _runs(bad)
    blinks = [(float(t[s]), float(t[e - 1])) for s, e in zip(starts, ends, strict=True)]

    out = np.full(n, np.nan)
    out[valid] = x[valid]
    interpolated = np.zeros(n, dtype=bool)
    if starts.size and valid.any():
        inner = (starts > 0) & (ends < n)
        s_in, e_in = starts[inner], ends[inner]
        short = (t[e_in] - t[s_in - 1]) <= settings.max_gap_s
        if short.any():
            cover = np.zeros(n + 1, dtype=np.int64)
            np.add.at(cover, s_in[short], 1)
            np.add.at(cover, e_in[short], -1)
            interpolated = np.cumsum(cover[:n]) > 0
            out[interpolated] = np.interp(t[interpolated], t[valid], x[valid])
    return CleanPupil(times=t, size=out, valid=valid, interpolated=interpolated, blinks=blinks)


def _window(clean: CleanPupil, span: tuple[float, float]) -> slice:
    """Samples with span[0] <= time < span[1]."""
    lo = int(np.searchsorted(clean.times, span[0], side="left"))
    hi = int(np.searchsorted(clean.times, span[1], side="left"))
    return slice(lo, max(lo, hi))


def baseline_value(clean: CleanPupil, baseline: tuple[float, float]) -> float | None:
    """Median usable pupil size in the baseline window, or None when it holds none.

    The pipeline calls this for every trial first, so that :func:`trial_pupil` can judge each
    baseline against the session's distribution (``session_baselines``).
    """
    values = clean.size[_window(clean, baseline)]
    values = values[np.isfinite(values)]
    return float(np.median(values)) if values.size else None


def _robust_z(value: float, others: np.ndarray) -> float | None:
    """Robust z-score of ``value`` against ``others`` (median and MAD), or None if undefined."""
    finite = others[np.isfinite(others)]
    if finite.size < MIN_SESSION_BASELINES:
        return None
    centre = float(np.median(finite))
    spread = MAD_TO_SD * float(np.median(np.abs(finite - centre)))
    if spread == 0.0:
        return None
    return (value - centre) / spread


def trial_pupil(
    clean: CleanPupil,
    baseline: tuple[float, float],
    window: tuple[float, float],
    settings: PupilSettings = PupilSettings(),
    *,
    session_baselines: np.ndarray | None = None,
) -> PupilTrial:
    """Subtractive baseline and change measures for one trial.

    The baseline is the median usable size in ``baseline`` (median rather than mean, so one
    stray sample cannot move it); change is size minus baseline (Mathot et al. 2018). Over the
    stimulus ``window`` the mean change, the largest change (peak dilation) and its latency from
    the window's start are reported. Windows are half-open: start <= t < end.

    Flags, each of which makes every measure None: ``no_data`` (no samples in a window),
    ``baseline_missing`` (no usable baseline sample), ``baseline_implausible`` (outside
    ``size_range`` or a robust outlier among ``session_baselines``), ``too_much_interpolated``
    and ``too_little_data`` (see :class:`PupilSettings`).
    """
    flags: list[str] = []
    base_slice = _window(clean, baseline)
    win_slice = _window(clean, window)
    n_base = base_slice.stop - base_slice.start
    n_win = win_slice.stop - win_slice.start
    if n_base == 0 or n_win == 0:
        return PupilTrial(None, None, None, None, 0.0, 0.0, (FLAG_NO_DATA,))

    valid_share = float(np.mean(clean.valid[win_slice]))
    interpolated_share = float(np.mean(clean.interpolated[win_slice]))
    base_interpolated = float(np.mean(clean.interpolated[base_slice]))
    win_size = clean.size[win_slice]
    data_share = float(np.mean(np.isfinite(win_size)))

    base = baseline_value(clean, baseline)
    if base is None:
        flags.append(FLAG_BASELINE_MISSING)
    else:
        implausible = False
        if settings.size_range is not None:
            low, high = settings.size_range
            implausible = not (low <= base <= high)
        if session_baselines is not None:
            z = _robust_z(base, np.asarray(session_baselines, dtype=np.float64))
            implausible = implausible or (z is not None and abs(z) > settings.baseline_z)
        if implausible:
            flags.append(FLAG_BASELINE_IMPLAUSIBLE)
    if max(interpolated_share, base_interpolated) > settings.max_interpolated_share:
        flags.append(FLAG_TOO_MUCH_INTERPOLATED)
    if data_share < settings.min_data_share:
        flags.append(FLAG_TOO_LITTLE_DATA)
    if flags or base is None:
        return PupilTrial(None, None, None, None, valid_share, interpolated_share, tuple(flags))

    change = win_size - base
    peak_index = int(np.nanargmax(change))
    return PupilTrial(
        baseline=base,
        mean_change=float(np.nanmean(change)),
        peak_change=float(change[peak_index]),
        peak_latency_s=float(clean.times[win_slice.start + peak_index] - window[0]),
        valid_share=valid_share,
        interpolated_share=interpolated_share,
        flags=(),
    )
