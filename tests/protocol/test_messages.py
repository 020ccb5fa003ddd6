"""Messages that name the fix: where-values, list settings, special files, unclosed brackets."""

from __future__ import annotations

import os
from pathlib import Path

import pytest
from protofix import BASE_PROTOCOL, merged, write_protocol

from runner.errors import InputFileError, ProtocolError
from runner.protocol.check import check_protocol
from runner.protocol.yamlsafe import read_yaml, read_yaml_text


def _only(report, code: str):
    hits = [p for p in report.problems if p.code == code]
    assert len(hits) == 1, [p.format() for p in report.problems]
    return hits[0]


def test_where_that_matches_nothing_lists_the_values_that_exist(tmp_path: Path) -> None:
    """`where: {set: Main}` names the column's real values and the near one ('main')."""
    sequence = [
        {"practice": {"where": {"set": "practice"}}},
        {"blocks": {"where": {"set": "Main"}, "by": "density"}},
    ]
    report = check_protocol(write_protocol(tmp_path, merged(sequence=sequence)))
    problem = _only(report, "no-matching-rows")
    assert "'Main'" in problem.message and "did you mean 'main'" in problem.message
    assert "'practice'" in problem.message


def test_a_single_number_for_fixation_asks_for_a_list(tmp_path: Path) -> None:
    """`fixation_ms: 700` says the setting is a list [low, high]."""
    timing = {**BASE_PROTOCOL.get("timing", {}), "fixation_ms": 700}  # type: ignore[dict-item]
    report = check_protocol(write_protocol(tmp_path, merged(timing=timing)))
    problem = _only(report, "bad-type")
    assert problem.path == "timing.fixation_ms" and "a list [low, high]" in problem.message


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="named pipes need POSIX")
def test_a_fifo_protocol_is_named_as_such_without_reading_it(tmp_path: Path) -> None:
    """A FIFO is refused as a named pipe at once (no hang), and check calls it unreadable."""
    fifo = tmp_path / "protocol.yaml"
    os.mkfifo(fifo)
    with pytest.raises(InputFileError, match="named pipe"):
        read_yaml(fifo)
    assert [p.code for p in check_protocol(fifo).problems] == ["unreadable-file"]


def test_a_folder_or_device_is_not_called_missing(tmp_path: Path) -> None:
    """A folder and a device are named for what they are, with the code unreadable-file."""
    with pytest.raises(InputFileError, match="is a folder"):
        read_yaml(tmp_path)
    if Path("/dev/null").exists():
        with pytest.raises(InputFileError, match="is a device"):
            read_yaml("/dev/null")
    report = check_protocol(tmp_path)
    assert [p.code for p in report.problems] == ["unreadable-file"]
    assert "does not exist" not in report.problems[0].message


def test_unclosed_bracket_is_placed_where_it_opened() -> None:
    """An unclosed '[' two lines above where the parser stops is reported at the '['.

    Source: the bracket's position counted by hand (line 2, column 22).
    """
    text = "study: x\nscreen: {resolution: [800, 600,\n  refresh_hz: 60}\nmarkers: 1\n"
    with pytest.raises(ProtocolError) as caught:
        read_yaml_text(text, filename="p.yaml")
    (problem,) = caught.value.problems
    assert (problem.line, problem.column) == (2, 22) and problem.code == "yaml-syntax"
    assert "'['" in problem.message and "not closed" in problem.message
