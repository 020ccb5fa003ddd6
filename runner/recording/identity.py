"""Which session a recorded marker stream came from, compared with a session's journal.

trialdeck's marker outlet writes the study, participant, session, protocol hash and mode into the
stream header's ``desc/session``, so a recording can be matched to a journal by identity first
and by payload sequence second. A recording of another participant then gets a plain sentence
naming whose it is, instead of a guess about clocks or late starts.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

# Fields compared, in the order a message names them.
IDENTITY_FIELDS = ("study", "participant", "session", "protocol_hash")


@dataclass(frozen=True)
class IdentityCheck:
    """The outcome of comparing a recorded stream's identity with a journal header."""

    recorded: dict[str, str]
    differences: tuple[tuple[str, str, str], ...]  # (field, recorded, journaled)

    @property
    def known(self) -> bool:
        """True when the stream carried an identity at all (older streams may not)."""
        return bool(self.recorded)

    @property
    def matches(self) -> bool:
        return self.known and not self.differences

    def describe(self) -> str:
        """One sentence naming whose recording this is, for a mismatch."""
        r = self.recorded
        who = (
            f"participant {r.get('participant', '?')}, session {r.get('session', '?')} of study "
            f"{r.get('study', '?')}"
        )
        fields = ", ".join(
            f"{name} {rec!r} instead of {jour!r}" for name, rec, jour in self.differences
        )
        return f"its marker stream was sent by {who} ({fields})"


def compare_identity(recorded: Mapping[str, str], header: Mapping[str, Any]) -> IdentityCheck:
    """Compare a stream's ``desc/session`` identity with a journal header's.

    Fields missing on either side are not compared, so streams from older versions (no identity)
    are judged by their payloads alone.
    """
    diffs = []
    for name in IDENTITY_FIELDS:
        rec = recorded.get(name)
        jour = header.get(name)
        if rec is None or jour is None:
            continue
        if str(rec) != str(jour):
            diffs.append((name, str(rec), str(jour)))
    return IdentityCheck(dict(recorded), tuple(diffs))
