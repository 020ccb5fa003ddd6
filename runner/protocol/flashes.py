"""Three-flash check for a sequence of screens (WCAG 2.2 success criterion 2.3.1).

Definitions used (WCAG 2.2, "general flash and red flash thresholds"):

* A *general flash* is a pair of opposing changes in relative luminance of 10% or more of the
  maximum relative luminance (1.0), where the relative luminance of the darker image is below
  0.80. A pair of opposing changes is an increase followed by a decrease, or the reverse.
* Content passes when there are no more than three general flashes in any one-second period,
  or when the flashing area is small (see :func:`flash_area_is_small`).

How changes are found. A screen sequence is a list of (mean relative luminance, duration).
Luminance is followed from screen to screen and a change is counted from one turning point to
the next, where a turning point is only accepted once the luminance has moved back from it by
the threshold (0.1) or more. So a slow fade over several screens counts as one change, and
small wiggles below the threshold neither count nor split a large change in two. A change
*qualifies* when it spans 0.1 or more and its darker end is below 0.80. Qualifying changes
always alternate in direction, and every two of them make one flash. The time of a change is
the onset of the screen at which it reaches its turning point. The number of flashes in a
window is the number of qualifying changes whose times fall in the half-open window
``[t, t + window_s)``, halved and rounded down; the report gives the largest such number over
all window positions.

Red flashes are **not** implemented: the WCAG red flash definition needs the saturated-red
content of each screen (the R/(R+G+B) ratio and the change in (R-G-B)*320), and the sequence
given here carries only luminance. Protocols that show saturated red flashing content must be
checked for red flashes another way.

Consequences of working on whole-screen mean luminance: a flash confined to part of the screen
is diluted in the mean, so pass both whole screens and, where a part flashes, that part's own
luminance sequence, together with :func:`flash_area_is_small` for its area.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

__all__ = [
    "DARK_LIMIT",
    "FLASH_CHANGE",
    "MAX_FLASHES_PER_WINDOW",
    "FlashReport",
    "Transition",
    "count_general_flashes_in_windows",
    "flash_area_is_small",
    "small_flash_area_limit_px",
]

# WCAG 2.2 definition of general flash threshold.
MAX_RELATIVE_LUMINANCE = 1.0
FLASH_CHANGE = 0.10 * MAX_RELATIVE_LUMINANCE
DARK_LIMIT = 0.80
# WCAG 2.2 success criterion 2.3.1: no more than three flashes in any one-second period.
MAX_FLASHES_PER_WINDOW = 3
WINDOW_S = 1.0
# Changes computed from luminance values carry rounding error; a change that is 0.1 up to this
# tolerance counts as "10% or more".
CHANGE_TOLERANCE = 1e-9
# Onsets are sums of durations and carry rounding error; a change this close to the end of a
# window (1 ns, far below one frame) is taken to fall on the end, outside the half-open window.
TIME_TOLERANCE_S = 1e-9

# WCAG 2.2 notes to the flash thresholds: the 10-degree field is estimated as 341 x 256 pixels
# on a 1024 x 768 screen, and the small-area limit (0.006 steradians) is a quarter of it.
REFERENCE_SCREEN_PX = (1024, 768)
TEN_DEGREE_FIELD_PX = (341, 256)
SMALL_AREA_FRACTION = 0.25


@dataclass(frozen=True)
class Transition:
    """One change in luminance between two turning points.

    Attributes
    ----------
    time_s : float
        Onset of the screen at which the change reaches its turning point, from the start of
        the sequence.
    from_index, to_index : int
        Screens at the start and end turning points.
    from_luminance, to_luminance : float
        Luminance at those screens.
    qualifies : bool
        Whether the change spans at least 0.1 and its darker end is below 0.80.
    """

    time_s: float
    from_index: int
    to_index: int
    from_luminance: float
    to_luminance: float
    qualifies: bool


@dataclass(frozen=True)
class FlashReport:
    """Result of the three-flash check.

    Attributes
    ----------
    max_flashes : int
        Largest number of general flashes in any window.
    window_start_s : float or None
        Start of the first window with that many flashes (None when there is no qualifying
        change at all).
    screen_indices : tuple of int
        Screens at whose onsets the qualifying changes in that window happen.
    window_s : float
        Window length used.
    transitions : tuple of Transition
        Every change between turning points, qualifying or not.
    passes : bool
        ``max_flashes <= 3``.
    """

    max_flashes: int
    window_start_s: float | None
    screen_indices: tuple[int, ...]
    window_s: float
    transitions: tuple[Transition, ...] = field(repr=False)
    passes: bool = field(init=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "passes", self.max_flashes <= MAX_FLASHES_PER_WINDOW)


def _validate(seq: Sequence[tuple[float, float]]) -> tuple[list[float], list[float]]:
    lums: list[float] = []
    onsets: list[float] = []
    clock = 0.0
    for index, entry in enumerate(seq):
        try:
            lum, duration = (float(v) for v in entry)
        except (TypeError, ValueError):
            raise ValueError(
                f"Screen {index} must be a pair (luminance, duration in seconds), not {entry!r}."
            ) from None
        if not (math.isfinite(lum) and 0.0 <= lum <= MAX_RELATIVE_LUMINANCE):
            raise ValueError(f"Screen {index} has luminance {lum!r}; it must lie between 0 and 1.")
        if not (math.isfinite(duration) and duration > 0):
            raise ValueError(f"Screen {index} has duration {duration!r} s; it must be above 0.")
        lums.append(lum)
        onsets.append(clock)
        clock += duration
    return lums, onsets


def _big(change: float) -> bool:
    return change >= FLASH_CHANGE - CHANGE_TOLERANCE


def _turning_points(lums: list[float]) -> list[int]:
    """Indices of accepted turning points (first one included), by a threshold zigzag."""
    if not lums:
        return []
    low = high = 0
    direction = 0
    points: list[int] = []
    extreme = 0
    for i in range(1, len(lums)):
        value = lums[i]
        if direction == 0:
            # Until the first big move, remember the lowest and highest screens so far.
            if value < lums[low]:
                low = i
            if value > lums[high]:
                high = i
            if _big(value - lums[low]):
                points, direction, extreme = [low], 1, i
            elif _big(lums[high] - value):
                points, direction, extreme = [high], -1, i
            continue
        if direction * (value - lums[extreme]) > 0:
            extreme = i
        elif _big(direction * (lums[extreme] - value)):
            points.append(extreme)
            direction, extreme = -direction, i
    if direction != 0:
        points.append(extreme)
    return points


def count_general_flashes_in_windows(
    seq: Sequence[tuple[float, float]], window_s: float = WINDOW_S
) -> FlashReport:
    """Find the largest number of general flashes in any window of ``window_s`` seconds.

    Parameters
    ----------
    seq : sequence of (float, float)
        Screens in the order shown: mean relative luminance (0-1) and duration in seconds.
        Use the shortest durations the protocol allows (the worst case). The first screen's
        own onset is not a change; put the screen shown before the sequence first if that
        change matters.
    window_s : float, optional
        Window length, 1 s in WCAG 2.2 success criterion 2.3.1.

    Returns
    -------
    FlashReport
        Maximum flashes per window, where it happens, every change, and ``passes``.

    Raises
    ------
    ValueError
        If a luminance lies outside 0-1, a duration is not positive, or the window is not
        positive.
    """
    if not (math.isfinite(float(window_s)) and window_s > 0):
        raise ValueError(
            f"The flash window must be a positive number of seconds, not {window_s!r}."
        )
    lums, onsets = _validate(seq)
    points = _turning_points(lums)
    transitions = []
    for start, end in zip(points, points[1:], strict=False):
        a, b = lums[start], lums[end]
        qualifies = _big(abs(b - a)) and min(a, b) < DARK_LIMIT
        transitions.append(Transition(onsets[end], start, end, a, b, qualifies))
    counted = [t for t in transitions if t.qualifies]
    best_indices: tuple[int, ...]
    best, best_start, best_indices = 0, None, ()
    right = 0
    for left, first in enumerate(counted):
        while (
            right < len(counted)
            and counted[right].time_s < first.time_s + window_s - TIME_TOLERANCE_S
        ):
            right += 1
        flashes = (right - left) // 2
        if best_start is None or flashes > best:
            best, best_start = flashes, first.time_s
            best_indices = tuple(t.to_index for t in counted[left:right])
    return FlashReport(best, best_start, best_indices, float(window_s), tuple(transitions))


def small_flash_area_limit_px(*, screen_w_px: int, screen_h_px: int) -> float:
    """Return the largest flashing area, in pixels, that still counts as small.

    The WCAG 2.2 estimate of the 10-degree visual field, 341 x 256 pixels on a 1024 x 768
    screen, is scaled by the ratio of screen pixel counts, and a quarter of it (0.006 sr) is
    the limit.

    Parameters
    ----------
    screen_w_px, screen_h_px : int
        Screen resolution.

    Returns
    -------
    float
        Limit in square pixels.

    Notes
    -----
    The estimate assumes the whole screen spans about the same visual angle as the
    reference display (a 15-17 inch screen at 22-26 inches), so one pixel's angle shrinks as
    the resolution grows. A large screen seen from close up makes each pixel subtend more, and
    then this limit is too generous; compute the field from the viewing geometry instead.
    """
    for name, value in (("width", screen_w_px), ("height", screen_h_px)):
        if isinstance(value, bool) or not isinstance(value, int) or value <= 0:
            raise ValueError(
                f"The screen {name} in pixels must be a positive whole number, not {value!r}."
            )
    field_px = TEN_DEGREE_FIELD_PX[0] * TEN_DEGREE_FIELD_PX[1]
    scale = (screen_w_px * screen_h_px) / (REFERENCE_SCREEN_PX[0] * REFERENCE_SCREEN_PX[1])
    return SMALL_AREA_FRACTION * field_px * scale


def flash_area_is_small(area_px: float, *, screen_w_px: int, screen_h_px: int) -> bool:
    """Whether a flashing area is small enough to pass regardless of the number of flashes.

    Parameters
    ----------
    area_px : float
        Combined area of the content that flashes at the same time, in square pixels.
    screen_w_px, screen_h_px : int
        Screen resolution.

    Returns
    -------
    bool
        ``area_px <= small_flash_area_limit_px(...)``; see that function for the assumption.
    """
    area = float(area_px)
    if not (math.isfinite(area) and area >= 0):
        raise ValueError(f"The flashing area must be 0 or more square pixels, not {area_px!r}.")
    return area <= small_flash_area_limit_px(screen_w_px=screen_w_px, screen_h_px=screen_h_px)
