"""The self-test measures this machine and gives a verdict (run here under the SDL dummy driver)."""

from __future__ import annotations

import json

import pytest
from conftest import MINI_PROTOCOL

from runner.cli import main
from runner.present.selftest import run_selftest

pytestmark = pytest.mark.slow  # measures the display, input and markers in real time


def test_selftest_reports_every_figure_and_refuses_a_headless_display():
    """Under the dummy driver the self-test measures polling, marker delays, loopback delivery and
    decode times, reports that flips do not block, and so does not call the machine ready.

    Source: liblsl loopback delivery through a real pylsl inlet on this machine is the reference
    for the marker latency figures.
    """
    rep = run_selftest(MINI_PROTOCOL, seconds=0.5, fullscreen=False)
    assert rep.refresh["blocking"] is False
    assert rep.flips_in_run >= 20  # 0.5 s of paced 60 Hz flips
    assert rep.late_flips == 0
    assert rep.poll_hz > 100
    assert 0 < rep.flip_to_marker["median_ms"] < 50
    assert 0 < rep.loopback["median_ms"] < 100
    assert rep.decode["files"] == 5 and rep.decode["max_ms"] > 0
    assert not rep.ready
    assert any("do not wait for the screen's refresh" in p for p in rep.problems)
    text = "\n".join(rep.lines())
    assert "Verdict: NOT READY" in text and "flips do NOT block" in text


def test_selftest_command_prints_json(capsys):
    """`trialdeck selftest PROTOCOL --json` prints the figures as JSON and exits 1 when not ready."""
    code = main(["selftest", str(MINI_PROTOCOL), "--json", "--seconds", "0.3", "--windowed"])
    data = json.loads(capsys.readouterr().out)
    assert code == 1 and data["ready"] is False
    assert {"refresh", "late_flips", "poll_hz", "flip_to_marker", "loopback", "decode"} <= set(data)
