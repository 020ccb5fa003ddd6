"""A resume continues the session as it was run: its mode, its speed and its stimuli."""

from __future__ import annotations

import hashlib
import json
import shutil
from pathlib import Path

import pytest
from conftest import TEST_DATA, run_pilot
from journalcopy import crash_after_onset, rewrite_session

from runner.cli import main
from runner.journal.read import read_journal
from runner.protocol.load import load_protocol
from runner.qa.audit import audit_session
from runner.session.console import Console
from runner.session.resume import ResumeRefused, resume_speed
from runner.session.run import RunOptions, run_session


@pytest.fixture
def protocol_dir(tmp_path) -> Path:
    """A private copy of the mini protocol, whose stimuli a test may replace."""
    dest = tmp_path / "proto"
    shutil.copytree(TEST_DATA / "mini", dest)
    return dest


def _journal_bytes(folder: Path) -> bytes:
    return (folder / "journal.jsonl").read_bytes()


def test_resume_speed_rules():
    """The journaled speed is kept; the same explicit speed is fine, another or a mode is refused."""
    header = {"mode": "pilot", "speed": 20.0}
    assert resume_speed(header, "pilot", None) == 20.0
    assert resume_speed(header, "pilot", 20.0) == 20.0
    with pytest.raises(ResumeRefused, match="--speed 20"):
        resume_speed(header, "pilot", 4.0)
    with pytest.raises(ResumeRefused, match="trialdeck pilot --resume"):
        resume_speed(header, "live", None)
    with pytest.raises(ResumeRefused, match="trialdeck run --resume"):
        resume_speed({"mode": "live", "speed": 1.0}, "pilot", None)


@pytest.mark.slow
def test_pilot_resume_of_a_live_session_and_a_new_speed_are_refused(protocol_dir, tmp_path, capsys):
    """`pilot --resume` of a live session exits 1 naming the mode and writes nothing, as does a
    live resume of a pilot; a pilot resumed with another --speed is refused, and without --speed
    it keeps the journaled one."""
    out = tmp_path / "out"
    aborted = run_pilot(protocol_dir / "mini.yaml", out, speed=20.0)
    crash_after_onset(aborted.folder, 3)
    live = rewrite_session(
        aborted.folder,
        tmp_path / "live" / "mini-test" / "sub-P01" / "ses-1",
        lambda i, r: {**r, "mode": "live", "speed": 1.0} if i == 0 else r,
    )
    before = _journal_bytes(live)
    base = ["pilot", str(protocol_dir / "mini.yaml"), "--participant", "P01", "--resume"]
    assert main([*base, "--out", str(tmp_path / "live")]) == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "live session" in err[0] and "trialdeck run --resume" in err[0]
    assert _journal_bytes(live) == before

    before = _journal_bytes(aborted.folder)
    assert main([*base, "--out", str(out), "--speed", "5"]) == 1
    assert "--speed 20" in capsys.readouterr().err
    assert _journal_bytes(aborted.folder) == before

    def no_display():
        raise AssertionError("a refused resume must not open the display")

    loaded = load_protocol(protocol_dir / "mini.yaml")
    live_opts = RunOptions(participant="P01", out=out, mode="live", resume=True)
    with pytest.raises(ResumeRefused, match="trialdeck pilot --resume"):
        run_session(loaded, live_opts, open_presenter=no_display, console=Console(quiet=True))
    assert _journal_bytes(aborted.folder) == before

    assert main([*base, "--out", str(out)]) == 0
    read = read_journal(aborted.folder / "journal.jsonl")
    (check,) = read.events("display_check")
    assert check["speed"] == 20.0 and check["mode"] == "pilot"


@pytest.mark.slow
def test_changed_stimulus_refuses_resume_unless_accepted_and_audit_reports_it(
    protocol_dir, tmp_path
):
    """A stimulus replaced between a crash and the resume is named and refused (journal untouched);
    with --accept-changed-stimuli the resume completes, journals old and new hashes, and audit
    warns with a stable code instead of failing.

    Source: hashlib.sha256 of the files before and after the change.
    """
    out = tmp_path / "out"
    proto = protocol_dir / "mini.yaml"
    aborted = run_pilot(proto, out, speed=20.0)
    crash_after_onset(aborted.folder, 3)
    image = protocol_dir / "img" / "route4.png"
    old = hashlib.sha256(image.read_bytes()).hexdigest()
    shutil.copyfile(protocol_dir / "img" / "route1.png", image)
    new = hashlib.sha256(image.read_bytes()).hexdigest()
    before = _journal_bytes(aborted.folder)
    with pytest.raises(ResumeRefused, match="img/route4.png"):
        run_pilot(proto, out, resume=True, speed=20.0)
    assert _journal_bytes(aborted.folder) == before

    done = run_pilot(proto, out, resume=True, speed=20.0, accept_changed_stimuli=True)
    assert done.status == "completed"
    lines = [json.loads(x) for x in _journal_bytes(done.folder).splitlines()]
    (ack,) = [r for r in lines if r["event"] == "stimuli_changed_accepted"]
    assert ack["attempt"] == 2
    assert ack["files"] == [{"stimulus": "img/route4.png", "old": old, "new": new}]

    audit = audit_session(done.folder)
    assert audit.ok, [p.format() for p in audit.errors]
    codes = [p.code for p in audit.problems]
    assert "changed-stimuli-accepted" in codes
    assert audit.facts["files"]["stimuli"]["changed"] == []
