"""The protocol schema: what a study's YAML file may say, validated with pydantic.

Every mapping forbids unknown keys, so a typo is an error instead of a silently ignored setting.
Field names are the protocol's own vocabulary; docs/protocol.md documents each one.
"""

from __future__ import annotations

import math
import re
import string
from collections.abc import Callable, Mapping
from typing import Annotated, Any, Literal

from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Discriminator,
    Field,
    Tag,
    ValidationInfo,
    field_validator,
    model_validator,
)
from pydantic_core import PydanticCustomError

from runner.physio.config import PhysioConfig

COLOUR_RE = re.compile(r"^#(?:[0-9a-fA-F]{3}|[0-9a-fA-F]{6})$")
STUDY_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9-]{0,62}$")
KEY_NAMES = frozenset(
    list("abcdefghijklmnopqrstuvwxyz") + ["space", "return", "tab", "period", "comma", "slash"]
)
# Keys the answer screen itself uses (digits type, Backspace corrects, Return confirms); the unsure
# key must differ from all of them. Escape always asks to end the session.
ANSWER_SCREEN_KEYS = frozenset({"return", "backspace", *"0123456789"})
KEY_HELP = "expected a letter a-z or one of space, return, tab, period, comma, slash"
MAX_SCREEN_PX = 16384


def plain_path(v: str) -> str:
    """A file path as written in a protocol: no control characters (NUL, line breaks, ...)."""
    if any(ord(ch) < 32 or ord(ch) == 127 for ch in v):
        raise PydanticCustomError(
            "control_character",
            "a file path may not hold control characters (such as NUL or a line break); retype it",
        )
    return v


PathText = Annotated[str, AfterValidator(plain_path)]


def check_key(v: str) -> str:
    """A key name a participant can press (see KEY_NAMES); Escape is kept for ending sessions."""
    if v not in KEY_NAMES:
        raise PydanticCustomError("unknown_key", KEY_HELP)
    return v


class Strict(BaseModel):
    """Base for every protocol section: unknown keys are errors, values are not coerced silently."""

    model_config = ConfigDict(extra="forbid", frozen=True)


def _colour(value: str) -> str:
    if not isinstance(value, str) or not COLOUR_RE.fullmatch(value):
        raise ValueError("expected a colour written '#rrggbb' or '#rgb', like '#808080'")
    return value.lower()


Colour = Annotated[str, AfterValidator(_colour)]


class Screen(Strict):
    """The participant's display."""

    resolution: tuple[
        Annotated[int, Field(ge=320, le=MAX_SCREEN_PX)],
        Annotated[int, Field(ge=240, le=MAX_SCREEN_PX)],
    ] = Field(description="a list [width, height] in pixels, the display's native resolution")
    refresh_hz: float = Field(ge=30, le=500, description="Refresh rate the display must run at.")
    background: Colour = Field("#8c8c8c", description="Background colour of every screen.")
    text_colour: Colour = Field("#141414", description="Colour of text and the fixation cross.")
    accent_colour: Colour = Field(
        "#1f4e79", description="Colour of the answer box and the chosen rating."
    )
    width_cm: float | None = Field(
        None, gt=0, le=1000, description="Visible width of the display in cm."
    )
    distance_cm: float | None = Field(None, gt=0, le=1000, description="Viewing distance in cm.")
    font_px: int = Field(34, ge=10, le=200, description="Height of body text in pixels.")
    font: PathText | None = Field(
        None,
        min_length=1,
        description="A TrueType or OpenType font file for every text the participant sees,"
        " relative to the protocol; none for the bundled DejaVu Sans.",
    )


class StimulusSize(Strict):
    """Size of the stimulus area. Give exactly one width (or one height); the aspect ratio is kept."""

    width_px: int | None = Field(None, ge=16, le=MAX_SCREEN_PX)
    height_px: int | None = Field(None, ge=16, le=MAX_SCREEN_PX)
    width_cm: float | None = Field(None, gt=0, le=500)
    height_cm: float | None = Field(None, gt=0, le=500)
    width_deg: float | None = Field(None, gt=0, lt=170)
    height_deg: float | None = Field(None, gt=0, lt=170)

    @model_validator(mode="after")
    def _one_size(self) -> StimulusSize:
        given = [k for k, v in self.model_dump().items() if v is not None]
        if len(given) != 1:
            raise ValueError(
                "give exactly one of width_px, height_px, width_cm, height_cm, width_deg, height_deg"
                f" (got {', '.join(given) or 'none'})"
            )
        return self


