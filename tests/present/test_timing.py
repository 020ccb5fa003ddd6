"""Refresh measurement, late flips and frame conversion, against a simulated frame clock."""

from __future__ import annotations

import random

import pytest

from runner.present.timing import (
    LATE_INTERVALS,
    MIN_MEASURE_FLIPS,
    FramePacer,
    check_vsync,
    is_late,
    measure_refresh,
    phase_spread,
    summarise_flips,
)
from runner.session.engine import frames_for


class SimulatedDisplay:
    """A display with a vertical blank every ``period`` s; a blocking flip returns at the next one.

    ``jitter`` adds Gaussian noise to when the flip call returns (the scheduler's delay),
    ``miss`` is the chance that a flip misses its refresh and lands one frame later, and a
    non-blocking display returns after ``work`` seconds, as the SDL dummy driver does.
    """

    def __init__(self, period, *, blocking=True, jitter=0.0, miss=0.0, work=0.0002, seed=1):
        self.period = period
        self.blocking = blocking
        self.jitter = jitter
        self.miss = miss
        self.work = work
        self.now = 12.345  # an arbitrary clock origin
        self.phase = 0.0031
        self.rng = random.Random(seed)

    def clock(self):
        return self.now

    def flip(self):
        if not self.blocking:
            self.now += self.work
            return
        k = int((self.now - self.phase) // self.period) + 1
        if self.rng.random() < self.miss:
            k += 1
        vblank = self.phase + k * self.period
        self.now = vblank + abs(self.rng.gauss(0.0, self.jitter))

    def sleep_until(self, t):
        self.now = max(self.now, t)


@pytest.mark.parametrize("hz", [59.94, 60.0, 75.0, 120.0, 144.0, 240.0])
def test_measured_interval_matches_the_simulated_refresh(hz):
    """Over 120 flips with 0.1 ms jitter the measured rate is within 0.05 % of the true one.

    Source: common practice (no published source): the expected value is the simulated clock's
    own period, the way a lab checks a display against its nominal rate.
    """
    sim = SimulatedDisplay(1.0 / hz, jitter=0.0001)
    check = measure_refresh(sim.flip, sim.clock, 1.0 / hz)
    assert check.flips == MIN_MEASURE_FLIPS
    assert check.blocking
    assert abs(check.measured_hz - hz) / hz < 0.0005
    assert check.problems() == []


def test_missed_frames_do_not_bias_the_interval_and_are_counted():
    """With 5 % missed refreshes the interval stays within 0.05 % and each miss is a late gap.

    Source: common practice (no published source).
    """
    sim = SimulatedDisplay(1 / 60, jitter=0.0001, miss=0.05, seed=7)
    stamps = []
    for _ in range(600):
        sim.flip()
        stamps.append(sim.clock())
    gaps = [b - a for a, b in zip(stamps, stamps[1:], strict=False)]
    true_late = sum(g > LATE_INTERVALS / 60 for g in gaps)
    check = summarise_flips(stamps, 1 / 60)
    assert true_late > 10
    assert check.late == true_late
    assert abs(check.interval_s - 1 / 60) / (1 / 60) < 0.0005


@pytest.mark.parametrize(
    "actual_hz, nominal_hz, refused",
    [
        (60.0, 60.0, False),
        (59.94, 60.0, False),  # 0.1 % off: NTSC-style rates are fine
        (61.0, 60.0, False),  # 1.6 % off
        (61.5, 60.0, True),  # 2.5 % off
        (75.0, 60.0, True),
        (120.0, 60.0, True),  # a 120 Hz panel where the protocol expects 60 Hz
        (50.0, 60.0, True),
    ],
)
def test_rate_mismatch_over_two_percent_is_a_problem(actual_hz, nominal_hz, refused):
    """A measured rate more than 2 % from the protocol's is reported as a problem, others not."""
    sim = SimulatedDisplay(1.0 / actual_hz, jitter=0.00005)
    check = measure_refresh(sim.flip, sim.clock, 1.0 / nominal_hz)
    problems = check.problems()
    assert bool(problems) is refused
    if refused:
        assert f"protocol expects {nominal_hz:.2f} Hz" in problems[0]
        assert "more than 2 %" in problems[0]
        assert check.measured_hz == pytest.approx(actual_hz, rel=0.0005)


def test_non_blocking_flips_are_detected():
    """Flips that return at once (no vsync, like the SDL dummy driver) are reported as not blocking."""
    sim = SimulatedDisplay(1 / 60, blocking=False)
    check = measure_refresh(sim.flip, sim.clock, 1 / 60)
    assert not check.blocking
    assert check.late == 0
    assert "do not wait for the screen's refresh" in check.problems()[0]


def test_too_few_flips_refused():
    """Fewer than three stamps cannot give an interval and raise ValueError."""
    with pytest.raises(ValueError):
        summarise_flips([0.0, 0.016], 1 / 60)


@pytest.mark.parametrize(
    "ms, hz, speed, frames",
    [
        (1000.0, 60.0, 1.0, 60),
        (700.0, 60.0, 1.0, 42),
        (16.0, 60.0, 1.0, 1),  # just under a frame: one frame
        (5.0, 60.0, 1.0, 1),  # any positive duration gets at least one frame
        (25.0, 60.0, 1.0, 2),  # 1.5 frames rounds to 2
        (0.0, 60.0, 1.0, 0),
        (800.0, 144.0, 1.0, 115),  # 115.2 frames
        (800.0, 60.0, 20.0, 2),  # pilots divide by speed first: 40 ms -> 2.4 frames
        (500.0, 59.94, 1.0, 30),  # 29.97
    ],
)
def test_requested_durations_become_whole_frames(ms, hz, speed, frames):
    """Durations are rounded to the nearest whole number of refresh frames.

    Source: common practice (no published source): an onset can only happen at a refresh (16.7 ms steps at
    60 Hz, 4.2 ms at 240 Hz); the expected counts are ms / 1000 * hz, rounded.
    """
    assert frames_for(ms, 1.0 / hz, speed) == frames


def test_paced_frame_clock_lands_on_a_steady_grid():
    """The frame pacer puts flips on one grid: requested onsets land on the nearest slot,
    never in the past, and a duration of n frames is exactly n intervals."""
    interval = 1 / 60
    pacer = FramePacer(interval)
    sim = SimulatedDisplay(interval, blocking=False)
    t0 = pacer.slot(sim.clock(), None)
    sim.sleep_until(t0)
    stamps = [t0]
    rng = random.Random(3)
    for _ in range(200):
        frames = rng.randint(1, 40)
        sim.now += rng.uniform(0, 0.004)  # drawing and journaling take a few ms
        slot = pacer.slot(sim.clock(), stamps[-1] + frames * interval)
        assert slot >= sim.clock()
        sim.sleep_until(slot)
        assert (slot - stamps[-1]) == pytest.approx(frames * interval, abs=1e-9)
        stamps.append(slot)
    offsets = [(s - t0) / interval for s in stamps]
    assert all(abs(o - round(o)) < 1e-6 for o in offsets)


def test_pacer_never_goes_back_in_time():
    """A request for a time already past goes to the next slot, not to a slot in the past."""
    pacer = FramePacer(0.01)
    pacer.slot(100.0, None)
    assert pacer.slot(100.0537, 100.02) == pytest.approx(100.06)


@pytest.mark.parametrize(
    "offset_frames, late",
    [(0.0, False), (0.3, False), (0.49, False), (0.51, True), (1.0, True), (2.0, True)],
)
def test_late_flip_rule(offset_frames, late):
    """A flip is late when it lands over 1.5 intervals after the frame before its target."""
    interval = 1 / 60
    target = 50.0
    assert is_late(target + offset_frames * interval, target, interval) is late


class EmulatedVsyncDisplay:
    """A driver that imitates vsync by sleeping: a flip returns one period after the last one.

    This is how SDL's renderer behaves without a real vsync (measured under Xvfb: flips block
    about one whole-millisecond interval after the previous flip, whenever they are issued).
    """

    def __init__(self, period, *, work=0.0003):
        self.period = period
        self.work = work
        self.now = 40.0
        self.last = self.now

    def clock(self):
        return self.now

    def flip(self):
        self.now = max(self.now + self.work, self.last + self.period)
        self.last = self.now

    def wait(self, seconds):
        self.now += seconds


@pytest.mark.parametrize("hz", [60.0, 120.0, 144.0])
def test_vsync_check_finds_flips_locked_to_the_refresh(hz):
    """Flips that land on a vertical blank grid (0.1 ms jitter) keep one phase: real vsync.

    Source: circular standard deviation sqrt(-2 ln R) (Mardia & Jupp, Directional Statistics,
    2000, sec. 2.3.4); locked flips return at the same phase of each refresh by construction.
    """
    sim = SimulatedDisplay(1 / hz, jitter=0.0001, seed=3)

    def wait(seconds):
        sim.now += seconds

    verdict, spread = check_vsync(sim.flip, sim.clock, 1 / hz, wait=wait)
    assert verdict == "real"
    assert spread < 0.05


@pytest.mark.parametrize("period", [0.016, 0.0159, 1 / 60])
def test_vsync_check_finds_a_driver_that_only_sleeps(period):
    """Flips that sleep one period after the previous flip return at any phase: emulated vsync.

    Source: circular standard deviation (Mardia & Jupp 2000, sec. 2.3.4); a uniform phase has
    R near 0 and a spread near or above 0.3 cycles (lead's measurement under Xvfb: 0.27-0.31).
    """
    sim = EmulatedVsyncDisplay(period)
    check = measure_refresh(sim.flip, sim.clock, 1 / 60)
    assert check.blocking  # the old guard was fooled: these flips do block
    verdict, spread = check_vsync(sim.flip, sim.clock, check.interval_s, wait=sim.wait)
    assert verdict == "emulated"
    assert spread > 0.2
    problems = check.with_vsync(verdict, spread).problems()
    assert problems and problems[0].startswith("vsync missing")
    assert "Hz" not in problems[0]  # not reported as a refresh rate that differs


def test_phase_spread_matches_scipy_circular_std():
    """The phase spread equals scipy's circular standard deviation over one cycle.

    Source: scipy.stats.circstd (an independent implementation of sqrt(-2 ln R)).
    """
    from scipy.stats import circstd

    rng = random.Random(7)
    period = 0.0125
    stamps = [3.0 + k * period + rng.gauss(0.0, 0.002) for k in range(50)]
    ours = phase_spread(stamps, period)
    ref = circstd([(t - stamps[0]) % period for t in stamps], high=period, low=0.0) / period
    assert ours == pytest.approx(ref, rel=1e-9)


def test_non_blocking_flips_are_reported_as_vsync_missing():
    """Flips that return at once are reported as 'vsync missing', with the 'off' verdict."""
    sim = SimulatedDisplay(1 / 60, blocking=False)
    check = measure_refresh(sim.flip, sim.clock, 1 / 60)
    assert check.vsync == "off" and check.vsync_missing
    assert check.problems()[0].startswith("vsync missing")
