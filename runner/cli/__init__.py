"""The ``trialdeck`` command line: the only part of trialdeck that prints or sets exit codes.

One module per verb (``runner.cli.check``, ``runner.cli.pilot``, ...), shared argument types in
:mod:`runner.cli.args`, the parser and entry point in :mod:`runner.cli.app`.
"""

from __future__ import annotations

from runner.cli.app import build_parser, main

__all__ = ["build_parser", "main"]
