"""``trialdeck export SESSION_DIR... --out DIR``: pooled trials table and BIDS events files."""

from __future__ import annotations

import argparse
from pathlib import Path

from runner.cli.args import add_allow_truncated, add_pooling, exclusion_lines, read_physio
from runner.data.export import DATATYPES, DEFAULT_DATATYPE, export_sessions
from runner.errors import EXIT_OK

MAX_LISTED = 10  # events files named one by one; more are counted


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``trialdeck export``."""
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
    add_allow_truncated(parser)
    parser.add_argument(
        "--datatype",
        choices=DATATYPES,
        default=DEFAULT_DATATYPE,
        help=f"BIDS datatype folder of the events files (default {DEFAULT_DATATYPE})",
    )
    parser.add_argument(
        "--copy-stimuli",
        action="store_true",
        help="copy the sessions' stimuli into the dataset's stimuli/ folder (checked against the "
        "hashes journaled at each session's start)",
    )
    parser.add_argument(
        "--stimuli-dir",
        metavar="DIR",
        type=Path,
        help="with --copy-stimuli: where the stimuli are now, if they moved since the sessions",
    )
    parser.add_argument(
        "--force",
        action="store_true",
        help="write into an existing folder that is not empty and not an earlier export's "
        "(never into or above a session folder)",
    )
    parser.add_argument(
        "--task",
        metavar="LABEL",
        help="BIDS task label, letters and digits (default: the study id without other characters)",
    )
    add_pooling(parser)


def run(args: argparse.Namespace) -> int:
    """Export, then print what was written; exit 0."""
    result = export_sessions(
        args.sessions,
        args.out,
        task=args.task,
        datatype=args.datatype,
        recordings=args.recording,
        allow_truncated=args.allow_truncated,
        force=args.force,
        pool_unlike=args.pool_unlike,
        physio=read_physio(args.physio),
    )
    print(f"Exported {len(result.sessions)} session(s), {result.n_trials} completed trial(s).")
    if args.copy_stimuli:
        from runner.data.bids import copy_stimuli

        copied = copy_stimuli(result.sessions, Path(args.out), stimuli_dir=args.stimuli_dir)
        print(f"Copied {len(copied)} stimulus file(s) into {Path(args.out) / 'stimuli'}.")
    print(f"Pooled trials table: {result.pooled}")
    for line in exclusion_lines(result.excluded):
        print(line)
    if result.exclusions is not None:
        print(f"Exclusions table: {result.exclusions}")
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
