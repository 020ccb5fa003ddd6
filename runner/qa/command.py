"""The ``trialdeck audit`` and ``trialdeck replay`` commands: arguments, printing, exit codes.

This module is the command-line edge of the qa layer, so it prints; everything it calls raises
typed errors instead. The lead wires the four functions into :mod:`runner.cli`.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from pathlib import Path

from runner.errors import EXIT_OK, EXIT_PROBLEMS, InputFileError, UsageError
from runner.qa.recording import DEFAULT_MAX_GAP_S, DEFAULT_RESIDUAL_LIMIT_MS


def _positive(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not (value > 0 and value != float("inf")):
        raise argparse.ArgumentTypeError(f"expected a number above 0, got {text!r}")
    return value


# -- audit -------------------------------------------------------------------------------------
def add_audit_arguments(p: argparse.ArgumentParser) -> None:
    """Add the ``audit`` command's arguments to ``p``.

    Parameters
    ----------
    p : argparse.ArgumentParser
        The sub-command parser.
    """
    p.add_argument(
        "sessions",
        nargs="+",
        metavar="SESSION_DIR",
        help="session folders (…/sub-<participant>/ses-<session>/)",
    )
    p.add_argument(
        "--recording",
        metavar="FILE.xdf",
        help="also check the markers and the other streams in this XDF recording",
    )
    p.add_argument("--json", action="store_true", help="print the findings as JSON")
    p.add_argument(
        "--max-gap",
        type=_positive,
        default=DEFAULT_MAX_GAP_S,
        metavar="SECONDS",
        help=f"report gaps in recorded streams longer than this (default {DEFAULT_MAX_GAP_S:g})",
    )
    p.add_argument(
        "--residual-limit",
        type=_positive,
        default=DEFAULT_RESIDUAL_LIMIT_MS,
        metavar="MS",
        help="largest accepted difference between journaled and recorded marker times "
        f"(default {DEFAULT_RESIDUAL_LIMIT_MS:g} ms)",
    )
    p.add_argument(
        "--allow-truncated",
        action="store_true",
        help="read the intact part of a truncated recording instead of refusing it",
    )


def run_audit(args: argparse.Namespace) -> int:
    """Run ``trialdeck audit``: exit 0 when every session is sound, 1 when any has errors.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed by a parser set up with :func:`add_audit_arguments`.

    Returns
    -------
    int
        The exit code.
    """
    from runner.qa.audit import audit_sessions, format_audits
    from runner.qa.recording import read_recording

    rec = None
    if args.recording:
        rec = read_recording(args.recording, allow_truncated=args.allow_truncated)
    audits = audit_sessions(
        [Path(s) for s in args.sessions],
        recording=rec,
        max_gap_s=args.max_gap,
        residual_limit_ms=args.residual_limit,
    )
    if args.json:
        print(json.dumps({"sessions": [a.as_dict() for a in audits]}, indent=2))
    else:
        print("\n".join(format_audits(audits)))
    return EXIT_OK if all(a.ok for a in audits) else EXIT_PROBLEMS


# -- replay ------------------------------------------------------------------------------------
def add_replay_arguments(p: argparse.ArgumentParser) -> None:
    """Add the ``replay`` command's arguments to ``p``.

    Parameters
    ----------
    p : argparse.ArgumentParser
        The sub-command parser.
    """
    p.add_argument("session", metavar="SESSION_DIR", help="the session folder to replay")
    p.add_argument(
        "--speed",
        type=_positive,
        metavar="X",
        help="show the screens X times faster than recorded (default 1; with --frames and no "
        "window, screens are drawn as fast as possible unless --speed is given)",
    )
    p.add_argument(
        "--windowed", action="store_true", help="a window instead of fullscreen (desk checks)"
    )
    p.add_argument(
        "--frames",
        metavar="DIR",
        help="write a PNG of every distinct screen and a contact sheet into DIR (works headless)",
    )
    p.add_argument(
        "--stimuli",
        metavar="DIR",
        help="folder the trial table's stimulus paths are relative to, when the session was "
        "copied from another computer",
    )


def _has_display() -> bool:
    if os.environ.get("SDL_VIDEODRIVER") in ("dummy", "offscreen"):
        return False
    if sys.platform.startswith("linux"):
        return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))
    return True


def run_replay(args: argparse.Namespace) -> int:
    """Run ``trialdeck replay``.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed by a parser set up with :func:`add_replay_arguments`.

    Returns
    -------
    int
        The exit code (0, or 1 when stopped early with Escape).
    """
    session = Path(args.session)
    if not (session / "journal.jsonl").is_file():
        raise InputFileError(
            f"{session} is not a session folder (it has no journal.jsonl); name the"
            " sub-<participant>/ses-<session> folder of the session to replay."
        )
    if args.stimuli is not None and not Path(args.stimuli).is_dir():
        raise InputFileError(f"the stimuli folder {args.stimuli} does not exist.")
    frames = Path(args.frames) if args.frames else None
    show = _has_display()
    if not show and frames is None:
        raise UsageError(
            "there is no display here to replay on; add --frames DIR to write the screens as "
            "PNG files instead."
        )
    if frames is not None and frames.exists() and any(frames.iterdir()):
        raise UsageError(
            f"the frames folder {frames} is not empty; give a new folder so frames of two "
            "replays are not mixed."
        )
    if not show:
        os.environ["SDL_VIDEODRIVER"] = "dummy"
    os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
    from runner.qa.replay import plan_replay, replay_session

    plan = plan_replay(Path(args.session), stimuli_dir=args.stimuli)
    timed = show or args.speed is not None
    speed = args.speed or 1.0
    if timed:
        span = (plan.screens[-1].t - plan.screens[0].t) / speed
        print(f"Replaying {len(plan.screens)} screens over {span:.1f} s; press Escape to stop.")
    result = replay_session(
        plan,
        speed=speed,
        timed=timed,
        fullscreen=show and not args.windowed,
        frames_dir=frames,
    )
    for note in result.notes:
        print(f"note: {note}")
    if result.timed and result.lateness_ms:
        worst = max(result.lateness_ms)
        print(
            f"Replayed {result.screens} screens in {result.seconds:.1f} s "
            f"(latest flip {worst:.1f} ms after its replay time)."
        )
    else:
        print(f"Drew {result.screens} screens in {result.seconds:.1f} s.")
    if frames is not None:
        print(f"Frames: {len(result.frames)} PNG files in {frames}")
        if result.contact_sheet is not None:
            print(f"Contact sheet: {result.contact_sheet}")
    if result.stopped_early:
        print("Stopped with Escape before the end.")
        return EXIT_PROBLEMS
    return EXIT_OK
