"""Journal event names and the marker payload format (pure; shared by engine, audit and export).

**Contract.** A marker sample is a compact JSON object string with ``event`` first and, for
trial events, ``trial`` (the 1-based position in the session, as in trials.csv). Its LSL
timestamp equals the journal line's ``t``.
"""

from __future__ import annotations

import json
from typing import Any

# Events that are sent as markers as well as journaled.
MARKED_EVENTS = frozenset(
    {
        "session_start",
        "session_end",
        "session_resume",
        "page_onset",
        "page_end",
        "rest_start",
        "rest_end",
        "block_start",
        "block_end",
        "break_start",
        "break_end",
        "pause_start",
        "pause_end",
        "fixation_onset",
        "stimulus_onset",
        "decision",
        "stimulus_offset",
        "answer_onset",
        "answer",
        "rating_onset",
        "rating",
        "feedback_onset",
        "gap_onset",
        "abort",
    }
)

# Events that are journaled only.
JOURNAL_ONLY_EVENTS = frozenset(
    {
        "header",
        "flip",
        "trial_start",
        "trial_end",
        "typing",
        "rating_select",
        "abort_requested",
        "abort_cancelled",
        "recorder_connected",
        "recorder_lost",
        "error",
        "warning",
        "session_interrupted",
        "display_check",
    }
)


def encode_marker(event: str, **fields: Any) -> str:
    """The JSON payload of one marker sample (compact, ``event`` first, fields in given order)."""
    return json.dumps({"event": event, **fields}, ensure_ascii=False, separators=(",", ":"))
