"""``trialdeck summary SESSION_DIR... --out DIR``: tables, plots and report.html of a pilot."""

from __future__ import annotations

import argparse
from pathlib import Path

from runner.cli.args import add_pooling, exclusion_lines
from runner.errors import EXIT_OK

SUMMARY_TITLE = "Pilot summary"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``trialdeck summary``."""
    parser.add_argument(
        "sessions",
        nargs="+",
        metavar="SESSION_DIR",
        help="session folders (holding journal.jsonl), or folders above them",
    )
    parser.add_argument(
        "--out", required=True, metavar="DIR", type=Path, help="folder for tables, plots, report"
    )
    parser.add_argument(
        "--include-practice",
        action="store_true",
        help="also summarise practice trials (default: main part only)",
    )
    parser.add_argument(
        "--force",
        action="store_true",
        help="write into an existing folder that is not empty and not an earlier summary's "
        "(never into or above a session folder)",
    )
    parser.add_argument(
        "--title",
        default=SUMMARY_TITLE,
        help="heading of the report (default: 'Pilot summary: ' and the study's name)",
    )
    add_pooling(parser)


def run(args: argparse.Namespace) -> int:
    """Write the summary, then print what was read and written; exit 0."""
    from runner.data.summarize import summarize_sessions
    from runner.data.summary_report import count

    done = summarize_sessions(
        args.sessions,
        args.out,
        include_practice=args.include_practice,
        title=args.title,
        force=args.force,
        pool_unlike=args.pool_unlike,
        physio=args.physio,
    )
    for line in exclusion_lines(done.excluded):
        print(line)
    print(
        f"Summarised {count(done.n_sessions, 'session')}, {count(done.n_trials, 'trial')}, by "
        + (", ".join(done.factors) if done.factors else "no factor")
        + "."
    )
    print(f"Wrote {count(len(done.paths), 'file')} to {args.out}; the report is {done.paths[-1]}")
    return EXIT_OK
