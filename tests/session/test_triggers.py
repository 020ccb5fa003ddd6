"""Hardware trigger codes: one byte per coded marker event, read back through a pseudo-terminal."""

from __future__ import annotations

import os
import select
import shutil
import time
import tty

import pytest
from conftest import MINI_PROTOCOL, run_pilot

from runner.errors import ProtocolError, RecorderError
from runner.protocol.load import load_protocol
from runner.session.journal import read_journal
from runner.session.triggers import SerialTriggers, trigger_map

CODES = {"stimulus_onset": 10, "stimulus_offset": 11, "rating_onset": 20, "gap_onset": 255}
READ_S = 2.0


def _pty():
    # Raw mode on both ends, so bytes such as 10 (newline) pass through unchanged.
    master, slave = os.openpty()
    tty.setraw(master)
    tty.setraw(slave)
    return master, slave, os.ttyname(slave)


def _drain(fd, until_quiet_s=0.3, limit_s=READ_S):
    data = b""
    end = time.monotonic() + limit_s
    while time.monotonic() < end:
        ready, _, _ = select.select([fd], [], [], until_quiet_s)
        if not ready:
            break
        data += os.read(fd, 4096)
    return data


def _protocol_with_triggers(tmp_path, port):
    folder = tmp_path / "proto"
    shutil.copytree(MINI_PROTOCOL.parent, folder)
    lines = "".join(f"    {k}: {v}\n" for k, v in CODES.items())
    text = (folder / "mini.yaml").read_text()
    text += f"triggers:\n  port: {port}\n  baud: 115200\n  codes:\n{lines}"
    (folder / "mini.yaml").write_text(text)
    return folder / "mini.yaml"


def test_codes_are_written_as_single_bytes():
    """Each coded event writes its code as one byte; uncoded events write nothing.

    Source: pyserial writing to a POSIX pseudo-terminal (os.openpty) read back on the master side.
    """
    master, slave, name = _pty()
    try:
        triggers = SerialTriggers.open(name, CODES)
        assert triggers.send("stimulus_onset") == 10
        assert triggers.send("page_onset") is None
        assert triggers.send("gap_onset") == 255
        triggers.close()
        assert _drain(master) == bytes([10, 255])
    finally:
        os.close(master)
        os.close(slave)


@pytest.mark.slow
def test_pilot_sends_and_journals_a_code_per_coded_marker(tmp_path):
    """A pilot with a triggers section sends, in order, one byte per coded marker event, and the
    journal records that code on the same line as the marker."""
    master, slave, name = _pty()
    try:
        protocol = _protocol_with_triggers(tmp_path, name)
        result = run_pilot(protocol, tmp_path / "out")
        assert result.status == "completed"
        received = _drain(master)
    finally:
        os.close(master)
        os.close(slave)
    read = read_journal(result.journal)
    coded = [r for r in read.records if "trigger" in r]
    assert [r["trigger"] for r in coded] == list(received)
    assert all(CODES[r["event"]] == r["trigger"] for r in coded)
    assert all("marker" in r for r in coded)
    assert sum(r["event"] == "stimulus_onset" for r in coded) == 5
    assert list(received).count(10) == 5 and list(received).count(255) == 5
    assert read.header["triggers"]["codes"] == CODES


def test_unknown_event_name_in_codes_is_a_protocol_error(tmp_path):
    """A code for a name that is not a marker event is refused, pointing at that setting."""
    protocol = _protocol_with_triggers(tmp_path, "/dev/null")
    text = protocol.read_text().replace("stimulus_offset: 11", "stimulus_ofset: 11")
    protocol.write_text(text)
    loaded = load_protocol(protocol)
    with pytest.raises(ProtocolError) as info:
        trigger_map(loaded)
    (problem,) = info.value.problems
    assert (problem.code, problem.path) == ("unknown-event", "triggers.codes.stimulus_ofset")
    line = problem.format()
    assert line.startswith(f"{protocol}:") and ":0:" not in line.split(": error")[0]


def test_missing_port_is_refused_with_a_plain_message(tmp_path):
    """A trigger port that does not exist stops the session before it starts, with a plain line."""
    with pytest.raises(RecorderError, match="trigger port .* cannot be opened"):
        SerialTriggers.open(str(tmp_path / "no-such-port"), CODES)
