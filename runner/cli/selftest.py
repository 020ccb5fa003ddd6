"""``trialdeck selftest [PROTOCOL]``: measure this machine's display, input and marker timing."""

from __future__ import annotations

import argparse
import json
import os
from pathlib import Path

from runner.cli.args import seconds
from runner.errors import EXIT_OK, EXIT_PROBLEMS
from runner.present.selftest import DEFAULT_SECONDS, run_selftest


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``trialdeck selftest``."""
    p.add_argument("protocol", metavar="PROTOCOL", nargs="?", help="the protocol to test for")
    p.add_argument("--json", action="store_true", help="print the figures as JSON")
    p.add_argument(
        "--seconds",
        type=seconds,
        default=DEFAULT_SECONDS,
        metavar="S",
        help=f"how long to flip for the late-flip count (default {DEFAULT_SECONDS:g})",
    )
    p.add_argument("--windowed", action="store_true", help="a window instead of fullscreen")


def run(args: argparse.Namespace) -> int:
    """Run the self-test and print its figures; exit 0 when the machine is ready, 1 otherwise."""
    os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
    rep = run_selftest(
        Path(args.protocol) if args.protocol else None,
        seconds=args.seconds,
        fullscreen=not args.windowed,
    )
    if args.json:
        print(json.dumps(rep.as_dict(), indent=2))
    else:
        for line in rep.lines():
            print(line)
    return EXIT_OK if rep.ready else EXIT_PROBLEMS
