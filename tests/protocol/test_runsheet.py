"""The run sheet and `check --json`: counts, lengths and each participant's plan."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from protofix import write_protocol

from runner.cli import main
from runner.protocol.latin import block_order, williams_rows
from runner.protocol.load import load_protocol
from runner.protocol.runsheet import format_run_sheet, labels, run_sheet
from runner.protocol.schedule import build_schedule, participant_index


def test_json_carries_counts_lengths_and_problems(tmp_path: Path, capsys) -> None:
    """`check --json` is one object whose counts agree with the schedule it describes."""
    path = write_protocol(tmp_path)
    assert main(["check", str(path), "--json"]) == 0
    report = json.loads(capsys.readouterr().out)
    assert report["format"] == 2 and report["ok"] is True
    assert isinstance(report["problems"], list) and report["errors"] == 0
    schedule = build_schedule(load_protocol(path), "1", "1")
    trials = schedule.trials
    assert report["counts"]["trials"] == len(trials)
    assert report["counts"]["practice"] == sum(t.part == "practice" for t in trials)
    assert sum(b["trials"] for b in report["counts"]["blocks"]) == len(trials)
    length = report["length_s"]
    assert 0 < length["shortest"] <= length["typical"]
    assert report["run_sheet"] is None
    assert set(report["contrast"]) == {"text", "hints", "headings"}


def test_run_sheet_rows_follow_the_williams_square(tmp_path: Path) -> None:
    """Each participant's block order is the Williams-square row of its label's index.

    Source: Williams (1949) balanced Latin square rows as computed by runner.protocol.latin
    (itself tested against the published construction); the run sheet must agree with the
    schedule each session builds.
    """
    loaded = load_protocol(write_protocol(tmp_path))
    sheet = run_sheet(loaded, 5)
    assert [r.participant for r in sheet] == ["P01", "P02", "P03", "P04", "P05"]
    step = next(iter(sheet[0].block_orders))
    levels = sorted(sheet[0].block_orders[step])
    n_rows = len(williams_rows(len(levels)))
    for r in sheet:
        schedule = build_schedule(loaded, r.participant, "1")
        assert r.seed == schedule.seed
        assert r.trials == len(schedule.trials)
        assert r.block_orders[step] == block_order(levels, r.index, method="balanced-latin")
        assert r.rows[step] == f"{r.index % n_rows + 1} of {n_rows}"


def test_p1_and_p01_share_a_row_but_not_a_seed(tmp_path: Path) -> None:
    """'P1' and 'P01' map to the same counterbalancing index, with different seeds."""
    loaded = load_protocol(write_protocol(tmp_path))
    a, b = build_schedule(loaded, "P1", "1"), build_schedule(loaded, "P01", "1")
    assert participant_index("P1") == participant_index("P01") == 0
    assert a.participant_index == b.participant_index and a.seed != b.seed


def test_labels_are_zero_padded_to_the_largest_number() -> None:
    """Two digits up to 99 participants, three from 100."""
    assert labels(3) == ["P01", "P02", "P03"]
    assert labels(100)[0] == "P001" and labels(100)[-1] == "P100"


def test_run_sheet_file_is_printable_markdown(tmp_path: Path, capsys) -> None:
    """--run-sheet writes one table row per participant and the label rule."""
    path = write_protocol(tmp_path / "study")
    sheet = tmp_path / "sheet.md"
    code = main(["check", str(path), "--participants", "4", "--run-sheet", str(sheet)])
    out = capsys.readouterr().out
    assert code == 0 and "participant labels:" in out
    text = sheet.read_text(encoding="utf-8")
    rows = [ln for ln in text.splitlines() if ln.startswith("| P0")]
    assert len(rows) == 4
    assert "P1, P01" in text and "without digits" in text
    loaded = load_protocol(path)
    assert text == format_run_sheet(loaded, run_sheet(loaded, 4))


def test_run_sheet_needs_participants_and_a_new_file(tmp_path: Path, capsys) -> None:
    """--run-sheet without --participants, or onto an existing file, is a usage error."""
    path = write_protocol(tmp_path / "study")
    sheet = tmp_path / "sheet.md"
    assert main(["check", str(path), "--run-sheet", str(sheet)]) == 2
    sheet.write_text("mine", encoding="utf-8")
    assert main(["check", str(path), "--participants", "2", "--run-sheet", str(sheet)]) == 2
    assert sheet.read_text(encoding="utf-8") == "mine"
    capsys.readouterr()


@pytest.mark.parametrize("participants", [2, 6])
def test_json_run_sheet_has_one_row_per_participant(tmp_path: Path, capsys, participants) -> None:
    """With --participants N the JSON carries N run-sheet rows, each with a block order."""
    path = write_protocol(tmp_path)
    main(["check", str(path), "--json", "--participants", str(participants)])
    report = json.loads(capsys.readouterr().out)
    assert len(report["run_sheet"]) == participants
    assert all(r["block_orders"] for r in report["run_sheet"])
