"""What each screen shows, as plain data.

The engine decides *what* is on the screen with these small records; the presenter
(:mod:`runner.present.painter`) decides *how* it looks. Replay rebuilds the same records from the
journal and hands them to the same presenter, so replayed frames match the live ones pixel for
pixel. Nothing here imports pygame.
"""

from __future__ import annotations

from dataclasses import dataclass


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
    """A key press: its name ('space', 'u', '7', 'return', 'backspace', 'escape'), and when it was seen."""

    key: str
    t: float
    pos: tuple[int, int] | None = None  # for 'click': where the mouse button went down
