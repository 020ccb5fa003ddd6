"""What ``pilot``, ``run`` and ``demo`` share: the session options and running one session."""

from __future__ import annotations

import argparse
import os
import shlex
import sys
from pathlib import Path

from runner.cli.args import no_display, positive_float, want_headless
from runner.errors import EXIT_OK, EXIT_PROBLEMS, DisplayError, UsageError


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
            help="start even when the measured refresh is off by more than 2%% or vsync is"
            " missing (flips do not wait for the refresh, or the driver only imitates it; flips"
            " are then paced by trialdeck's frame clock); the mismatch is journaled",
        )
        p.add_argument(
            "--allow-display-mismatch",
            action="store_true",
            help="start even when the desktop size differs from the protocol's"
            " screen.resolution: the protocol's screen is drawn pixel for pixel, centred (both"
            " sizes are journaled)",
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


def _exit_display_lost() -> None:
    """After the session was closed on a lost display: say so and end at once.

    Called from Xlib's fatal IO error hook, which would otherwise end the process itself
    without a word; Python's own shutdown cannot run there.
    """
    sys.stderr.write(
        "error: the connection to the display was lost; the session was closed"
        " (session_end with reason display_lost; trials.csv written).\n"
    )
    sys.stderr.flush()
    os._exit(EXIT_PROBLEMS)


def check_desktop(loaded, *, allow: bool) -> tuple[int, int] | None:
    """Refuse a live run whose desktop size differs from the protocol's screen.resolution.

    Nothing is created before this check. With ``allow`` the run goes on: the protocol's
    screen is drawn pixel for pixel, centred on the desktop (the display refuses one too small).

    Raises
    ------
    DisplayError
        The sizes differ and the mismatch was not allowed.
    """
    from runner.present.display import desktop_size

    desktop = desktop_size()
    want = (int(loaded.model.screen.resolution[0]), int(loaded.model.screen.resolution[1]))
    if desktop is not None and desktop != want and not allow:
        raise DisplayError(
            f"the display's desktop is {desktop[0]}x{desktop[1]} pixels but the protocol's"
            f" screen.resolution is {want[0]}x{want[1]}; nothing was created. Set the display to"
            " that resolution (see docs/lab-setup.md), or run with --allow-display-mismatch to"
            " draw the protocol's screen pixel for pixel, centred on this desktop."
        )
    return desktop


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
    from runner.protocol.check import refuse_check_errors
    from runner.protocol.load import load_protocol
    from runner.protocol.schedule import build_schedule
    from runner.session.console import SAFETY_REMINDER, Console
    from runner.session.run import RunOptions, run_session

    if mode == "pilot":
        want_headless(args.show)
    else:
        os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
        if no_display():
            raise UsageError(
                "there is no display here, so a live session cannot be shown; use `trialdeck pilot` for a headless pilot."
            )
    from runner.present.display import Display, after_display_lost, display_for

    after_display_lost(_exit_display_lost)

    loaded = load_protocol(protocol)
    # What `check` refuses is not started (nothing is created for it): one rule for both.
    refuse_check_errors(protocol, loaded)
    if mode == "live":
        check_desktop(loaded, allow=getattr(args, "allow_display_mismatch", False))
    pause_key = getattr(args, "pause_key", "p")
    console = Console(
        quiet=console_quiet, live=mode == "live" and sys.stdout.isatty(), pause_key=pause_key
    )
    if mode == "live":
        console.warn(SAFETY_REMINDER.format(pause=(pause_key or "p").upper()))
    frames = Path(args.frames) if getattr(args, "frames", None) else None
    frames_out = None
    if frames is not None:
        from runner.contract.outputs import prepare_output_folder

        frames_out = prepare_output_folder(frames, "trialdeck pilot --frames", what="frames")
    opened: list[Display] = []

    def open_presenter() -> Display:
        opened.append(display_for(loaded, fullscreen=fullscreen, frames_dir=frames))
        return opened[-1]

    fullscreen = not args.windowed and (mode == "live" or args.show)
    opts = RunOptions(
        participant=args.participant,
        session=args.session,
        out=Path(args.out),
        mode=mode,  # type: ignore[arg-type]  # the verbs pass 'live' or 'pilot'
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
    console.plan(build_schedule(loaded, args.participant, args.session))
    console.start()
    try:
        result = run_session(
            loaded,
            opts,
            open_presenter=open_presenter,
            console=console,
            observers=[console],
        )
    finally:
        console.stop()
        if frames_out is not None:
            frames_out.finish(p for d in opened for p in d.frames_written)
    print(f"Session {result.status}: {result.trials_done} of {result.trials_total} trials.")
    print(f"Session folder: {result.folder}")
    print(f"Trials table:   {result.trials_csv}")
    late = audited_late_flips(result.folder, result.late_flips)
    if late:
        print(f"Late flips: {late}" + late_flips_note())
    if result.status in ("aborted", "interrupted", "failed"):
        for line in resume_lines(args, mode, protocol, result.folder):
            print(line)
    if result.error is not None and not isinstance(result.error, KeyboardInterrupt):
        raise result.error
    return EXIT_OK if result.status == "completed" else EXIT_PROBLEMS


def audited_late_flips(folder: Path, fallback: int) -> int:
    """Late flips as ``trialdeck audit`` counts them from the journal (so the two agree);
    the presenter's own count when the journal cannot be audited."""
    from runner.errors import TrialdeckError
    from runner.qa.audit import audit_session

    try:
        timing = audit_session(folder).facts.get("timing") or {}
    except (TrialdeckError, OSError):
        return fallback
    late = timing.get("late_flips")
    return late if isinstance(late, int) else fallback


def late_flips_note() -> str:
    """Why late flips of a headless run say nothing about the lab display (empty when shown)."""
    if os.environ.get("SDL_VIDEODRIVER") in ("dummy", "offscreen"):
        return (
            " (a headless run has no real display, so these say nothing about the lab's screen;"
            " `trialdeck selftest` on the lab machine measures it)"
        )
    return ""


def resume_lines(
    args: argparse.Namespace, mode: str, protocol: Path, folder: Path | None
) -> list[str]:
    """What to do after a session that did not complete: how to continue it, how to audit it."""
    verb = "run" if mode == "live" else "pilot"
    command = (
        f"trialdeck {verb} {shlex.quote(str(protocol))} --participant {args.participant}"
        f" --session {args.session} --out {shlex.quote(str(args.out))} --resume"
    )
    lines = ["To continue this session where it stopped:", f"  {command}"]
    if folder is not None:
        lines += [
            "To see what was recorded so far:",
            f"  trialdeck audit {shlex.quote(str(folder))}",
        ]
    return lines
