"""`trialdeck summary --physio` on real pilot sessions: the model files and facts are written."""

from __future__ import annotations

import argparse
import csv
import json
from pathlib import Path

import numpy as np
import pytest
from export_pilots import pilot_root

from runner.cli.summary import add_arguments, run
from runner.data.pooled import pooled_trials
from runner.data.sessions import SUMMARY_EVENTS, load_sessions
from runner.errors import InputFileError


def _physio_folder(pilots: Path, folder: Path) -> Path:
    """A physio_trials.csv (+ sidecar) for every completed trial of the pilots (synthetic)."""
    trials = pooled_trials(load_sessions([pilots], decode=SUMMARY_EVENTS, keep_records=False))
    rng = np.random.default_rng(4)
    folder.mkdir()
    with (folder / "physio_trials.csv").open("w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(["participant", "session", "trial", "hr_bpm", "hr_flags"])
        for row in trials.itertuples(index=False):
            hr = 70 + rng.normal(0, 2)
            writer.writerow([row.participant, row.session, row.trial, f"{hr:.3f}", ""])
    sidecar = {
        "participant": {"Description": "Participant label.", "Units": "", "Kind": "key"},
        "session": {"Description": "Session label.", "Units": "", "Kind": "key"},
        "trial": {"Description": "Trial number.", "Units": "", "Kind": "key"},
        "hr_bpm": {"Description": "Heart rate.", "Units": "bpm", "Kind": "measure"},
        "hr_flags": {"Description": "Why heart rate is missing.", "Units": "", "Kind": "flag"},
    }
    (folder / "physio_trials.json").write_text(json.dumps(sidecar), encoding="utf-8")
    return folder


@pytest.mark.slow
def test_summary_command_relates_physiology_to_difficulty(
    tmp_path_factory: pytest.TempPathFactory, tmp_path: Path
) -> None:
    """--physio FOLDER reads the table and sidecar; facts and the load tables name the measure."""
    pilots = pilot_root(tmp_path_factory.getbasetemp())
    physio = _physio_folder(pilots, tmp_path / "physio")
    parser = argparse.ArgumentParser()
    add_arguments(parser)
    out = tmp_path / "summary"
    assert run(parser.parse_args([str(pilots), "--out", str(out), "--physio", str(physio)])) == 0
    facts = json.loads((out / "facts.json").read_text(encoding="utf-8"))
    assert {"difficulty", "drivers", "load"} <= set(facts)
    measures = [m["measure"] for m in facts["load"]["measures"]]
    assert facts["difficulty"]["available"] and measures == ["rt_ms", "accuracy", "hr_bpm"]
    matched = [n for n in facts["load"]["notes"] if n.startswith("Physiology matched")]
    assert len(matched) == 1
    _, count, _, total, _ = matched[0].rsplit(" ", 4)
    assert count == total and int(total) > 0
    with (out / "load_twolines.csv").open(encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["measure"] for r in rows] == measures
    # Four stimuli give four distinct scores: too few for the flexible fit, and it says so.
    assert all("distinct" in r["reason"] for r in rows)
    assert facts["drivers"]["available"] is False and "(4)" in facts["drivers"]["reason"]
    missing = parser.parse_args(
        [str(pilots), "--out", str(tmp_path / "again"), "--physio", str(tmp_path / "nowhere")]
    )
    with pytest.raises(InputFileError):
        run(missing)
