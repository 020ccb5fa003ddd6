"""``trialdeck selftest``: measure this presenter machine before a study runs on it.

It opens the participant's display (as a protocol describes it, or at 1920x1080 / 60 Hz without
one) and reports, with a plain verdict at the end:

* the refresh interval and its jitter over 120 flips, and whether flips block (vsync);
* late flips during ``--seconds`` (default 10) of flips each asked for the next refresh;
* the input polling rate while waiting for a key;
* the delay from a flip to the marker push that follows it;
* the delivery latency of markers to an LSL inlet on this machine (loopback);
* the decode time of the protocol's stimuli.

Nothing here writes a session or prints: :mod:`runner.cli.selftest` prints the report.
pygame and pylsl are imported only when the test runs.
"""

from __future__ import annotations

import os
import statistics
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

DEFAULT_SECONDS = 10.0
DEFAULT_RESOLUTION = (1920, 1080)
DEFAULT_REFRESH_HZ = 60.0
POLL_TEST_S = 1.0
MARKER_SAMPLES = 200
MAX_DECODE_FILES = 50
# Verdict thresholds (ours; see docs/timing.md for why each is where it is).
MIN_POLL_HZ = 1000.0  # USB full-speed HID reports at most every 1 ms
MAX_FLIP_TO_MARKER_MS = 1.0
MAX_LOOPBACK_P99_MS = 5.0
MAX_DECODE_MS = 400.0  # stimuli are decoded two trials ahead; this leaves ample margin


def _ms(values: list[float]) -> dict[str, float]:
    if not values:
        return {}
    s = sorted(values)
    return {
        "median_ms": round(statistics.median(s) * 1000, 4),
        "p99_ms": round(s[min(len(s) - 1, int(0.99 * len(s)))] * 1000, 4),
        "max_ms": round(s[-1] * 1000, 4),
    }


@dataclass
class SelftestReport:
    """Figures measured by :func:`run_selftest` and the verdict drawn from them."""

    video_driver: str
    resolution: tuple[int, int]
    nominal_hz: float
    refresh: dict[str, Any]
    late_flips: int
    flips_in_run: int
    run_seconds: float
    poll_hz: float
    flip_to_marker: dict[str, float]
    loopback: dict[str, float]
    decode: dict[str, Any]
    problems: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @property
    def ready(self) -> bool:
        return not self.problems

    def as_dict(self) -> dict[str, Any]:
        d = asdict(self)
        d["ready"] = self.ready
        return d

    def lines(self) -> list[str]:
        r = self.refresh
        out = [
            f"Display: {self.resolution[0]}x{self.resolution[1]}, driver"
            f" '{self.video_driver or 'default'}', protocol refresh {self.nominal_hz:g} Hz",
            (
                f"Refresh: {r['measured_hz']:.3f} Hz measured over {r['flips']} flips"
                f" (interval {r['interval_s'] * 1000:.3f} ms, jitter {r['jitter_ms']:.3f} ms);"
                " flips block (vsync)"
                if r["blocking"]
                else f"Refresh: flips do NOT block (each returned after about"
                f" {r['median_gap_s'] * 1000:.3f} ms), so there is no refresh to measure"
            ),
            f"Late flips: {self.late_flips} of {self.flips_in_run} in {self.run_seconds:g} s",
            f"Input polling: {self.poll_hz:.0f} polls per second while waiting",
            "Flip to marker push: " + _fmt(self.flip_to_marker),
            "Marker delivery (loopback inlet): " + _fmt(self.loopback),
        ]
        d = self.decode
        if d.get("files"):
            out.append(
                f"Stimulus decode: {d['files']} files, median {d['median_ms']:.1f} ms,"
                f" max {d['max_ms']:.1f} ms"
            )
        else:
            out.append("Stimulus decode: no protocol given, not measured")
        out += [f"note: {n}" for n in self.notes]
        if self.ready:
            out.append("Verdict: READY - this machine meets trialdeck's timing targets.")
        else:
            out.append("Verdict: NOT READY")
            out += [f"  - {p}" for p in self.problems]
        return out


def _fmt(stats: dict[str, float]) -> str:
    if not stats:
        return "not measured"
    return (
        f"median {stats['median_ms']:.3f} ms, p99 {stats['p99_ms']:.3f} ms,"
        f" max {stats['max_ms']:.3f} ms"
    )


