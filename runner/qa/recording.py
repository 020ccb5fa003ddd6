"""Compatibility path: the XDF reader and recording check live in :mod:`runner.recording`."""

from __future__ import annotations

from runner.recording import (
    DEFAULT_MAX_GAP_S,
    DEFAULT_RESIDUAL_LIMIT_MS,
    MARKER_TYPE,
    MarkerMatch,
    MarkerStreamChoice,
    RecordedStream,
    Recording,
    RecordingReport,
    StreamCoverage,
    check_recording,
    find_marker_streams,
    is_marker_payload,
    match_markers,
    read_recording,
    stream_coverage,
)

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
