"""Display timing arithmetic, kept free of pygame so it can be tested against a simulated clock.

* :func:`measure_refresh` flips a number of times and summarises the flip stamps
  (:func:`summarise_flips`): the refresh interval, its jitter, whether flips block until the
  vertical blank, and how far the rate is from the one the protocol expects.
* :class:`FramePacer` is the frame clock used when flips do not block (the SDL dummy driver of
  tests and headless pilots): it lands every flip on a slot of a steady frame grid, so headless
  runs keep the frame-quantised timing of a lab display.
* :func:`is_late` is the late-flip rule shared by the presenter, the console and the self-test.
* :func:`check_vsync` tells a display whose flips are locked to its refresh (real vsync) from
  one whose driver only sleeps between flips to imitate it (emulated vsync, e.g. SDL's renderer
  on a virtual X server): it flips after random waits and looks at where the flips return
  within the refresh cycle. Locked flips return at the same phase; imitated ones anywhere.
"""

from __future__ import annotations

import cmath
import math
import random
import statistics
from collections.abc import Callable
from dataclasses import asdict, dataclass, replace

MIN_MEASURE_FLIPS = 120  # at least two seconds at 60 Hz: enough for a sub-0.1 % interval estimate
RATE_TOLERANCE = 0.02  # refuse a live run when the measured rate is off by more than 2 %
# Flips block when their median gap exceeds this: shorter than the fastest refresh a protocol may
# ask for (500 Hz, 2 ms), longer than a non-blocking flip of a full-HD frame takes. An absolute
# bound, so a 120 Hz panel under a 60 Hz protocol is reported as a rate mismatch, not as no vsync.
BLOCKING_MIN_GAP_S = 0.0015
LATE_INTERVALS = 1.5  # a flip is late when it lands more than 1.5 intervals after the last frame
MS = 1000.0
VSYNC_FLIPS = 60  # flips after random waits in the vsync check (about 1.5 s at 60 Hz)
VSYNC_MAX_WAIT = 1.5  # the random wait before each of them: 0 to 1.5 refresh intervals
# Flips locked to the refresh return within a small part of a frame of the same phase; flips
# that only sleep to imitate vsync return at any phase (a uniform phase has a spread of about
# 0.3 frames). Spreads below this many frames count as locked.
VSYNC_MAX_SPREAD = 0.1
VSYNC_REAL, VSYNC_EMULATED, VSYNC_OFF, VSYNC_UNCHECKED = "real", "emulated", "off", "unchecked"


@dataclass(frozen=True)
class RefreshCheck:
    """What a run of back-to-back flips showed about the display."""

    flips: int
    nominal_interval_s: float
    interval_s: float  # measured refresh interval (frame-count-corrected mean of the gaps)
    median_gap_s: float
    jitter_ms: float  # standard deviation of the gaps from whole frames, in ms
    blocking: bool  # True when a flip waits for the vertical blank
    late: int  # gaps over 1.5 intervals (a missed frame)
    vsync: str = VSYNC_UNCHECKED  # real, emulated (flips block but are not locked), off, unchecked
    phase_spread: float | None = None  # the vsync check's flip-return phase spread, in frames

    @property
    def measured_hz(self) -> float:
        return 1.0 / self.interval_s if self.interval_s > 0 else math.inf

    @property
    def deviation(self) -> float:
        """Relative difference of the measured from the nominal interval (0.01 is 1 %)."""
        return (self.interval_s - self.nominal_interval_s) / self.nominal_interval_s

    def problems(self, tolerance: float = RATE_TOLERANCE) -> list[str]:
        """Plain sentences for each way the display fails the protocol's timing (empty: fine)."""
        out = []
        if self.vsync == VSYNC_EMULATED:
            spread = f" (flip-return phase spread {self.phase_spread:.2f} frames)" * (
                self.phase_spread is not None
            )
            out.append(
                "vsync missing: flips wait, but not for the screen's refresh (the video driver"
                f" imitates vsync by sleeping{spread}), so onsets would not be tied to refreshes"
            )
        elif not self.blocking:
            out.append(
                "vsync missing: flips do not wait for the screen's refresh (vsync is off or not"
                " available), so onsets would not be tied to refreshes"
            )
        elif abs(self.deviation) > tolerance:
            out.append(
                f"the display refreshes at {self.measured_hz:.2f} Hz but the protocol expects"
                f" {1.0 / self.nominal_interval_s:.2f} Hz (off by {100 * abs(self.deviation):.1f} %,"
                f" more than {100 * tolerance:g} %)"
            )
        return out

    @property
    def vsync_missing(self) -> bool:
        """True when flips are not locked to the screen's refresh (off or only imitated)."""
        return self.vsync == VSYNC_EMULATED or not self.blocking

    def with_vsync(self, vsync: str, phase_spread: float | None) -> RefreshCheck:
        """This measurement with the vsync check's verdict added."""
        return replace(self, vsync=vsync, phase_spread=phase_spread)

    def as_dict(self) -> dict[str, object]:
        d = asdict(self)
        d["measured_hz"] = round(self.measured_hz, 4)
        d["deviation"] = round(self.deviation, 6)
        return d