def _verdict(rep: SelftestReport, check: Any, headless: bool) -> None:
    if headless:
        rep.notes.append(
            "the SDL dummy driver is in use: there is no real display, flips never block and"
            " frames are paced by trialdeck's frame clock; a live run needs a real display."
        )
    rep.problems += check.problems()
    if rep.late_flips:
        rep.problems.append(
            f"{rep.late_flips} flips missed their refresh in {rep.run_seconds:g} s; close other"
            " programs, turn off display scaling and power saving, and test again"
        )
    if rep.poll_hz < MIN_POLL_HZ:
        rep.problems.append(
            f"input is polled only {rep.poll_hz:.0f} times per second (target {MIN_POLL_HZ:g}),"
            " so response times are coarser than 1 ms"
        )
    f2m = rep.flip_to_marker.get("p99_ms")
    if f2m is not None and f2m > MAX_FLIP_TO_MARKER_MS:
        rep.problems.append(
            f"marker pushes follow flips by up to {f2m:.2f} ms (p99; target under"
            f" {MAX_FLIP_TO_MARKER_MS:g} ms)"
        )
    lb = rep.loopback.get("p99_ms")
    if lb is not None and lb > MAX_LOOPBACK_P99_MS:
        rep.problems.append(
            f"markers reach a local inlet in up to {lb:.2f} ms (p99; target under"
            f" {MAX_LOOPBACK_P99_MS:g} ms)"
        )
    if rep.decode.get("max_ms", 0.0) > MAX_DECODE_MS:
        rep.problems.append(
            f"the slowest stimulus takes {rep.decode['max_ms']:.0f} ms to decode (target under"
            f" {MAX_DECODE_MS:g} ms); use smaller image files"
        )


def run_selftest(
    protocol: Path | None = None, *, seconds: float = DEFAULT_SECONDS, fullscreen: bool = True
) -> SelftestReport:
    """Measure the display, input and marker timing of this machine (see the module docstring)."""
    from runner.present.display import Display, display_for, headless
    from runner.present.images import ImageCache
    from runner.present.painter import Style
    from runner.session.markers import (
        MarkerOutlet,
        local_clock,
        loopback_latency,
        make_source_id,
        station_name,
    )
    from runner.session.views import BlankView, FixationView, View

    loaded = None
    if protocol is not None:
        from runner.protocol.load import load_protocol

        loaded = load_protocol(protocol)
        display = display_for(loaded, fullscreen=fullscreen)
        nominal = loaded.model.screen.refresh_hz
    else:
        nominal = DEFAULT_REFRESH_HZ
        display = Display(
            resolution=DEFAULT_RESOLUTION,
            refresh_hz=nominal,
            style=Style.from_colours("#8c8c8c", "#141414", "#1f4e79", 34),
            stimulus_box=(1000, 1000),
            fullscreen=fullscreen,
        )
    outlet = None
    try:
        check = display.refresh
        # Flips each asked for the next refresh, alternating two screens, for `seconds`.
        views: list[View] = [BlankView(), FixationView()]
        late0, n = display.late_flips, 0
        t = display.show(views[0])
        end = t + seconds
        while t < end:
            n += 1
            t = display.show(views[n % 2], at=t + display.interval)
        late = display.late_flips - late0
        # Input polling rate while waiting for a key that does not come.
        polls0, t0 = display.polls, time.perf_counter()
        display.wait_key(frozenset(), local_clock() + POLL_TEST_S)
        poll_hz = (display.polls - polls0) / (time.perf_counter() - t0)
        # Flip to marker push, then loopback delivery.
        station = station_name()
        outlet = MarkerOutlet(
            "trialdeck-selftest",
            make_source_id("selftest", f"{station}-{os.getpid()}"),
            metadata={"purpose": "self-test"},
        )
        delays = []
        for i in range(MARKER_SAMPLES // 2):
            t = display.show(views[i % 2], at=t + display.interval)
            delays.append(outlet.push('{"event":"selftest_flip"}', t) - t)
        loop = loopback_latency(outlet, MARKER_SAMPLES)
        decode: dict[str, Any] = {}
        if loaded is not None:
            cache = ImageCache(display.images.box, threaded=False)
            paths = sorted({str(loaded.table.stimulus_path(r)) for r in loaded.table.rows})
            times = []
            for path in paths[:MAX_DECODE_FILES]:
                t0 = time.perf_counter()
                cache._load(path)
                times.append(time.perf_counter() - t0)
            decode = {"files": len(times), **_ms(times)}
        import pygame

        rep = SelftestReport(
            video_driver=os.environ.get("SDL_VIDEODRIVER", "") or pygame.display.get_driver(),
            resolution=display.size,
            nominal_hz=nominal,
            refresh=check.as_dict(),
            late_flips=late,
            flips_in_run=n,
            run_seconds=seconds,
            poll_hz=poll_hz,
            flip_to_marker=_ms(delays),
            loopback=_ms(loop),
            decode=decode,
        )
        _verdict(rep, check, headless())
        return rep
    finally:
        if outlet is not None:
            outlet.close()
        display.close()
