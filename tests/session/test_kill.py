"""kill -9 at random moments of real headless pilots, then --resume: nothing lost, nothing twice."""

from __future__ import annotations

import csv
import os
import random
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest
from conftest import MINI_PROTOCOL, REPO

from runner.session.journal import read_journal

pytestmark = pytest.mark.slow  # kills and resumes pilot processes in real time

KILLS_PER_CHAIN = 11  # two chains run side by side: 22 kills in all
CHAINS = 2
SPEED = "20"
JOURNAL_WAIT_S = 20.0
RUN_LIMIT_S = 60.0


def _pilot(out: Path, participant: str, session: str, resume: bool, err) -> subprocess.Popen:
    cmd = [
        sys.executable,
        "-m",
        "runner",
        "pilot",
        str(MINI_PROTOCOL),
        "--participant",
        participant,
        "--session",
        session,
        "--out",
        str(out),
        "--speed",
        SPEED,
    ]
    if resume:
        cmd.append("--resume")
    env = dict(os.environ, SDL_VIDEODRIVER="dummy", SDL_AUDIODRIVER="dummy")
    return subprocess.Popen(cmd, cwd=REPO, env=env, stdout=subprocess.DEVNULL, stderr=err)


def _events(folder: Path):
    path = folder / "journal.jsonl"
    return read_journal(path) if path.exists() else None


def _chain(out: Path, participant: str, seed: int, report: list) -> None:
    """Kill sessions again and again at seeded random moments, resuming each time.

    When a run finishes before its kill moment, the session is complete and the next kill goes
    to a new session of the same participant.
    """
    rng = random.Random(seed)
    kills, session = 0, 1
    while kills < KILLS_PER_CHAIN:
        folder = out / "mini-test" / f"sub-{participant}" / f"ses-{session}"
        journal = folder / "journal.jsonl"
        checks = []
        while True:
            size0 = journal.stat().st_size if journal.exists() else -1
            with open(out / f"{participant}.err", "wb") as err:
                proc = _pilot(out, participant, str(session), size0 >= 0, err)
            if kills < KILLS_PER_CHAIN:
                # A moment once this run has written to the journal (or, for one kill in five,
                # anywhere in the start-up), up to about a whole pilot later.
                if rng.random() < 0.2:
                    time.sleep(rng.uniform(0.0, 2.0))
                else:
                    end = time.monotonic() + JOURNAL_WAIT_S
                    while time.monotonic() < end and proc.poll() is None:
                        if journal.exists() and journal.stat().st_size > size0:
                            break
                        time.sleep(0.005)
                    time.sleep(rng.uniform(0.0, 2.0))
                if proc.poll() is None:
                    before = _events(folder)
                    proc.send_signal(signal.SIGKILL)
                    proc.wait()
                    kills += 1
                    checks.append((before, _events(folder)))
                    continue
            proc.wait(timeout=RUN_LIMIT_S)
            message = (out / f"{participant}.err").read_text(errors="replace")
            # A kill after the session's last line leaves a complete session: resuming says so.
            if proc.returncode == 0 or "is complete; there is nothing to resume" in message:
                break
            raise AssertionError(f"pilot exited {proc.returncode}: {message}")
        report.append((checks, folder))
        session += 1


def test_sigkill_then_resume_loses_at_most_the_trial_in_progress(tmp_path):
    """22 SIGKILLs at seeded random moments, each followed by --resume: every scheduled trial is
    in trials.csv exactly once, the hash chain is intact, no trial ended twice, each kill lost
    at most the trial in progress, and each interrupted attempt is journaled and marked resumed.

    Source: common practice (no published source): crash-consistency testing by killing the
    process at random points and checking the recovered log.
    """
    report: list = []
    errors: list[BaseException] = []

    def run(i: int) -> None:
        try:
            _chain(tmp_path, f"K{i}", 1000 + i, report)
        except BaseException as exc:  # reported below, in the test's own thread
            errors.append(exc)

    threads = [threading.Thread(target=run, args=(i,)) for i in range(CHAINS)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert not errors, errors[0]

    total_kills, mid_trial = 0, 0
    for checks, folder in report:
        total_kills += len(checks)
        participant = folder.parent.name
        read = read_journal(folder / "journal.jsonl")
        assert not read.chain_errors and not read.torn_tail
        scheduled = [t["trial"] for t in read.header["schedule"]]
        with open(folder / "trials.csv", newline="") as fh:
            rows = list(csv.DictReader(fh))
        assert sorted(int(r["trial"]) for r in rows) == scheduled, participant
        ends = [r["trial"] for r in read.events("trial_end")]
        assert len(ends) == len(set(ends)) == len(scheduled)
        assert read.records[-1]["event"] == "session_end"
        assert read.records[-1]["status"] == "completed"
        # Interrupted attempts are journaled; each resume follows one and is sent as a marker.
        events = [r["event"] for r in read.records]
        interrupted = events.count("session_interrupted")
        mid_trial += sum(
            r.get("trial_in_progress") is not None for r in read.events("session_interrupted")
        )
        resumes = [r for r in read.records if r["event"] == "session_resume"]
        assert len(resumes) <= interrupted
        for r in resumes:
            assert "session_interrupted" in events[: r["seq"]]
            assert '"event":"session_resume"' in r["marker"]
        for before, after in checks:
            if after is None:
                continue
            # Each kill loses at most the trial in progress: every trial_end written before
            # the kill is still there, and at most one trial was started but not ended.
            ended = {r["trial"] for r in after.events("trial_end")}
            if before is not None:
                assert {r["trial"] for r in before.events("trial_end")} <= ended
            started_trials = {r["trial"] for r in after.events("trial_start")}
            assert len(started_trials - ended) <= 1
    assert total_kills >= 20
    # The seeded moments put a good share of the kills inside a trial.
    assert mid_trial >= 5, mid_trial
