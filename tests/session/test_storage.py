"""Storage safety: refuse to start without room, and pause rather than run unlogged mid-session."""

from __future__ import annotations

import csv
import os
import resource
import shutil
import subprocess
import sys
import threading
import time

import pytest
from conftest import MINI_PROTOCOL, REPO

from runner.errors import StorageError
from runner.session.journal import Journal, read_journal
from runner.session.run import check_writable

FSIZE_LIMIT = 24 * 1024  # the journal passes this a few trials into the mini protocol
PAUSE_SEEN_S = 60.0
HOLD_S = 1.5
MAX_RETRIES = 5

WRAPPER = """
import resource, runpy, signal, sys
signal.signal(signal.SIGXFSZ, signal.SIG_IGN)  # a write past the limit fails with EFBIG instead
resource.setrlimit(resource.RLIMIT_FSIZE, ({limit}, resource.RLIM_INFINITY))
sys.argv = ["trialdeck", *sys.argv[1:]]
runpy.run_module("runner", run_name="__main__")
"""


@pytest.mark.slow
def test_write_failure_mid_session_pauses_and_resumes_without_losing_data(tmp_path):
    """A pilot whose journal hits a file-size limit (RLIMIT_FSIZE) pauses with a console message,
    writes nothing while paused, and goes on once the limit is lifted: every trial is in
    trials.csv once, the chain is intact, and the pause is journaled with its reason."""
    env = dict(
        os.environ, SDL_VIDEODRIVER="dummy", SDL_AUDIODRIVER="dummy", PYTHONDONTWRITEBYTECODE="1"
    )
    cmd = [
        sys.executable,
        "-c",
        WRAPPER.format(limit=FSIZE_LIMIT),
        "pilot",
        str(MINI_PROTOCOL),
        "--participant",
        "P01",
        "--out",
        str(tmp_path),
        "--speed",
        "20",
    ]
    proc = subprocess.Popen(
        cmd, cwd=REPO, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True
    )
    lines: list[str] = []
    paused = threading.Event()

    def read() -> None:
        assert proc.stdout is not None
        for line in proc.stdout:
            lines.append(line)
            if "The session is paused so nothing goes unlogged" in line:
                paused.set()

    reader = threading.Thread(target=read, daemon=True)
    reader.start()
    journal = tmp_path / "mini-test" / "sub-P01" / "ses-1" / "journal.jsonl"
    try:
        assert paused.wait(PAUSE_SEEN_S), "".join(lines)
        size = journal.stat().st_size
        assert size <= FSIZE_LIMIT
        time.sleep(HOLD_S)
        assert proc.poll() is None  # still paused, not failed
        assert journal.stat().st_size == size  # nothing written while paused
        assert not read_journal(journal).chain_errors
        resource.prlimit(
            proc.pid, resource.RLIMIT_FSIZE, (resource.RLIM_INFINITY, resource.RLIM_INFINITY)
        )
        assert proc.wait(timeout=60) == 0, "".join(lines)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        reader.join(timeout=5)
        if proc.stdout is not None:
            proc.stdout.close()
    out = "".join(lines)
    assert "writing the journal failed" in out and "File too large" in out
    assert "Writing works again" in out
    read = read_journal(journal)
    assert not read.chain_errors and not read.torn_tail
    assert read.records[-1]["status"] == "completed"
    pauses = [r for r in read.events("pause_start") if r.get("reason") == "storage"]
    ends = [r for r in read.events("pause_end") if r.get("reason") == "storage"]
    assert len(pauses) == len(ends) == 1
    assert "File too large" in pauses[0]["message"] and ends[0]["paused_s"] >= HOLD_S
    with open(journal.parent / "trials.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [int(r["trial"]) for r in rows] == [t["trial"] for t in read.header["schedule"]]


def test_removed_session_folder_is_rebuilt_from_the_open_journal(tmp_path):
    """If the session folder is deleted mid-session the next write fails, the handler is told,
    and the journal is rebuilt in a new folder with every line so far and a valid chain."""
    folder = tmp_path / "s"
    journal = Journal.create(folder, {"study": "x"})
    calls: list[str] = []

    def on_error(exc):
        calls.append(str(exc))
        if len(calls) > MAX_RETRIES:
            raise exc

    journal.on_error = on_error
    recovered: list[bool] = []
    journal.on_recover = lambda: recovered.append(True)
    for i in range(5):
        journal.append("tick", t=float(i))
    shutil.rmtree(folder)
    journal.append("after", t=9.0)
    journal.close()
    assert calls and "session folder was removed" in calls[0]
    assert recovered == [True]
    read = read_journal(folder / "journal.jsonl")
    assert not read.chain_errors and not read.torn_tail
    assert [r["event"] for r in read.records] == ["header"] + ["tick"] * 5 + ["after"]


def test_partial_line_is_cut_before_the_retry(tmp_path):
    """A write that fails halfway leaves no partial line: the retry starts at the last whole line."""
    folder = tmp_path / "s"
    journal = Journal.create(folder, {"study": "x"})
    journal.append("tick", t=1.0)
    real_write = os.write
    state = {"failed": False}

    def flaky(fd, data):
        if not state["failed"]:
            state["failed"] = True
            real_write(fd, bytes(data[:10]))
            raise OSError(28, "No space left on device")
        return real_write(fd, data)

    journal.on_error = lambda exc: None
    os_write = os.write
    try:
        os.write = flaky
        journal.append("big", t=2.0, payload="x" * 100)
    finally:
        os.write = os_write
    journal.close()
    read = read_journal(folder / "journal.jsonl")
    assert not read.chain_errors and not read.torn_tail
    assert [r["event"] for r in read.records] == ["header", "tick", "big"]


def test_write_failure_without_a_handler_raises_storage_error(tmp_path):
    """Without a pause handler a failed write raises StorageError naming the cause."""
    folder = tmp_path / "s"
    journal = Journal.create(folder, {"study": "x"})
    shutil.rmtree(folder)
    with pytest.raises(StorageError, match="session folder was removed"):
        journal.append("tick", t=1.0)


@pytest.mark.parametrize(
    "case, fragment",
    [
        ("file", "is a file"),
        ("full", "MB are free"),
        ("readonly", "does not take new files"),
    ],
)
def test_check_writable_refuses_before_starting(tmp_path, case, fragment):
    """The output folder must be a folder that takes files and has room to spare."""
    if case == "file":
        target = tmp_path / "f"
        target.write_text("x")
        out = target / "sessions"
        with pytest.raises(StorageError, match=fragment):
            check_writable(out)
    elif case == "full":
        free = shutil.disk_usage(tmp_path).free
        with pytest.raises(StorageError, match=fragment):
            check_writable(tmp_path / "sessions", min_free=free * 2 + 1)
    else:
        if os.geteuid() == 0:
            pytest.skip("root writes into read-only folders")
        ro = tmp_path / "ro"
        ro.mkdir()
        ro.chmod(0o500)
        try:
            with pytest.raises(StorageError, match=fragment):
                check_writable(ro / "sessions")
        finally:
            ro.chmod(0o700)
