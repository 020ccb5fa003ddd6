"""The ``trialdeck`` parser and entry point: the one place that turns errors into exit codes.

Each verb lives in its own module, ``runner.cli.<verb>``, with ``add_arguments(parser)`` and
``run(args) -> exit code``. A verb's module (and whatever heavy library it needs: pygame, pandas,
matplotlib, networkx) is imported only when that verb runs; usage and help still list every verb.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
import traceback
from collections.abc import Callable, Sequence

from runner import __version__
from runner.cli.args import Parser
from runner.errors import EXIT_PROBLEMS, TrialdeckError

__all__ = ["VERBS", "build_parser", "main"]

#: **contract**: the verbs, in the order help lists them, each with its help line.
VERBS: tuple[tuple[str, str], ...] = (
    ("new", "write a starter study to edit: protocol, welcome page, stimuli"),
    ("check", "check a protocol before anyone arrives"),
    ("pilot", "run a protocol with a simulated participant"),
    ("run", "run a live session with a participant"),
    ("demo", "pilot the demo protocol (configs/demo.yaml)"),
    ("schema", "print the protocol's JSON Schema"),
    ("selftest", "measure this machine's display, input and marker timing"),
    ("audit", "check that sessions are complete and intact (and against a recording)"),
    ("replay", "re-present a session's screens from its journal"),
    ("export", "pooled trials table and BIDS events files"),
    ("summary", "pilot report: tables, plots and report.html"),
    ("stimuli", "make node-link stimuli with known answers from a spec"),
    ("physio", "per-trial pupil, heart and EEG measures from a session's recording"),
)


def build_parser(wanted: str | None = None) -> argparse.ArgumentParser:
    """The argument parser. With ``wanted``, only that verb's module is imported; the other
    verbs are still listed, so usage and help stay complete."""
    parser = Parser(
        prog="trialdeck", description="Run, check and analyse diagram-reading lab sessions."
    )
    parser.add_argument("--version", action="version", version=f"trialdeck {__version__}")
    sub = parser.add_subparsers(dest="verb", metavar="VERB", parser_class=Parser)
    sub.required = True
    verbs: dict[str, Callable[[argparse.Namespace], int]] = {}
    for verb, help_text in VERBS:
        p = sub.add_parser(verb, help=help_text)
        if wanted is None or wanted == verb:
            module = importlib.import_module(f"runner.cli.{verb}")
            module.add_arguments(p)
            verbs[verb] = module.run
    parser.set_defaults(_verbs=verbs)
    return parser


def _wanted_verb(argv: Sequence[str]) -> str | None:
    for arg in argv:
        if not arg.startswith("-"):
            return arg
    return None


def main(argv: Sequence[str] | None = None) -> int:
    """Run ``trialdeck`` with ``argv`` (default: the process's arguments); return the exit code.

    Errors the user can act on are printed as plain lines on stderr and exit with their code;
    anything else is a bug, printed as one ``internal error`` line (with the traceback when
    ``TRIALDECK_DEBUG`` is set).
    """
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
