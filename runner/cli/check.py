"""``trialdeck check PROTOCOL``: every problem a protocol has, before anyone arrives."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from runner.errors import EXIT_OK, EXIT_PROBLEMS, StorageError, UsageError


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``trialdeck check``."""
    p.add_argument("protocol", metavar="PROTOCOL")
    p.add_argument(
        "--participants",
        type=int,
        metavar="N",
        help="also check counterbalancing over N participants (P01..PNN) and plan their run sheet",
    )
    p.add_argument(
        "--run-sheet",
        metavar="FILE.md",
        type=Path,
        help="write the participants' run sheet (block order, seed, expected length) as"
        " printable Markdown; needs --participants",
    )
    p.add_argument(
        "--json",
        action="store_true",
        help="print the report as one JSON object (problems, facts, counts, lengths, run sheet)",
    )


def run(args: argparse.Namespace) -> int:
    """Print one line per problem (or JSON) and the facts; exit 1 when any problem is an error.

    Raises
    ------
    UsageError
        ``--run-sheet`` without ``--participants``, or naming a file that exists.
    StorageError
        The run sheet cannot be written.
    """
    from runner.protocol.check import check_protocol
    from runner.protocol.runsheet import LABEL_RULE, format_run_sheet

    sheet_file: Path | None = args.run_sheet
    if sheet_file is not None:
        if args.participants is None:
            raise UsageError("--run-sheet needs --participants N (how many to plan).")
        if sheet_file.exists() or sheet_file.is_symlink():
            raise UsageError(f"{sheet_file} already exists; name a new file for the run sheet.")
    report = check_protocol(Path(args.protocol), participants=args.participants)
    if args.json:
        print(json.dumps(report.as_dict(), indent=2, ensure_ascii=False))
    else:
        for p in report.problems:
            print(p.format())
        for line in report.summary_lines():
            print(line)
        if report.run_sheet is not None:
            print(f"participant labels: {LABEL_RULE}")
    if sheet_file is not None and report.run_sheet is not None and report.loaded is not None:
        text = format_run_sheet(report.loaded, report.run_sheet)
        try:
            with open(sheet_file, "x", encoding="utf-8") as fh:
                fh.write(text)
        except OSError as exc:
            raise StorageError(f"cannot write {sheet_file}: {exc.strerror}.") from None
        if not args.json:
            print(f"run sheet for {len(report.run_sheet)} participants: {sheet_file}")
    return EXIT_PROBLEMS if report.has_errors else EXIT_OK