class Photodiode(Strict):
    """A square patch that is white while the stimulus is shown and black otherwise."""

    corner: Literal["top-left", "top-right", "bottom-left", "bottom-right"] = "top-left"
    size_px: int = Field(48, ge=8, le=400)


class Markers(Strict):
    """The LSL marker stream."""

    stream: str = Field(
        min_length=1, max_length=120, description="Stream name the recorder looks for."
    )
    station: str | None = Field(
        None,
        pattern=r"^[A-Za-z0-9._-]{1,64}$",
        description="Name of this presenter machine, part of the stable source_id (default: host name).",
    )


class Trials(Strict):
    """The trial table: a CSV file with `stimulus`, `expected` and factor columns."""

    table: PathText = Field(
        min_length=1, description="Path of the CSV trial table, relative to the protocol."
    )
    factors: list[str] = Field(
        default_factory=list, description="Columns that are experimental factors."
    )
    allow_outside: bool = Field(
        False, description="Allow stimulus paths outside the protocol's folder."
    )


class Answer(Strict):
    """How the participant gives the count."""

    prompt: str = Field("How many?", min_length=1, max_length=300)
    max: int = Field(99, ge=1, le=9999, description="Largest count that can be typed.")
    unsure_key: str = Field("u", description="Key that answers 'unsure'.")
    mode: Literal["after", "over"] = Field(
        "after",
        description="'after': the stimulus leaves at the decision key and the count is typed on its own"
        " screen; 'over': the count is typed while the stimulus stays visible.",
    )
    decision_key: str = Field("space", description="Key that ends viewing in 'after' mode.")
    prompt_column: str | None = Field(
        None, description="Trial-table column that overrides the prompt."
    )

    @model_validator(mode="after")
    def _distinct_keys(self) -> Answer:
        if self.unsure_key == self.decision_key:
            raise ValueError(
                f"unsure_key and decision_key are both {self.unsure_key!r}; give them different keys"
            )
        return self

    @field_validator("unsure_key", "decision_key")
    @classmethod
    def _key(cls, v: str) -> str:
        return check_key(v)

    @field_validator("unsure_key")
    @classmethod
    def _unsure_free(cls, v: str) -> str:
        if v in ANSWER_SCREEN_KEYS:
            raise PydanticCustomError(
                "key_clash",
                f"{v!r} is already used on the answer screen (digits type the count, Backspace"
                " corrects, Return confirms); choose another key for 'unsure', such as 'u'",
            )
        return v


class Rating(Strict):
    """The rating scale shown after each answer."""

    points: int = Field(9, ge=2, le=11)
    question: str = Field("How hard was that?", min_length=1, max_length=300)
    low: str = Field("very easy", max_length=60)
    high: str = Field("very hard", max_length=60)
    mid: str | None = Field(None, max_length=60)
    input: Literal["keys", "mouse", "both"] = Field(
        "keys",
        description="how the rating is given: number keys (and arrows), a mouse click on a box, or both",
    )
    question_column: str | None = Field(
        None, description="Trial-table column that overrides the question."
    )


class Timing(Strict):
    """Durations. Requested durations are rounded to whole frames of the display."""

    fixation_ms: tuple[
        Annotated[float, Field(ge=0, le=60000)], Annotated[float, Field(ge=0, le=60000)]
    ] = Field(
        (700, 1300),
        description="a list [low, high] in ms, such as [700, 1300]: each fixation lasts a"
        " duration drawn uniformly from it",
    )
    stimulus_limit_s: float | None = Field(
        40, gt=0, le=3600, description="Longest viewing time; none for no limit."
    )
    answer_limit_s: float | None = Field(20, gt=0, le=3600)
    rating_limit_s: float | None = Field(None, gt=0, le=3600)
    gap_ms: float = Field(800, ge=0, le=60000, description="Blank screen between trials.")
    feedback_ms: float = Field(
        1500, ge=0, le=60000, description="How long practice feedback stays."
    )

    @field_validator("fixation_ms")
    @classmethod
    def _ordered(cls, v: tuple[float, float]) -> tuple[float, float]:
        if v[0] > v[1]:
            raise ValueError(f"the low end {v[0]!r} is above the high end {v[1]!r}")
        return v


Where = dict[str, str | int | float | bool | list[str | int | float]]


