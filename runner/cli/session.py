"""What ``pilot``, ``run`` and ``demo`` share: the session options and running one session."""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from runner.cli.args import no_display, positive_float, want_headless
from runner.errors import EXIT_OK, EXIT_PROBLEMS, UsageError


def add_session_arguments(p: argparse.ArgumentParser, *, pilot: bool) -> None:
    """Options of ``trialdeck pilot`` (``pilot=True``) and ``trialdeck run``."""
    p.add_argument("protocol", metavar="PROTOCOL", help="the protocol YAML file")
    p.add_argument(
        "--participant", required=True, metavar="ID", help="participant label: letters and digits"
    )
    p.add_argument(
        "--session", default="1", metavar="N", help="session label: letters and digits (default 1)"
    )
    p.add_argument(
        "--out",
        default="sessions",
        metavar="DIR",
        help="where session folders go (default ./sessions)",
    )
    p.add_argument(
        "--windowed", action="store_true", help="a window instead of fullscreen (desk tests)"
    )
    p.add_argument(
        "--wait-for-recorder",
        type=positive_float,
        metavar="SECONDS",
        help="wait this long for a recorder to connect to the marker stream; refuse to start otherwise",
    )
    p.add_argument(
        "--station", metavar="NAME", help="name of this presenter machine in the stream's source_id"
    )
    p.add_argument(
        "--resume",
        action="store_true",
        help="continue an interrupted session at its first incomplete trial",
    )
    p.add_argument(
        "--accept-changed-stimuli",
        action="store_true",
        help="with --resume: go on although stimulus files changed since the session started"
        " (each change is journaled with its old and new hash, and audit reports it)",
    )
    p.add_argument(
        "--pause-key",
        default="p",
        metavar="KEY",
        help="the experimenter's pause key, taken between trials and on waiting screens (default p)",
    )
    p.add_argument(
        "--trigger-port",
        metavar="PORT",
        help="serial port for the protocol's trigger codes (overrides triggers.port)",
    )
    if not pilot:
        p.add_argument(
            "--allow-timing-mismatch",
            action="store_true",
            help="start even when the measured refresh is off by more than 2%% or flips do not"
            " block (the mismatch is journaled)",
        )
    if pilot:
        p.add_argument(
            "--speed",
            type=positive_float,
            default=None,
            metavar="X",
            help="divide every wait and simulated response time by X (default 1; a --resume"
            " keeps the session's own speed and refuses a different one)",
        )
        p.add_argument(
            "--show", action="store_true", help="open a real window instead of running headless"
        )
        p.add_argument(
            "--frames", metavar="DIR", help="write a PNG of every distinct screen into DIR"
        )
        p.add_argument("--sim-abort-at", type=int, metavar="TRIAL", help=argparse.SUPPRESS)
        p.add_argument("--sim-pause-at", type=int, metavar="TRIAL", help=argparse.SUPPRESS)


def run_one_session(
    args: argparse.Namespace, *, mode: str, protocol: Path, console_quiet: bool = False
) -> int:
    """Run one session (``mode`` "pilot" or "live"), print where it went, return the exit code.

    Raises
    ------
    UsageError
        A live session is asked for where there is no display.
    TrialdeckError
        Whatever ended the session, after its journal and trials table were written.
    """
    from runner.protocol.load import load_protocol
    from runner.session.console import SAFETY_REMINDER, Console
    from runner.session.run import RunOptions, run_session

    if mode == "pilot":
        want_headless(args.show)
    else:
        os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
        if no_display() and os.environ.get("SDL_VIDEODRIVER") not in ("dummy", "offscreen"):
            raise UsageError(
                "there is no display here, so a live session cannot be shown; use `trialdeck pilot` for a headless pilot."
            )
    from runner.present.display import display_for

    loaded = load_protocol(protocol)
    pause_key = getattr(args, "pause_key", "p")
    console = Console(
        quiet=console_quiet, live=mode == "live" and sys.stdout.isatty(), pause_key=pause_key
    )
    if mode == "live":
        console.warn(SAFETY_REMINDER.format(pause=(pause_key or "p").upper()))
    frames = Path(args.frames) if getattr(args, "frames", None) else None
    fullscreen = not args.windowed and (mode == "live" or args.show)
    opts = RunOptions(
        participant=args.participant,
        session=args.session,
        out=Path(args.out),
        mode=mode,  # type: ignore[arg-type]
        speed=getattr(args, "speed", None),
        wait_for_recorder=args.wait_for_recorder,
        station=args.station,
        abort_at=getattr(args, "sim_abort_at", None),
        resume=getattr(args, "resume", False),
        allow_timing_mismatch=getattr(args, "allow_timing_mismatch", False),
        pause_key=pause_key,
        trigger_port=getattr(args, "trigger_port", None),
        pause_at=getattr(args, "sim_pause_at", None),
        accept_changed_stimuli=getattr(args, "accept_changed_stimuli", False),
    )
    console.start()
    try:
        result = run_session(
            loaded,
            opts,
            open_presenter=lambda: display_for(loaded, fullscreen=fullscreen, frames_dir=frames),
            console=console,
            observers=[console],
        )
    finally:
        console.stop()
    print(f"Session {result.status}: {result.trials_done} of {result.trials_total} trials.")
    print(f"Session folder: {result.folder}")
    print(f"Trials table:   {result.trials_csv}")
    if result.late_flips:
        print(f"Late flips: {result.late_flips}")
    if result.error is not None and not isinstance(result.error, KeyboardInterrupt):
        raise result.error
    return EXIT_OK if result.status == "completed" else EXIT_PROBLEMS
