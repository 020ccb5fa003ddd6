"""``trialdeck audit SESSION_DIR...``: check that sessions are complete and intact."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from runner.cli.args import add_allow_truncated, add_photodiode, check_photodiode, positive_float
from runner.errors import EXIT_OK, EXIT_PROBLEMS
from runner.recording import DEFAULT_MAX_GAP_S, DEFAULT_RESIDUAL_LIMIT_MS


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``trialdeck audit``."""
    p.add_argument(
        "sessions",
        nargs="+",
        metavar="SESSION_DIR",
        help="session folders (…/sub-<participant>/ses-<session>/), or folders above them"
        " (a study folder: every session under it)",
    )
    p.add_argument(
        "--recording",
        metavar="FILE.xdf",
        help="also check the markers and the other streams in this XDF recording",
    )
    p.add_argument("--json", action="store_true", help="print the findings as JSON")
    p.add_argument(
        "--max-gap",
        type=positive_float,
        default=DEFAULT_MAX_GAP_S,
        metavar="SECONDS",
        help=f"report gaps in recorded streams longer than this (default {DEFAULT_MAX_GAP_S:g})",
    )
    p.add_argument(
        "--residual-limit",
        type=positive_float,
        default=DEFAULT_RESIDUAL_LIMIT_MS,
        metavar="MS",
        help="largest accepted difference between journaled and recorded marker times "
        f"(default {DEFAULT_RESIDUAL_LIMIT_MS:g} ms)",
    )
    add_photodiode(
        p, "measure the display latency per onset from a light sensor on the photodiode patch"
    )
    add_allow_truncated(p)


def session_folders(paths: list[str]) -> list[Path]:
    """Each path as given when it holds a journal (or is not a folder: audit names what is
    missing), else every session folder under it, as export and summary find them."""
    from runner.contract.layout import JOURNAL_NAME
    from runner.data.sessions import find_session_folders

    out: list[Path] = []
    for raw in paths:
        path = Path(raw)
        if path.is_dir() and not (path / JOURNAL_NAME).exists():
            out.extend(find_session_folders([path]))
        else:
            out.append(path)
    return out


def run(args: argparse.Namespace) -> int:
    """Print the audit (or JSON); exit 0 when every session is sound, 1 when any has errors."""
    from runner.qa.audit import audit_sessions, format_audits
    from runner.recording import read_recording

    rec = None
    check_photodiode(args.photodiode, args.recording)
    if args.recording:
        from runner.recording.photodiode import recording_values

        rec = read_recording(
            args.recording,
            allow_truncated=args.allow_truncated,
            values=recording_values(args.photodiode),
        )
    audits = audit_sessions(
        session_folders(args.sessions),
        recording=rec,
        max_gap_s=args.max_gap,
        residual_limit_ms=args.residual_limit,
        photodiode=args.photodiode,
    )
    if args.json:
        print(json.dumps({"sessions": [a.as_dict() for a in audits]}, indent=2))
    else:
        print("\n".join(format_audits(audits)))
    return EXIT_OK if all(a.ok for a in audits) else EXIT_PROBLEMS