class PageSpec(Strict):
    text: str | None = Field(None, max_length=20000)
    file: PathText | None = Field(
        None, description="A text or simple Markdown file, relative to the protocol."
    )
    key: str = Field("space", description="Key that moves on from the page.")

    @field_validator("key")
    @classmethod
    def _key(cls, v: str) -> str:
        return check_key(v)

    @model_validator(mode="after")
    def _one(self) -> PageSpec:
        if (self.text is None) == (self.file is None):
            raise ValueError("give either text or file")
        return self


class RestSpec(Strict):
    seconds: float = Field(gt=0, le=3600)
    label: str = Field("baseline", pattern=r"^[A-Za-z0-9_-]{1,40}$")
    show: Literal["fixation", "blank"] = "fixation"


class PracticeSpec(Strict):
    where: Where = Field(
        default_factory=dict, description="Trial-table rows to use, by column value."
    )
    feedback: bool = True
    shuffle: bool = True


class BlocksSpec(Strict):
    where: Where = Field(default_factory=dict)
    by: str = Field(description="Factor whose levels form the blocks.")
    order: Literal["balanced-latin", "fixed", "random"] = "balanced-latin"
    levels: list[str] | None = Field(
        None, description="Block order for 'fixed' (and the level list otherwise)."
    )
    shuffle: bool = True
    max_run: dict[str, Annotated[int, Field(ge=1, le=1000)]] = Field(
        default_factory=dict, description="At most K trials in a row at one level of a factor."
    )
    no_repeat: bool = Field(True, description="Never show the same stimulus twice in a row.")


class TrialsSpec(Strict):
    where: Where = Field(default_factory=dict)
    shuffle: bool = True
    max_run: dict[str, Annotated[int, Field(ge=1, le=1000)]] = Field(default_factory=dict)
    no_repeat: bool = True


class PageStep(Strict):
    page: PageSpec


class RestStep(Strict):
    rest: RestSpec


class PracticeStep(Strict):
    practice: PracticeSpec


class BlocksStep(Strict):
    blocks: BlocksSpec


class TrialsStep(Strict):
    trials: TrialsSpec


STEP_KINDS = ("page", "rest", "practice", "blocks", "trials")


def _step_tag(value: object) -> str | None:
    """Pick the step model from the single key of a sequence item (``- page: {...}``)."""
    if isinstance(value, dict):
        keys = [k for k in value if k in STEP_KINDS]
        return keys[0] if len(keys) == 1 and len(value) == 1 else None
    for kind in STEP_KINDS:
        if hasattr(value, kind):
            return kind
    return None


Step = Annotated[
    Annotated[PageStep, Tag("page")]
    | Annotated[RestStep, Tag("rest")]
    | Annotated[PracticeStep, Tag("practice")]
    | Annotated[BlocksStep, Tag("blocks")]
    | Annotated[TrialsStep, Tag("trials")],
    Discriminator(
        _step_tag,
        custom_error_type="sequence_step",
        custom_error_message="each sequence item is one of page, rest, practice, blocks, trials",
    ),
]


class Breaks(Strict):
    every_trials: int | None = Field(None, ge=1, le=100000)
    every_minutes: float | None = Field(None, gt=0, le=600)
    min_s: float = Field(15, ge=0, le=3600)
    key: str = Field("space", description="Key that ends a break once min_s have passed.")
    text: str = Field(
        "Time for a short break. Rest your eyes; the next part starts when you are ready.",
        max_length=2000,
    )

    @field_validator("key")
    @classmethod
    def _key(cls, v: str) -> str:
        return check_key(v)


class Checks(Strict):
    """Thresholds used by `trialdeck check`."""

    luminance_tolerance: float = Field(
        0.05,
        ge=0,
        le=1,
        description="Largest allowed spread (max - min) of stimulus mean relative luminance.",
    )
    max_upscale: float = Field(
        1.5, ge=1, le=100, description="Warn when a stimulus is enlarged more than this."
    )
    max_minutes_without_break: float = Field(
        20,
        gt=0,
        le=600,
        description="Warn when the typical time between two pauses (break, page or rest) is longer.",
    )
    acknowledge_flashes: bool = Field(
        False,
        description="Set true only after ethics approval of content that breaks the three-flash rule.",
    )
    min_response_ms: float = Field(
        200,
        gt=0,
        le=60000,
        description="Shortest time from a screen's onset to a key press that the flash check and"
        " the shortest session length assume (a fast simple reaction time).",
    )
    typical_viewing_s: float = Field(
        10,
        gt=0,
        le=3600,
        description="Typical viewing time of a stimulus, for the typical session length.",
    )
    typical_response_s: float = Field(
        2,
        gt=0,
        le=3600,
        description="Typical time to type a count or choose a rating, for the typical session length.",
    )
    typical_page_s: float = Field(
        20,
        gt=0,
        le=3600,
        description="Typical time spent reading an instruction page, for the session length.",
    )


