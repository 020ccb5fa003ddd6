"""The ``trialdeck`` command: argument parsing, printing and exit codes only.

Every verb's work lives in the library; errors the user can act on arrive here as
:class:`runner.errors.TrialdeckError` and are printed as plain lines, never as a traceback.
"""

from __future__ import annotations

import argparse
import importlib
import json
import os
import sys
import tempfile
import traceback
from collections.abc import Callable, Sequence
from pathlib import Path

from runner import __version__
from runner.errors import EXIT_OK, EXIT_PROBLEMS, EXIT_USAGE, TrialdeckError, UsageError

DEMO_PROTOCOL = Path("configs") / "demo.yaml"
DEMO_PARTICIPANT = "P01"
DEMO_SPEED = 10.0


class _Parser(argparse.ArgumentParser):
    """argparse, but usage errors exit 2 with one plain line (and the usage)."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.print_usage(sys.stderr)
        self.exit(EXIT_USAGE, f"error: {message}\n")


def _positive_float(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not value > 0 or value != value or value == float("inf"):
        raise argparse.ArgumentTypeError(f"expected a number above 0, got {text!r}")
    return value


def _want_headless(show: bool) -> None:
    """Use the SDL dummy driver unless a window was asked for and a display exists."""
    if not show:
        os.environ["SDL_VIDEODRIVER"] = "dummy"
        if not os.environ.get("XDG_RUNTIME_DIR"):
            # SDL prints "error: XDG_RUNTIME_DIR is invalid" without one, which reads like ours.
            os.environ["XDG_RUNTIME_DIR"] = tempfile.mkdtemp(prefix="trialdeck-sdl-")
    os.environ.setdefault("SDL_AUDIODRIVER", "dummy")


def _no_display() -> bool:
    if sys.platform.startswith("linux"):
        return not (os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))
    return False


# -- check -------------------------------------------------------------------------------------
def cmd_check(args: argparse.Namespace) -> int:
    from runner.protocol.check import check_protocol

    report = check_protocol(Path(args.protocol), participants=args.participants)
    if args.json:
        print(json.dumps([p.as_dict() for p in report.problems], indent=2))
    else:
        for p in report.problems:
            print(p.format())
        for line in report.summary_lines():
            print(line)
    return EXIT_PROBLEMS if report.has_errors else EXIT_OK


# -- pilot / run / demo ------------------------------------------------------------------------
def _session_args(p: argparse.ArgumentParser, *, pilot: bool) -> None:
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
        type=_positive_float,
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
            type=_positive_float,
            default=1.0,
            metavar="X",
            help="divide every wait and simulated response time by X",
        )
        p.add_argument(
            "--show", action="store_true", help="open a real window instead of running headless"
        )
        p.add_argument(
            "--frames", metavar="DIR", help="write a PNG of every distinct screen into DIR"
        )
        p.add_argument("--sim-abort-at", type=int, metavar="TRIAL", help=argparse.SUPPRESS)
        p.add_argument("--sim-pause-at", type=int, metavar="TRIAL", help=argparse.SUPPRESS)


def _run(
    args: argparse.Namespace, *, mode: str, protocol: Path, console_quiet: bool = False
) -> int:
    from runner.protocol.load import load_protocol
    from runner.session.console import SAFETY_REMINDER, Console
    from runner.session.run import RunOptions, run_session

    if mode == "pilot":
        _want_headless(args.show)
    else:
        os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
        if _no_display() and os.environ.get("SDL_VIDEODRIVER") not in ("dummy", "offscreen"):
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
        speed=getattr(args, "speed", 1.0),
        wait_for_recorder=args.wait_for_recorder,
        station=args.station,
        abort_at=getattr(args, "sim_abort_at", None),
        resume=getattr(args, "resume", False),
        allow_timing_mismatch=getattr(args, "allow_timing_mismatch", False),
        pause_key=pause_key,
        trigger_port=getattr(args, "trigger_port", None),
        pause_at=getattr(args, "sim_pause_at", None),
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


def cmd_pilot(args: argparse.Namespace) -> int:
    return _run(args, mode="pilot", protocol=Path(args.protocol))


def cmd_run(args: argparse.Namespace) -> int:
    return _run(args, mode="live", protocol=Path(args.protocol))


def _demo_protocol() -> Path:
    here = Path.cwd() / DEMO_PROTOCOL
    if here.is_file():
        return here
    repo = Path(__file__).resolve().parent.parent / DEMO_PROTOCOL
    if repo.is_file():
        return repo
    raise UsageError(
        "the demo protocol configs/demo.yaml was not found; run `trialdeck demo` from the trialdeck"
        " folder (or install it with `pip install -e .`)."
    )


def cmd_demo(args: argparse.Namespace) -> int:
    from runner.protocol.load import load_protocol
    from runner.session.run import session_folder

    protocol = _demo_protocol()
    study = load_protocol(protocol).model.study
    out = Path(args.out)
    n = 1
    while (session_folder(out, study, DEMO_PARTICIPANT, str(n)) / "journal.jsonl").exists():
        n += 1
    ns = argparse.Namespace(
        participant=DEMO_PARTICIPANT,
        session=str(n),
        out=str(out),
        windowed=args.windowed,
        wait_for_recorder=None,
        station=None,
        speed=args.speed,
        show=args.show,
        frames=args.frames,
        sim_abort_at=None,
    )
    print(
        f"Demo: a pilot of {protocol} with a simulated participant, {args.speed:g} times faster than real time."
    )
    return _run(ns, mode="pilot", protocol=protocol, console_quiet=not args.verbose)


def cmd_schema(args: argparse.Namespace) -> int:
    from runner.protocol.model import Protocol

    print(json.dumps(Protocol.model_json_schema(), indent=2))
    return EXIT_OK


# -- parser ------------------------------------------------------------------------------------
# Verbs whose modules are heavy (pygame, pandas, matplotlib, networkx): imported only when used.
PLUGIN_VERBS = [
    (
        "selftest",
        "measure this machine's display, input and marker timing",
        "runner.present.selftest",
        "add_arguments",
        "run",
    ),
    (
        "audit",
        "check that sessions are complete and intact (and against a recording)",
        "runner.qa.command",
        "add_audit_arguments",
        "run_audit",
    ),
    (
        "replay",
        "re-present a session's screens from its journal",
        "runner.qa.command",
        "add_replay_arguments",
        "run_replay",
    ),
    (
        "export",
        "pooled trials table and BIDS events files",
        "runner.data.command",
        "add_export_arguments",
        "run_export",
    ),
    (
        "summary",
        "pilot report: tables, plots and report.html",
        "runner.data.command",
        "add_summary_arguments",
        "run_summary",
    ),
    (
        "stimuli",
        "make node-link stimuli with known answers from a spec",
        "runner.graphs.command",
        "add_arguments",
        "run",
    ),
]


def build_parser(wanted: str | None = None) -> argparse.ArgumentParser:
    """The argument parser. With ``wanted``, only that verb's (possibly heavy) module is imported;
    the other verbs are still listed, so usage and help stay complete."""
    parser = _Parser(
        prog="trialdeck", description="Run, check and analyse diagram-reading lab sessions."
    )
    parser.add_argument("--version", action="version", version=f"trialdeck {__version__}")
    sub = parser.add_subparsers(dest="verb", metavar="VERB", parser_class=_Parser)
    sub.required = True
    verbs: dict[str, Callable[[argparse.Namespace], int]] = {}

    p = sub.add_parser("check", help="check a protocol before anyone arrives")
    p.add_argument("protocol", metavar="PROTOCOL")
    p.add_argument(
        "--participants",
        type=int,
        metavar="N",
        help="also check counterbalancing over N participants",
    )
    p.add_argument("--json", action="store_true", help="print the findings as JSON")
    verbs["check"] = cmd_check

    p = sub.add_parser("pilot", help="run a protocol with a simulated participant")
    _session_args(p, pilot=True)
    verbs["pilot"] = cmd_pilot

    p = sub.add_parser("run", help="run a live session with a participant")
    _session_args(p, pilot=False)
    verbs["run"] = cmd_run

    p = sub.add_parser("demo", help="pilot the demo protocol (configs/demo.yaml)")
    p.add_argument(
        "--out",
        default="demo-sessions",
        metavar="DIR",
        help="where the session goes (default ./demo-sessions)",
    )
    p.add_argument("--speed", type=_positive_float, default=DEMO_SPEED, metavar="X")
    p.add_argument(
        "--show", action="store_true", help="open a real window instead of running headless"
    )
    p.add_argument("--windowed", action="store_true")
    p.add_argument("--frames", metavar="DIR", help="write a PNG of every distinct screen into DIR")
    p.add_argument("--verbose", action="store_true", help="print a line per trial")
    verbs["demo"] = cmd_demo

    p = sub.add_parser("schema", help="print the protocol's JSON Schema")
    verbs["schema"] = cmd_schema

    for verb, help_text, module, add_name, run_name in PLUGIN_VERBS:
        p = sub.add_parser(verb, help=help_text)
        if wanted is None or wanted == verb:
            mod = importlib.import_module(module)
            getattr(mod, add_name)(p)
            verbs[verb] = getattr(mod, run_name)

    parser.set_defaults(_verbs=verbs)
    return parser


def _wanted_verb(argv: Sequence[str]) -> str | None:
    for arg in argv:
        if not arg.startswith("-"):
            return arg
    return None


def main(argv: Sequence[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser(_wanted_verb(argv))
    args = parser.parse_args(argv)
    handler = args._verbs[args.verb]
    try:
        return int(handler(args) or 0)
    except TrialdeckError as exc:
        for line in exc.lines():
            print(line, file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("error: interrupted.", file=sys.stderr)
        return EXIT_PROBLEMS
    except BrokenPipeError:
        return EXIT_PROBLEMS
    except Exception as exc:  # a bug in trialdeck, not the user's mistake
        if os.environ.get("TRIALDECK_DEBUG"):
            traceback.print_exc()
        print(
            f"internal error (a bug in trialdeck, please report it): {type(exc).__name__}: {exc}."
            " Set TRIALDECK_DEBUG=1 to see the details.",
            file=sys.stderr,
        )
        return EXIT_PROBLEMS


if __name__ == "__main__":
    sys.exit(main())
