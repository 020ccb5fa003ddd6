"""Test-wide set-up: no screen, no sound, and an LSL configuration private to this test run.

The SDL dummy drivers let the real pygame run anywhere. The LSL configuration keeps stream
discovery on this machine and gives the run its own session id, so tests never see (or are seen
by) streams of other programs or other test runs.
"""

from __future__ import annotations

import os
import tempfile
import uuid
from pathlib import Path

os.environ["SDL_VIDEODRIVER"] = "dummy"
os.environ["SDL_AUDIODRIVER"] = "dummy"
os.environ["PYGAME_HIDE_SUPPORT_PROMPT"] = "1"
os.environ.setdefault("MPLBACKEND", "Agg")

# This module is imported twice (as pytest's conftest and by `from conftest import ...`): make the
# LSL configuration once per test run.
if "TRIALDECK_TEST_LSLCFG" not in os.environ:
    _LSL_CFG = Path(tempfile.gettempdir()) / f"trialdeck-test-lsl-{uuid.uuid4().hex}.cfg"
    _LSL_CFG.write_text(
        "[multicast]\nResolveScope = machine\n"
        f"[lab]\nSessionID = trialdeck-tests-{uuid.uuid4().hex[:12]}\n"
        "[log]\nlevel = -3\n",
        encoding="utf-8",
    )
    os.environ["TRIALDECK_TEST_LSLCFG"] = str(_LSL_CFG)
    os.environ["LSLAPICFG"] = str(_LSL_CFG)
    # The marker source_id locks of this test run (runner.session.lock), apart from other runs.
    os.environ["TRIALDECK_STREAM_LOCKS"] = tempfile.mkdtemp(prefix="trialdeck-test-streams-")

REPO = Path(__file__).resolve().parent.parent
TEST_DATA = Path(__file__).resolve().parent / "data"

MINI_PROTOCOL = TEST_DATA / "mini" / "mini.yaml"
DEMO_PROTOCOL = REPO / "configs" / "demo.yaml"


def run_pilot(
    protocol: Path,
    out: Path,
    *,
    participant: str = "P01",
    session: str = "1",
    speed: float = 20.0,
    frames: Path | None = None,
    **options,
):
    """Run a headless pilot in this process and return its RunResult (test helper)."""
    from runner.present.display import display_for
    from runner.protocol.load import load_protocol
    from runner.session.console import Console
    from runner.session.run import RunOptions, run_session

    loaded = load_protocol(protocol)
    opts = RunOptions(
        participant=participant, session=session, out=out, mode="pilot", speed=speed, **options
    )
    return run_session(
        loaded,
        opts,
        open_presenter=lambda: display_for(loaded, fullscreen=False, frames_dir=frames),
        console=Console(quiet=True),
    )
