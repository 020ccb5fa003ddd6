"""Real pilot sessions for the export tests, made once per test run (test helper).

Three participants run the tiny test protocol headless through the real engine (SDL dummy
driver, simulated participant), one of them twice; a fourth session is aborted by the
simulated participant in its third trial.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

# The tiny protocol of tests/data (the analysis conftest shadows the top-level one by name).
MINI_PROTOCOL = Path(__file__).resolve().parent.parent / "data" / "mini" / "mini.yaml"
SPEED = 20.0

PARTICIPANTS = ("P01", "P02", "P03")
ABORTED = "P09"
ABORT_AT_TRIAL = 3
_MADE: dict[Path, Path] = {}


def run_pilot(out: Path, *, participant: str, session: str = "1", **options: Any) -> None:
    """One headless pilot of the tiny protocol, through the same calls as `trialdeck pilot`."""
    from runner.present.display import display_for
    from runner.protocol.load import load_protocol
    from runner.session.console import Console
    from runner.session.run import RunOptions, run_session

    loaded = load_protocol(MINI_PROTOCOL)
    opts = RunOptions(
        participant=participant, session=session, out=out, mode="pilot", speed=SPEED, **options
    )
    run_session(
        loaded,
        opts,
        open_presenter=lambda: display_for(loaded, fullscreen=False),
        console=Console(quiet=True),
    )


def pilot_root(base: Path) -> Path:
    """Run the pilots under ``base`` once; return the folder holding the study folder."""
    if base not in _MADE:
        root = base / "pilot-sessions"
        for p in PARTICIPANTS:
            run_pilot(root, participant=p)
        run_pilot(root, participant="P01", session="2")
        run_pilot(root, participant=ABORTED, abort_at=ABORT_AT_TRIAL)
        _MADE[base] = root
    return _MADE[base]
