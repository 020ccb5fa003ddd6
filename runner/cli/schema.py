"""``trialdeck schema``: print the protocol's JSON Schema."""

from __future__ import annotations

import argparse
import json

from runner.errors import EXIT_OK


def add_arguments(p: argparse.ArgumentParser) -> None:
    """``trialdeck schema`` takes no options."""


def run(args: argparse.Namespace) -> int:
    """Print the JSON Schema of :class:`runner.protocol.model.Protocol`."""
    from runner.protocol.model import Protocol

    print(json.dumps(Protocol.model_json_schema(), indent=2))
    return EXIT_OK
