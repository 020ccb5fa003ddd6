"""Time zero of a session's BIDS events: the session start, or the first EEG sample of a recording.

With a recording, the journal's markers are matched with the recording's marker stream
(:func:`runner.recording.check_recording`) to map presenter times onto the recorder's clock.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from runner.data.sessions import ExportSession
from runner.errors import RecordingError

__all__ = ["Origin", "recording_origin", "session_origin"]

EEG_STREAM_TYPE = "eeg"  # compared case-insensitively with the XDF stream type
# A recording lines up with a session when most of its markers are found and their median
# timing difference (after the clock offset) is within the recording check's limit. Half is a
# tolerance for a recorder that joined late, not a published figure.
MIN_MATCHED_SHARE = 0.5
# Seconds are written with 6 decimals (1 microsecond): the journal clock has sub-microsecond
# resolution, and no recorder samples faster than 1 MHz.
SECONDS_DECIMALS = 6


@dataclass(frozen=True)
class Origin:
    """Time zero of the events file, on the presenter's LSL clock.

    ``kind`` is ``"session_start"`` or ``"recording"``; ``description`` is the sentence put into
    the sidecar's ``onset`` description; ``details`` are the numbers behind it.
    """

    kind: str
    t0: float
    description: str
    details: dict[str, Any] = field(default_factory=dict)


def session_origin(session: ExportSession) -> Origin:
    """Origin at the session start: the ``session_start`` line of the journal."""
    t0 = session.start_t
    return Origin(
        kind="session_start",
        t0=t0,
        description=(
            "Onset in seconds from the session start: the session_start marker, sent when the "
            "session began, at presenter LSL clock time "
            f"{t0:.{SECONDS_DECIMALS}f} s. No recording was used to set the origin. Later "
            "attempts (resumes) are on the same timeline; an attempt whose clock restarted "
            "(a reboot) was placed by the wall clock."
        ),
        details={"session_start_lsl": t0},
    )


def recording_origin(session: ExportSession, recording: str | Path) -> Origin:
    """Origin at the first sample of the recording's first EEG-type stream.

    The recording's marker stream is matched with the journal's markers
    (:func:`runner.recording.check_recording`); their median time difference maps presenter
    times onto the recorder's clock. Time zero on the presenter clock is then the EEG stream's
    first timestamp (after pyxdf's clock synchronisation) minus that offset.

    Raises
    ------
    RecordingError
        If the recording has no EEG stream with samples, or no journaled marker was found in it.
    """
    from runner.recording import check_recording, read_recording

    rec = read_recording(recording)
    eeg = [
        s
        for s in sorted(rec.streams, key=lambda x: x.stream_id)
        if s.type.strip().lower() == EEG_STREAM_TYPE and s.first_timestamp is not None
    ]
    if not eeg:
        kinds = ", ".join(sorted({repr(s.type) for s in rec.streams})) or "none"
        raise RecordingError(
            f"{recording} has no EEG stream with samples (stream types found: {kinds}); "
            "export without --recording to use the session start as the origin."
        )
    stream = eeg[0]
    # On the session timeline, like the event rows: one clock offset serves every attempt, also
    # when the presenter's clock restarted between them (bridged by the wall clock).
    markers = session.markers(on_timeline=True)
    info = session.header.get("markers") or {}
    report = check_recording(rec, markers, source_id=info.get("source_id"), name=info.get("name"))
    match = report.match
    if match.offset_s is None or match.matched == 0:
        raise RecordingError(
            f"none of the {len(markers)} markers of {session.folder} were found in {recording}, "
            "so its clock cannot be lined up with the session; check that this recording "
            "belongs to this session (run `trialdeck audit` with it)."
        )
    residual = match.residual_median_abs_ms
    if match.matched < len(markers) * MIN_MATCHED_SHARE or (
        residual is not None and residual > report.residual_limit_ms
    ):
        raise RecordingError(
            f"the markers of {session.folder} do not line up with {recording} ({match.matched} of "
            f"{len(markers)} found, median timing difference {residual or 0:.3f} ms after the "
            "clock offset); it is probably another session's recording. Check the file, or run "
            "`trialdeck audit` with it."
        )
    first = float(stream.first_timestamp)  # type: ignore[arg-type]
    t0 = first - match.offset_s
    return Origin(
        kind="recording",
        t0=t0,
        description=(
            f"Onset in seconds from the first sample of EEG stream {stream.name!r} "
            f"(source_id {stream.source_id!r}) in recording {Path(recording).name}, at "
            f"recorder time {first:.{SECONDS_DECIMALS}f} s after clock synchronisation. "
            f"Presenter times were mapped onto the recorder clock with the marker clock offset "
            f"{match.offset_s:.{SECONDS_DECIMALS}f} s (recorder minus presenter), the median over "
            f"{match.matched} of {len(markers)} markers matched by payload"
            + (f", median residual {residual:.3f} ms" if residual is not None else "")
            + ". Negative onsets are events before the first EEG sample."
        ),
        details={
            "recording": str(recording),
            "eeg_stream": stream.name,
            "eeg_source_id": stream.source_id,
            "eeg_first_timestamp": first,
            "marker_offset_s": match.offset_s,
            "markers_matched": match.matched,
            "markers_journaled": len(markers),
            "residual_median_abs_ms": residual,
            "origin_presenter_lsl": t0,
        },
    )
