"""``trialdeck new FOLDER``: write a starter study (protocol, welcome page, stimuli, table)."""

from __future__ import annotations

import argparse
from pathlib import Path

from runner.errors import EXIT_OK


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``trialdeck new``."""
    p.add_argument("folder", metavar="FOLDER", type=Path, help="a new (or empty) folder")


def run(args: argparse.Namespace) -> int:
    """Write the starter and say what to do next; exit 0."""
    from runner.protocol.starter import WELCOME_NAME, write_starter

    made = write_starter(args.folder)
    folder = args.folder
    print(f"Wrote a starter study into {folder}:")
    print(f"  {made.protocol}  the protocol (every setting: docs/protocol.md)")
    print(f"  {folder / WELCOME_NAME}  the welcome page")
    print(
        f"  {folder / 'stimuli'}  {made.stimuli} stimuli, their spec and manifest.csv (the trial table)"
    )
    print("Next:")
    print(f"  trialdeck check {made.protocol} --participants 8")
    print(f"  trialdeck pilot {made.protocol} --participant P01")
    return EXIT_OK
