"""One session timeline across attempts: clock epochs, and the wall clock across a restart."""

from __future__ import annotations

import pandas as pd
import pytest
from conftest import MINI_PROTOCOL, run_pilot
from journalcopy import crash_after_onset, rewrite_session

from runner.cli import main
from runner.journal.read import read_journal
from runner.journal.timeline import session_timeline
from runner.qa.audit import audit_session

WALL0 = 1_800_000_000.0  # an arbitrary wall-clock time, seconds since 1970


def _header(local: float, wall: float) -> dict:
    return {"event": "header", "lsl_clock_at_start": local, "wall_clock_unix_at_start": wall}


def _epoch(local: float, wall: float) -> dict:
    return {"event": "clock_epoch", "t": local, "wall_clock_unix": wall}


def test_same_clock_keeps_every_time():
    """A resume on the same clock (local and wall gaps agree) leaves every time as it is."""
    records = [
        _header(100.0, WALL0),
        {"event": "session_start", "t": 100.5},
        {"event": "trial_end", "t": 130.0},
        _epoch(400.0, WALL0 + 300.2),
        {"event": "session_interrupted", "t": 400.1},
        {"event": "session_resume", "t": 401.0},
    ]
    timeline = session_timeline(records)
    assert [s.offset for s in timeline.segments] == [0.0, 0.0]
    assert timeline.restarted == []


def test_restarted_clock_is_placed_by_the_wall_clock():
    """After a reboot the second attempt's clock reads less than the first's last line: its epoch
    goes the wall-clock gap after the first epoch.

    Source: by hand: attempt 1's epoch at 100 s (wall W), attempt 2's at local 5 s, wall W + 600 s,
    so attempt 2's epoch maps to 100 + 600 = 700 s, an offset of 695 s.
    """
    records = [
        _header(100.0, WALL0),
        {"event": "session_start", "t": 100.5},
        {"event": "trial_end", "t": 160.0},
        _epoch(5.0, WALL0 + 600.0),
        {"event": "session_interrupted", "t": 5.1},
        {"event": "session_resume", "t": 6.0},
        {"event": "trial_end", "t": 20.0},
    ]
    timeline = session_timeline(records)
    assert timeline.restarted == [2]
    assert timeline.segments[1].offset == pytest.approx(695.0)
    assert timeline.at(6, 20.0) == pytest.approx(715.0)
    assert timeline.at(2, 160.0) == 160.0


def test_wall_gap_disagreeing_by_more_than_a_second_counts_as_restart():
    """A later local reading whose gap differs from the wall gap by over 1 s (suspend, another
    computer) is also placed by the wall clock.

    Source: by hand: epochs local 100 -> 150 (gap 50 s) against wall gap 3600 s: offset 3550 s.
    """
    records = [
        _header(100.0, WALL0),
        {"event": "session_start", "t": 100.5},
        {"event": "trial_end", "t": 120.0},
        _epoch(150.0, WALL0 + 3600.0),
        {"event": "session_resume", "t": 151.0},
    ]
    timeline = session_timeline(records)
    assert timeline.restarted == [2]
    assert timeline.segments[1].offset == pytest.approx(3550.0)


def test_wall_clock_set_back_never_moves_the_timeline_back():
    """A wall clock that went back between attempts places the attempt at the previous last line.

    Source: by hand: attempt 1 ends at 160 s; the wall says the resume came 10 s before the first
    epoch, so the epoch (local 5 s) is placed at 160 s: offset 155 s.
    """
    records = [
        _header(100.0, WALL0),
        {"event": "trial_end", "t": 160.0},
        _epoch(5.0, WALL0 - 10.0),
        {"event": "session_resume", "t": 6.0},
    ]
    assert session_timeline(records).segments[1].offset == pytest.approx(155.0)


def test_journal_without_epochs_that_goes_back_follows_journal_order():
    """An older journal without clock epochs: a resume whose times go back starts at the previous
    attempt's last line.

    Source: by hand: last line 160 s, the resume's first line 5 s: offset 155 s.
    """
    records = [
        {"event": "header"},
        {"event": "session_start", "t": 100.0},
        {"event": "trial_end", "t": 160.0},
        {"event": "session_interrupted", "t": 5.0},
        {"event": "display_check", "t": 5.5},
        {"event": "session_resume", "t": 6.0},
    ]
    timeline = session_timeline(records)
    assert len(timeline.segments) == 2 and timeline.segments[1].first == 3
    assert timeline.segments[1].offset == pytest.approx(155.0)


def _export(folder, out) -> pd.DataFrame:
    assert main(["export", str(folder), "--out", str(out)]) == 0
    (tsv,) = out.rglob("*_events.tsv")
    return pd.read_csv(tsv, sep="\t", na_values="n/a", keep_default_na=False)


@pytest.mark.slow
def test_resume_after_a_clock_restart_exports_one_forward_timeline(tmp_path):
    """A pilot crashed and resumed, then rewritten (chain intact) as if the computer rebooted
    before the resume: events.tsv onsets stay non-negative, go forward across attempts and equal
    the unrewritten session's within 5 ms; audit notes the restart with a stable code.

    Source: the same session's export before the rewrite, whose attempts share one clock.
    """
    first = run_pilot(MINI_PROTOCOL, tmp_path / "out")
    crash_after_onset(first.folder, 3)
    done = run_pilot(MINI_PROTOCOL, tmp_path / "out", resume=True)
    assert done.status == "completed"
    records = read_journal(done.journal).records
    epoch = next(i for i, r in enumerate(records) if r["event"] == "clock_epoch")
    last_t = max(r["t"] for r in records[:epoch] if "t" in r)
    # The rebooted computer's clock reads about 1 s at the resume, far below attempt 1's times.
    shift = records[epoch]["t"] - 1.0

    def reboot(i: int, rec: dict) -> dict:
        if i >= epoch and "t" in rec:
            rec = {**rec, "t": rec["t"] - shift}
        return rec

    rebooted = rewrite_session(done.folder, tmp_path / "rebooted" / "ses-1", reboot)
    raw = read_journal(rebooted / "journal.jsonl").records
    assert raw[epoch]["t"] < last_t  # the condition the timeline has to repair

    before = _export(done.folder, tmp_path / "bids-before")
    after = _export(rebooted, tmp_path / "bids-after")
    assert (after["onset"] >= 0).all()
    first, second = after[after["attempt"] == 1], after[after["attempt"] == 2]
    assert len(second) > 0 and second["onset"].min() >= first["onset"].max()
    assert list(after["trial_type"]) == list(before["trial_type"])
    assert (after["onset"] - before["onset"]).abs().max() < 0.005

    audit = audit_session(rebooted)
    assert audit.ok, [p.format() for p in audit.errors]
    assert "clock-restarted" in [p.code for p in audit.problems]
    segments = audit.facts["timeline"]
    assert [s["clock_restarted"] for s in segments] == [False, True]
    assert segments[1]["placed_by"] == "wall clock"
    assert segments[1]["first_line"] == epoch + 1
    # The same session without the rewrite: one clock, nothing to note.
    plain = audit_session(done.folder)
    assert "clock-restarted" not in [p.code for p in plain.problems]
