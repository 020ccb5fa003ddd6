"""Tests for turning pydantic validation errors into positioned, plain-sentence problems."""

from __future__ import annotations

from typing import Annotated, Literal

import pytest
from pydantic import (
    BaseModel,
    ConfigDict,
    Discriminator,
    Field,
    Tag,
    ValidationError,
    field_validator,
)

from runner.errors import Problem
from runner.protocol.report import (
    format_path,
    known_keys_from_model,
    parse_path,
    problem_at,
    problems_from_validation,
)
from runner.protocol.yamlsafe import YamlDoc, read_yaml_text


class Strict(BaseModel):
    model_config = ConfigDict(extra="forbid")


class Timing(Strict):
    fixation_ms: tuple[float, float] = Field(
        (700, 1300), description="two numbers [low, high] in milliseconds"
    )
    gap_ms: int = Field(800, ge=0, le=5000)
    stimulus_limit_s: float = Field(40, gt=0)


class Blocks(Strict):
    by: str
    order: Literal["balanced-latin", "random", "fixed"] = "random"


class Page(Strict):
    text: str


class Rest(Strict):
    seconds: int = Field(ge=1)
    label: str = "rest"


class PageStep(Strict):
    page: Page


class RestStep(Strict):
    rest: Rest


class BlocksStep(Strict):
    blocks: Blocks


class Rating(Strict):
    points: int = 9
    labels: dict[int, str] = {}

    @field_validator("points")
    @classmethod
    def _odd(cls, value: int) -> int:
        if value % 2 == 0:
            raise ValueError("a rating scale needs an odd number of points so it has a middle")
        return value


class Courier(Strict):
    """A small protocol-like model; the steps are a plain (smart-mode) union."""

    study: str
    timing: Timing = Timing()
    rating: Rating = Rating()
    sequence: list[PageStep | RestStep | BlocksStep] = []
    station: int | str = "desk-1"


def _step_kind(value: object) -> str | None:
    if isinstance(value, dict) and len(value) == 1:
        return str(next(iter(value)))
    return None


Step = Annotated[
    Annotated[PageStep, Tag("page")] | Annotated[RestStep, Tag("rest")],
    Discriminator(_step_kind),
]


class TaggedCourier(Strict):
    """The same steps as a discriminated union keyed by each step's single key."""

    study: str
    sequence: list[Step]


def _problems(schema: type[BaseModel], text: str, **kwargs) -> tuple[list[Problem], YamlDoc]:
    doc = read_yaml_text(text, filename="courier.yaml")
    with pytest.raises(ValidationError) as caught:
        schema.model_validate(doc.data)
    kwargs.setdefault("model", schema)
    return problems_from_validation(caught.value, file="courier.yaml", doc=doc, **kwargs), doc


def _position(text: str, line_fragment: str, token: str) -> tuple[int, int]:
    """1-based (line, column) of ``token`` on the first line containing ``line_fragment``."""
    for number, line in enumerate(text.splitlines(), start=1):
        if line_fragment in line:
            return number, line.index(token) + 1
    raise AssertionError(f"{line_fragment!r} not in text")


def _at(problem: Problem) -> tuple[int, int]:
    return problem.line, problem.column


def test_wrong_type_uses_the_field_description_and_points_at_the_value():
    """A type error names the path, says what is expected in the field's words, echoes the value.

    Source: common practice (no published source); position found by searching the text.
    """
    text = "study: courier-hops\ntiming:\n  fixation_ms: abc\n"
    (problem,), _ = _problems(Courier, text)
    assert problem.code == "bad-type"
    assert problem.message == (
        "timing.fixation_ms: expected two numbers [low, high] in milliseconds, got 'abc'"
    )
    assert _at(problem) == _position(text, "fixation_ms", "abc")
    assert problem.path == "timing.fixation_ms"


