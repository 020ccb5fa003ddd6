"""The audit's timing check: late flips, fixation and rest durations, marker push delays."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from runner.contract.events import MARKED_EVENTS
from runner.contract.line import as_int, num
from runner.qa.audit_facts import EventIndex, Findings, plural, ranges, stats

__all__ = ["LateFlip", "Pause", "check_timing"]

MS = 1000.0
# A flip that lands more than half a refresh interval after its requested time missed its frame;
# the presenter counts late flips the same way (runner.present.screen.LATE_FRACTION).
LATE_FRACTION = 0.5
# A realised duration more than half a frame away from its whole-frame request is off by a frame.
DURATION_TOLERANCE_FRAMES = 0.5


@dataclass(frozen=True)
class LateFlip:
    """A flip that missed its frame: its line, how late (ms), the screen kind, the trial."""

    line: int
    late_ms: float
    kind: str
    trial: int | None


@dataclass
class Pause:
    """A rest or a break: its start line, requested seconds, frames (rests), actual seconds."""

    line: int
    requested_s: float | None
    frames: int | None
    is_break: bool
    actual_s: float | None = None
    ended: bool = False


def check_timing(
    header: dict[str, Any],
    ix: EventIndex,
    out: Findings,
    facts: dict[str, Any],
) -> None:
    screen = header["screen"] if isinstance(header.get("screen"), dict) else {}
    interval = num(screen.get("interval_s"))
    if interval is None or interval <= 0:
        hz = num(screen.get("refresh_hz"))
        interval = 1.0 / hz if hz else None
    speed = num(header.get("speed")) or 1.0
    timing: dict[str, Any] = {
        "interval_ms": None if interval is None else interval * MS,
        "speed": speed,
    }
    facts["timing"] = timing
    if interval is None:
        out.warning(
            "the journal header gives no refresh interval, so flip timing cannot be checked.",
            1,
            code="no-refresh-interval",
        )
        return
    frame_ms = interval * MS

    late: list[LateFlip] = []
    timed = flips = 0
    lateness: list[float] = []
    fix_flip: dict[int, float] = {}
    for n, rec in ix.of("flip"):
        flips += 1
        at = rec.get("at")
        if at is None:
            continue
        t, at = num(rec.get("t")), num(at)
        if t is not None and at is not None:
            timed += 1
            d = t - at
            lateness.append(d * MS)
            if d > LATE_FRACTION * interval:
                late.append(LateFlip(n, d * MS, str(rec.get("kind")), as_int(rec.get("trial"))))
    timing.update(flips=flips, timed_flips=timed, late_flips=len(late))
    timing["flip_lateness_ms"] = stats(lateness)
    if late:
        worst = max(late, key=lambda x: x.late_ms)
        onsets = sorted({x.trial for x in late if x.kind == "stimulus" and x.trial is not None})
        late_onsets = f"; stimulus onsets of trials {ranges(onsets)} were late" if onsets else ""
        out.warning(
            f"{plural(len(late), 'flip')} of {timed} timed flips missed their frame (more than "
            f"{LATE_FRACTION:g} of a {frame_ms:.2f} ms refresh late; worst {worst.late_ms:.1f} ms "
            f"at line {worst.line}, a {worst.kind} screen){late_onsets}. Close other programs on "
            "the presenter computer, and for pilots run without --frames when timing matters.",
            worst.line,
            code="late-flips",
        )

    # Fixation: the requested duration (divided by the pilot speed) became whole frames; the
    # stimulus onset then tells how long the cross was actually shown.
    fixes: dict[int, tuple[int, float | None, int | None]] = {}
    actual: dict[int, tuple[int, float]] = {}
    for n, rec in ix.of("fixation_onset", "stimulus_onset"):
        ev = rec.get("event")
        tr = as_int(rec.get("trial"))
        if tr is None:
            continue
        if ev == "fixation_onset":
            fixes[tr] = (n, num(rec.get("requested_ms")), as_int(rec.get("frames")))
            t = num(rec.get("t"))
            if t is not None:
                fix_flip[tr] = t
        elif ev == "stimulus_onset":
            a = num(rec.get("fixation_actual_ms"))
            if a is not None:
                actual[tr] = (n, a)
    req, act, err_frames, off = [], [], [], []
    for tr, (_, requested, frames) in fixes.items():
        if tr not in actual:
            continue
        n, a = actual[tr]
        act.append(a)
        if requested is not None:
            req.append(requested / speed)
        if frames is not None:
            e = a - frames * frame_ms
            err_frames.append(e)
            if abs(e) > DURATION_TOLERANCE_FRAMES * frame_ms:
                off.append((tr, n, e))
    timing["fixation"] = {
        "requested_ms": stats(req),  # already divided by the pilot speed
        "actual_ms": stats(act),
        "error_vs_frames_ms": stats(err_frames),
        "off_by_a_frame": len(off),
    }
    if off:
        off.sort(key=lambda x: -abs(x[2]))
        out.warning(
            f"{plural(len(off), 'fixation')} lasted a frame or more longer or shorter than "
            f"requested (worst trial {off[0][0]}: {off[0][2]:+.1f} ms); trials "
            f"{ranges([x[0] for x in off])}. Analyses of pre-stimulus baselines should use "
            "the actual durations (trials.csv fixation_ms).",
            off[0][1],
            code="fixation-off",
        )

    # Rests and breaks: a rest lasts its whole-frame request; a break lasts at least its minimum.
    pauses: list[Pause] = []
    for n, rec in ix.of("rest_start", "rest_end", "break_start", "break_end"):
        ev = rec.get("event")
        last = pauses[-1] if pauses else None
        if ev == "rest_start":
            pauses.append(Pause(n, num(rec.get("requested_s")), as_int(rec.get("frames")), False))
        elif (
            ev == "rest_end"
            and last is not None
            and last.actual_s is None
            and (not last.is_break or last.ended)
        ):
            last.actual_s = num(rec.get("actual_s"))
        elif ev == "break_start":
            pauses.append(Pause(n, num(rec.get("requested_s")), None, True))
        elif ev == "break_end" and last is not None and last.is_break and not last.ended:
            requested, actual_s = last.requested_s, num(rec.get("actual_s"))
            if (
                requested is not None
                and actual_s is not None
                and actual_s < requested / speed - interval
            ):
                out.warning(
                    f"the break at line {last.line} lasted {actual_s:.2f} s, less "
                    f"than its minimum of {requested / speed:.2f} s.",
                    last.line,
                    code="short-break",
                )
            last.actual_s, last.ended = actual_s, True
    rest_info = []
    for p in pauses:
        if p.is_break or p.frames is None or p.actual_s is None:
            continue
        n, frames, actual_s = p.line, p.frames, p.actual_s
        want_s = frames * interval
        rest_info.append(
            {"line": n, "requested_s": p.requested_s, "frames": frames, "actual_s": actual_s}
        )
        if abs(actual_s - want_s) > DURATION_TOLERANCE_FRAMES * interval:
            out.warning(
                f"the rest at line {n} lasted {actual_s:.3f} s instead of "
                f"{want_s:.3f} s ({frames} frames).",
                n,
                code="rest-off",
            )
    timing["rests"] = rest_info

    pushes = [
        v
        for name in MARKED_EVENTS
        for _, r in ix.of(name)
        if (v := num(r.get("push_us"))) is not None
    ]
    timing["marker_push_us"] = stats(pushes)
