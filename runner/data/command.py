"""The ``trialdeck export`` and ``trialdeck summary`` commands: arguments and run.

This is the command-line edge of the data layer, so it prints a short account of what it wrote;
everything it calls raises typed errors, which the CLI turns into messages and exit codes.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from runner.data.export import (
    DATATYPES,
    DEFAULT_DATATYPE,
    export_sessions,
)
from runner.errors import EXIT_OK

SUMMARY_TITLE = "Pilot summary"
MAX_LISTED = 10  # events files named one by one; more are counted


def add_export_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the ``export`` command's arguments to ``parser``.

    Parameters
    ----------
    parser : argparse.ArgumentParser
        The sub-command parser.
    """
    parser.add_argument(
        "sessions",
        nargs="+",
        metavar="SESSION_DIR",
        help="session folders (holding journal.jsonl), or folders above them",
    )
    parser.add_argument(
        "--out", required=True, metavar="DIR", type=Path, help="export folder (a BIDS root)"
    )
    parser.add_argument(
        "--recording",
        action="append",
        metavar="FILE.xdf",
        type=Path,
        help="XDF recording of a session: onsets then count from the first sample of its EEG "
        "stream; give one per session, in session order",
    )
    parser.add_argument(
        "--datatype",
        choices=DATATYPES,
        default=DEFAULT_DATATYPE,
        help=f"BIDS datatype folder of the events files (default {DEFAULT_DATATYPE})",
    )
    parser.add_argument(
        "--task",
        metavar="LABEL",
        help="BIDS task label, letters and digits (default: the study id without other characters)",
    )


def run_export(args: argparse.Namespace) -> int:
    """Run ``trialdeck export``: pooled trials.csv plus BIDS events per session.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed arguments (see :func:`add_export_arguments`).

    Returns
    -------
    int
        The exit code (0).
    """
    result = export_sessions(
        args.sessions,
        args.out,
        task=args.task,
        datatype=args.datatype,
        recordings=args.recording,
    )
    print(f"Exported {len(result.sessions)} session(s), {result.n_trials} completed trial(s).")
    print(f"Pooled trials table: {result.pooled}")
    listed = 0
    for (tsv, _side), origin, s in zip(result.events, result.origins, result.sessions, strict=True):
        where = "session start" if origin.kind == "session_start" else "first EEG sample"
        if listed < MAX_LISTED or s.status != "completed":
            print(f"Events (onsets from the {where}): {tsv}")
            listed += 1
        if s.status != "completed":
            print(f"  note: this session ended as {s.status!r}; its last rows may lack a duration.")
    if len(result.events) > listed:
        print(f"... and {len(result.events) - listed} more events files under {args.out}.")
    return EXIT_OK


def add_summary_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the ``summary`` command's arguments to ``parser``.

    Parameters
    ----------
    parser : argparse.ArgumentParser
        The sub-command parser.
    """
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
    parser.add_argument("--title", default=SUMMARY_TITLE, help="heading of the report")


def run_summary(args: argparse.Namespace) -> int:
    """Run ``trialdeck summary``: tables, difficulty score, plots and report.html.

    The sessions are read from their journals; factors, the rating scale and block level order
    come from the frozen protocols.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed arguments (see :func:`add_summary_arguments`).

    Returns
    -------
    int
        The exit code (0).
    """
    from runner.data.summarize import summarize_sessions

    result = summarize_sessions(
        args.sessions, args.out, include_practice=args.include_practice, title=args.title
    )
    print(
        f"Summarised {result.n_sessions} session(s), {result.n_trials} trial(s), by "
        + (", ".join(result.factors) if result.factors else "no factor")
        + "."
    )
    print(f"Wrote {len(result.paths)} file(s) to {args.out}; the report is {result.paths[-1]}")
    return EXIT_OK
