"""Ratings given with the mouse: a click on a box of the scale, through the real pygame event path."""

from __future__ import annotations

import csv
import shutil

import pytest
from conftest import MINI_PROTOCOL, run_pilot

from runner.protocol.load import load_protocol
from runner.protocol.schedule import build_schedule
from runner.session.journal import read_journal
from runner.session.simulate import plan_trial

pytestmark = pytest.mark.slow  # runs sessions in real time


def test_mouse_ratings_are_taken_from_clicks(tmp_path):
    """With rating.input: mouse, the simulated participant clicks the centre of a box, the click
    is hit-tested against the drawn boxes, and the rating journaled is the clicked box's number."""
    folder = tmp_path / "proto"
    shutil.copytree(MINI_PROTOCOL.parent, folder)
    path = folder / "mini.yaml"
    text = path.read_text()
    path.write_text(text.replace('high: "very hard"}', 'high: "very hard", input: mouse}'))
    result = run_pilot(path, tmp_path / "out")
    read = read_journal(result.journal)
    ratings = [r for r in read.events("rating") if r.get("rating") is not None]
    assert len(ratings) == 5 and all(r["via"] == "mouse" for r in ratings)
    hints = {f["view"]["hint"] for f in read.events("flip") if f["view"]["type"] == "RatingView"}
    assert hints == {"Click a box."}
    with open(result.trials_csv, newline="") as fh:
        rows = list(csv.DictReader(fh))
    journaled = {r["trial"]: r["rating"] for r in ratings}
    assert all(int(row["rating"]) == journaled[int(row["trial"])] for row in rows)
    loaded = load_protocol(path)
    schedule = build_schedule(loaded, "P01", "1")
    for t in schedule.trials:
        intended = plan_trial(schedule.seed, t, points=9, max_answer=loaded.model.answer.max).rating
        assert journaled[t.trial] == intended
