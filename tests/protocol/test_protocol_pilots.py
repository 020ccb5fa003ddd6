"""Protocol features end to end: a pilot with the simulated participant runs each one."""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np
import pytest
from PIL import Image
from protofix import merged, write_protocol

from runner.cli import main
from runner.protocol.latin import williams_rows
from runner.session.journal import read_journal

pytestmark = pytest.mark.slow  # runs sessions in real time

SPEED = "25"


def _pilot(path: Path, out: Path, participant: str, *extra: str) -> Path:
    code = main(
        [
            "pilot",
            str(path),
            "--participant",
            participant,
            "--out",
            str(out),
            "--speed",
            SPEED,
            *extra,
        ]
    )
    assert code == 0
    return out / "courier-check" / f"sub-{participant}" / "ses-1"


def test_session_structure_runs_in_order_with_markers(tmp_path: Path, capsys) -> None:
    """Pages (text and Markdown file), rest, practice with feedback, blocks and breaks all run."""
    (tmp_path / "intro.md").write_text("# Welcome\n- count the stops\n", encoding="utf-8")
    rows = [("img/p.png", "3", "practice", "sparse")] + [
        (f"img/{lvl}{k}.png", str(3 + k), "main", lvl)
        for lvl in ("sparse", "dense", "medium")
        for k in range(2)
    ]
    protocol = merged(
        sequence=[
            {"page": {"file": "intro.md"}},
            {"rest": {"seconds": 2, "label": "baseline", "show": "blank"}},
            {"practice": {"where": {"set": "practice"}, "feedback": True}},
            {
                "blocks": {
                    "where": {"set": "main"},
                    "by": "density",
                    "levels": ["sparse", "dense", "medium"],
                    "max_run": {"expected": 1},
                }
            },
            {"page": {"text": "Thank you."}},
        ],
        breaks={"every_trials": 3, "min_s": 0.5},
    )
    path = write_protocol(tmp_path, protocol, rows=rows)
    folder = _pilot(path, tmp_path / "out", "P02")
    capsys.readouterr()
    journal = read_journal(folder / "journal.jsonl")
    assert not journal.chain_errors
    names = [r["event"] for r in journal.records if r["event"] != "flip"]
    pages = [r for r in journal.records if r["event"] == "page_onset"]
    assert len(pages) == 2
    assert names.index("rest_start") < names.index("rest_end") < names.index("block_start")
    rest = [r for r in journal.records if r["event"] in ("rest_start", "rest_end")]
    assert all("marker" in r for r in rest)
    assert rest[1]["actual_s"] >= 2 / float(SPEED) - 1 / 60
    page_flip = next(r for r in journal.records if r["event"] == "flip" and r["kind"] == "page")
    assert page_flip["view"]["text"].startswith("# Welcome")
    feedback = [r for r in journal.records if r["event"] == "feedback_onset"]
    assert len(feedback) == 1 and feedback[0]["trial"] == 1
    breaks = [r for r in journal.records if r["event"] == "break_end"]
    assert len(breaks) == 1 and breaks[0]["actual_s"] >= 0.5 / float(SPEED)
    # Participant 2 gets row 2 of the Williams square for three levels (written order).
    levels = ["sparse", "dense", "medium"]
    expected_order = [levels[i] for i in williams_rows(3)[1]]
    with open(folder / "trials.csv", encoding="utf-8") as fh:
        trials = list(csv.DictReader(fh))
    seen = list(dict.fromkeys(t["block"] for t in trials if t["part"] == "main"))
    assert seen == expected_order
    for level in levels:
        counts = [t["expected"] for t in trials if t["block"] == level]
        assert all(a != b for a, b in zip(counts, counts[1:], strict=False))


