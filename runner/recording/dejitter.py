"""Dejittered timestamps of a regularly sampled stream: one straight line per segment.

Amplifiers often stamp a whole chunk of samples when it arrives, so raw timestamps jitter by
milliseconds around the true sample times. Within a stretch without breaks the samples were taken
at a steady rate, so a least-squares line of timestamp on sample index recovers their times; the
stream is split into segments where consecutive timestamps are farther apart than
``max(threshold_s, threshold_samples / srate)``. This is the procedure pyxdf applies with
``dejitter_timestamps=True`` (its defaults: 1 s and 500 samples), written here so one stream can
be dejittered without re-reading the whole file.
"""

from __future__ import annotations

import numpy as np

BREAK_THRESHOLD_S = 1.0
BREAK_THRESHOLD_SAMPLES = 500


def segments(
    timestamps: np.ndarray,
    srate: float,
    *,
    threshold_s: float = BREAK_THRESHOLD_S,
    threshold_samples: int = BREAK_THRESHOLD_SAMPLES,
) -> list[tuple[int, int]]:
    """Inclusive (first, last) sample indices of the stretches between breaks."""
    n = len(timestamps)
    if n == 0:
        return []
    limit = max(threshold_s, threshold_samples / srate)
    breaks = np.flatnonzero(np.abs(np.diff(timestamps)) > limit)
    starts = np.concatenate(([0], breaks + 1))
    stops = np.concatenate((breaks, [n - 1]))
    return list(zip(starts.tolist(), stops.tolist(), strict=True))


def dejitter(timestamps: np.ndarray, srate: float, **thresholds: float) -> np.ndarray:
    """Timestamps replaced by each segment's least-squares line over the sample index.

    Streams with an irregular rate (``srate <= 0``) are returned unchanged.
    """
    ts = np.asarray(timestamps, dtype=float)
    if srate <= 0 or len(ts) < 2:
        return ts.copy()
    out = ts.copy()
    for first, last in segments(ts, srate, **thresholds):  # type: ignore[arg-type]
        idx = np.arange(first, last + 1, dtype=float)
        if len(idx) < 2:
            continue
        design = np.column_stack((np.ones_like(idx), idx))
        coef = np.linalg.lstsq(design, ts[first : last + 1], rcond=None)[0]
        out[first : last + 1] = coef[0] + coef[1] * idx
    return out
