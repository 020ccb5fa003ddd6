"""Session length: how long a schedule takes, shortest, typical and longest, and the longest
stretch of trials without a pause (used by `trialdeck check` and the run sheet)."""

from __future__ import annotations

import statistics
from dataclasses import dataclass

from runner.protocol.model import Protocol
from runner.protocol.schedule import Item, Schedule, ScheduledTrial
from runner.session.views import RATING_SHOW_CHOICE_S

SECONDS_PER_MINUTE = 60.0


@dataclass(frozen=True)
class LengthEstimate:
    """Estimated session length in seconds; ``longest`` is None when a time limit is missing.

    ``longest_unbounded_by`` names the settings whose ``none`` leaves the longest unbounded.
    ``max_stretch_s`` is the longest typical stretch of trials between two pauses (page, rest or
    break), ``max_stretch_step`` the sequence step where it ends.
    """

    shortest: float
    typical: float
    longest: float | None
    longest_unbounded_by: tuple[str, ...]
    typical_trial_s: float
    max_stretch_s: float
    max_stretch_step: int


# -- pure parts: length and screen sequence --------------------------------------------------
def _trial_seconds(model: Protocol, trial: ScheduledTrial) -> tuple[float, float, float | None]:
    """Shortest, typical and longest seconds of one trial (longest None without a limit)."""
    t, c = model.timing, model.checks
    after = model.answer.mode == "after"
    low, high = t.fixation_ms[0] / 1000, t.fixation_ms[1] / 1000
    tail = RATING_SHOW_CHOICE_S + t.gap_ms / 1000 + (t.feedback_ms / 1000 if trial.feedback else 0)
    quick = c.min_response_ms / 1000
    view = c.typical_viewing_s
    if t.stimulus_limit_s is not None:
        view = min(view, t.stimulus_limit_s)
    if after:
        answer = c.typical_response_s
        if t.answer_limit_s is not None:
            answer = min(answer, t.answer_limit_s)
        shortest = low + 3 * quick + tail
        typical = (low + high) / 2 + view + answer
        limits = [t.stimulus_limit_s, t.answer_limit_s, t.rating_limit_s]
    else:
        view = c.typical_viewing_s + c.typical_response_s
        if t.stimulus_limit_s is not None:
            view = min(view, t.stimulus_limit_s)
        shortest = low + 2 * quick + tail
        typical = (low + high) / 2 + view
        limits = [t.stimulus_limit_s, t.rating_limit_s]
    rating = c.typical_response_s
    if t.rating_limit_s is not None:
        rating = min(rating, t.rating_limit_s)
    typical += rating + tail
    longest = None if any(v is None for v in limits) else high + sum(limits) + tail  # type: ignore[arg-type]  # any() ruled out None
    return shortest, typical, longest


def _unbounded_by(model: Protocol) -> tuple[str, ...]:
    t = model.timing
    names = ["stimulus_limit_s", "rating_limit_s"]
    if model.answer.mode == "after":
        names.insert(1, "answer_limit_s")
    return tuple(f"timing.{n}" for n in names if getattr(t, n) is None)


def estimate_length(schedule: Schedule, model: Protocol) -> LengthEstimate:
    """Estimate how long a session takes and the longest stretch of trials without a pause.

    Parameters
    ----------
    schedule
        The participant's schedule.
    model
        The protocol.

    Returns
    -------
    LengthEstimate
        *Shortest*: every screen that waits for a key ends after ``checks.min_response_ms``,
        fixations are at their low end, breaks at their minimum. *Typical*: viewing takes
        ``checks.typical_viewing_s``, typing and rating ``checks.typical_response_s`` each,
        pages ``checks.typical_page_s``, fixations their mean, breaks their minimum plus one
        response. *Longest*: every trial screen runs to its time limit (pages and breaks as in
        the typical estimate, since they wait for the participant); None when a limit is none.
        A stretch ends at a page, rest or break; with ``breaks.every_minutes`` the engine
        inserts a break once that long has passed, so no stretch exceeds it by more than a trial.
    """
    c = model.checks
    quick = c.min_response_ms / 1000
    shortest = typical = longest = 0.0
    stretch = max_stretch = 0.0
    stretch_step = max_step = 0
    trial_typical: list[float] = []
    every = (
        model.breaks.every_minutes * SECONDS_PER_MINUTE
        if model.breaks is not None and model.breaks.every_minutes
        else None
    )
    for item in schedule.items:
        if item.kind == "block":
            for trial in item.trials:
                s, ty, lo = _trial_seconds(model, trial)
                shortest += s
                typical += ty
                longest += lo if lo is not None else 0.0
                trial_typical.append(ty)
                if every is not None and stretch >= every:
                    typical += item_break_typical(model)
                    shortest += model.breaks.min_s if model.breaks else 0.0
                    stretch = 0.0
                stretch += ty
                stretch_step = item.step
                if stretch > max_stretch:
                    max_stretch, max_step = stretch, stretch_step
            continue
        s, ty = _pause_seconds(item, model, quick)
        shortest += s
        typical += ty
        longest += ty
        stretch = 0.0
    unbounded = _unbounded_by(model)
    return LengthEstimate(
        shortest=shortest,
        typical=typical,
        longest=None if unbounded else longest,
        longest_unbounded_by=unbounded,
        typical_trial_s=statistics.fmean(trial_typical) if trial_typical else 0.0,
        max_stretch_s=max_stretch,
        max_stretch_step=max_step,
    )


def item_break_typical(model: Protocol) -> float:
    breaks = model.breaks
    return 0.0 if breaks is None else breaks.min_s + model.checks.typical_response_s


def _pause_seconds(item: Item, model: Protocol, quick: float) -> tuple[float, float]:
    if item.kind == "page":
        return quick, model.checks.typical_page_s
    if item.kind == "rest":
        return item.seconds, item.seconds
    return item.seconds + quick, item.seconds + model.checks.typical_response_s