def test_tuple_with_a_missing_item_points_at_the_setting():
    """A [low, high] pair with one number is reported at its key, saying which item is missing."""
    text = "study: courier-hops\ntiming:\n  fixation_ms: [700]\n"
    (problem,), _ = _problems(Courier, text)
    assert problem.code == "bad-length"
    assert _at(problem) == _position(text, "fixation_ms", "fixation_ms")
    assert "got [700] (item 2 is missing)" in problem.message


def test_wrong_item_type_in_a_list_points_at_the_item():
    """A bad list item is named with its index and located at the item itself."""
    text = "study: courier-hops\ntiming:\n  fixation_ms: [700, soon]\n"
    (problem,), _ = _problems(Courier, text)
    assert problem.code == "bad-type"
    assert problem.message == "timing.fixation_ms[1]: expected a number, got 'soon'"
    assert _at(problem) == _position(text, "fixation_ms", "soon")


def test_literal_error_lists_allowed_values_and_suggests_one():
    """A value outside a Literal lists every allowed value and suggests the closest."""
    text = "study: s\nsequence:\n  - blocks: {by: density, order: balanced-latn}\n"
    (problem,), _ = _problems(Courier, text)
    assert problem.code == "bad-choice"
    assert problem.message == (
        "sequence[0].blocks.order: got 'balanced-latn', expected one of 'balanced-latin', "
        "'random' or 'fixed'; did you mean 'balanced-latin'?"
    )
    assert _at(problem) == _position(text, "order", "balanced-latn")


@pytest.mark.parametrize(
    ("setting", "value", "with_model", "fragment", "code"),
    [
        ("gap_ms", "-5", True, "got -5, must be at least 0 and at most 5000", "out-of-range"),
        ("gap_ms", "9000", True, "got 9000, must be at least 0 and at most 5000", "out-of-range"),
        ("gap_ms", "-5", False, "got -5, must be at least 0", "out-of-range"),
        ("stimulus_limit_s", "0", True, "got 0, must be more than 0", "out-of-range"),
        ("gap_ms", "1.5", True, "expected a whole number, got 1.5", "bad-type"),
        ("gap_ms", "soon", True, "expected a whole number, got 'soon'", "bad-type"),
    ],
)
def test_number_errors_give_the_bounds(setting, value, with_model, fragment, code):
    """Bound errors quote every bound the model declares (only the broken one without a model)."""
    text = f"study: s\ntiming:\n  {setting}: {value}\n"
    model = Courier if with_model else None
    (problem,), _ = _problems(Courier, text, model=model)
    assert problem.message == f"timing.{setting}: {fragment}"
    assert problem.code == code
    assert _at(problem) == (3, len(setting) + 5)


def test_unknown_key_suggests_the_closest_allowed_key():
    """An extra key is located at the key and answered with a difflib suggestion.

    Source: Python difflib.get_close_matches as the similarity measure.
    """
    text = "study: s\ntiming:\n  fixaton_ms: [700, 900]\n"
    (problem,), _ = _problems(Courier, text)
    assert problem.code == "unknown-field"
    assert problem.message.startswith(
        "timing.fixaton_ms: unknown setting 'fixaton_ms'; did you mean 'fixation_ms'?"
    )
    assert "Allowed here: 'fixation_ms', 'gap_ms' or 'stimulus_limit_s'." in problem.message
    assert _at(problem) == (3, 3)


def test_unknown_key_suggestion_can_come_from_a_known_keys_function():
    """known_keys(parent_path) is asked for the allowed keys when given."""
    asked = []

    def known(path):
        asked.append(path)
        return ["fixation_ms", "gap_ms"]

    text = "study: s\ntiming:\n  Gap_MS: 3\n"
    (problem,), _ = _problems(Courier, text, known_keys=known, model=None)
    assert problem.code == "unknown-field"
    assert asked == [("timing",)]
    assert "did you mean 'gap_ms'?" in problem.message


