"""One writer per session: a second run, pilot or resume of a running session is refused."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from conftest import MINI_PROTOCOL, REPO

from runner.contract.layout import LOCK_NAME
from runner.errors import SessionBusyError
from runner.journal.read import read_journal
from runner.session.lock import SessionLock, claim_source_id, lock_holder

WAIT_S = 60.0  # an upper bound for a start-up on a busy machine, never a measured time


def _folder(out: Path) -> Path:
    return out / "mini-test" / "sub-P01" / "ses-1"


def _pilot(out: Path, *extra: str) -> list[str]:
    return [
        sys.executable,
        "-m",
        "runner",
        "pilot",
        str(MINI_PROTOCOL),
        "--participant",
        "P01",
        "--out",
        str(out),
        *extra,
    ]


def _env() -> dict[str, str]:
    return dict(os.environ, SDL_VIDEODRIVER="dummy", SDL_AUDIODRIVER="dummy")


def _start(cmd: list[str], err: Path) -> subprocess.Popen:
    with open(err, "wb") as fh:
        return subprocess.Popen(cmd, cwd=REPO, env=_env(), stdout=subprocess.DEVNULL, stderr=fh)


def _wait_for(folder: Path, pid: int, event: str, proc: subprocess.Popen) -> None:
    """Wait until process ``pid`` holds the session's lock and has journaled ``event``."""
    deadline = time.monotonic() + WAIT_S
    while time.monotonic() < deadline:
        assert proc.poll() is None, "the session ended before the test could use it"
        journal = folder / "journal.jsonl"
        if lock_holder(folder / LOCK_NAME).get("pid") == pid and journal.exists():
            if any(r.get("event") == event for r in read_journal(journal).records):
                return
        time.sleep(0.05)
    raise AssertionError(f"process {pid} did not reach {event}")


def _refused(cmd: list[str]) -> subprocess.CompletedProcess:
    return subprocess.run(cmd, cwd=REPO, env=_env(), capture_output=True, text=True, timeout=120)


@pytest.mark.slow
def test_second_writer_is_refused_while_the_session_or_a_resume_runs(tmp_path):
    """While a pilot runs, a resume and a second pilot of the same session exit 1 with one line
    naming its pid, and write nothing; after a kill -9 a resume takes the lock, and a second
    resume started meanwhile is refused naming the first resume's pid."""
    folder = _folder(tmp_path)
    first = _start(_pilot(tmp_path, "--speed", "0.3"), tmp_path / "first.err")
    try:
        _wait_for(folder, first.pid, "trial_start", first)
        for extra in (("--resume", "--speed", "0.3"), ("--speed", "0.3")):
            done = _refused(_pilot(tmp_path, *extra))
            assert done.returncode == 1
            lines = done.stderr.strip().splitlines()
            assert len(lines) == 1 and f"process {first.pid}" in lines[0], done.stderr
    finally:
        first.send_signal(signal.SIGKILL)
        first.wait(timeout=WAIT_S)
    records = read_journal(folder / "journal.jsonl").records
    assert [r["event"] for r in records if r.get("event") == "session_interrupted"] == []
    assert sum(r.get("event") == "session_start" for r in records) == 1

    resume = _start(_pilot(tmp_path, "--resume"), tmp_path / "resume.err")
    try:
        _wait_for(folder, resume.pid, "session_resume", resume)
        done = _refused(_pilot(tmp_path, "--resume"))
        assert done.returncode == 1
        lines = done.stderr.strip().splitlines()
        assert len(lines) == 1 and f"process {resume.pid}" in lines[0], done.stderr
    finally:
        resume.send_signal(signal.SIGINT)
        resume.wait(timeout=WAIT_S)
    read = read_journal(folder / "journal.jsonl")
    assert not read.chain_errors
    events = [r.get("event") for r in read.records]
    assert events.count("session_interrupted") == 1 and events.count("session_resume") == 1
    # The Ctrl+C path closed the attempt and released the lock: the lock can be taken again.
    assert events[-1] == "session_end"
    with SessionLock(folder / LOCK_NAME, what="the session") as lock:
        assert lock.held


def test_lock_is_exclusive_and_released(tmp_path):
    """A held lock refuses a second holder naming the first; released, it can be taken again."""
    path = tmp_path / LOCK_NAME
    first = SessionLock(path, what="the session", mode="pilot")
    first.acquire()
    assert json.loads(path.read_text())["pid"] == os.getpid()
    with pytest.raises(SessionBusyError, match=f"process {os.getpid()} \\(pilot"):
        SessionLock(path, what="the session").acquire()
    first.release()
    second = SessionLock(path, what="the session")
    assert second.acquire() and second.held
    second.release()


def test_probe_without_record_leaves_the_holder_named_in_the_file(tmp_path):
    """A lock taken only to probe (record off) keeps the last holder's line in the file."""
    path = tmp_path / LOCK_NAME
    path.write_text('{"pid": 1, "mode": "live"}\n')
    probe = SessionLock(path, what="the session", create=False, record=False)
    assert probe.acquire()
    probe.release()
    assert json.loads(path.read_text()) == {"pid": 1, "mode": "live"}


def test_without_create_a_missing_lock_file_is_not_made(tmp_path):
    """A lock that may not create its file reports False and leaves the folder empty."""
    assert SessionLock(tmp_path / LOCK_NAME, what="x", create=False).acquire() is False
    assert list(tmp_path.iterdir()) == []


def test_source_id_in_use_falls_back_to_the_next_candidate(tmp_path, monkeypatch):
    """A second claim of one source_id gets the next candidate; with none left it is refused."""
    monkeypatch.setenv("TRIALDECK_STREAM_LOCKS", str(tmp_path))
    got, held = claim_source_id(["a", "a:sub-P02:ses-1"], mode="pilot")
    assert got == "a"
    other, held2 = claim_source_id(["a", "a:sub-P02:ses-1"], mode="pilot")
    assert other == "a:sub-P02:ses-1"
    with pytest.raises(SessionBusyError, match="source_id"):
        claim_source_id(["a", "a:sub-P02:ses-1"], mode="pilot")
    held.release()
    held2.release()
    again, held3 = claim_source_id(["a"], mode="pilot")
    assert again == "a"
    held3.release()
