"""Export and summary on real pilot sessions: unlike sessions refused, exclusions applied alike."""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import pandas as pd
import pytest
from export_pilots import MINI_PROTOCOL
from rread import needs_r, same_kinds

from runner.cli import main

pytestmark = pytest.mark.slow  # runs pilot sessions in real time

RULES = (
    "exclusions: {unsure_share_above: 0.5, timed_out_share_above: 0.9,"
    " physio_valid_share_below: 0.5}\n"
)
ALWAYS_UNSURE = "pilot: {unsure_at_zero: 1.0, unsure_max: 1.0}\n"


def _protocol(base: Path, name: str, extra: str) -> Path:
    folder = base / name
    shutil.copytree(MINI_PROTOCOL.parent, folder)
    path = folder / "mini.yaml"
    path.write_text(path.read_text() + extra)
    return path


def _pilot(protocol: Path, out: Path, participant: str, speed: float) -> None:
    from runner.present.display import display_for
    from runner.protocol.load import load_protocol
    from runner.session.console import Console
    from runner.session.run import RunOptions, run_session

    loaded = load_protocol(protocol)
    opts = RunOptions(participant=participant, session="1", out=out, mode="pilot", speed=speed)
    run_session(
        loaded,
        opts,
        open_presenter=lambda: display_for(loaded, fullscreen=False),
        console=Console(quiet=True),
    )