def test_timed_breaks_follow_breaks_every_minutes(tmp_path: Path, capsys) -> None:
    """breaks.every_minutes inserts breaks during a block, journaled and marked."""
    protocol = merged(breaks={"every_minutes": 0.02, "min_s": 0.5})
    folder = _pilot(write_protocol(tmp_path, protocol), tmp_path / "out", "P01")
    capsys.readouterr()
    journal = read_journal(folder / "journal.jsonl")
    starts = [r for r in journal.records if r["event"] == "break_start"]
    assert starts and all(r["item"] == -1 and "marker" in r for r in starts)


def test_answer_over_stimulus_with_overrides_timeout_and_size(tmp_path: Path, capsys) -> None:
    """'over' answers, per-trial prompt and question, a 5-point scale, a timeout, size in degrees.

    Source: visual angle V = 2 atan(S / 2D); 10 degrees at 57 cm on a 40 cm wide 640 px screen is
    2 * 57 * tan(5 degrees) cm = 9.974 cm = 159.6 px, so the stimulus is drawn 160 px wide.
    """
    rows = [
        ("img/a.png", "3", "main", "sparse", "How many depots?", "How sure are you?"),
        ("img/b.png", "4", "main", "dense", "", ""),
    ]
    protocol = merged(
        screen={
            "resolution": [640, 480],
            "refresh_hz": 60,
            "background": "#808080",
            "width_cm": 40,
            "distance_cm": 57,
        },
        answer={"mode": "over", "max": 60, "prompt_column": "prompt"},
        rating={
            "points": 5,
            "low": "easy",
            "high": "hard",
            "mid": "medium",
            "question_column": "question",
        },
        timing={"fixation_ms": [100, 100], "gap_ms": 100, "stimulus_limit_s": 0.02},
        sequence=[{"trials": {"where": {"set": "main"}, "shuffle": False}}],
    )
    protocol["stimulus_size"] = {"width_deg": 10}
    path = write_protocol(
        tmp_path, protocol, rows=[r[:4] for r in rows], image_size=(200, 100), colour=(200, 60, 60)
    )
    header = "stimulus,expected,set,density,prompt,question\n"
    (tmp_path / "table.csv").write_text(
        header + "".join(",".join(r) + "\n" for r in rows), encoding="utf-8"
    )
    frames = tmp_path / "frames"
    folder = _pilot(path, tmp_path / "out", "P01", "--frames", str(frames))
    capsys.readouterr()
    journal = read_journal(folder / "journal.jsonl")
    stim = [r for r in journal.records if r["event"] == "flip" and r["kind"] == "stimulus"]
    assert [s["view"]["prompt"] for s in stim] == ["How many depots?", "How many stops?"]
    ratings = [r for r in journal.records if r["event"] == "flip" and r["kind"] == "rating"]
    assert ratings[0]["view"]["question"] == "How sure are you?"
    assert ratings[1]["view"]["question"] == "How hard was that?"
    assert {r["view"]["points"] for r in ratings} == {5}
    assert {r["view"]["mid"] for r in ratings} == {"medium"}
    # Only trial 1 is asserted: the simulated participant's keys planned for a timed-out trial
    # are still posted later and can answer the next trial (reported to the engine's owner).
    offset = next(r for r in journal.records if r["event"] == "stimulus_offset")
    answer = next(r for r in journal.records if r["event"] == "answer")
    assert offset["trial"] == 1 and offset["timed_out"] is True
    assert answer["timed_out"] is True and answer["answer"] is None
    expected_px = 2 * 57 * math.tan(math.radians(5)) / 40 * 640
    assert round(expected_px) == 160
    widths = set()
    for png in frames.glob("*.png"):
        pixels = np.asarray(Image.open(png).convert("RGB")).astype(int)
        dark = np.all(np.abs(pixels - (200, 60, 60)) <= 3, axis=2)  # smoothscale rounds
        if dark.sum() > 1000:
            cols = np.flatnonzero(dark.any(axis=0))
            widths.add(int(cols[-1] - cols[0] + 1))
    assert widths == {round(expected_px)}
