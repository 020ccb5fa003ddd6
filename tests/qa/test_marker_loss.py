"""Markers the journal knows were sent with no recorder connected, and one source_id per session."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pylsl
import pytest
from conftest import MINI_PROTOCOL, REPO, run_pilot

from runner.contract.layout import LOCK_NAME
from runner.journal.read import read_journal
from runner.protocol.load import load_protocol
from runner.qa.audit import audit_session
from runner.qa.audit_checks import count_unrecorded_markers
from runner.session.lock import lock_holder
from runner.session.markers import make_source_id, station_name

WAIT_S = 60.0  # an upper bound for start-up on a busy machine, never a measured time
STATION = "losstest"


def _lines(folder: Path) -> list[dict]:
    return [json.loads(x) for x in (folder / "journal.jsonl").read_text("utf-8").splitlines()]


def test_count_follows_connects_drops_and_new_processes():
    """Markers count as unrecorded before a connect, after a drop, and after a resume's start.

    Source: the expected counts are read off the hand-written journal lines below.
    """
    events = [
        (2, {"event": "session_start", "marker": "a"}),
        (3, {"event": "fixation_onset", "trial": 1, "marker": "b"}),
        (4, {"event": "recorder_connected"}),
        (5, {"event": "stimulus_onset", "trial": 1, "marker": "c"}),
        (6, {"event": "recorder_lost"}),
        (7, {"event": "stimulus_onset", "trial": 2, "marker": "d"}),
        (8, {"event": "recorder_connected"}),
        (9, {"event": "clock_epoch"}),
        (10, {"event": "session_resume", "marker": "e"}),
        (11, {"event": "stimulus_onset", "trial": 3, "marker": "f"}),
    ]
    info = count_unrecorded_markers(events)
    assert info["sent"] == 6 and info["without_recorder"] == 5
    assert (info["first_trial"], info["last_trial"]) == (1, 3)
    assert info["recorder"] == "dropped" and info["dropped_lines"] == [6]


@pytest.mark.slow
def test_pilot_without_recorder_reports_every_marker_unrecorded(tmp_path):
    """A session no recorder ever listened to: audit warns (code markers-unrecorded) with every
    marker counted and the first and last trial named.

    Source: the journal's own lines, parsed with json: every line with a marker payload.
    """
    result = run_pilot(MINI_PROTOCOL, tmp_path, station=STATION)
    lines = _lines(result.folder)
    markers = [r for r in lines if "marker" in r]
    trials = [r["trial"] for r in markers if "trial" in r]
    audit = audit_session(result.folder)
    assert audit.ok
    (warning,) = [p for p in audit.problems if p.code == "markers-unrecorded"]
    assert warning.severity == "warning"
    info = audit.facts["markers"]
    assert info["recorder"] == "never connected"
    assert info["sent"] == info["without_recorder"] == len(markers)
    assert (info["first_trial"], info["last_trial"]) == (min(trials), max(trials))


class DroppingInlet(threading.Thread):
    """A real LSL consumer that collects payloads and closes its inlet once trial 2 starts."""

    def __init__(self, source_id: str):
        super().__init__(daemon=True)
        self.source_id = source_id
        self.received: list[str] = []
        self.ready = threading.Event()
        self.stop = threading.Event()

    def run(self) -> None:
        streams = []
        while not streams and not self.stop.is_set():
            streams = pylsl.resolve_byprop("source_id", self.source_id, timeout=1.0)
        inlet = pylsl.StreamInlet(streams[0], max_buflen=60)
        inlet.open_stream(timeout=10.0)
        self.ready.set()
        while not self.stop.is_set():
            sample, _ = inlet.pull_sample(timeout=0.2)
            if sample is None:
                continue
            self.received.append(sample[0])
            if json.loads(sample[0]).get("trial") == 2:
                break
        inlet.close_stream()
        del inlet


@pytest.mark.slow
def test_recorder_that_drops_out_is_counted_from_the_drop(tmp_path):
    """A real inlet that leaves during trial 2: audit counts the markers after the journaled
    drop, and every marker the inlet did not receive is among those counted.

    Source: the payloads a real pylsl inlet received, against the journal's marker lines.
    """
    loaded = load_protocol(MINI_PROTOCOL)
    inlet = DroppingInlet(make_source_id(loaded.model.study, station_name(STATION)))
    inlet.start()
    result = run_pilot(MINI_PROTOCOL, tmp_path, station=STATION, speed=4.0, wait_for_recorder=30.0)
    inlet.stop.set()
    inlet.join(timeout=10)
    lines = _lines(result.folder)
    assert lines[1]["event"] == "recorder_connected"  # connected as the attempt started
    audit = audit_session(result.folder)
    info = audit.facts["markers"]
    assert info["recorder"] == "dropped" and info["without_recorder"] > 0
    (warning,) = [p for p in audit.problems if p.code == "markers-unrecorded"]
    drop = info["dropped_lines"][0]
    counted = {r["marker"] for n, r in enumerate(lines, 1) if "marker" in r and n > drop}
    unreceived = {r["marker"] for r in lines if "marker" in r} - set(inlet.received)
    assert unreceived <= counted
    assert len(counted) == info["without_recorder"]
    assert warning.line == min(n for n, r in enumerate(lines, 1) if "marker" in r and n > drop)


@pytest.mark.slow
def test_second_session_on_the_machine_takes_a_distinct_source_id(tmp_path):
    """While one pilot sends under the stable source_id, a second session (another process)
    takes the id suffixed with its participant and session, and journals it."""
    cmd = [
        sys.executable,
        "-m",
        "runner",
        "pilot",
        str(MINI_PROTOCOL),
        "--participant",
        "P01",
        "--out",
        str(tmp_path / "a"),
        "--station",
        STATION,
        "--speed",
        "0.3",
    ]
    env = dict(os.environ, SDL_VIDEODRIVER="dummy", SDL_AUDIODRIVER="dummy")
    first = subprocess.Popen(cmd, cwd=REPO, env=env, stdout=subprocess.DEVNULL)
    folder = tmp_path / "a" / "mini-test" / "sub-P01" / "ses-1"
    try:
        deadline = time.monotonic() + WAIT_S
        while lock_holder(folder / LOCK_NAME).get("pid") != first.pid:
            assert time.monotonic() < deadline and first.poll() is None
            time.sleep(0.05)
        second = run_pilot(MINI_PROTOCOL, tmp_path / "b", participant="P02", station=STATION)
    finally:
        first.send_signal(signal.SIGINT)
        first.wait(timeout=WAIT_S)
    base = make_source_id("mini-test", STATION)
    assert read_journal(folder / "journal.jsonl").header["markers"]["source_id"] == base
    assert read_journal(second.journal).header["markers"]["source_id"] == f"{base}:sub-P02:ses-1"


class LateInlet(threading.Thread):
    """A real LSL consumer that connects only once the journal shows trial 2 started."""

    def __init__(self, source_id: str, journal: Path):
        super().__init__(daemon=True)
        self.source_id = source_id
        self.journal = journal
        self.received: list[str] = []
        self.stop = threading.Event()

    def _trial_2_started(self) -> bool:
        if not self.journal.exists():
            return False
        # Only whole lines: the journal may be read while a line is being written.
        lines = self.journal.read_bytes().split(b"\n")[:-1]
        return any(
            rec.get("event") == "trial_start" and rec.get("trial") == 2
            for rec in (json.loads(x) for x in lines)
        )

    def run(self) -> None:
        while not self.stop.is_set() and not self._trial_2_started():
            time.sleep(0.02)
        streams = []
        while not streams and not self.stop.is_set():
            streams = pylsl.resolve_byprop("source_id", self.source_id, timeout=1.0)
        if not streams:
            return
        inlet = pylsl.StreamInlet(streams[0], max_buflen=60)
        inlet.open_stream(timeout=10.0)
        while not self.stop.is_set():
            sample, _ = inlet.pull_sample(timeout=0.2)
            if sample is not None:
                self.received.append(sample[0])
                if json.loads(sample[0]).get("event") == "session_end":
                    break
        inlet.close_stream()


@pytest.mark.slow
def test_recorder_that_connects_late_is_counted_until_it_connects(tmp_path):
    """A real inlet that connects during trial 2: audit counts the markers before the journaled
    connect, and every marker after that line reached the inlet.

    Source: the payloads a real pylsl inlet received, against the journal's marker lines.
    """
    loaded = load_protocol(MINI_PROTOCOL)
    folder = tmp_path / "mini-test" / "sub-P01" / "ses-1"
    inlet = LateInlet(
        make_source_id(loaded.model.study, station_name(STATION)), folder / "journal.jsonl"
    )
    inlet.start()
    try:
        result = run_pilot(MINI_PROTOCOL, tmp_path, station=STATION, speed=4.0)
        inlet.join(timeout=30)  # it ends by itself once it has pulled session_end
    finally:
        inlet.stop.set()
        inlet.join(timeout=10)
    lines = _lines(result.folder)
    audit = audit_session(result.folder)
    info = audit.facts["markers"]
    assert info["recorder"] == "connected" and info["without_recorder"] > 0
    connect = info["first_connected_line"]
    before = [r["marker"] for n, r in enumerate(lines, 1) if "marker" in r and n < connect]
    after = [r["marker"] for n, r in enumerate(lines, 1) if "marker" in r and n > connect]
    assert len(before) == info["without_recorder"] and after
    assert set(after) <= set(inlet.received)
    (warning,) = [p for p in audit.problems if p.code == "markers-unrecorded"]
    trials = [
        r["trial"] for n, r in enumerate(lines, 1) if "marker" in r and n < connect and "trial" in r
    ]
    assert (info["first_trial"], info["last_trial"]) == (min(trials), max(trials))
    assert info["first_trial"] == 1  # the inlet waited for trial 2 to start