def test_unknown_key_without_any_known_keys_says_to_remove_it():
    """Without a model or known_keys an unknown key is still reported, with plain advice."""
    (problem,), _ = _problems(Courier, "study: s\ncolour: red\n", model=None)
    assert problem.code == "unknown-field"
    assert (
        problem.message == "colour: unknown setting 'colour'; remove it or check its indentation."
    )


def test_missing_field_points_at_the_parent_mapping():
    """A missing required field is reported at the mapping that lacks it, by name."""
    text = "sequence:\n  - rest:\n      label: baseline\n"
    problems, _ = _problems(Courier, text)
    assert {p.code for p in problems} == {"missing-field"}
    messages = {p.message: _at(p) for p in problems}
    assert messages == {
        "top level: missing required field 'study'": (1, 1),
        "sequence[0].rest: missing required field 'seconds'": (2, 5),
    }


def test_smart_union_keeps_only_the_member_that_fits_and_drops_tags_from_the_path():
    """In a plain union of steps only the matching step's error remains, with a clean path."""
    text = (
        "study: s\nsequence:\n  - page: {text: Welcome}\n  - rest: {seconds: 30}\n"
        "  - blocks: {by: 5}\n"
    )
    (problem,), _ = _problems(Courier, text)
    assert problem.code == "bad-type"
    assert problem.path == "sequence[2].blocks.by"
    assert problem.message == "sequence[2].blocks.by: expected text, got 5"
    assert _at(problem) == _position(text, "blocks", "5")


def test_smart_union_with_an_unknown_step_suggests_a_step_kind():
    """A step that fits no member is one problem at its key, suggesting the closest kind."""
    text = "study: s\nsequence:\n  - pagee: {text: Welcome}\n"
    (problem,), _ = _problems(Courier, text, model=None)
    assert problem.code == "unknown-field"
    assert problem.message == (
        "sequence[0].pagee: unknown setting 'pagee'; did you mean 'page'? Allowed here: "
        "'page', 'rest' or 'blocks'."
    )
    assert _at(problem) == (3, 5)


def test_smart_union_with_an_empty_step_lists_the_step_kinds():
    """An empty mapping as a step is reported once, listing the keys a step can have."""
    text = "study: s\nsequence:\n  - {}\n"
    (problem,), _ = _problems(Courier, text)
    assert problem.code == "missing-field"
    assert problem.message == "sequence[0]: expected one of the settings 'page', 'rest' or 'blocks'"
    assert _at(problem) == (3, 5)


def test_union_of_plain_types_is_one_problem():
    """An int | str setting with a list value gives one problem naming both types."""
    (problem,), _ = _problems(Courier, "study: s\nstation: [1, 2]\n")
    assert problem.code == "bad-type"
    assert problem.message == "station: expected a whole number or text, got [1, 2]"
    assert _at(problem) == (2, 10)


def test_discriminated_union_tag_equal_to_the_key_is_stripped():
    """A tag that equals the step's key is removed once: sequence[1].rest.seconds, not rest.rest."""
    text = "study: s\nsequence:\n  - page: {text: hi}\n  - rest: {seconds: 0}\n"
    (problem,), _ = _problems(TaggedCourier, text)
    assert problem.code == "out-of-range"
    assert problem.path == "sequence[1].rest.seconds"
    assert problem.message == "sequence[1].rest.seconds: got 0, must be at least 1"
    assert _at(problem) == _position(text, "rest", "0")


def test_discriminated_union_with_an_unknown_tag_points_at_the_key():
    """An unknown step kind under a discriminator is located at that key with a suggestion."""
    text = "study: s\nsequence:\n  - rets: {seconds: 5}\n"
    (problem,), _ = _problems(TaggedCourier, text)
    assert problem.code == "unknown-kind"
    assert problem.message == (
        "sequence[0]: unknown kind 'rets'; did you mean 'rest'? Allowed here: 'page' or 'rest'."
    )
    assert _at(problem) == (3, 5)


