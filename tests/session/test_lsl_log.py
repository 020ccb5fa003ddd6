"""liblsl stays quiet on the terminal and the lab's own LSL configuration still applies."""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap
import uuid

import pytest
from conftest import REPO

from runner.session.markers import QUIET_LOG_LEVEL, quiet_config

OPEN_OUTLET = textwrap.dedent(
    """
    from runner.session.markers import MarkerOutlet
    import time
    out = MarkerOutlet("quiet-test", "quiet-test-{tag}", metadata={{}})
    print("open", flush=True)
    time.sleep(float({hold}))
    """
)

FIND = textwrap.dedent(
    """
    import pylsl
    found = pylsl.resolve_byprop("source_id", "quiet-test-{tag}", timeout=4.0)
    print(len(found))
    """
)


def _env(home, cfg=None):
    env = {k: v for k, v in os.environ.items() if k != "LSLAPICFG"}
    env["HOME"] = str(home)
    if cfg is not None:
        env["LSLAPICFG"] = str(cfg)
    return env


def test_quiet_config_adds_a_level_only_when_the_lab_set_none():
    """A configuration without a [log] level gains the quiet one; one with a level keeps it.

    Source: common practice (no published source): liblsl's configuration file is INI-like.
    """
    assert quiet_config("") == f"[log]\nlevel = {QUIET_LOG_LEVEL}\n"
    lab = "[lab]\nSessionID = room2"
    assert quiet_config(lab).startswith(lab + "\n[log]\nlevel = ")
    chatty = "[log]\nlevel = 0\n"
    assert quiet_config(chatty) == chatty
    assert quiet_config("[Log]\n Level=1\n") == "[Log]\n Level=1\n"


@pytest.mark.slow
def test_opening_an_outlet_prints_nothing_on_stderr(tmp_path):
    """An outlet opened with no lab configuration leaves stderr empty (no liblsl INFO lines)."""
    code = OPEN_OUTLET.format(tag=uuid.uuid4().hex[:8], hold=0)
    proc = subprocess.run(
        [sys.executable, "-c", code],
        capture_output=True,
        text=True,
        cwd=tmp_path,
        env=_env(tmp_path) | {"PYTHONPATH": str(REPO)},
        timeout=120,
    )
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == "open"
    assert proc.stderr == ""


@pytest.mark.slow
def test_the_labs_session_id_still_applies(tmp_path):
    """The lab's SessionID from LSLAPICFG still decides who can see the marker stream."""
    tag = uuid.uuid4().hex[:8]
    ours, theirs = tmp_path / "ours.cfg", tmp_path / "theirs.cfg"
    scope = "[multicast]\nResolveScope = machine\n"
    ours.write_text(f"{scope}[lab]\nSessionID = room-{tag}\n", encoding="utf-8")
    theirs.write_text(f"{scope}[lab]\nSessionID = other-{tag}\n[log]\nlevel = -3\n")
    env = _env(tmp_path, ours) | {"PYTHONPATH": str(REPO)}
    outlet = subprocess.Popen(
        [sys.executable, "-c", OPEN_OUTLET.format(tag=tag, hold=30)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        cwd=tmp_path,
        env=env,
    )
    try:
        assert outlet.stdout is not None and outlet.stdout.readline().strip() == "open"
        seen = {}
        for name, cfg in (("same", ours), ("other", theirs)):
            found = subprocess.run(
                [sys.executable, "-c", FIND.format(tag=tag)],
                capture_output=True,
                text=True,
                env=_env(tmp_path, cfg),
                timeout=60,
            )
            seen[name] = found.stdout.strip()
        assert seen == {"same": "1", "other": "0"}
    finally:
        outlet.kill()
        outlet.communicate()
