"""``trialdeck physio SESSION_DIR... --recording FILE.xdf... --out DIR``: per-trial physiology."""

from __future__ import annotations

import argparse
from pathlib import Path

from runner.cli.args import add_allow_truncated
from runner.errors import EXIT_OK, UsageError

STREAM_KINDS = ("eeg", "pupil", "ecg", "rr", "photodiode")


def positive_int(text: str) -> int:
    """A whole number of at least 1 (argparse type)."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"expected 1 or more, got {value}")
    return value


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``trialdeck physio``."""
    parser.add_argument(
        "sessions",
        nargs="+",
        metavar="SESSION_DIR",
        type=Path,
        help="session folders (each holding journal.jsonl)",
    )
    parser.add_argument(
        "--recording",
        action="append",
        required=True,
        metavar="FILE.xdf",
        type=Path,
        help="the XDF recording of a session; give one per SESSION_DIR, in the same order",
    )
    parser.add_argument("--out", required=True, metavar="DIR", type=Path, help="output folder")
    parser.add_argument(
        "--config",
        metavar="FILE.yaml",
        type=Path,
        help="physio settings (default: the protocol's physio section, else the defaults of "
        "docs/physio.md)",
    )
    parser.add_argument(
        "--jobs",
        type=positive_int,
        default=1,
        metavar="N",
        help="sessions processed side by side in N worker processes (default 1)",
    )
    parser.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        help="send each session to the existing Dask cluster at ADDRESS (needs the dask extra)",
    )
    for kind in STREAM_KINDS:
        parser.add_argument(
            f"--{kind}-stream",
            metavar="NAME",
            help=f"the {kind} stream's name, when several streams of its type are recorded",
        )
    parser.add_argument(
        "--no-figures", action="store_true", help="leave out the per-session QA figures"
    )
    parser.add_argument(
        "--force",
        action="store_true",
        help="write into an existing folder that is not empty and not an earlier physio output",
    )
    add_allow_truncated(parser)


def run(args: argparse.Namespace) -> int:
    """Compute, write the tables, print what was written; exit 0."""
    from runner.contract.layout import JOURNAL_NAME
    from runner.data.summary_report import count
    from runner.physio.config import load_config
    from runner.physio.outputs import FIGURES_FOLDER, prepare, write_tables
    from runner.physio.pipeline import SessionJob, check_distinct, check_pairs, run_sessions

    for folder in args.sessions:
        if not (folder / JOURNAL_NAME).is_file():
            raise UsageError(
                f"{folder} is not a session folder (it holds no {JOURNAL_NAME}); give each "
                "session's own folder, paired in order with its --recording."
            )
    check_pairs(args.sessions, args.recording)
    check_distinct(args.sessions)
    if args.jobs > 1 and args.scheduler:
        raise UsageError("give either --jobs or --scheduler, not both.")
    config = load_config(args.config) if args.config is not None else None
    names = tuple(
        (kind, getattr(args, f"{kind}_stream"))
        for kind in STREAM_KINDS
        if getattr(args, f"{kind}_stream")
    )
    target = prepare(args.out, force=args.force)
    figures = None if args.no_figures else Path(args.out) / FIGURES_FOLDER
    jobs = [
        SessionJob(
            folder=folder,
            recording=recording,
            config=config,
            figures=figures,
            allow_truncated=args.allow_truncated,
            stream_names=names,
        )
        for folder, recording in zip(args.sessions, args.recording, strict=True)
    ]
    results = []
    for result in run_sessions(jobs, workers=args.jobs, scheduler=args.scheduler):
        results.append(result)
        streams = ", ".join(f"{k} {v}" for k, v in result.streams.items()) or "none"
        print(
            f"{result.folder}: {count(len(result.trials), 'trial')}, "
            f"{count(len(result.periods), 'period')}; "
            f"streams: {streams}"
        )
        for note in result.notes:
            print(f"  note: {note}")
    files = write_tables(target, results)
    figs = [f for r in results for f in r.figures]
    target.finish(files + figs)
    print(f"Per-trial table: {files[0]} ({sum(len(r.trials) for r in results)} rows)")
    print(f"Block and rest table: {files[2]}")
    if figs:
        print(f"QA figures: {len(figs)} in {figures}")
    return EXIT_OK