def test_dict_key_errors_point_at_the_key():
    """A mapping key of the wrong type is reported at the key, not at its value."""
    text = "study: s\nrating:\n  labels: {1: effortless, top: extremely hard}\n"
    (problem,), _ = _problems(Courier, text)
    assert problem.code == "bad-type"
    assert problem.message == "rating.labels.top: the key 'top' must be a whole number"
    assert _at(problem) == _position(text, "labels", "top")


def test_custom_validator_messages_are_kept_without_pydantic_prefix():
    """A ValueError raised by a model validator reads as its own sentence, with the value."""
    (problem,), _ = _problems(Courier, "study: s\nrating:\n  points: 8\n")
    assert problem.code == "bad-value"
    assert problem.message == (
        "rating.points: a rating scale needs an odd number of points so it has a middle (got 8)"
    )
    assert _at(problem) == (3, 11)


def test_problems_come_in_file_order_on_one_line_each():
    """Several errors come back sorted by position; echoed values never break the line."""
    text = 'study: [1]\ntiming:\n  gap_ms: "a\\nb"\n  extra: 1\n'
    problems, _ = _problems(Courier, text)
    assert [(*_at(p), p.code) for p in problems] == [
        (1, 8, "bad-type"),
        (3, 11, "bad-type"),
        (4, 3, "unknown-field"),
    ]
    assert all("\n" not in p.message for p in problems)
    assert "got 'a\\nb'" in problems[1].message


def test_known_keys_from_model_walks_lists_unions_and_dicts():
    """The model walk finds the keys of the mapping at a path, merging union members."""
    known = known_keys_from_model(Courier)
    assert list(known(())) == ["study", "timing", "rating", "sequence", "station"]
    assert list(known(("sequence", 4))) == ["page", "rest", "blocks"]
    assert list(known(("sequence", 0, "rest"))) == ["seconds", "label"]
    assert list(known(("timing", "gap_ms"))) == []


@pytest.mark.parametrize(
    ("path", "text"),
    [
        ((), ""),
        (("timing", "fixation_ms"), "timing.fixation_ms"),
        (("sequence", 2, "blocks", "by"), "sequence[2].blocks.by"),
        (("timing", "fixation_ms", 0), "timing.fixation_ms[0]"),
        (("rating", "labels", "very hard"), "rating.labels['very hard']"),
        (("matrix", 0, 1), "matrix[0][1]"),
    ],
)
def test_paths_are_written_dotted_with_indices_and_read_back(path, text):
    """format_path writes the dotted form and parse_path reads it back."""
    assert format_path(path) == text
    assert parse_path(text) == path


def test_problem_at_points_like_validation_problems():
    """problem_at locates values, collections and absent settings the same way as validation."""
    text = "study: s\ntiming:\n  gap_ms: 900\nsequence:\n  - blocks: {by: density}\n"
    doc = read_yaml_text(text, filename="courier.yaml")
    value = problem_at(
        doc,
        "courier.yaml",
        "sequence[0].blocks.by",
        "is not in the trial table",
        code="unknown-column",
    )
    assert value.format() == (
        "courier.yaml:5:18: error: sequence[0].blocks.by: is not in the trial table"
    )
    collection = problem_at(
        doc, "courier.yaml", ("timing",), "is too short", severity="warning", code="long-stretch"
    )
    assert (collection.line, collection.column, collection.severity) == (2, 1, "warning")
    absent = problem_at(
        doc, "courier.yaml", ("timing", "fixation_ms"), "is needed for EEG", code="missing-field"
    )
    assert (absent.line, absent.column) == (2, 1)
    assert absent.path == "timing.fixation_ms"
    whole = problem_at(doc, "courier.yaml", (), "names no stimuli", code="no-rows")
    assert (whole.line, whole.column, whole.message) == (1, 1, "names no stimuli")
    assert (value.code, collection.code, absent.code) == (
        "unknown-column",
        "long-stretch",
        "missing-field",
    )
