"""Every exit path leaves a readable, fsynced journal and a trials.csv of what was completed."""

from __future__ import annotations

import csv
import shutil

import pytest
from conftest import MINI_PROTOCOL, run_pilot

from runner.cli import main
from runner.session.journal import read_journal

pytestmark = pytest.mark.slow  # runs sessions in real time


def _rows(path):
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def test_confirmed_abort_keeps_completed_trials(tmp_path, capsys):
    """Escape then Y at trial 3 ends the session: journal intact, trials 1-2 in trials.csv, exit 1."""
    code = main(
        [
            "pilot",
            str(MINI_PROTOCOL),
            "--participant",
            "P01",
            "--out",
            str(tmp_path),
            "--speed",
            "20",
            "--sim-abort-at",
            "3",
        ]
    )
    out = capsys.readouterr().out
    assert code == 1
    assert "Session aborted: 2 of 5 trials." in out
    folder = tmp_path / "mini-test" / "sub-P01" / "ses-1"
    read = read_journal(folder / "journal.jsonl")
    assert not read.chain_errors and not read.torn_tail
    events = [r["event"] for r in read.records]
    assert "abort_requested" in events and events[-2:] == ["abort", "session_end"]
    assert read.records[-1]["status"] == "aborted"
    assert [r["trial"] for r in _rows(folder / "trials.csv")] == ["1", "2"]


def test_exception_mid_trial_is_journaled(tmp_path, capsys, monkeypatch):
    """A stimulus that cannot be decoded at trial time fails the session cleanly: the error is
    journaled, earlier trials are in trials.csv, and the user sees one plain line, no traceback."""
    import runner.session.run as run_module

    folder = tmp_path / "proto"
    shutil.copytree(MINI_PROTOCOL.parent, folder)
    real_run = run_module.run_session

    def damage_then_run(*args, **kwargs):
        # Loading and checking decode every stimulus, so the damage must come after them, as
        # when a file is replaced while the session runs. Trial order for P01 puts route1
        # (practice) first.
        (folder / "img" / "route3.png").write_bytes(b"not a png")
        return real_run(*args, **kwargs)

    monkeypatch.setattr(run_module, "run_session", damage_then_run)
    code = main(
        [
            "pilot",
            str(folder / "mini.yaml"),
            "--participant",
            "P01",
            "--out",
            str(tmp_path / "out"),
            "--speed",
            "20",
        ]
    )
    captured = capsys.readouterr()
    assert code == 1
    assert "Traceback" not in captured.err
    assert "cannot be decoded" in captured.err
    session = tmp_path / "out" / "mini-test" / "sub-P01" / "ses-1"
    read = read_journal(session / "journal.jsonl")
    assert not read.chain_errors
    assert read.records[-1]["event"] == "session_end" and read.records[-1]["status"] == "failed"
    assert any(r["event"] == "error" for r in read.records)
    rows = _rows(session / "trials.csv")
    assert 1 <= len(rows) < 5


def test_interrupted_run_result_reports_completed_count(tmp_path):
    """The run result counts completed trials and the journal ends with session_end completed."""
    result = run_pilot(MINI_PROTOCOL, tmp_path, participant="P05")
    assert result.status == "completed" and result.trials_done == result.trials_total == 5
    read = read_journal(result.journal)
    assert read.records[-1]["event"] == "session_end" and read.records[-1]["status"] == "completed"


def test_stop_signal_ends_the_session_cleanly(tmp_path):
    """SIGTERM (SDL turns it into a window-close event) ends a pilot as an abort without asking:
    exit 1, a closed journal whose last line is session_end 'aborted', and a trials.csv."""
    import os
    import signal
    import subprocess
    import sys
    import time

    from conftest import REPO

    out = tmp_path / "out"
    proc = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "runner",
            "pilot",
            str(MINI_PROTOCOL),
            "--participant",
            "P01",
            "--out",
            str(out),
            "--speed",
            "2",
        ],
        cwd=REPO,
        env=dict(os.environ),
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
    )
    journal = out / "mini-test" / "sub-P01" / "ses-1" / "journal.jsonl"
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and not (
        journal.exists() and b"fixation_onset" in journal.read_bytes()
    ):
        time.sleep(0.1)
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 1, err
    assert b"Traceback" not in err
    read = read_journal(journal)
    assert not read.chain_errors and not read.torn_tail
    assert read.records[-1]["event"] == "session_end" and read.records[-1]["status"] == "aborted"
    assert (journal.parent / "trials.csv").exists()
