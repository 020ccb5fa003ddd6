"""The protocol's texts are what the participant's screens show, in a real pilot."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest
import yaml
from conftest import MINI_PROTOCOL, run_pilot

from runner.journal.read import read_journal

TEXTS = {
    "key_space": "der Leertaste",
    "page_hint": "Weiter mit {key}.",
    "last_page_hint": "Ende mit {key}.",
    "feedback_correct": "Richtig.",
    "feedback_answer": "Richtig wäre {expected}.",
    "feedback_thanks": "Danke.",
    "answer_hint": "Zahl tippen, dann Enter.",
    "unsure_hint": "{key} = unsicher",
    "break_ready": "Weiter mit {key}, wenn Sie bereit sind.",
}


@pytest.mark.slow
def test_translated_texts_reach_the_screens(tmp_path: Path) -> None:
    """Page, last-page, typing, break and feedback screens journal the protocol's texts."""
    folder = tmp_path / "proto"
    shutil.copytree(MINI_PROTOCOL.parent, folder)
    data = yaml.safe_load(MINI_PROTOCOL.read_text(encoding="utf-8"))
    data["texts"] = TEXTS
    protocol = folder / "mini.yaml"
    protocol.write_text(yaml.safe_dump(data, allow_unicode=True), encoding="utf-8")
    result = run_pilot(protocol, tmp_path / "out", speed=20)
    assert result.status == "completed"
    flips = [
        r for r in read_journal(result.folder / "journal.jsonl").records if r.get("event") == "flip"
    ]
    views = [(r["kind"], r["view"]) for r in flips]
    pages = [v["hint"] for k, v in views if k == "page"]
    assert pages[0] == "Weiter mit der Leertaste." and pages[-1] == "Ende mit der Leertaste."
    typing = {v["hint"] for k, v in views if v["type"] == "AnswerView"}
    assert typing == {"Zahl tippen, dann Enter.   U = unsicher"}
    ready = {v["hint"] for k, v in views if k == "break-ready"}
    assert ready == {"Weiter mit der Leertaste, wenn Sie bereit sind."}
    feedback = {v["text"] for k, v in views if v["type"] == "FeedbackView"}
    assert feedback and feedback <= {"Richtig.", "Danke."} | {
        f"Richtig wäre {n}." for n in range(30)
    }
    rating = {v["hint"] for k, v in views if v["type"] == "RatingView"}
    assert rating == {
        "Press a number key from 1 to 9, or choose with the arrow keys and press Enter."
    }
