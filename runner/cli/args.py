"""Argument types and helpers shared by the verbs: number parsers, display choice, the parser.

Nothing here imports a heavy module; every verb module may use it at import time.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import tempfile
from pathlib import Path
from typing import Any, NoReturn

from runner.errors import EXIT_USAGE

__all__ = [
    "Parser",
    "has_display",
    "no_display",
    "positive_float",
    "seconds",
    "want_headless",
]

#: Longest ``--seconds`` a self-test accepts (an hour of flips says nothing more than ten minutes).
MAX_SELFTEST_SECONDS = 3600.0


class Parser(argparse.ArgumentParser):
    """argparse, but usage errors exit 2 with one plain line (and the usage)."""

    def error(self, message: str) -> NoReturn:
        self.print_usage(sys.stderr)
        self.exit(EXIT_USAGE, f"error: {message}\n")


def positive_float(text: str) -> float:
    """A finite number above 0, for ``--speed``, ``--max-gap`` and similar options.

    Raises
    ------
    argparse.ArgumentTypeError
        For text that is not a number, or a number at or below 0, NaN or infinity.
    """
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not value > 0 or not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"expected a number above 0, got {text!r}")
    return value


def seconds(text: str) -> float:
    """A duration above 0 and at most :data:`MAX_SELFTEST_SECONDS`, for ``selftest --seconds``.

    Raises
    ------
    argparse.ArgumentTypeError
        For text that is not a number or a number outside the range.
    """
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number of seconds, got {text!r}") from None
    if not 0 < value <= MAX_SELFTEST_SECONDS:
        raise argparse.ArgumentTypeError(
            f"expected more than 0 and at most {MAX_SELFTEST_SECONDS:g} seconds, got {text!r}"
        )
    return value


def want_headless(show: bool) -> None:
    """Use the SDL dummy driver unless a window was asked for (``show``)."""
    if not show:
        os.environ["SDL_VIDEODRIVER"] = "dummy"
        if not os.environ.get("XDG_RUNTIME_DIR"):
            # SDL prints "error: XDG_RUNTIME_DIR is invalid" without one, which reads like ours.
            os.environ["XDG_RUNTIME_DIR"] = tempfile.mkdtemp(prefix="trialdeck-sdl-")
    os.environ.setdefault("SDL_AUDIODRIVER", "dummy")


def no_display() -> bool:
    """True on Linux without an X11 or Wayland display to open a window on."""
    if sys.platform.startswith("linux"):
        return not (os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))
    return False


def has_display() -> bool:
    """True when a real window can be shown: a display exists and no headless driver is forced."""
    if os.environ.get("SDL_VIDEODRIVER") in ("dummy", "offscreen"):
        return False
    return not no_display()


def add_allow_truncated(parser: argparse.ArgumentParser) -> None:
    """``--allow-truncated``: the recording-reading option audit and export share."""
    parser.add_argument(
        "--allow-truncated",
        action="store_true",
        help="read the intact part of a truncated recording instead of refusing it",
    )


def add_photodiode(parser: argparse.ArgumentParser, purpose: str) -> None:
    """``--photodiode STREAM[:CHANNEL]``: the light-sensor option audit and export share."""
    parser.add_argument(
        "--photodiode",
        metavar="STREAM[:CHANNEL]",
        help=f"with --recording: {purpose}, recorded in this stream (name, source_id or type; "
        "channel from 1)",
    )


def check_photodiode(photodiode: str | None, recording: object) -> None:
    """Refuse ``--photodiode`` without ``--recording`` or with a bad channel (audit and export).

    Raises
    ------
    UsageError
        With the sentence both verbs print.
    """
    from runner.errors import UsageError

    if not photodiode:
        return
    if not recording:
        raise UsageError(
            "--photodiode needs --recording FILE.xdf (the sensor is in the recording)."
        )
    from runner.recording.photodiode import parse_spec

    try:
        parse_spec(photodiode)
    except ValueError as exc:
        raise UsageError(f"{exc}.") from None


def add_pooling(parser: argparse.ArgumentParser) -> None:
    """``--pool-unlike`` and ``--physio``: what export and summary share about pooling."""
    parser.add_argument(
        "--pool-unlike",
        action="store_true",
        help="pool sessions that differ in speed, mode (pilot or live) or protocol version; "
        "refused by default",
    )
    parser.add_argument(
        "--physio",
        metavar="FILE.csv",
        type=Path,
        help="per-trial physiology table (participant, session, valid) for the protocol's "
        "exclusions.physio_valid_share_below rule",
    )


def read_physio(path: Path | None) -> Any:
    """The ``--physio`` table as a DataFrame with labels kept as text, or None."""
    if path is None:
        return None
    import pandas as pd

    from runner.errors import InputFileError

    try:
        return pd.read_csv(path, dtype={"participant": str, "session": str})
    except (OSError, ValueError) as exc:
        raise InputFileError(f"cannot read the physiology table {path}: {exc}.") from None


def exclusion_lines(reasons: dict[tuple[str, str], list[str]]) -> list[str]:
    """One printed line per excluded session, with the rules it met."""
    return [
        f"Excluded participant {p} session {s} by the protocol's rule(s): {', '.join(rules)}."
        for (p, s), rules in sorted(reasons.items())
    ]
