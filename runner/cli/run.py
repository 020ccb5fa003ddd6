"""``trialdeck run PROTOCOL``: a live session with a participant."""

from __future__ import annotations

import argparse
from pathlib import Path

from runner.cli.session import add_session_arguments, run_one_session


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``trialdeck run``."""
    add_session_arguments(p, pilot=False)


def run(args: argparse.Namespace) -> int:
    """Run the live session; exit 0 when it completed."""
    return run_one_session(args, mode="live", protocol=Path(args.protocol))
