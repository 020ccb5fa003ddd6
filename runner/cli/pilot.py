"""``trialdeck pilot PROTOCOL``: a session with a simulated participant, headless by default."""

from __future__ import annotations

import argparse
from pathlib import Path

from runner.cli.session import add_session_arguments, run_one_session


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``trialdeck pilot``."""
    add_session_arguments(p, pilot=True)


def run(args: argparse.Namespace) -> int:
    """Run the pilot; exit 0 when it completed."""
    return run_one_session(args, mode="pilot", protocol=Path(args.protocol))
