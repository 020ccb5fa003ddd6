"""The protocol's exclusions and pilot sections: accepted when valid, located errors when not."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
from conftest import MINI_PROTOCOL

from runner.cli import main
from runner.protocol.load import load_protocol


def _copy_with(tmp_path: Path, extra: str, *, replace: tuple[str, str] | None = None) -> Path:
    folder = tmp_path / "proto"
    shutil.copytree(MINI_PROTOCOL.parent, folder)
    path = folder / "mini.yaml"
    text = path.read_text()
    if replace is not None:
        assert replace[0] in text
        text = text.replace(*replace)
    path.write_text(text + extra)
    return path


def _problems(path: Path, capsys: pytest.CaptureFixture[str]) -> list[dict[str, object]]:
    assert main(["check", str(path), "--json"]) == 1
    return json.loads(capsys.readouterr().out)["problems"]


def _line_of(path: Path, needle: str) -> int:
    """The last line holding ``needle`` (the appended section is at the end)."""
    return max(i for i, ln in enumerate(path.read_text().splitlines(), 1) if needle in ln)


def test_valid_sections_load_with_their_values(tmp_path):
    """Exclusions and pilot settings written in the protocol reach the loaded model."""
    path = _copy_with(
        tmp_path,
        "exclusions: {practice_accuracy_below: 0.5, unsure_share_above: 0.4}\n"
        "pilot: {difficulty: {nodes: 0.1, expected: 0.5}, give_up_difficulty: 4,"
        " give_up: timeout}\n",
    )
    model = load_protocol(path).model
    assert model.exclusions is not None
    assert model.exclusions.practice_accuracy_below == 0.5
    assert model.exclusions.timed_out_share_above is None
    assert model.pilot.difficulty == {"nodes": 0.1, "expected": 0.5}
    assert (model.pilot.give_up_difficulty, model.pilot.give_up) == (4, "timeout")


def test_protocol_without_sections_has_no_rules_and_the_default_pilot():
    """A protocol without the sections applies no exclusions; the pilot weighs the expected count."""
    model = load_protocol(MINI_PROTOCOL).model
    assert model.exclusions is None
    assert model.pilot.difficulty == {"expected": 1.0}


@pytest.mark.parametrize(
    "extra, needle, code",
    [
        ("exclusions: {timed_out_share_above: 1.5}\n", "timed_out_share_above", "out-of-range"),
        ("exclusions: {accuracy_below: 0.5}\n", "accuracy_below", "unknown-field"),
        ("pilot: {difficulty: {colour: 1}}\n", "colour", "unknown-column"),
        ("pilot: {difficulty: {density: 1}}\n", "density", "non-numeric-column"),
        ("pilot: {give_up: never}\n", "give_up", "bad-choice"),
        ("pilot: {rt_sd_s: -1}\n", "rt_sd_s", "out-of-range"),
    ],
)
def test_bad_rules_give_located_errors(tmp_path, capsys, extra, needle, code):
    """`check` reports a bad rule or pilot setting at its FILE:LINE with a stable code."""
    path = _copy_with(tmp_path, extra)
    found = _problems(path, capsys)
    line = _line_of(path, needle)
    assert (line, code) in [(p["line"], p["code"]) for p in found], found


def test_practice_rule_without_practice_is_an_error(tmp_path, capsys):
    """practice_accuracy_below in a protocol without a practice step is refused at its line."""
    path = _copy_with(
        tmp_path,
        "exclusions: {practice_accuracy_below: 0.5}\n",
        replace=("  - practice: {where: {set: practice}, feedback: true}\n", ""),
    )
    found = _problems(path, capsys)
    line = _line_of(path, "exclusions: {practice")
    assert (line, "bad-value") in [(p["line"], p["code"]) for p in found], found


def test_check_states_the_pilot_difficulty_range_and_the_rules(tmp_path, capsys):
    """`check` lists the pilot's difficulty range over the main trials, how many it gives up on,
    and the declared exclusion rules.
    Source: the weighted sums of tests/data/mini/table.csv's main rows, worked by hand
    (nodes 4, 5, 6, 7 weighted 1: 4 to 7; 2 rows at 6 or more)."""
    path = _copy_with(
        tmp_path,
        "exclusions: {unsure_share_above: 0.4}\n"
        "pilot: {difficulty: {nodes: 1}, give_up_difficulty: 6}\n",
    )
    assert main(["check", str(path), "--json"]) == 0
    facts = json.loads(capsys.readouterr().out)["facts"]
    assert (
        "simulated participant's difficulty (1 x nodes): 4 to 7 over participant 1's main "
        "trials; gives up (unsure) on 2 of 4" in facts
    )
    assert "pre-declared exclusions: unsure_share_above 0.4" in facts
