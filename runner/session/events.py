"""Journal event names and the marker payload format (re-exported from the contract).

The one definition is :mod:`runner.contract.events`; this module keeps the session layer's
import path for the engine and the trigger codes.
"""

from __future__ import annotations

from runner.contract.events import JOURNAL_ONLY_EVENTS, MARKED_EVENTS, encode_marker

__all__ = ["JOURNAL_ONLY_EVENTS", "MARKED_EVENTS", "encode_marker"]
