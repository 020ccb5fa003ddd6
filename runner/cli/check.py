"""``trialdeck check PROTOCOL``: every problem a protocol has, before anyone arrives."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from runner.errors import EXIT_OK, EXIT_PROBLEMS


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``trialdeck check``."""
    p.add_argument("protocol", metavar="PROTOCOL")
    p.add_argument(
        "--participants",
        type=int,
        metavar="N",
        help="also check counterbalancing over N participants",
    )
    p.add_argument("--json", action="store_true", help="print the findings as JSON")


def run(args: argparse.Namespace) -> int:
    """Print one line per problem (or JSON) and the facts; exit 1 when any problem is an error."""
    from runner.protocol.check import check_protocol

    report = check_protocol(Path(args.protocol), participants=args.participants)
    if args.json:
        print(json.dumps([p.as_dict() for p in report.problems], indent=2))
    else:
        for p in report.problems:
            print(p.format())
        for line in report.summary_lines():
            print(line)
    return EXIT_PROBLEMS if report.has_errors else EXIT_OK