def summarise_flips(stamps: list[float], nominal_interval: float) -> RefreshCheck:
    """Summarise the times right after a run of back-to-back flips.

    Parameters
    ----------
    stamps
        Clock readings taken right after each flip returned (at least 3).
    nominal_interval
        The refresh interval the protocol expects, in seconds.

    Returns
    -------
    RefreshCheck
        When the flips block, the interval is the mean of the gaps after dividing each by its
        whole number of frames (so an occasional missed frame does not bias it); otherwise it
        is the median gap.
    """
    if len(stamps) < 3:
        raise ValueError("need at least 3 flip times to measure a refresh interval")
    gaps = [b - a for a, b in zip(stamps, stamps[1:], strict=False)]
    median = statistics.median(gaps)
    blocking = median > BLOCKING_MIN_GAP_S
    if blocking:
        per_frame = [g / max(1, round(g / median)) for g in gaps]
        interval = statistics.fmean(per_frame)
        jitter = statistics.pstdev(per_frame) * MS
        late = sum(g > LATE_INTERVALS * interval for g in gaps)
    else:
        interval = median
        jitter = statistics.pstdev(gaps) * MS
        late = 0
    return RefreshCheck(
        flips=len(stamps),
        nominal_interval_s=nominal_interval,
        interval_s=interval,
        median_gap_s=median,
        jitter_ms=jitter,
        blocking=blocking,
        late=late,
        vsync=VSYNC_UNCHECKED if blocking else VSYNC_OFF,
    )


def measure_refresh(
    flip: Callable[[], None],
    clock: Callable[[], float],
    nominal_interval: float,
    flips: int = MIN_MEASURE_FLIPS,
) -> RefreshCheck:
    """Flip ``flips + 1`` times back to back and summarise the stamps (see summarise_flips)."""
    flip()  # the first flip may wait for the first refresh after the window opened
    stamps = []
    for _ in range(flips):
        flip()
        stamps.append(clock())
    return summarise_flips(stamps, nominal_interval)


def phase_spread(stamps: list[float], interval: float) -> float:
    """The circular spread of ``stamps`` within a cycle of ``interval``, in cycles.

    Each stamp is a point on the unit circle at its phase; ``R`` is the length of their mean.
    The spread is the circular standard deviation ``sqrt(-2 ln R)`` (in radians, then divided
    by 2 pi): near 0 when the stamps share one phase, about 0.3 or more for uniform phases.
    """
    if len(stamps) < 3 or interval <= 0:
        raise ValueError("need at least 3 flip times and a positive interval")
    t0 = stamps[0]
    mean = sum(cmath.exp(2j * math.pi * ((t - t0) / interval)) for t in stamps) / len(stamps)
    r = min(1.0, abs(mean))
    if r <= 0.0:
        return math.inf
    return math.sqrt(-2.0 * math.log(r)) / (2.0 * math.pi)


def check_vsync(
    flip: Callable[[], None],
    clock: Callable[[], float],
    interval: float,
    *,
    wait: Callable[[float], None],
    flips: int = VSYNC_FLIPS,
    seed: int = 0,
) -> tuple[str, float]:
    """Whether blocking flips are locked to the refresh: ``("real" | "emulated", spread)``.

    Before each of ``flips`` flips, ``wait`` is given a random time of 0 to 1.5 ``interval``
    (it busy-waits that long). A flip locked to the refresh still returns at the next vertical
    blank, so the return times keep one phase modulo the interval; a driver that only sleeps
    until an interval after its previous flip returns at once after a long wait, so the phases
    spread over the whole cycle. The spread is :func:`phase_spread` in frames.
    """
    rng = random.Random(seed)
    flip()
    stamps = []
    for _ in range(flips):
        wait(rng.uniform(0.0, VSYNC_MAX_WAIT * interval))
        flip()
        stamps.append(clock())
    spread = phase_spread(stamps, interval)
    return (VSYNC_REAL if spread < VSYNC_MAX_SPREAD else VSYNC_EMULATED), spread


def is_late(t: float, target: float, interval: float) -> bool:
    """True when a flip at ``t`` missed the frame it was meant for.

    ``target`` is the requested onset; the frame before it began one interval earlier, so a
    flip later than 1.5 intervals after that (half an interval after the target) missed it.
    """
    return t - (target - interval) > LATE_INTERVALS * interval


class FramePacer:
    """A steady frame grid for displays whose flips do not block.

    The first flip starts the grid; every later flip goes to the grid slot nearest the requested
    time, but never to a slot already in the past.
    """

    def __init__(self, interval: float):
        self.interval = interval
        self.origin: float | None = None

    def slot(self, now: float, at: float | None) -> float:
        """The clock time to flip at, given the current time and the requested onset."""
        if self.origin is None:
            self.origin = now
        k = round(((now if at is None else at) - self.origin) / self.interval)
        if self.origin + k * self.interval < now:
            k = math.ceil((now - self.origin) / self.interval)
        return self.origin + k * self.interval
