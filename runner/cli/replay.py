"""``trialdeck replay SESSION_DIR``: re-present a session's screens from its journal."""

from __future__ import annotations

import argparse
import os
from pathlib import Path

from runner.cli.args import has_display, positive_float
from runner.errors import EXIT_OK, EXIT_PROBLEMS, InputFileError, UsageError

#: The command a frames folder of replay's marker names.
REPLAY_COMMAND = "trialdeck replay --frames"


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``trialdeck replay``."""
    p.add_argument("session", metavar="SESSION_DIR", help="the session folder to replay")
    p.add_argument(
        "--speed",
        type=positive_float,
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
        "--force",
        action="store_true",
        help="write frames into DIR although it is not empty and was not made by replay "
        "(never into or above a session folder)",
    )
    p.add_argument(
        "--stimuli",
        metavar="DIR",
        help="folder the trial table's stimulus paths are relative to, when the session was "
        "copied from another computer",
    )


def run(args: argparse.Namespace) -> int:
    """Replay the session; exit 0, or 1 when stopped early with Escape.

    Raises
    ------
    InputFileError
        The folder holds no journal, or the stimuli folder does not exist.
    UsageError
        No display and no ``--frames``.
    OutputRefused
        A frames folder that is not empty and not an earlier replay's (without ``--force``), or
        is or holds a session folder.
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
    show = has_display()
    if not show and frames is None:
        raise UsageError(
            "there is no display here to replay on; add --frames DIR to write the screens as "
            "PNG files instead."
        )
    frames_out = None
    if frames is not None:
        from runner.contract.outputs import prepare_output_folder

        frames_out = prepare_output_folder(frames, REPLAY_COMMAND, force=args.force, what="frames")
    if not show:
        os.environ["SDL_VIDEODRIVER"] = "dummy"
    os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
    from runner.qa.replay import plan_replay, replay_session

    plan = plan_replay(session, stimuli_dir=args.stimuli)
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
    if frames_out is not None:
        sheet = [result.contact_sheet] if result.contact_sheet is not None else []
        frames_out.finish([*result.frames, *sheet])
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
