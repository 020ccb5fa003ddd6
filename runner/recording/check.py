"""Check a session against the lab's XDF recording: markers, stream coverage, the report.

Answers, without pylsl or a display: whether every journaled marker was recorded, once, at the
journaled time (after removing the constant offset between presenter and recorder clocks), and
whether each other stream was recording for the whole session, and without gaps.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from runner.errors import RecordingError
from runner.recording.markers import (
    COVER_FRACTION,
    MarkerMatch,
    MarkerStreamChoice,
    find_marker_streams,
    match_markers,
)
from runner.recording.xdf import Recording

# Same-machine LSL delivery keeps explicit timestamps bit-identical and LAN clock correction is
# sub-millisecond (liblsl and pylsl documentation), so more than 1 ms after removing the offset
# means a marker was not stamped at its flip.
DEFAULT_RESIDUAL_LIMIT_MS = 1.0
DEFAULT_MAX_GAP_S = 0.5
# A gap is never shorter than two nominal sample intervals, so a single late sample is not one.
GAP_INTERVALS = 2.0
# An effective rate more than 1% away from the nominal one is worth a sentence.
SRATE_TOLERANCE = 0.01


@dataclass(frozen=True)
class StreamCoverage:
    """Whether one non-marker stream recorded the whole session span, and its gaps.

    ``gaps`` are (start, end) timestamp pairs (recorder clock) of consecutive samples further
    apart than the gap threshold, where the gap touches the span. Irregular streams
    (nominal rate 0) are not checked for gaps: silence is normal for them.
    """

    stream_id: int
    name: str
    type: str
    nominal_srate: float
    effective_srate: float | None
    sample_count: int
    covers_span: bool
    missing_start_s: float
    missing_end_s: float
    gap_threshold_s: float | None
    gaps: list[tuple[float, float]]

    @property
    def gap_total_s(self) -> float:
        return float(sum(b - a for a, b in self.gaps))

    def as_dict(self) -> dict[str, Any]:
        return {
            "stream_id": self.stream_id,
            "name": self.name,
            "type": self.type,
            "nominal_srate": self.nominal_srate,
            "effective_srate": self.effective_srate,
            "sample_count": self.sample_count,
            "covers_span": self.covers_span,
            "missing_start_s": self.missing_start_s,
            "missing_end_s": self.missing_end_s,
            "gap_threshold_s": self.gap_threshold_s,
            "gaps": [{"start": a, "end": b, "seconds": b - a} for a, b in self.gaps],
        }


def stream_coverage(
    rec: Recording, span: tuple[float, float], *, max_gap_s: float = DEFAULT_MAX_GAP_S
) -> list[StreamCoverage]:
    """Check every non-marker stream against the session span.

    Parameters
    ----------
    rec : Recording
    span : (float, float)
        Session start and end in the recording's (synchronised) clock.
    max_gap_s : float
        Shortest interruption reported; the threshold is ``max(max_gap_s, 2 / nominal_srate)``.

    Returns
    -------
    list of StreamCoverage
        One per non-marker stream, in file order.
    """
    start, end = span
    out: list[StreamCoverage] = []
    for s in rec.streams:
        if s.is_markers:
            continue
        ts = rec.timestamps(s.stream_id)
        eff: float | None = None
        if len(ts) > 1 and ts[-1] > ts[0]:
            eff = float((len(ts) - 1) / (ts[-1] - ts[0]))
        if len(ts):
            covers = bool(ts[0] <= start and ts[-1] >= end)
            miss_start = float(max(0.0, ts[0] - start))
            miss_end = float(max(0.0, end - ts[-1]))
        else:
            covers, miss_start, miss_end = False, float(end - start), float(end - start)
        gaps: list[tuple[float, float]] = []
        threshold: float | None = None
        if s.nominal_srate > 0:
            threshold = max(max_gap_s, GAP_INTERVALS / s.nominal_srate)
            if len(ts) > 1:
                d = np.diff(ts)
                idx = np.flatnonzero(d > threshold)
                gaps = [
                    (float(ts[i]), float(ts[i + 1]))
                    for i in idx
                    if ts[i + 1] > start and ts[i] < end
                ]
        out.append(
            StreamCoverage(
                stream_id=s.stream_id,
                name=s.name,
                type=s.type,
                nominal_srate=s.nominal_srate,
                effective_srate=eff,
                sample_count=s.sample_count,
                covers_span=covers,
                missing_start_s=miss_start,
                missing_end_s=miss_end,
                gap_threshold_s=threshold,
                gaps=gaps,
            )
        )
    return out


# --------------------------------------------------------------------------------------------
# The report


def _preview(payload: str, limit: int = 60) -> str:
    return repr(payload if len(payload) <= limit else payload[: limit - 3] + "...")


def _plural(n: int, word: str) -> str:
    return f"{n} {word}" if n == 1 else f"{n} {word}s"


def _verb(n: int, singular: str, plural: str) -> str:
    return singular if n == 1 else plural


# After the clock model (offset and drift), markers of the right session line up to well under a
# millisecond; those of another session with the same payloads (same protocol) scatter by
# hundreds. A median residual above this means the timing sequence is not this session's. The
# value is ours (common practice: ten times the worst residual seen on a loaded test machine).
SEQUENCE_LIMIT_MS = 5.0


def sequence_mismatch(match: MarkerMatch) -> bool:
    """True when the matched markers do not line up in time even after offset and drift."""
    res = match.residual_median_abs_ms
    return res is not None and res > SEQUENCE_LIMIT_MS


@dataclass
class RecordingReport:
    """Everything the recording check found, with plain sentences in :meth:`problems`."""

    path: Path
    choice: MarkerStreamChoice
    match: MarkerMatch
    coverage: list[StreamCoverage]
    session_span: tuple[float, float]
    recording_span: tuple[float, float]
    reader_notes: list[str] = field(default_factory=list)
    residual_limit_ms: float = DEFAULT_RESIDUAL_LIMIT_MS

    def problems(self) -> list[str]:
        """Plain sentences, one per finding a lab should act on (empty when all is well)."""
        out: list[str] = list(self.reader_notes)
        ch = self.choice
        if ch.combined:
            out.append(ch.note)
        elif ch.coverage is not None and ch.coverage < COVER_FRACTION:
            out.append(
                f"The session's marker stream (stream {ch.stream_ids[0]}) covers only "
                f"{ch.coverage:.0%} of the session; the recorder was started late or stopped "
                f"early. {ch.note}".rstrip()
            )
        m = self.match
        if m.missing:
            first = m.missing[0]
            out.append(
                f"{_plural(len(m.missing), 'journaled marker')} never reached the recording "
                f"(first: {_preview(first[0])} at {first[1]:.6f}); markers sent before the "
                "recorder connected are lost, so start the recorder before the session."
            )
        if m.duplicated:
            out.append(
                f"{_plural(len(m.duplicated), 'marker')} "
                f"{_verb(len(m.duplicated), 'appears', 'appear')} more than once in the recording "
                f"(first: {_preview(m.duplicated[0][0])}); count each event once in analysis."
            )
        if m.extra:
            out.append(
                f"{_plural(len(m.extra), 'recorded marker')} "
                f"{_verb(len(m.extra), 'was', 'were')} never journaled by this "
                f"session (first: {_preview(m.extra[0][0])}); they may come from a pilot or "
                "another session on the same stream."
            )
        if m.garbage:
            at_end = bool(self.choice.markers) and m.garbage[-1][1] == self.choice.markers[-1][1]
            where = (
                "as the last sample, as happens when the presenter closes its stream while "
                "the recorder is still connected"
                if at_end and len(m.garbage) == 1
                else f"first at {m.garbage[0][1]:.6f}"
            )
            out.append(
                f"{_plural(len(m.garbage), 'recorded marker sample')} "
                f"{_verb(len(m.garbage), 'is not a JSON object', 'are not JSON objects')} "
                f"({_preview(m.garbage[0][0])}, {where}); {_verb(len(m.garbage), 'it was', 'they were')} left out of the comparison."
            )
        if m.residual_max_abs_ms is not None and m.residual_max_abs_ms > self.residual_limit_ms:
            worst = m.worst[0] if m.worst else ""
            out.append(
                f"Recorded marker times differ from the journal by up to "
                f"{m.residual_max_abs_ms:.3f} ms after the clock model (offset and drift; limit "
                f"{self.residual_limit_ms:g} ms; worst: {_preview(worst)}); the recorder or the "
                "network delayed some markers, so use the clock model's times for them."
            )
        for c in self.coverage:
            label = f"Stream {c.stream_id} ({c.name!r}, {c.type})"
            if c.sample_count == 0:
                out.append(f"{label} holds no samples; check that device was streaming.")
                continue
            if not c.covers_span:
                parts = []
                if c.missing_start_s > 0:
                    parts.append(f"starts {c.missing_start_s:.3f} s after the session began")
                if c.missing_end_s > 0:
                    parts.append(f"ends {c.missing_end_s:.3f} s before the session ended")
                out.append(f"{label} {' and '.join(parts)}.")
            if c.gaps:
                longest = max(b - a for a, b in c.gaps)
                out.append(
                    f"{label} has {_plural(len(c.gaps), 'gap')} longer than "
                    f"{c.gap_threshold_s:g} s during the session (longest {longest:.3f} s, "
                    f"first at {c.gaps[0][0]:.6f}); check the device's connection."
                )
            if (
                c.effective_srate is not None
                and c.nominal_srate > 0
                and not c.gaps
                and abs(c.effective_srate - c.nominal_srate) / c.nominal_srate > SRATE_TOLERANCE
            ):
                out.append(
                    f"{label} delivered {c.effective_srate:.2f} samples per second instead of "
                    f"the nominal {c.nominal_srate:g}."
                )
        return out

    def as_dict(self) -> dict[str, Any]:
        """A JSON-ready summary (floats, strings, lists and dicts only)."""
        return {
            "path": str(self.path),
            "session_span": list(self.session_span),
            "recording_span": list(self.recording_span),
            "marker_stream": self.choice.as_dict(),
            "markers": self.match.as_dict(),
            "coverage": [c.as_dict() for c in self.coverage],
            "residual_limit_ms": self.residual_limit_ms,
            "problems": self.problems(),
        }


def check_recording(
    rec: Recording,
    journaled: Sequence[tuple[str, float]],
    *,
    source_id: str | None,
    name: str | None,
    max_gap_s: float = DEFAULT_MAX_GAP_S,
    residual_limit_ms: float = DEFAULT_RESIDUAL_LIMIT_MS,
    combine_restarts: bool = True,
) -> RecordingReport:
    """Run the whole check: choose the marker stream, match markers, check the other streams.

    The session span is the first to last journaled marker (presenter clock). It is moved onto
    the recording's clock with the matched markers' offset (or, when nothing matched, the chosen
    stream's median clock offset) before checking the other streams.

    Raises
    ------
    RecordingError
        The journal has no markers, or the recording has no matching marker stream.
    """
    if not journaled:
        raise RecordingError(
            "The session journal lists no markers, so there is nothing to compare with the "
            "recording; check that the right session folder was given."
        )
    times = [float(t) for _, t in journaled]
    span = (min(times), max(times))
    choice = find_marker_streams(
        rec,
        source_id=source_id,
        name=name,
        session_span=span,
        combine_restarts=combine_restarts,
    )
    match = match_markers(journaled, choice.markers)
    if match.offset_s is not None:
        shift = match.offset_s
    else:
        shift = rec.stream(choice.stream_ids[0]).clock_offset_s
    rec_span = (span[0] + shift, span[1] + shift)
    return RecordingReport(
        path=rec.path,
        choice=choice,
        match=match,
        coverage=stream_coverage(rec, rec_span, max_gap_s=max_gap_s),
        session_span=span,
        recording_span=rec_span,
        reader_notes=list(rec.notes),
        residual_limit_ms=residual_limit_ms,
    )
