"""Time zero of a session's BIDS events: the session start, or the first EEG sample of a recording.

With a recording, the journal's markers are matched with the recording's marker stream
(:func:`runner.recording.check_recording`) and a clock model (offset plus drift,
:mod:`runner.recording.clock`) maps presenter times onto the recorder's clock. An event whose
marker was recorded takes its recorded time; the model fills in the others. Time zero is the
first sample of the EEG stream after pyxdf's clock synchronisation and dejittering (one line per
segment, :mod:`runner.recording.dejitter`), never the raw stamp of a chunk.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from runner.data.sessions import ExportSession
from runner.errors import RecordingError
from runner.recording.clock import ClockModel
from runner.recording.dejitter import dejitter
from runner.recording.identity import compare_identity
from runner.recording.photodiode import MAX_LATENCY_S
from runner.recording.xdf import Recording

__all__ = [
    "PHOTODIODE_COLUMN",
    "RECORDING_EVENT_COLUMNS",
    "SAMPLE_COLUMN",
    "Origin",
    "recording_origin",
    "session_origin",
]

SAMPLE_COLUMN = "sample"
PHOTODIODE_COLUMN = "photodiode_onset"
#: Optional events.tsv columns an export with a recording adds (after all other columns).
RECORDING_EVENT_COLUMNS = (SAMPLE_COLUMN, PHOTODIODE_COLUMN)

EEG_STREAM_TYPE = "eeg"  # compared case-insensitively with the XDF stream type
# A recording lines up with a session when most of its markers are found and their median
# timing difference (after the clock offset) is within the recording check's limit. Half is a
# tolerance for a recorder that joined late, not a published figure.
MIN_MATCHED_SHARE = 0.5
# Seconds are written with 6 decimals (1 microsecond): the journal clock has sub-microsecond
# resolution, and no recorder samples faster than 1 MHz.
SECONDS_DECIMALS = 6
FLIP_EVENT = "flip"
MAX_LATENCY_MS = MAX_LATENCY_S * 1000.0


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
    # With ``sample`` asked for: the EEG stream's dejittered timestamps (recorder clock).
    sample_times: np.ndarray | None = field(default=None, repr=False)
    sample_srate: float = 0.0
    # With a photodiode: the light edge (recorder clock) of each onset flip that lit the patch,
    # keyed by the flip's presenter time on the session timeline.
    light_edges: dict[float, float] | None = field(default=None, repr=False)
    photodiode_description: str = ""

    def onset(self, t: float) -> float:
        """Seconds from time zero of an event at presenter time ``t``."""
        if self.clock is None:
            return t - self.t0
        exact = self.recorded.get(t)
        return (self.clock.to_recorder(t) if exact is None else exact) - self.zero

    def extra_columns(self) -> list[str]:
        """The optional columns this origin fills (:data:`RECORDING_EVENT_COLUMNS` order)."""
        out = []
        if self.sample_times is not None:
            out.append(SAMPLE_COLUMN)
        if self.light_edges is not None:
            out.append(PHOTODIODE_COLUMN)
        return out

    def sample(self, t: float) -> int | None:
        """0-based index of the EEG sample nearest to the event at presenter time ``t``; None
        when the event lies more than half a sample period outside the recorded samples."""
        times = self.sample_times
        if times is None or not len(times):
            return None
        rec_t = self.onset(t) + self.zero
        half = 0.5 / self.sample_srate if self.sample_srate > 0 else 0.0
        if rec_t < times[0] - half or rec_t > times[-1] + half:
            return None
        i = int(np.searchsorted(times, rec_t))
        if i >= len(times) or (i > 0 and rec_t - times[i - 1] <= times[i] - rec_t):
            i -= 1
        return i

    def photodiode_onset(self, t: float) -> float | None:
        """Seconds from time zero of the light edge of the onset at presenter time ``t`` (None:
        that onset's frame did not light the patch, or no edge was found for it)."""
        if self.light_edges is None:
            return None
        edge = self.light_edges.get(t)
        return None if edge is None else edge - self.zero

    def extra_cells(self, t: float) -> list[float | int | None]:
        """The values of :meth:`extra_columns` for the row at presenter time ``t``."""
        out: list[float | int | None] = []
        if self.sample_times is not None:
            out.append(self.sample(t))
        if self.light_edges is not None:
            out.append(self.photodiode_onset(t))
        return out

    def without_samples(self) -> Origin:
        """This origin without the EEG timestamps (small to keep or send between processes)."""
        return replace(self, sample_times=None) if self.sample_times is not None else self


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
    sample: bool = False,
    photodiode: str | None = None,
    loaded: Recording | None = None,
    zero_stream_id: int | None = None,
) -> Origin:
    """Origin at the first sample of the recording's first EEG-type stream (or of the stream
    with id ``zero_stream_id``, when given: the EEG stream, or the first signal, a caller chose).

    The recording's marker stream is matched with the journal's markers
    (:func:`runner.recording.check_recording`); their median time difference maps presenter
    times onto the recorder's clock. Time zero on the presenter clock is then the EEG stream's
    first timestamp (after pyxdf's clock synchronisation) minus that offset. ``loaded`` is the
    recording already read from ``recording`` (then it is not read again): the one reader,
    :func:`runner.recording.read_recording`, for export, audit and physio alike.

    With ``sample`` the origin also gives each event's nearest EEG sample (the ``sample``
    column); with ``photodiode`` (``STREAM[:CHANNEL]``, as for ``audit --photodiode``) the light
    edge of each onset that lit the photodiode patch (the ``photodiode_onset`` column).

    Raises
    ------
    RecordingError
        If the recording has no EEG stream with samples, no journaled marker was found in it,
        or it has no such photodiode stream.
    ValueError
        A photodiode channel that is not a whole number from 1.
    """
    from runner.recording import check_recording, read_recording
    from runner.recording.check import sequence_mismatch
    from runner.recording.photodiode import recording_values

    # Timestamps of every stream, sample values of the marker streams (and the photodiode) only.
    # export --with-data reads the file once (every channel) for the origin and the samples.
    rec = loaded
    if rec is None:
        values = recording_values(photodiode)
        rec = read_recording(recording, allow_truncated=allow_truncated, values=values)
    eeg = [
        s
        for s in sorted(rec.streams, key=lambda x: x.stream_id)
        if s.type.strip().lower() == EEG_STREAM_TYPE and s.first_timestamp is not None
    ]
    if zero_stream_id is not None:
        chosen = rec.stream(zero_stream_id)
        if chosen.first_timestamp is None:
            raise RecordingError(f"{chosen.label()} in {recording} holds no samples.")
        eeg = [chosen]
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
    light: dict[float, float] | None = None
    light_text = ""
    if photodiode:
        light, light_text = _light_edges(session, rec, clock, match.recorded_times(), photodiode)
    raw_first = float(stream.first_timestamp)  # type: ignore[arg-type]  # EEG streams here have samples
    drift = seg.drift_ppm
    kind = "EEG" if stream.type.strip().lower() == EEG_STREAM_TYPE else repr(stream.type)
    return Origin(
        kind="recording",
        t0=t0,
        description=(
            f"Onset in seconds from the first sample of {kind} stream {stream.name!r} "
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
        sample_times=eeg_times if sample else None,
        sample_srate=stream.nominal_srate,
        light_edges=light,
        photodiode_description=light_text,
    )


def _light_edges(
    session: ExportSession,
    rec: Recording,
    clock: ClockModel,
    recorded: dict[float, float],
    spec: str,
) -> tuple[dict[float, float], str]:
    """The light edge (recorder clock) of each flip that turned the photodiode patch on, keyed
    by the flip's time on the session timeline, and the sidecar sentence about them."""
    from runner.journal.timeline import session_timeline
    from runner.recording.photodiode import find_photodiode_stream, light_onsets, onset_edges

    stream, channel = find_photodiode_stream(rec, spec)
    records = session.read.records
    timeline = session_timeline(records)
    flips = [
        (timeline.at(i, float(r["t"])), bool(r.get("photodiode")))
        for i, r in enumerate(records)
        if r.get("event") == FLIP_EVENT and "t" in r
    ]
    onsets = light_onsets(flips)
    on_recorder = [recorded.get(t, clock.to_recorder(t)) for t in onsets]
    times = dejitter(rec.timestamps(stream.stream_id), stream.nominal_srate)
    values = np.asarray(rec.channel(stream.stream_id, channel), dtype=float)
    edges, lat = onset_edges(times, values, on_recorder)
    light = {t: float(e) for t, e in zip(onsets, edges, strict=True) if not np.isnan(e)}
    summary = lat.summary()
    median = summary.get("median_ms")
    text = (
        "Onset in seconds, from the same time zero as onset, of the light edge a photodiode on "
        f"the photodiode patch recorded (stream {stream.name!r}, channel {channel + 1}): when "
        "the screen actually changed. Given on rows whose onset frame turned the patch on "
        f"({len(light)} of {len(onsets)} such onsets had an edge within "
        f"{MAX_LATENCY_MS:g} ms"
        + (f"; median display latency {median:.1f} ms" if median is not None else "")
        + "); n/a on other rows and where no edge was found."
    )
    return light, text
