"""**Contract.** Journal event names and the marker payload format.

A marker sample is a compact JSON object string with ``event`` first and, for trial events,
``trial`` (the 1-based position in the session, as in trials.csv). Its LSL timestamp equals the
journal line's ``t``.
"""

from __future__ import annotations

import json
from typing import Any

#: The marked events of one trial's screens, in the order a trial can reach them (physio windows
#: start and end at these).
TRIAL_EVENTS = (
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
)

# Events that are sent as markers as well as journaled.
MARKED_EVENTS = frozenset(
    {
        *TRIAL_EVENTS,
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
        "anticipation",
        "rating_select",
        "abort_requested",
        "abort_cancelled",
        "recorder_connected",
        "recorder_lost",
        "error",
        "warning",
        "session_interrupted",
        "display_check",
        "clock_epoch",
        "stimuli_changed_accepted",
    }
)
KNOWN_EVENTS = MARKED_EVENTS | JOURNAL_ONLY_EVENTS

# Lines that start an attempt of a session (a resume starts a new one).
ATTEMPT_STARTS = frozenset({"session_start", "session_resume"})
# session_end statuses.
STATUS_COMPLETED = "completed"
STATUS_ABORTED = "aborted"
STATUS_INCOMPLETE = "incomplete"  # no session_end line (a crash): what readers report

# Fields of journal lines that the readers rely on.
MARKER_FIELD = "marker"  # the exact payload string sent
RECORD_FIELD = "record"  # a trial_end line's trials.csv row
VALUES_FIELD = "values"  # inside a record: the trial table's own values


# **Contract.** The integer ``value`` of each events.tsv row kind (``trial_type``): the same in every
# session and study, so EEG tools that need integer event codes (MNE's events arrays) can pool
# sessions whose event sets differ. Never renumber; add new kinds with new numbers.
EVENT_VALUES: dict[str, int] = {
    "session": 1,
    "resume": 2,
    "page": 3,
    "rest": 4,
    "block": 5,
    "break": 6,
    "pause": 7,
    "fixation": 10,
    "stimulus": 11,
    "decision": 12,
    "answer_prompt": 13,
    "answer": 14,
    "rating_prompt": 15,
    "rating": 16,
    "feedback": 17,
    "gap": 18,
    "anticipation": 19,
    "abort": 90,
}


def encode_marker(event: str, **fields: Any) -> str:
    """The JSON payload of one marker sample (compact, ``event`` first, fields in given order)."""
    return json.dumps({"event": event, **fields}, ensure_ascii=False, separators=(",", ":"))