class Triggers(Strict):
    """Optional hardware trigger codes: one byte per marked event, sent over a serial port."""

    port: str | None = Field(
        None,
        min_length=1,
        description="Serial port of the trigger interface (COM3, /dev/ttyUSB0); --trigger-port"
        " overrides it.",
    )
    baud: int = Field(115200, ge=300, le=4000000, description="Serial speed in bits per second.")
    codes: dict[
        Annotated[str, Field(pattern=r"^[a-z_]{1,40}$")], Annotated[int, Field(ge=1, le=255)]
    ] = Field(
        min_length=1,
        description="Code (1-255) per marker event name, e.g. stimulus_onset: 10. 0 is left"
        " free as the interface's resting state.",
    )


#: Every participant-facing built-in text: key -> (English default, placeholders it may use).
#: The one place that defines the keys; docs/protocol.md lists them.
TEXT_DEFAULTS: dict[str, tuple[str, tuple[str, ...]]] = {
    "key_space": ("the space bar", ()),
    "key_other": ("the {key} key", ("key",)),
    "page_hint": ("Press {key} to continue.", ("key",)),
    "last_page_hint": ("Press {key} to finish.", ("key",)),
    "resume": ("The session continues where it stopped.", ()),
    "answer_hint": ("Type the number, then press Enter.", ()),
    "unsure_hint": ("{key} = unsure", ("key",)),
    "rating_hint_keys": (
        "Press a number key from 1 to {points}, or choose with the arrow keys and press Enter.",
        ("points",),
    ),
    "rating_hint_keys_ten": (
        "Press 1 to 9 (0 for 10), or choose with the arrow keys and press Enter.",
        (),
    ),
    "rating_hint_mouse": ("Click a box.", ()),
    "rating_hint_mouse_keys": (
        "Click a box, press a number key from 1 to {points}, or choose with the arrow keys and"
        " press Enter.",
        ("points",),
    ),
    "rating_hint_mouse_keys_ten": (
        "Click a box, press 1 to 9 (0 for 10), or choose with the arrow keys and press Enter.",
        (),
    ),
    "feedback_correct": ("Correct.", ()),
    "feedback_answer": ("The answer was {expected}.", ("expected",)),
    "feedback_thanks": ("Thank you.", ()),
    "break_countdown": ("You can go on in {seconds} s.", ("seconds",)),
    "break_ready": ("Press {key} when you are ready to go on.", ("key",)),
    "pause": ("The session is paused. Please wait for the experimenter.", ()),
    "confirm": ("Experimenter: end this session now?", ()),
    "confirm_hint": ("Press Y to end the session, or any other key to go on.", ()),
}


def _check_text(key: str) -> Callable[[str], str]:
    placeholders = TEXT_DEFAULTS[key][1]

    def check(v: str) -> str:
        try:
            names = [f for _, f, _, _ in string.Formatter().parse(v) if f is not None]
        except ValueError as exc:
            raise PydanticCustomError(
                "text_placeholder",
                "a brace that does not close: write {{ and }} for literal braces ({error})",
                {"error": str(exc)},
            ) from None
        wrong = [n for n in names if n not in placeholders]
        if wrong:
            allowed = ", ".join("{" + p + "}" for p in placeholders) or "no placeholders"
            raise PydanticCustomError(
                "text_placeholder",
                "unknown placeholder {wrong}; this text may use {allowed}",
                {"wrong": ", ".join("{" + n + "}" for n in wrong), "allowed": allowed},
            )
        return v

    return check


def _text_field(key: str) -> Any:
    default, placeholders = TEXT_DEFAULTS[key]
    names = ", ".join("{" + p + "}" for p in placeholders)
    return Field(
        default,
        min_length=1,
        max_length=300,
        description=f"Placeholders: {names}." if names else "No placeholders.",
    )


