"""Which sessions may be pooled: the same speed, the same mode and the same protocol.

A pilot run at ten times real speed and a participant's session measure different things, and two
versions of a protocol may show different trials; averaging them together hides that. Export and
summary therefore refuse to pool unlike sessions unless asked (``--pool-unlike``), and the error
names what differs in one line.
"""

from __future__ import annotations

import json
from collections import Counter
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

from runner.contract.layout import JOURNAL_NAME
from runner.errors import TrialdeckError

__all__ = [
    "UnlikeSessionsError",
    "check_alike",
    "header_of",
    "pooling_key",
]

#: What must agree between pooled sessions, in the order the error names them.
POOLING_FIELDS = ("speed", "mode", "protocol")
HASH_SHOWN = 12  # characters of a protocol hash shown in the message


class UnlikeSessionsError(TrialdeckError):
    """The sessions differ in speed, mode or protocol; ``differences`` maps each field to the
    values found, each with its number of sessions (code ``unlike-sessions``)."""

    code = "unlike-sessions"

    def __init__(self, message: str, differences: dict[str, dict[str, int]]):
        super().__init__(message)
        self.differences = differences


def _speed(header: Mapping[str, Any]) -> str:
    raw = header.get("speed")
    try:
        value = float(raw) if raw is not None else 1.0
    except (TypeError, ValueError):
        return str(raw)
    return f"{value:g}x"


def pooling_key(header: Mapping[str, Any]) -> dict[str, str]:
    """The fields of a journal header that must agree for pooling: speed (``1x`` when the
    header has none, as for a live session), mode and protocol (study and protocol hash)."""
    digest = str(header.get("protocol_hash", ""))
    return {
        "speed": _speed(header),
        "mode": str(header.get("mode", "live")),
        "protocol": f"{header.get('study', '')} {digest[:HASH_SHOWN]}".strip(),
    }


def header_of(folder: str | Path) -> dict[str, Any]:
    """The header line of a session folder's journal, read without verifying the journal (the
    export verifies it when it reads the session); an unreadable header gives ``{}``."""
    try:
        with open(Path(folder) / JOURNAL_NAME, "rb") as fh:
            first = fh.readline()
        value = json.loads(first)
    except (OSError, ValueError):
        return {}
    return value if isinstance(value, dict) else {}


def check_alike(headers: Iterable[Mapping[str, Any]], *, verb: str = "pool") -> None:
    """Refuse sessions that differ in speed, mode or protocol.

    Parameters
    ----------
    headers : iterable of mapping
        The sessions' journal headers.
    verb : str
        The command's verb for the message (``summarise``, ``export``).

    Raises
    ------
    UnlikeSessionsError
        If any of :data:`POOLING_FIELDS` takes more than one value; the message lists each
        differing field with its values and session counts, in one line.
    """
    counts: dict[str, Counter[str]] = {f: Counter() for f in POOLING_FIELDS}
    for header in headers:
        for name, value in pooling_key(header).items():
            counts[name][value] += 1
    differences = {
        name: dict(sorted(found.items())) for name, found in counts.items() if len(found) > 1
    }
    if not differences:
        return
    parts = [
        f"{name} ({', '.join(f'{value}: {n} session(s)' for value, n in found.items())})"
        for name, found in differences.items()
    ]
    raise UnlikeSessionsError(
        f"the sessions differ in {'; '.join(parts)}; {verb} them separately, or pass "
        "--pool-unlike to pool them anyway.",
        differences,
    )


def alike_summary(headers: Sequence[Mapping[str, Any]]) -> dict[str, list[str]]:
    """Each pooling field's distinct values among ``headers`` (for facts and reports)."""
    out: dict[str, list[str]] = {}
    for name in POOLING_FIELDS:
        out[name] = sorted({pooling_key(h)[name] for h in headers})
    return out
