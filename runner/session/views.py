"""What each screen shows, as plain data.

The engine decides *what* is on the screen with these small records; the presenter
(:mod:`runner.present.painter`) decides *how* it looks. Replay rebuilds the same records from the
journal and hands them to the same presenter, so replayed frames match the live ones pixel for
pixel. The few measures that both the painter and the protocol check need (the fixation cross, the
photodiode patch, how long a chosen rating stays lit) are defined here, once. Nothing here imports
pygame, so the check can use them too.
"""

from __future__ import annotations

from dataclasses import dataclass

Rect = tuple[int, int, int, int]  # left, top, width, height in screen pixels

#: The chosen rating box stays lit this long (seconds), so the choice is seen.
RATING_SHOW_CHOICE_S = 0.15
#: The fixation cross: half-length of an arm and bar thickness as shares of the screen height,
#: with a minimum in pixels each.
FIXATION_ARM_FRACTION = 0.012
FIXATION_THICKNESS_FRACTION = 0.003
FIXATION_MIN_ARM_PX = 6
FIXATION_MIN_THICKNESS_PX = 2
#: The photodiode patch is white during the stimulus and black otherwise.
PATCH_ON = "#ffffff"
PATCH_OFF = "#000000"


def fixation_rects(size: tuple[int, int]) -> tuple[Rect, Rect]:
    """The fixation cross's horizontal and vertical bars on a screen of ``size`` pixels.

    The painter fills them with the text colour; the protocol check counts them in the fixation
    screen's luminance. Both take them from here.
    """
    w, h = size
    arm = max(FIXATION_MIN_ARM_PX, round(h * FIXATION_ARM_FRACTION))
    thick = max(FIXATION_MIN_THICKNESS_PX, round(h * FIXATION_THICKNESS_FRACTION))
    cx, cy = w // 2, h // 2
    return (
        (cx - arm, cy - thick // 2, 2 * arm + 1, thick),
        (cx - thick // 2, cy - arm, thick, 2 * arm + 1),
    )


#: The answer box of 'over' mode: width and height as multiples of the body font size, and the
#: least gap between it and the stimulus, the hint line or the screen edge, in pixels.
ANSWER_BOX_EM = (5.0, 2.4)
ANSWER_GAP_PX = 10
#: The hint line's baseline sits this share of the screen height above the bottom edge.
HINT_MARGIN_FRACTION = 0.07
#: An upper bound of the hint line's height as a multiple of the body font size (the hint font
#: is 0.95 of it; a line is at most 1.3 of its font size), for placing without the font at hand.
HINT_LINE_EM = 0.95 * 1.3


def answer_box_size(font_px: int) -> tuple[int, int]:
    """Width and height of the answer box typed into over the stimulus ('over' mode)."""
    return round(font_px * ANSWER_BOX_EM[0]), round(font_px * ANSWER_BOX_EM[1])


def hint_top(size: tuple[int, int], font_px: int, line_px: int | None = None) -> int:
    """The top of the hint line: ``line_px`` is its height (default the bound HINT_LINE_EM)."""
    line = line_px if line_px is not None else round(font_px * HINT_LINE_EM)
    return round(size[1] * (1 - HINT_MARGIN_FRACTION)) - line


def answer_box_rect(
    size: tuple[int, int], image: Rect, box: tuple[int, int], top_of_hint: int
) -> Rect | None:
    """Where the answer box goes so that it covers neither the stimulus nor the hint line.

    Below the stimulus (centred) when there is room above the hint line, else to its right,
    else to its left (level with the stimulus's centre, above the hint line); None when the
    box fits nowhere on the screen. The painter draws it here; ``check`` refuses a protocol
    whose stimuli leave it no room.
    """
    w, h = size
    x, y, iw, ih = image
    bw, bh = box
    gap = ANSWER_GAP_PX
    below = top_of_hint - (y + ih)
    if below >= bh + 2 * gap:
        return (w // 2 - bw // 2, y + ih + (below - bh) // 2, bw, bh)
    cy = min(y + ih // 2 - bh // 2, top_of_hint - gap - bh)
    if cy < gap:
        return None
    right = w - (x + iw)
    if right >= bw + 2 * gap:
        return (x + iw + (right - bw) // 2, cy, bw, bh)
    if x >= bw + 2 * gap:
        return ((x - bw) // 2, cy, bw, bh)
    return None


def answer_fit_limits(
    size: tuple[int, int], box: tuple[int, int], top_of_hint: int
) -> tuple[int, int]:
    """The largest stimulus height (with the box below) and width (with the box beside), in
    pixels, that leave the centred stimulus room for the answer box."""
    w, h = size
    bw, bh = box
    gap = ANSWER_GAP_PX
    # Centred: bottom = (h + ih) / 2 must stay bh + 2 gap above the hint line.
    max_h = max(0, 2 * (top_of_hint - bh - 2 * gap) - h)
    max_w = max(0, w - 2 * (bw + 2 * gap))
    return max_h, max_w


def photodiode_rect(size: tuple[int, int], corner: str, side: int) -> Rect:
    """The photodiode patch: a ``side``-pixel square in ``corner`` (e.g. 'top-left')."""
    w, h = size
    x = 0 if corner.endswith("left") else w - side
    y = 0 if corner.startswith("top") else h - side
    return (x, y, side, side)


@dataclass(frozen=True)
class PageView:
    text: str
    hint: str = "Press the space bar to continue."
    key: str = "space"


@dataclass(frozen=True)
class FixationView:
    pass


@dataclass(frozen=True)
class BlankView:
    pass


@dataclass(frozen=True)
class StimulusView:
    stimulus: str  # absolute path of the image file
    typed: str | None = None  # the count typed so far, shown over the stimulus ('over' mode)
    prompt: str = ""
    hint: str = ""


@dataclass(frozen=True)
class AnswerView:
    prompt: str
    typed: str = ""
    hint: str = ""


@dataclass(frozen=True)
class RatingView:
    question: str
    points: int
    low: str
    high: str
    mid: str | None = None
    selected: int | None = None
    hint: str = ""


@dataclass(frozen=True)
class FeedbackView:
    text: str
    good: bool


@dataclass(frozen=True)
class BreakView:
    text: str
    seconds_left: int
    hint: str = ""
    key: str = "space"  # the key that ends the break once its minimum is over


@dataclass(frozen=True)
class ConfirmView:
    """Shown when Escape is pressed: the experimenter confirms or cancels the abort."""

    text: str = "Experimenter: end this session now?"
    hint: str = "Press Y to end the session, or any other key to go on."


@dataclass(frozen=True)
class PauseView:
    text: str = "The session is paused. Please wait for the experimenter."
    hint: str = ""


View = (
    PageView
    | FixationView
    | BlankView
    | StimulusView
    | AnswerView
    | RatingView
    | FeedbackView
    | BreakView
    | ConfirmView
    | PauseView
)

VIEW_TYPES: dict[str, type] = {
    cls.__name__: cls
    for cls in (
        PageView,
        FixationView,
        BlankView,
        StimulusView,
        AnswerView,
        RatingView,
        FeedbackView,
        BreakView,
        ConfirmView,
        PauseView,
    )
}


def view_to_dict(view: View) -> dict[str, object]:
    """A journal-friendly form of a view: its type name and fields."""
    return {"type": type(view).__name__, **view.__dict__}


def view_from_dict(data: dict[str, object]) -> View:
    fields = dict(data)
    cls = VIEW_TYPES[str(fields.pop("type"))]
    return cls(**fields)


@dataclass(frozen=True)
class KeyHit:
    """A key press: its name ('space', 'u', '7', 'return', 'backspace', 'escape'), and when it was read.

    ``t`` is the time of the input poll that read it; the press happened within ``blind_ms``
    before that.
    """

    key: str
    t: float
    pos: tuple[int, int] | None = None  # for 'click': where the mouse button went down
    # How long before ``t`` the press may have happened, in ms: the time since the input poll
    # before the one that read it (a fraction of a ms while waiting; a whole flip when the key
    # came in while the screen was flipping).
    blind_ms: float = 0.0

    @property
    def earliest(self) -> float:
        """The earliest time the press may have happened (``t`` less the blind window)."""
        return self.t - self.blind_ms / 1000.0
