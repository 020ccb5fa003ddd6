"""The column registry end to end: a trial-table column trialdeck writes itself is refused by
check; any other column reaches trials.csv, the pooled export table and events.tsv unchanged."""

from __future__ import annotations

import csv
import shutil
from pathlib import Path

from export_pilots import MINI_PROTOCOL, SPEED

from runner.cli import main
from runner.contract.columns import ENGINE_COLUMNS, RESERVED_TABLE_COLUMNS
from runner.data.export import export_sessions
from runner.protocol.table import read_trial_table

HEADER = "stimulus,expected,set,nodes,density"
# Invented courier zones, one per table row (rows in table order).
ZONES = ["harbour", "old town", "north ring", "depot 7", "riverside"]


def _copy_with_column(tmp_path: Path, name: str) -> Path:
    """A copy of the mini protocol whose trial table has one more column, ``name``."""
    folder = tmp_path / "proto"
    shutil.copytree(MINI_PROTOCOL.parent, folder)
    table = folder / "table.csv"
    lines = table.read_text(encoding="utf-8").splitlines()
    assert lines[0] == HEADER and len(lines) == len(ZONES) + 1
    out = [f"{HEADER},{name}"] + [f"{ln},{z}" for ln, z in zip(lines[1:], ZONES, strict=True)]
    table.write_text("\n".join(out) + "\n", encoding="utf-8")
    return folder / MINI_PROTOCOL.name


def _table_zones(proto: Path, column: str) -> dict[str, str]:
    """Stimulus -> value of ``column``, read from the copy's table with the csv module."""
    with open(proto.parent / "table.csv", newline="", encoding="utf-8") as fh:
        return {row["stimulus"]: row[column] for row in csv.DictReader(fh)}


def test_every_engine_column_is_reserved() -> None:
    """Every column the engine writes into trials.csv, timed_out included, is reserved.

    Source: the trials.csv contract in docs/analysis.md (engine columns after the contract ones).
    """
    assert "timed_out" in ENGINE_COLUMNS
    assert set(ENGINE_COLUMNS) <= RESERVED_TABLE_COLUMNS
    assert not {"stimulus", "expected"} & RESERVED_TABLE_COLUMNS


def test_timed_out_column_is_refused_by_check_and_pilot(tmp_path, capsys) -> None:
    """A table column named timed_out fails check at the header's column (exit 1) and a pilot
    of it creates nothing.

    Source: the expected column is counted from the header text: len("stimulus,expected,set,
    nodes,density,") + 1.
    """
    proto = _copy_with_column(tmp_path, "timed_out")
    col = len(HEADER) + 2
    code = main(["check", str(proto)])
    text = capsys.readouterr()
    lines = [ln for ln in (text.out + text.err).splitlines() if ": error: " in ln]
    assert code == 1
    assert any(f"table.csv:1:{col}: error: " in ln and "'timed_out'" in ln for ln in lines), lines
    out = tmp_path / "out"
    code = main(["pilot", str(proto), "--participant", "P01", "--out", str(out)])
    capsys.readouterr()
    assert code == 1
    assert not out.exists()
    _, problems = read_trial_table(proto.parent / "table.csv")
    assert len(problems) == 1 and f"table.csv:1:{col}: error: " in problems[0].format()


def test_own_column_survives_into_trials_csv_pooled_table_and_events(tmp_path, capsys) -> None:
    """A non-clashing column (courier_zone) keeps every value, per stimulus, in the session's
    trials.csv, the pooled export table and the trial rows of events.tsv.

    Source: the trial table itself, read with Python's csv module, is the reference.
    """
    proto = _copy_with_column(tmp_path, "courier_zone")
    want = _table_zones(proto, "courier_zone")
    sessions = tmp_path / "sessions"
    code = main(
        ["pilot", str(proto), "--participant", "P01", "--out", str(sessions)]
        + ["--speed", str(SPEED)]
    )
    capsys.readouterr()
    assert code == 0
    (trials_csv,) = sessions.rglob("trials.csv")
    with open(trials_csv, newline="", encoding="utf-8") as fh:
        reader = csv.DictReader(fh)
        assert reader.fieldnames is not None
        assert reader.fieldnames.count("courier_zone") == 1
        rows = list(reader)
    assert rows and all(r["courier_zone"] == want[r["stimulus"]] for r in rows)

    result = export_sessions([sessions], tmp_path / "export")
    with open(result.pooled, newline="", encoding="utf-8") as fh:
        pooled = list(csv.DictReader(fh))
    assert len(pooled) == len(rows)
    assert all(r["courier_zone"] == want[r["stimulus"]] for r in pooled)

    ((tsv, _),) = result.events
    with open(tsv, newline="", encoding="utf-8") as fh:
        events = list(csv.DictReader(fh, delimiter="\t"))
    stimulus_rows = [r for r in events if r["trial_type"] == "stimulus"]
    assert len(stimulus_rows) == len(rows)
    assert all(r["courier_zone"] == want[r["stimulus"]] for r in stimulus_rows)
