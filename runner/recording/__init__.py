"""The lab's XDF recording: reading it, and checking a session's markers and streams against it.

* :mod:`runner.recording.xdf`: :func:`read_recording` (pyxdf is the only reader);
* :mod:`runner.recording.markers`: the session's marker stream, and marker matching;
* :mod:`runner.recording.check`: stream coverage and :func:`check_recording`.

Used by the audit (``runner.qa``) and by export (the EEG origin of BIDS events).
"""

from __future__ import annotations

from runner.recording.check import (
    DEFAULT_MAX_GAP_S,
    DEFAULT_RESIDUAL_LIMIT_MS,
    RecordingReport,
    StreamCoverage,
    check_recording,
    stream_coverage,
)
from runner.recording.markers import (
    MarkerMatch,
    MarkerStreamChoice,
    find_marker_streams,
    is_marker_payload,
    match_markers,
)
from runner.recording.xdf import MARKER_TYPE, RecordedStream, Recording, read_recording

__all__ = [
    "DEFAULT_MAX_GAP_S",
    "DEFAULT_RESIDUAL_LIMIT_MS",
    "MARKER_TYPE",
    "MarkerMatch",
    "MarkerStreamChoice",
    "RecordedStream",
    "Recording",
    "RecordingReport",
    "StreamCoverage",
    "check_recording",
    "find_marker_streams",
    "is_marker_payload",
    "match_markers",
    "read_recording",
    "stream_coverage",
]
