"""The experimenter's console: states of the participant's screen, block order, next break."""

from __future__ import annotations

import io
from pathlib import Path

import pytest
from conftest import MINI_PROTOCOL
from rich.console import Console as RichConsole

from runner.protocol.load import load_protocol
from runner.protocol.schedule import build_schedule
from runner.session.console import Console, break_points
from runner.session.views import BlankView, BreakView


def _console(**kw) -> tuple[Console, io.StringIO]:
    buf = io.StringIO()
    return Console(rich_console=RichConsole(file=buf, width=200), **kw), buf


def _schedule():
    return build_schedule(load_protocol(MINI_PROTOCOL), "P01", "1")


def test_break_points_are_the_trials_before_each_break() -> None:
    """Each break comes after the trial count reached just before it in the schedule."""
    schedule = _schedule()
    expected, seen = [], 0
    for item in schedule.items:
        seen += len(item.trials) if item.kind == "block" else 0
        if item.kind == "break":
            expected.append(seen)
    assert expected and break_points(schedule) == expected


def test_plain_console_prints_block_order_and_breaks() -> None:
    """The plain console names the blocks in the participant's order and the break points."""
    schedule = _schedule()
    console, buf = _console()
    console.plan(schedule)
    text = buf.getvalue()
    blocks = [it.trials[0].block for it in schedule.items if it.kind == "block" and it.trials]
    assert "Block order: " + " → ".join(blocks) in text
    assert "Breaks after trials " + ", ".join(map(str, break_points(schedule))) in text


def test_status_shows_breaks_and_rests_as_states() -> None:
    """A break screen, then a rest screen, show as states with the next break and block order."""
    schedule = _schedule()
    console, buf = _console(quiet=False)
    console.plan(schedule)
    console.on_view("break", 0.0, None, BreakView("rest", 5))
    status = console.status()
    assert status["state"].startswith("BREAK")
    assert status["next break"].startswith(f"after trial {break_points(schedule)[0]}")
    assert "→" in status["block order"]
    console.on_view("rest", 1.0, None, BlankView())
    assert console.status()["state"].startswith("REST")
    assert "BREAK: the participant rests" in buf.getvalue()


@pytest.mark.slow
def test_pilot_console_reports_each_break(tmp_path: Path) -> None:
    """A real pilot's console prints one break line per planned break and the block order."""
    from runner.present.display import display_for
    from runner.session.run import RunOptions, run_session

    loaded = load_protocol(MINI_PROTOCOL)
    console, buf = _console()
    console.plan(build_schedule(loaded, "P01", "1"))
    opts = RunOptions(participant="P01", session="1", out=tmp_path, mode="pilot", speed=20)
    result = run_session(
        loaded,
        opts,
        open_presenter=lambda: display_for(loaded, fullscreen=False),
        console=console,
        observers=[console],
    )
    assert result.status == "completed"
    text = buf.getvalue()
    assert text.count("BREAK: the participant rests") == len(break_points(_schedule()))
    assert text.count("REST: the participant looks") == 1