@pytest.fixture(scope="module")
def pilots(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """P01 and P02 under one protocol with rules (P02 ran at another speed); P03 under a
    protocol whose simulated participant is always unsure (same rules, another hash)."""
    base = tmp_path_factory.mktemp("pool")
    plain = _protocol(base, "plain", RULES)
    unsure = _protocol(base, "unsure", RULES + ALWAYS_UNSURE)
    roots = {"alike": base / "alike", "speeds": base / "speeds", "protocols": base / "protocols"}
    _pilot(plain, roots["alike"], "P01", 20.0)
    _pilot(plain, roots["alike"], "P02", 20.0)
    shutil.copytree(roots["alike"], roots["speeds"])
    shutil.copytree(roots["alike"], roots["protocols"])
    _pilot(plain, roots["speeds"], "P04", 10.0)
    _pilot(unsure, roots["protocols"], "P03", 20.0)
    return roots


@pytest.mark.parametrize("root, differs", [("speeds", "speed"), ("protocols", "protocol")])
def test_unlike_sessions_are_refused_by_export_and_summary(pilots, tmp_path, capsys, root, differs):
    """Without --pool-unlike, export and summary exit 1 with one error line naming what
    differs, and write nothing."""
    for verb in ("export", "summary"):
        out = tmp_path / verb
        assert main([verb, str(pilots[root]), "--out", str(out)]) == 1
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and err[0].startswith("error: ")
        assert f"differ in {differs} (" in err[0]
        assert not out.exists()


def test_exclusions_are_applied_alike_by_export_and_summary(pilots, tmp_path, capsys):
    """With --pool-unlike, the always-unsure session is excluded by both: left out of export's
    trials.csv and every summary table, listed with its rule in the same exclusions.csv."""
    root = str(pilots["protocols"])
    assert main(["export", root, "--out", str(tmp_path / "x"), "--pool-unlike"]) == 0
    assert main(["summary", root, "--out", str(tmp_path / "s"), "--pool-unlike"]) == 0
    printed = capsys.readouterr().out
    assert printed.count("Excluded participant P03 session 1") == 2
    dtype = {"participant": str, "session": str}
    exported = pd.read_csv(tmp_path / "x" / "exclusions.csv", dtype=dtype)
    summarised = pd.read_csv(tmp_path / "s" / "exclusions.csv", dtype=dtype)
    pd.testing.assert_frame_equal(exported, summarised)
    out = exported[exported["excluded"] == 1]
    assert list(zip(out["participant"], out["rule"], strict=True)) == [
        ("P03", "unsure_share_above")
    ]
    assert out["value"].iloc[0] == 1.0
    trials = pd.read_csv(tmp_path / "x" / "trials.csv", dtype=dtype)
    assert set(trials["participant"]) == {"P01", "P02"}
    people = pd.read_csv(tmp_path / "s" / "participants.csv", dtype=dtype)
    assert set(people["participant"]) == {"P01", "P02"}
    facts = json.loads((tmp_path / "s" / "facts.json").read_text(encoding="utf-8"))
    assert facts["excluded"] == [
        {"participant": "P03", "session": "1", "rules": ["unsure_share_above"]}
    ]
    assert facts["studies"] == ["mini-test"] and len(facts["pooling"]["protocol"]) == 2
    html = (tmp_path / "s" / "report.html").read_text(encoding="utf-8")
    # The report's heading names the study; its first table lists the excluded session.
    assert "<h1>mini-test</h1>" in html
    assert re.search(
        r"<td[^>]*>P03</td><td[^>]*>1</td><td[^>]*>share of unsure answers above</td>", html
    )
    assert "exclusions.csv" in (tmp_path / "x" / ".bidsignore").read_text(encoding="utf-8")


def test_alike_sessions_pool_without_the_option(pilots, tmp_path):
    """Sessions of one protocol at one speed are exported and summarised as before."""
    assert main(["export", str(pilots["alike"]), "--out", str(tmp_path / "x")]) == 0
    assert main(["summary", str(pilots["alike"]), "--out", str(tmp_path / "s")]) == 0
    trials = pd.read_csv(tmp_path / "x" / "trials.csv", dtype={"participant": str})
    assert set(trials["participant"]) == {"P01", "P02"}


@needs_r
def test_r_reads_the_exported_tables_as_pandas_does(pilots, tmp_path):
    """The export's trials.csv and exclusions.csv read back with the same column kinds in R's
    read.csv and pandas (empty cells are missing numbers, not text).
    Source: R's utils::read.csv (R from the system packages), run with Rscript."""
    root = str(pilots["protocols"])
    assert main(["export", root, "--out", str(tmp_path / "x"), "--pool-unlike"]) == 0
    same_kinds([tmp_path / "x" / "trials.csv", tmp_path / "x" / "exclusions.csv"])


def test_physiology_table_excludes_through_the_command_line(pilots, tmp_path, capsys):
    """--physio gives export and summary the per-trial validity: a session with too few valid
    trials is excluded by both; without the table the rule is listed as not judged."""
    # Laid out as `trialdeck physio` writes it: physio_trials.csv with a JSON sidecar.
    physio = tmp_path / "physio_trials.csv"
    physio.write_text(
        "participant,session,trial,valid\nP01,1,1,1\nP01,1,2,1\nP02,1,1,0\nP02,1,2,1\nP02,1,3,0\n",
        encoding="utf-8",
    )
    sidecar = {"valid": {"Description": "1 when the trial's physiology is valid"}}
    physio.with_suffix(".json").write_text(json.dumps(sidecar), encoding="utf-8")
    root = str(pilots["alike"])
    for verb, out in (("export", tmp_path / "x"), ("summary", tmp_path / "s")):
        assert main([verb, root, "--out", str(out), "--physio", str(physio)]) == 0
        table = pd.read_csv(out / "exclusions.csv", dtype={"participant": str, "session": str})
        rule = table[table["rule"] == "physio_valid_share_below"].set_index("participant")
        assert rule.loc["P02", "excluded"] == 1 and rule.loc["P02", "value"] == 0.3333
        assert rule.loc["P01", "excluded"] == 0 and rule.loc["P01", "value"] == 1.0
    assert capsys.readouterr().out.count("Excluded participant P02 session 1") == 2
    assert main(["summary", root, "--out", str(tmp_path / "none")]) == 0
    table = pd.read_csv(tmp_path / "none" / "exclusions.csv")
    notes = set(table.loc[table["rule"] == "physio_valid_share_below", "note"])
    assert notes == {"no physiology table given"}
