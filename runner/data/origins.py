"""Time zero of a session's BIDS events: the session start, or the first EEG sample of a recording.

With a recording, the journal's markers are matched with the recording's marker stream
(:func:`runner.recording.check_recording`) and a clock model (offset plus drift,
:mod:`runner.recording.clock`) maps presenter times onto the recorder's clock. An event whose
marker was recorded takes its recorded time; the model fills in the others. Time zero is the
first sample of the EEG stream after pyxdf's clock synchronisation and dejittering (one line per
segment, :mod:`runner.recording.dejitter`), never the raw stamp of a chunk.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from runner.data.sessions import ExportSession
from runner.errors import RecordingError
from runner.recording.clock import ClockModel
from runner.recording.dejitter import dejitter
from runner.recording.identity import compare_identity

if TYPE_CHECKING:
    from runner.recording.xdf import Recording

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
    # With a recording: the clock model, the recorded time of each journaled marker time, and
    # the recorder time of time zero. Onsets are then counted on the recorder's clock.
    clock: ClockModel | None = None
    recorded: dict[float, float] = field(default_factory=dict, repr=False)
    zero: float = 0.0

    def onset(self, t: float) -> float:
        """Seconds from time zero of an event at presenter time ``t``."""
        if self.clock is None:
            return t - self.t0
        exact = self.recorded.get(t)
        return (self.clock.to_recorder(t) if exact is None else exact) - self.zero


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


def recording_origin(
    session: ExportSession,
    recording: str | Path,
    *,
    allow_truncated: bool = False,
    loaded: Recording | None = None,
) -> Origin:
    """Origin at the first sample of the recording's first EEG-type stream.

    The recording's marker stream is matched with the journal's markers
    (:func:`runner.recording.check_recording`); their median time difference maps presenter
    times onto the recorder's clock. Time zero on the presenter clock is then the EEG stream's
    first timestamp (after pyxdf's clock synchronisation) minus that offset. ``loaded`` is the
    recording already read from ``recording`` (then it is not read again).

    Raises
    ------
    RecordingError
        If the recording has no EEG stream with samples, or no journaled marker was found in it.
    """
    from runner.recording import check_recording, read_recording
    from runner.recording.check import sequence_mismatch

    rec = loaded  # export --with-data reads the file once for the origin and the samples
    if rec is None:
        rec = read_recording(recording, allow_truncated=allow_truncated)
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
    for sid in report.choice.stream_ids:
        identity = compare_identity(rec.stream(sid).identity, session.header)
        if identity.known and not identity.matches:
            raise RecordingError(
                f"{recording} is not the recording of {session.folder}: "
                f"{identity.describe()}. Pick that session's recording."
            )
    match = report.match
    if match.clock is None or match.matched == 0:
        raise RecordingError(
            f"none of the {len(markers)} markers of {session.folder} were found in {recording}, "
            "so its clock cannot be lined up with the session; check that this recording "
            "belongs to this session (run `trialdeck audit` with it)."
        )
    residual = match.residual_median_abs_ms
    if match.matched < len(markers) * MIN_MATCHED_SHARE or sequence_mismatch(match):
        raise RecordingError(
            f"the markers of {session.folder} do not line up with {recording} as a sequence "
            f"({match.matched} of {len(markers)} found; after the clock's offset and drift their "
            f"times still differ by {residual or 0:.1f} ms at the median); it is probably another "
            "session's recording. Check the file, or run `trialdeck audit --recording` with it."
        )
    clock = match.clock
    eeg_times = dejitter(rec.timestamps(stream.stream_id), stream.nominal_srate)
    first = float(eeg_times[0])
    seg = clock.segments[0]  # the session's first attempt (segments follow the recorder clock)
    t0 = (first - seg.offset_s + seg.slope * seg.t_ref) / (1.0 + seg.slope)
    raw_first = float(stream.first_timestamp)  # type: ignore[arg-type]  # EEG streams here have samples
    drift = seg.drift_ppm
    return Origin(
        kind="recording",
        t0=t0,
        description=(
            f"Onset in seconds from the first sample of EEG stream {stream.name!r} "
            f"(source_id {stream.source_id!r}) in recording {Path(recording).name}, at "
            f"recorder time {first:.{SECONDS_DECIMALS}f} s after clock synchronisation and "
            "dejittering. Events whose marker was recorded are at their recorded times; the "
            f"others were mapped onto the recorder clock by a clock model fitted to "
            f"{match.matched} of {len(markers)} markers matched by payload (offset "
            f"{seg.offset_s:.{SECONDS_DECIMALS}f} s, drift {drift:.2f} ppm"
            + (f", median residual {residual:.3f} ms" if residual is not None else "")
            + "). Negative onsets are events before the first EEG sample."
        ),
        details={
            "recording": str(recording),
            "eeg_stream": stream.name,
            "eeg_stream_id": stream.stream_id,
            "eeg_source_id": stream.source_id,
            "eeg_first_timestamp": first,
            "eeg_first_timestamp_raw": raw_first,
            "marker_offset_s": match.offset_s,
            "clock_offset_s": seg.offset_s,
            "clock_drift_ppm": drift,
            "clock_segments": len(clock.segments),
            "markers_matched": match.matched,
            "markers_journaled": len(markers),
            "markers_outliers": match.outliers,
            "residual_median_abs_ms": residual,
            "origin_presenter_lsl": t0,
        },
        clock=clock,
        recorded=match.recorded_times(),
        zero=first,
    )