class Texts(Strict):
    """Every built-in text the participant sees, for translation (English defaults in TEXT_DEFAULTS)."""

    key_space: str = _text_field("key_space")
    key_other: str = _text_field("key_other")
    page_hint: str = _text_field("page_hint")
    last_page_hint: str = _text_field("last_page_hint")
    resume: str = _text_field("resume")
    answer_hint: str = _text_field("answer_hint")
    unsure_hint: str = _text_field("unsure_hint")
    rating_hint_keys: str = _text_field("rating_hint_keys")
    rating_hint_keys_ten: str = _text_field("rating_hint_keys_ten")
    rating_hint_mouse: str = _text_field("rating_hint_mouse")
    rating_hint_mouse_keys: str = _text_field("rating_hint_mouse_keys")
    rating_hint_mouse_keys_ten: str = _text_field("rating_hint_mouse_keys_ten")
    feedback_correct: str = _text_field("feedback_correct")
    feedback_answer: str = _text_field("feedback_answer")
    feedback_thanks: str = _text_field("feedback_thanks")
    break_countdown: str = _text_field("break_countdown")
    break_ready: str = _text_field("break_ready")
    pause: str = _text_field("pause")
    confirm: str = _text_field("confirm")
    confirm_hint: str = _text_field("confirm_hint")

    @field_validator("*")
    @classmethod
    def _placeholders(cls, v: str, info: ValidationInfo) -> str:
        return _check_text(str(info.field_name))(v)


class Exclusions(Strict):
    """Pre-declared exclusion rules: a session meeting any rule is left out of pooled analyses.

    Written before the data are seen; `export` and `summary` apply them identically
    (:mod:`runner.data.exclusions`) and list every session with each rule's value in
    exclusions.csv. A rule left out is not applied. Shares are fractions from 0 to 1.
    """

    practice_accuracy_below: float | None = Field(
        None,
        ge=0,
        le=1,
        description="Exclude a session whose share of correct practice answers (over scored"
        " practice trials) is below this.",
    )
    timed_out_share_above: float | None = Field(
        None,
        ge=0,
        le=1,
        description="Exclude a session whose share of timed-out main trials is above this.",
    )
    unsure_share_above: float | None = Field(
        None,
        ge=0,
        le=1,
        description="Exclude a session whose share of 'unsure' answers among scored main trials"
        " is above this.",
    )
    physio_valid_share_below: float | None = Field(
        None,
        ge=0,
        le=1,
        description="Exclude a session whose share of trials with valid physiology is below this"
        " (judged only when a physiology table is given; otherwise listed as not judged).",
    )


class PilotSettings(Strict):
    """The simulated participant of `trialdeck pilot` and `demo` (invented numbers, seeded).

    A trial's difficulty d is the weighted sum of trial-table columns (``difficulty``). The
    response time is ex-Gaussian: ``rt_base_s + rt_per_difficulty_s * d`` plus a normal part
    (sd ``rt_sd_s``) plus an exponential tail (mean ``rt_tau_s + rt_tau_per_difficulty_s * d``).
    Accuracy, the unsure rate and the rating follow d linearly (clipped); from
    ``give_up_difficulty`` on, the participant gives up (``give_up``: unsure or timeout).
    """

    difficulty: dict[str, float] = Field(
        default_factory=lambda: {"expected": 1.0},
        min_length=1,
        description="Weights of numeric trial-table columns (or 'expected'): difficulty is the"
        " sum of weight x value.",
    )
    rt_base_s: float = Field(1.4, ge=0, le=600, description="Response time at difficulty 0.")
    rt_per_difficulty_s: float = Field(
        0.55, ge=0, le=600, description="Added response time per unit of difficulty."
    )
    rt_sd_s: float = Field(0.3, ge=0, le=600, description="SD of the normal part.")
    rt_tau_s: float = Field(0.3, ge=0, le=600, description="Mean of the exponential tail.")
    rt_tau_per_difficulty_s: float = Field(
        0.05, ge=0, le=600, description="Added tail mean per unit of difficulty."
    )
    rt_min_s: float = Field(0.25, ge=0, le=60, description="Shortest response time.")
    correct_at_zero: float = Field(0.98, ge=0, le=1, description="P(correct) at difficulty 0.")
    correct_per_difficulty: float = Field(
        0.05, ge=0, le=1, description="Drop of P(correct) per unit of difficulty."
    )
    correct_min: float = Field(0.3, ge=0, le=1, description="Lowest P(correct).")
    unsure_at_zero: float = Field(0.01, ge=0, le=1, description="P(unsure) at difficulty 0.")
    unsure_per_difficulty: float = Field(
        0.02, ge=0, le=1, description="Rise of P(unsure) per unit of difficulty."
    )
    unsure_max: float = Field(0.3, ge=0, le=1, description="Highest P(unsure).")
    rating_per_difficulty: float = Field(
        1 / 12,
        ge=0,
        le=10,
        description="Share of the rating scale climbed per unit of difficulty.",
    )
    rating_sd: float = Field(0.12, ge=0, le=10, description="SD of the rating, as a scale share.")
    give_up_difficulty: float | None = Field(
        None, description="From this difficulty on the participant gives up; none: never."
    )
    give_up: Literal["unsure", "timeout"] = Field(
        "unsure",
        description="How the participant gives up: press the unsure key, or answer nothing and"
        " let the time limit end the trial (unsure when no limit applies).",
    )

    def difficulty_of(self, expected: int | None, values: Mapping[str, str]) -> float:
        """A trial's difficulty: the weighted sum of its table values (``expected`` for the
        expected count); a missing, empty or non-numeric value counts 0."""
        total = 0.0
        for column, weight in self.difficulty.items():
            raw: object = expected if column == "expected" else values.get(column)
            try:
                value = float(str(raw)) if raw is not None else 0.0
            except ValueError:
                value = 0.0
            total += weight * (value if math.isfinite(value) else 0.0)
        return total


