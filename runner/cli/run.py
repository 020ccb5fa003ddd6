"""``trialdeck run PROTOCOL``: a live session with a participant."""

from __future__ import annotations

import argparse
import os
from pathlib import Path

from runner.cli.session import add_session_arguments, run_one_session
from runner.errors import UsageError

HEADLESS_DRIVERS = ("dummy", "offscreen")


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``trialdeck run``."""
    add_session_arguments(p, pilot=False)


def run(args: argparse.Namespace) -> int:
    """Run the live session; exit 0 when it completed.

    Raises
    ------
    UsageError
        ``SDL_VIDEODRIVER`` asks for a headless driver: a live session must be seen. Refused
        before anything is opened or created.
    """
    driver = os.environ.get("SDL_VIDEODRIVER", "")
    if driver in HEADLESS_DRIVERS:
        raise UsageError(
            f"SDL_VIDEODRIVER={driver} is set, so the live session would run on an invisible"
            " display; nothing was created. Unset it (`unset SDL_VIDEODRIVER`) to run on the"
            " participant's screen, or use `trialdeck pilot` for a headless pilot."
        )
    return run_one_session(args, mode="live", protocol=Path(args.protocol))
