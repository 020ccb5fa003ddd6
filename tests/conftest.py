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

_LSL_CFG = Path(tempfile.gettempdir()) / f"trialdeck-test-lsl-{uuid.uuid4().hex}.cfg"
_LSL_CFG.write_text(
    "[multicast]\nResolveScope = machine\n"
    f"[lab]\nSessionID = trialdeck-tests-{uuid.uuid4().hex[:12]}\n"
    "[log]\nlevel = -3\n",
    encoding="utf-8",
)
os.environ["LSLAPICFG"] = str(_LSL_CFG)

REPO = Path(__file__).resolve().parent.parent
TEST_DATA = Path(__file__).resolve().parent / "data"