class Protocol(Strict):
    """A whole study protocol."""

    study: str = Field(description="Study id: letters, digits and hyphens.")
    screen: Screen
    stimulus_size: StimulusSize
    trials: Trials
    markers: Markers
    answer: Answer = Field(default_factory=Answer)
    rating: Rating = Field(default_factory=Rating)
    timing: Timing = Field(default_factory=Timing)
    photodiode: Photodiode | None = None
    sequence: list[Step] = Field(min_length=1)
    breaks: Breaks | None = None
    checks: Checks = Field(default_factory=Checks)
    triggers: Triggers | None = None
    texts: Texts = Field(default_factory=Texts)
    exclusions: Exclusions | None = None
    pilot: PilotSettings = Field(default_factory=PilotSettings)
    physio: PhysioConfig | None = Field(
        None, description="Settings of `trialdeck physio` (docs/physio.md); optional."
    )

    @field_validator("study")
    @classmethod
    def _study(cls, v: str) -> str:
        if not STUDY_RE.fullmatch(v):
            raise ValueError(
                "expected letters, digits and hyphens (at most 63), starting with a letter or digit"
            )
        return v

    # Cross-field rules are field validators (not one model validator) so that each error
    # points at the setting it concerns; fields are validated in order, so screen comes first.
    @field_validator("stimulus_size")
    @classmethod
    def _size_needs_screen(cls, v: StimulusSize, info: ValidationInfo) -> StimulusSize:
        screen = info.data.get("screen")
        if screen is None:
            return v
        if (v.width_deg is not None or v.height_deg is not None) and (
            screen.width_cm is None or screen.distance_cm is None
        ):
            raise ValueError("a size in degrees needs screen.width_cm and screen.distance_cm")
        if (v.width_cm is not None or v.height_cm is not None) and screen.width_cm is None:
            raise ValueError("a size in cm needs screen.width_cm")
        return v

    @field_validator("exclusions")
    @classmethod
    def _practice_rule_needs_practice(
        cls, v: Exclusions | None, info: ValidationInfo
    ) -> Exclusions | None:
        sequence = info.data.get("sequence")
        if v is None or v.practice_accuracy_below is None or sequence is None:
            return v
        if not any(isinstance(s, PracticeStep) for s in sequence):
            raise ValueError(
                "exclusions.practice_accuracy_below needs a practice step in the sequence"
            )
        return v

    @field_validator("sequence")
    @classmethod
    def _has_trials(cls, v: list[Step]) -> list[Step]:
        if not any(isinstance(s, (PracticeStep, BlocksStep, TrialsStep)) for s in v):
            raise ValueError("the sequence has no trials: add a practice, blocks or trials step")
        return v


def step_kind(step: Step) -> str:
    """Name of a sequence step ('page', 'rest', 'practice', 'blocks' or 'trials')."""
    for kind in STEP_KINDS:
        if hasattr(step, kind):
            return kind
    raise TypeError(f"not a sequence step: {step!r}")
