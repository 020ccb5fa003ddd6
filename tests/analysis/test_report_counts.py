"""The report's counts take the right number ("1 trial", never "1 trials")."""

from __future__ import annotations

import re

from synthetic import make_pool

from runner.data.summary import write_summary


def test_single_counts_are_singular(tmp_path):
    """One main trial of one pilot session: the report says 1 trial, 1 session, 1 participant."""
    trials, sessions = make_pool(1, 1)
    write_summary(trials, sessions, tmp_path, factors=["nodes"])
    html = (tmp_path / "report.html").read_text(encoding="utf-8")
    assert "The analysis includes 1 main-part trial from 1 session of 1 participant." in html
    assert "3 practice trials are left out" in html
    assert "The session was run by the simulated participant" in html
    assert not re.search(r"\b1 (trials|sessions|participants|pilots)\b", html)
