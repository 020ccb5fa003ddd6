"""The clock model: presenter time (the journal's local_clock) mapped onto a recorder's clock.

Two free-running PC clocks differ by an offset and drift apart at a steady rate (tens of parts
per million are common), so one constant offset is wrong by tens of milliseconds within an hour.
The model is therefore a line per segment,

    recorder_t = presenter_t + offset_s + slope * (presenter_t - t_ref),

fitted robustly to matched markers (journaled flip time, recorded time): a Theil-Sen line gives a
start that ignores outliers (markers delayed by the network or a busy recorder), markers farther
from it than the outlier limit are set aside, and a least-squares line over the rest is the model.
A clock reset (a reboot restarts local_clock; a recorder restart may restart its clock) shows up
as presenter times that go backwards or a jump in the difference: the pairs are split there into
segments, each with its own line, much as pyxdf splits a stream's clock offsets at resets.

Where a marker was recorded, its recorded time is the truth for that event; the model fills in
events whose marker was lost (see :meth:`ClockModel.to_recorder`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

PPM = 1e6
MS = 1000.0
# A jump of the recorder-minus-presenter difference this large between consecutive markers is a
# clock reset, not drift (20 ppm over a 10-minute gap between markers is 12 ms).
RESET_JUMP_S = 0.5
# Residuals beyond max(OUTLIER_MIN_MS, OUTLIER_MADS robust standard deviations) are outliers.
OUTLIER_MIN_MS = 5.0
OUTLIER_MADS = 6.0
MAD_TO_SD = 1.4826  # for normally distributed residuals (common practice)
MIN_PAIRS_FOR_SLOPE = 3
THEIL_SEN_MAX = 2000  # Theil-Sen takes all pairs of points; thin the start fit beyond this


@dataclass(frozen=True)
class ClockSegment:
    """One stretch of matched markers with a steady clock relation."""

    start: float  # presenter time of the first pair
    end: float  # presenter time of the last pair
    t_ref: float
    offset_s: float  # recorder - presenter at t_ref
    slope: float  # change of that difference per second of presenter time (drift)
    n_pairs: int
    n_outliers: int
    residual_sd_ms: float  # robust (MAD-based) spread of the inliers' residuals
    residual_max_ms: float  # largest absolute inlier residual

    @property
    def drift_ppm(self) -> float:
        return self.slope * PPM

    def to_recorder(self, t: float | np.ndarray) -> float | np.ndarray:
        return t + self.offset_s + self.slope * (np.asarray(t) - self.t_ref)


@dataclass(frozen=True)
class ClockModel:
    """Segments in presenter-time order; :meth:`to_recorder` maps any presenter time."""

    segments: tuple[
        ClockSegment, ...
    ]  # in the order of the pairs given (time order of the session)
    outliers: tuple[int, ...]  # indices (into the fitted pairs) set aside as outliers
    assignment: tuple[int, ...] = ()  # for each fitted pair, the index of its segment

    @property
    def n_pairs(self) -> int:
        return sum(s.n_pairs for s in self.segments)

    @property
    def main(self) -> ClockSegment:
        """The segment with the most pairs (its drift is the one reported)."""
        return max(self.segments, key=lambda s: s.n_pairs)

    def fitted(self, i: int, t: float) -> float:
        """The model's recorder time for fitted pair ``i`` (journaled time ``t``), on its own
        segment (spans of segments overlap in presenter time after a presenter reboot)."""
        return float(self.segments[self.assignment[i]].to_recorder(t))

    def segment_for(self, t: float) -> ClockSegment:
        """The segment whose span holds ``t``, else the nearest one in presenter time.

        After a presenter reboot two segments can span the same presenter times; callers that
        know an event's attempt should pick its segment themselves.
        """
        for s in self.segments:
            if s.start <= t <= s.end:
                return s
        return min(self.segments, key=lambda s: min(abs(t - s.start), abs(t - s.end)))

    def to_recorder(self, t: float) -> float:
        return float(self.segment_for(t).to_recorder(t))


def split_at_resets(presenter: np.ndarray, recorder: np.ndarray) -> list[np.ndarray]:
    """Index arrays of the segments between clock resets (pairs in journal order)."""
    if len(presenter) == 0:
        return []
    diff = recorder - presenter
    cuts = [
        i
        for i in range(1, len(presenter))
        if presenter[i] < presenter[i - 1] or abs(diff[i] - diff[i - 1]) > RESET_JUMP_S
    ]
    bounds = [0, *cuts, len(presenter)]
    return [np.arange(a, b) for a, b in zip(bounds, bounds[1:], strict=False) if b > a]


def theil_sen(x: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """Theil-Sen line: the median of the slopes between all pairs of points, then the median
    intercept as median(y) - slope * median(x) (Sen 1968; the convention scipy uses); robust to nearly a third of the points being outliers."""
    i, j = np.triu_indices(len(x), k=1)
    dx = x[j] - x[i]
    ok = dx != 0
    slope = float(np.median((y[j] - y[i])[ok] / dx[ok])) if ok.any() else 0.0
    return slope, float(np.median(y) - slope * np.median(x))


def _fit_segment(p: np.ndarray, r: np.ndarray) -> tuple[ClockSegment, np.ndarray]:
    """The robust line of one segment; also a mask of the pairs kept (not outliers)."""
    d = r - p
    t_ref = float(p[0])
    x = p - t_ref
    if len(p) < MIN_PAIRS_FOR_SLOPE or np.ptp(x) <= 0:
        offset = float(np.median(d))
        res = (d - offset) * MS
        keep = np.ones(len(p), dtype=bool)
        slope = 0.0
    else:
        step = max(1, len(p) // THEIL_SEN_MAX)
        slope0, intercept0 = theil_sen(x[::step], d[::step])
        guess = intercept0 + slope0 * x
        res0 = (d - guess) * MS
        spread = MAD_TO_SD * float(np.median(np.abs(res0 - np.median(res0))))
        limit = max(OUTLIER_MIN_MS, OUTLIER_MADS * spread)
        keep = np.abs(res0) <= limit
        if keep.sum() < MIN_PAIRS_FOR_SLOPE:
            keep = np.ones(len(p), dtype=bool)
        slope, offset = (float(v) for v in np.polyfit(x[keep], d[keep], 1))
        res = (d - (offset + slope * x)) * MS
    inl = res[keep]
    seg = ClockSegment(
        start=float(p.min()),
        end=float(p.max()),
        t_ref=t_ref,
        offset_s=float(offset),
        slope=float(slope),
        n_pairs=int(len(p)),
        n_outliers=int((~keep).sum()),
        residual_sd_ms=MAD_TO_SD * float(np.median(np.abs(inl - np.median(inl)))),
        residual_max_ms=float(np.max(np.abs(inl))),
    )
    return seg, keep


def fit_clock(
    presenter_t: Sequence[float] | np.ndarray, recorder_t: Sequence[float] | np.ndarray
) -> ClockModel:
    """Fit the clock model to matched markers, given in journal order.

    Parameters
    ----------
    presenter_t, recorder_t : sequence of float
        For each matched marker, the journaled (flip) time and the recorded time, in seconds.

    Returns
    -------
    ClockModel

    Raises
    ------
    ValueError
        No pairs, or the two sequences differ in length.
    """
    p = np.asarray(presenter_t, dtype=float)
    r = np.asarray(recorder_t, dtype=float)
    if len(p) != len(r) or len(p) == 0:
        raise ValueError("the clock model needs matched pairs of equal count (at least one).")
    segments = []
    outliers: list[int] = []
    assignment = np.zeros(len(p), dtype=int)
    for k, idx in enumerate(split_at_resets(p, r)):
        seg, keep = _fit_segment(p[idx], r[idx])
        segments.append(seg)
        outliers.extend(int(i) for i in idx[~keep])
        assignment[idx] = k
    return ClockModel(tuple(segments), tuple(sorted(outliers)), tuple(int(a) for a in assignment))
