"""Check a session against the lab's XDF recording.

The presenter sends one LSL marker stream per session and journals every marker it sent as
(payload, LSL timestamp). After the session the lab's recorder has an XDF file holding that
marker stream next to EEG, gaze, ECG and other streams. This module answers, without pylsl or a
display:

- which marker stream in the file belongs to the session (there can be several after restarts),
- whether every journaled marker was recorded, once, at the journaled time (after removing the
  constant offset between presenter and recorder clocks),
- whether each other stream was recording for the whole session, and without gaps.

Everything here is pure functions and dataclasses over numpy arrays; pyxdf is the only reader.
"""

from __future__ import annotations

import json
import logging
import struct
import warnings
from collections import defaultdict
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any
from xml.etree.ElementTree import ParseError

import numpy as np
import pyxdf

from runner.errors import RecordingError

__all__ = [
    "MARKER_TYPE",
    "MarkerMatch",
    "MarkerStreamChoice",
    "RecordedStream",
    "Recording",
    "RecordingReport",
    "StreamCoverage",
    "check_recording",
    "find_marker_streams",
    "match_markers",
    "read_recording",
    "stream_coverage",
]

MARKER_TYPE = "Markers"
XDF_MAGIC = b"XDF:"
# Chunk tags of the XDF 1.0 specification; anything else means the byte layout is off.
KNOWN_TAGS = frozenset({1, 2, 3, 4, 5, 6})
VARLEN_WIDTHS = {1: "<B", 4: "<I", 8: "<Q"}
TAG_BYTES = 2
PYXDF_LOGGER = "pyxdf"
PYXDF_NO_OFFSET_MESSAGE = "Segments and clock-segments differ"

# A candidate marker stream "covers" the session when at least this fraction of the session
# span lies between its first and last marker (a tolerance for float rounding, not a policy).
COVER_FRACTION = 0.999
# In repeated payloads, leaving one journaled and one recorded marker unpaired costs this much
# each, so two copies are paired when they are less than 2 * GAP_COST_S apart.
GAP_COST_S = 1.0
PERCENTILE_HIGH = 99.0
MS_PER_S = 1000.0
PPM = 1e6
# Same-machine LSL delivery keeps explicit timestamps bit-identical and LAN clock correction is
# sub-millisecond (liblsl and pylsl documentation), so more than 1 ms after removing the offset
# means a marker was not stamped at its flip.
DEFAULT_RESIDUAL_LIMIT_MS = 1.0
DEFAULT_MAX_GAP_S = 0.5
# A gap is never shorter than two nominal sample intervals, so a single late sample is not one.
GAP_INTERVALS = 2.0
# An effective rate more than 1% away from the nominal one is worth a sentence.
SRATE_TOLERANCE = 0.01
MIN_POINTS_FOR_DRIFT = 3


# --------------------------------------------------------------------------------------------
# Reading


@dataclass(frozen=True)
class RecordedStream:
    """What an XDF file says about one stream, plus a summary of its samples.

    Timestamps are in the recorder's clock after pyxdf's clock synchronisation.
    ``clock_offset_s`` is the median of the stream's ClockOffset values (0.0 when it has none):
    subtracting it maps a synchronised timestamp back to the sending machine's clock to within
    the offset's spread.
    """

    stream_id: int
    name: str
    type: str
    source_id: str
    created_at: str
    nominal_srate: float
    channel_count: int
    channel_format: str
    sample_count: int
    first_timestamp: float | None
    last_timestamp: float | None
    clock_offset_s: float = 0.0
    clock_offset_count: int = 0
    has_footer: bool = True

    @property
    def created_at_value(self) -> float:
        """``created_at`` as a number for ordering (LSL writes the source's local_clock)."""
        try:
            return float(self.created_at)
        except ValueError:
            return float("-inf")

    @property
    def is_markers(self) -> bool:
        return self.type == MARKER_TYPE

    def label(self) -> str:
        return f"stream {self.stream_id} ({self.name!r}, type {self.type!r})"

    def as_dict(self) -> dict[str, Any]:
        return {
            "stream_id": self.stream_id,
            "name": self.name,
            "type": self.type,
            "source_id": self.source_id,
            "created_at": self.created_at,
            "nominal_srate": self.nominal_srate,
            "channel_count": self.channel_count,
            "channel_format": self.channel_format,
            "sample_count": self.sample_count,
            "first_timestamp": self.first_timestamp,
            "last_timestamp": self.last_timestamp,
            "clock_offset_s": self.clock_offset_s,
            "clock_offset_count": self.clock_offset_count,
            "has_footer": self.has_footer,
        }


@dataclass
class Recording:
    """A loaded XDF file: stream summaries, their data, and what the reader had to say."""

    path: Path
    streams: list[RecordedStream]
    notes: list[str] = field(default_factory=list)
    truncated: bool = False
    _timestamps: dict[int, np.ndarray] = field(default_factory=dict, repr=False)
    _values: dict[int, Any] = field(default_factory=dict, repr=False)

    def stream(self, stream_id: int) -> RecordedStream:
        """Return the summary of the stream with id ``stream_id``."""
        for s in self.streams:
            if s.stream_id == stream_id:
                return s
        known = ", ".join(str(s.stream_id) for s in self.streams) or "none"
        raise RecordingError(
            f"{self.path} has no stream with id {stream_id}; its stream ids are {known}."
        )

    def timestamps(self, stream_id: int) -> np.ndarray:
        """Synchronised timestamps (seconds, recorder clock) of one stream."""
        self.stream(stream_id)
        return self._timestamps[stream_id]

    def values(self, stream_id: int) -> Any:
        """Samples of one stream: an array (samples, channels), or a list of lists of str."""
        self.stream(stream_id)
        return self._values[stream_id]

    def marker_samples(self, stream_id: int) -> list[tuple[str, float]]:
        """(payload, timestamp) pairs of a string stream, using its first channel."""
        ts = self.timestamps(stream_id)
        vals = self.values(stream_id)
        if self.stream(stream_id).channel_format != "string":
            raise RecordingError(
                f"{self.stream(stream_id).label()} in {self.path} holds numbers, not marker "
                "strings; check the stream name and source_id given to the check."
            )
        return [(str(v[0]) if len(v) else "", float(t)) for v, t in zip(vals, ts, strict=True)]


class _Collect(logging.Handler):
    def __init__(self) -> None:
        super().__init__(level=logging.WARNING)
        self.messages: list[str] = []

    def emit(self, record: logging.LogRecord) -> None:
        self.messages.append(record.getMessage())


@contextmanager
def _collect_reader_messages() -> Iterator[list[str]]:
    """Collect pyxdf's log messages and Python warnings raised while reading.

    pyxdf logs (and numpy may warn) when it repairs a damaged file; those repairs are findings
    for the report, so they are kept as notes instead of reaching the console.
    """
    handler = _Collect()
    logger = logging.getLogger(PYXDF_LOGGER)
    logger.addHandler(handler)
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            yield handler.messages
        handler.messages.extend(str(w.message) for w in caught)
    finally:
        logger.removeHandler(handler)


def _scan_chunks(path: Path, data_size: int) -> tuple[int, str | None]:
    """Walk the chunk framing of an XDF file; return (chunk count, damage sentence or None).

    Only lengths and tags are read, so this is quick even for large recordings. It finds a file
    cut short (the recorder stopped before closing it) or bytes that are not XDF chunks.
    """
    count = 0
    with path.open("rb") as f:
        f.seek(len(XDF_MAGIC))
        pos = len(XDF_MAGIC)
        while pos < data_size:
            width_byte = f.read(1)
            width = width_byte[0]
            if width not in VARLEN_WIDTHS:
                return count, (
                    f"byte {pos} does not start an XDF chunk (length width {width}, expected "
                    "1, 4 or 8)"
                )
            raw = f.read(width)
            if len(raw) < width:
                return count, f"the file ends inside the length of chunk {count + 1}"
            length = struct.unpack(VARLEN_WIDTHS[width], raw)[0]
            tag_raw = f.read(TAG_BYTES)
            if len(tag_raw) < TAG_BYTES:
                return count, f"the file ends inside the tag of chunk {count + 1}"
            tag = struct.unpack("<H", tag_raw)[0]
            if tag not in KNOWN_TAGS or length < TAG_BYTES:
                return count, f"chunk {count + 1} at byte {pos} has an unknown tag {tag}"
            end = pos + 1 + width + length
            if end > data_size:
                return count, (
                    f"chunk {count + 1} at byte {pos} needs {end - data_size} more bytes than "
                    "the file has"
                )
            count += 1
            pos = end
            f.seek(pos)
    return count, None


def _first(info: dict[str, Any], key: str, default: str = "") -> str:
    value = info.get(key)
    if isinstance(value, list) and value:
        return value[0] if isinstance(value[0], str) else default
    return value if isinstance(value, str) else default


def read_recording(path: str | Path, *, allow_truncated: bool = False) -> Recording:
    """Load an XDF recording with pyxdf and summarise its streams.

    Clock synchronisation is on (each stream's ClockOffset chunks map its timestamps to the
    recorder's clock). Dejitter is off for every stream: irregular marker streams must keep
    their exact timestamps, and dejittering a regular stream fits one straight line per segment,
    which would spread a data gap shorter than pyxdf's break threshold over the whole segment
    and hide it from :func:`stream_coverage`.

    Parameters
    ----------
    path : str or Path
        The ``.xdf`` file.
    allow_truncated : bool
        Read what a truncated file holds (noting it) instead of refusing it.

    Returns
    -------
    Recording

    Raises
    ------
    RecordingError
        The file is missing, empty, not XDF, truncated (unless allowed) or unreadable.
    """
    path = Path(path)
    if not path.is_file():
        raise RecordingError(
            f"The recording {path} does not exist; check the path, or copy the .xdf file from "
            "the recording computer first."
        )
    size = path.stat().st_size
    if size == 0:
        raise RecordingError(
            f"The recording {path} is empty (0 bytes); the recorder probably never wrote to it. "
            "Look for another copy on the recording computer."
        )
    with path.open("rb") as f:
        head = f.read(len(XDF_MAGIC))
    if head != XDF_MAGIC:
        raise RecordingError(
            f"{path} is not an XDF recording (it does not start with 'XDF:'); check that you "
            "picked the recorder's .xdf file."
        )
    chunks, damage = _scan_chunks(path, size)
    notes: list[str] = []
    if damage is not None:
        sentence = (
            f"The recording {path} is damaged or truncated: {damage}. The recorder was probably "
            "stopped before it closed the file"
        )
        if not allow_truncated:
            raise RecordingError(
                f"{sentence}; read it anyway with the allow-truncated option, or use a complete "
                "copy."
            )
        notes.append(f"{sentence}; only the intact part was read.")
    if chunks == 0:
        raise RecordingError(f"The recording {path} holds no data after its 'XDF:' start.")

    raw_loaded: list[dict[str, Any]]
    with _collect_reader_messages() as messages:
        try:
            raw_loaded, _ = pyxdf.load_xdf(
                str(path), synchronize_clocks=True, dejitter_timestamps=False
            )
        except (
            OSError,
            ValueError,
            KeyError,
            IndexError,
            TypeError,
            RuntimeError,
            struct.error,
            ParseError,
            UnicodeError,
            np.linalg.LinAlgError,
        ) as exc:
            raise RecordingError(
                f"The recording {path} could not be read as XDF ({type(exc).__name__}: {exc}); "
                "use a complete copy from the recording computer."
            ) from exc
    # pyxdf says "Segments and clock-segments differ" for every stream without ClockOffset
    # chunks; that case gets a clearer sentence of our own below, so its message is dropped.
    no_offsets = {int(e["info"]["stream_id"]) for e in raw_loaded if not e.get("clock_values")}
    boilerplate = {f"Stream {sid}: {PYXDF_NO_OFFSET_MESSAGE}" for sid in no_offsets}
    notes.extend(f"XDF reader: {m}" for m in messages if m not in boilerplate)

    rec = Recording(path=path, streams=[], notes=notes, truncated=damage is not None)
    for entry in raw_loaded:
        info = entry["info"]
        sid = int(info["stream_id"])
        ts = np.asarray(entry["time_stamps"], dtype=np.float64)
        offsets = np.asarray(entry.get("clock_values", []), dtype=np.float64)
        rec.streams.append(
            RecordedStream(
                stream_id=sid,
                name=_first(info, "name"),
                type=_first(info, "type"),
                source_id=_first(info, "source_id"),
                created_at=_first(info, "created_at"),
                nominal_srate=float(_first(info, "nominal_srate", "0") or 0.0),
                channel_count=int(_first(info, "channel_count", "0") or 0),
                channel_format=_first(info, "channel_format"),
                sample_count=len(ts),
                first_timestamp=float(ts[0]) if len(ts) else None,
                last_timestamp=float(ts[-1]) if len(ts) else None,
                clock_offset_s=float(np.median(offsets)) if len(offsets) else 0.0,
                clock_offset_count=len(offsets),
                has_footer="footer" in entry,
            )
        )
        if not len(offsets) and len(ts):
            rec.notes.append(
                f"Stream {sid} ({rec.streams[-1].name!r}) has no clock offset measurements, so "
                "its timestamps could not be moved onto the recorder's clock and were used as "
                "stored; check the recorder's settings if that stream came from another computer."
            )
        rec._timestamps[sid] = ts
        rec._values[sid] = entry["time_series"]
    if not rec.streams:
        raise RecordingError(f"The recording {path} holds no streams.")
    return rec


# --------------------------------------------------------------------------------------------
# Choosing the session's marker stream


@dataclass(frozen=True)
class MarkerStreamChoice:
    """The marker stream(s) taken as the session's, and why.

    ``combined`` is true when several streams with the same source_id were joined because a
    restart split the session between them. ``markers`` are their samples in time order.
    """

    stream_ids: list[int]
    candidates: list[int]
    combined: bool
    coverage: float | None
    note: str
    markers: list[tuple[str, float]]

    def as_dict(self) -> dict[str, Any]:
        return {
            "stream_ids": list(self.stream_ids),
            "candidates": list(self.candidates),
            "combined": self.combined,
            "coverage": self.coverage,
            "note": self.note,
            "marker_count": len(self.markers),
        }


def _source_interval(rec: Recording, s: RecordedStream) -> tuple[float, float] | None:
    if s.first_timestamp is None or s.last_timestamp is None:
        return None
    return (s.first_timestamp - s.clock_offset_s, s.last_timestamp - s.clock_offset_s)


def _union_length(intervals: list[tuple[float, float]], span: tuple[float, float]) -> float:
    clipped = sorted(
        (max(a, span[0]), min(b, span[1]))
        for a, b in intervals
        if min(b, span[1]) >= max(a, span[0])
    )
    total = 0.0
    cur: tuple[float, float] | None = None
    for a, b in clipped:
        if cur is None or a > cur[1]:
            if cur is not None:
                total += cur[1] - cur[0]
            cur = (a, b)
        else:
            cur = (cur[0], max(cur[1], b))
    if cur is not None:
        total += cur[1] - cur[0]
    return total


def _overlap(intervals: list[tuple[float, float]], span: tuple[float, float]) -> float:
    """Fraction of ``span`` inside the union of ``intervals`` (a point span: 1.0 or 0.0)."""
    width = span[1] - span[0]
    if width <= 0:
        return float(any(a <= span[0] <= b for a, b in intervals))
    return _union_length(intervals, span) / width


def _describe_other(s: RecordedStream, cover: float | None) -> str:
    base = f"stream {s.stream_id} (created_at {s.created_at}, {s.sample_count} markers)"
    if cover is None:
        return base
    if cover <= 0:
        return f"{base} lies outside the session"
    return f"{base} covers {cover:.0%} of it"


def find_marker_streams(
    rec: Recording,
    *,
    source_id: str | None,
    name: str | None,
    session_span: tuple[float, float] | None = None,
    combine_restarts: bool = True,
) -> MarkerStreamChoice:
    """Pick the session's marker stream among the recording's ``Markers`` streams.

    Parameters
    ----------
    rec : Recording
    source_id, name : str or None
        Candidates must match each one given (both None: every marker stream is a candidate).
    session_span : (float, float) or None
        First and last journaled marker time, in the presenter's clock (the journal's clock).
        Each candidate's timestamps are mapped back to the sender's clock with its median clock
        offset before comparing. Without a span the latest ``created_at`` wins.
    combine_restarts : bool
        When no single candidate covers the span, join the candidates that share the best
        one's source_id and overlap the span, if together they cover more of it.

    Returns
    -------
    MarkerStreamChoice

    Raises
    ------
    RecordingError
        No marker stream matches.
    """
    markers = [s for s in rec.streams if s.is_markers]
    cands = [
        s
        for s in markers
        if (source_id is None or s.source_id == source_id) and (name is None or s.name == name)
    ]
    if not cands:
        wanted = " and ".join(
            part
            for part in (
                f"source_id {source_id!r}" if source_id is not None else "",
                f"name {name!r}" if name is not None else "",
            )
            if part
        )
        present = (
            "; ".join(f"{s.name!r} (source_id {s.source_id!r})" for s in markers)
            or "no marker streams at all"
        )
        raise RecordingError(
            f"The recording {rec.path} has no marker stream with {wanted or 'type Markers'}; it "
            f"holds {present}. Check the protocol's marker stream name and the recorder's stream "
            "list."
        )

    by_recency = sorted(cands, key=lambda s: (s.created_at_value, s.stream_id))
    covers: dict[int, float] = {}
    if session_span is None:
        best = by_recency[-1]
        chosen = [best]
        cover: float | None = None
    else:
        for s in cands:
            iv = _source_interval(rec, s)
            covers[s.stream_id] = _overlap([iv], session_span) if iv else 0.0
        # Best coverage first, then the most recent outlet.
        # max keeps the first of equals, so walk newest first: ties go to the latest outlet.
        best = max(reversed(by_recency), key=lambda s: covers[s.stream_id])
        chosen = [best]
        cover = covers[best.stream_id]
        if combine_restarts and cover < COVER_FRACTION:
            siblings = [
                s
                for s in cands
                if s.source_id == best.source_id and covers[s.stream_id] > 0 and s is not best
            ]
            if siblings:
                group = sorted([best, *siblings], key=lambda s: (s.created_at_value, s.stream_id))
                ivs = [iv for s in group if (iv := _source_interval(rec, s)) is not None]
                joint = _overlap(ivs, session_span)
                if joint > cover:
                    chosen, cover = group, joint

    ids = [s.stream_id for s in chosen]
    samples = sorted((m for sid in ids for m in rec.marker_samples(sid)), key=lambda m: m[1])
    note = _choice_note(cands, chosen, covers, session_span, source_id, name, cover)
    return MarkerStreamChoice(
        stream_ids=ids,
        candidates=[s.stream_id for s in cands],
        combined=len(chosen) > 1,
        coverage=cover,
        note=note,
        markers=samples,
    )


def _choice_note(
    cands: list[RecordedStream],
    chosen: list[RecordedStream],
    covers: dict[int, float],
    span: tuple[float, float] | None,
    source_id: str | None,
    name: str | None,
    cover: float | None,
) -> str:
    if len(cands) == 1:
        return ""
    if name is not None:
        what = f"{len(cands)} marker streams named {name!r}"
    elif source_id is not None:
        what = f"{len(cands)} marker streams with source_id {source_id!r}"
    else:
        what = f"{len(cands)} marker streams"
    chosen_ids = {s.stream_id for s in chosen}
    others = [s for s in cands if s.stream_id not in chosen_ids]
    if span is None:
        why = "the most recently created one, since no session span was given"
    elif cover is not None and cover >= COVER_FRACTION:
        why = "whose markers cover the session"
    else:
        why = f"whose markers cover {(cover or 0.0):.0%} of the session"
    if len(chosen) > 1:
        listed = [f"{s.stream_id} (created_at {s.created_at})" for s in chosen]
        parts = ", ".join(listed[:-1]) + " and " + listed[-1]
        head = (
            f"{what}; a restart split the session, so the check combined streams {parts}, "
            f"which share source_id {chosen[0].source_id!r} and together {why.removeprefix('whose markers ')}"
        )
    else:
        c = chosen[0]
        head = f"{what}; chose stream {c.stream_id} (created_at {c.created_at}), {why}"
    if not others:
        return head + "."
    tail = "; ".join(_describe_other(s, covers.get(s.stream_id)) for s in others)
    return f"{head}; the others: {tail}."


# --------------------------------------------------------------------------------------------
# Matching journaled and recorded markers


@dataclass(frozen=True)
class MarkerMatch:
    """How the recorded markers compare with the journaled ones.

    ``missing``: journaled, not recorded. ``extra``: recorded payloads never journaled.
    ``duplicated``: recorded copies of a journaled payload beyond the journaled count.
    ``garbage``: recorded samples that are not a JSON object string. Residuals are
    (recorded - journaled) minus ``offset_s`` (the median of that difference), in milliseconds.
    ``drift_ppm`` is the slope of (recorded - journaled) against journaled time: a steady
    rate difference between the two clocks shows up there rather than in a late marker.
    """

    matched: int
    missing: list[tuple[str, float]]
    extra: list[tuple[str, float]]
    duplicated: list[tuple[str, float]]
    garbage: list[tuple[str, float]]
    offset_s: float | None
    residual_median_abs_ms: float | None
    residual_p99_abs_ms: float | None
    residual_max_abs_ms: float | None
    drift_ppm: float | None
    worst: tuple[str, float] | None
    pairs: list[tuple[str, float, float]] = field(default_factory=list, repr=False)

    def as_dict(self) -> dict[str, Any]:
        def items(xs: list[tuple[str, float]]) -> list[dict[str, Any]]:
            return [{"payload": p, "timestamp": t} for p, t in xs]

        return {
            "matched": self.matched,
            "missing": items(self.missing),
            "extra": items(self.extra),
            "duplicated": items(self.duplicated),
            "garbage": items(self.garbage),
            "offset_s": self.offset_s,
            "residual_median_abs_ms": self.residual_median_abs_ms,
            "residual_p99_abs_ms": self.residual_p99_abs_ms,
            "residual_max_abs_ms": self.residual_max_abs_ms,
            "drift_ppm": self.drift_ppm,
            "worst": None
            if self.worst is None
            else {"payload": self.worst[0], "residual_ms": self.worst[1]},
        }


def is_marker_payload(payload: str) -> bool:
    """True when ``payload`` is a JSON object string (what the presenter sends)."""
    try:
        return isinstance(json.loads(payload), dict)
    except (ValueError, TypeError):
        return False


def _align(j: list[float], r: list[float], offset: float) -> list[tuple[int, int]]:
    """Order-preserving pairing of two time lists that minimises total |residual|.

    Each unpaired item costs GAP_COST_S. Used only for a payload sent several times whose
    journaled and recorded counts differ, so the lists are short.
    """
    n, m = len(j), len(r)
    cost = np.zeros((n + 1, m + 1))
    cost[:, 0] = np.arange(n + 1) * GAP_COST_S
    cost[0, :] = np.arange(m + 1) * GAP_COST_S
    for a in range(1, n + 1):
        for b in range(1, m + 1):
            pair = cost[a - 1, b - 1] + abs(r[b - 1] - j[a - 1] - offset)
            cost[a, b] = min(pair, cost[a - 1, b] + GAP_COST_S, cost[a, b - 1] + GAP_COST_S)
    pairs: list[tuple[int, int]] = []
    a, b = n, m
    while a > 0 and b > 0:
        if cost[a, b] == cost[a - 1, b - 1] + abs(r[b - 1] - j[a - 1] - offset):
            pairs.append((a - 1, b - 1))
            a, b = a - 1, b - 1
        elif cost[a, b] == cost[a - 1, b] + GAP_COST_S:
            a -= 1
        else:
            b -= 1
    return pairs[::-1]


def match_markers(
    journaled: Sequence[tuple[str, float]], recorded: Sequence[tuple[str, float]]
) -> MarkerMatch:
    """Pair journaled and recorded markers by payload and measure their timing.

    Payload strings must be identical. A payload sent once is paired with its first recorded
    copy; copies of a payload sent several times are paired in time order (when the counts
    differ, by an order-preserving alignment that tolerates a lost or doubled copy). The clock
    offset is the median of (recorded - journaled) over the pairs; residuals are reported as
    absolute values in milliseconds.

    Parameters
    ----------
    journaled : sequence of (str, float)
        (payload, LSL timestamp) as the session journal recorded them.
    recorded : sequence of (str, float)
        (payload, timestamp) from the recording's marker stream.

    Returns
    -------
    MarkerMatch
    """
    garbage = [(p, t) for p, t in recorded if not is_marker_payload(p)]
    j_by: dict[str, list[float]] = defaultdict(list)
    r_by: dict[str, list[float]] = defaultdict(list)
    for p, t in journaled:
        j_by[p].append(float(t))
    for p, t in recorded:
        if is_marker_payload(p):
            r_by[p].append(float(t))
    for d in (j_by, r_by):
        for times in d.values():
            times.sort()

    # First pass: payloads sent and recorded exactly once (nearly all of them, since they carry
    # a trial number) give a robust offset estimate that repeated payloads are then aligned
    # with. Only when there are none do in-order pairs of repeated payloads stand in, and then
    # a lost first copy cannot be told from a lost last one.
    first_diffs = [
        r_by[p][0] - jts[0]
        for p, jts in j_by.items()
        if len(jts) == 1 and len(r_by.get(p, [])) == 1
    ] or [rt - jt for p, jts in j_by.items() for jt, rt in zip(jts, r_by.get(p, []), strict=False)]
    offset0 = float(np.median(first_diffs)) if first_diffs else 0.0

    pairs: list[tuple[str, float, float]] = []
    missing: list[tuple[str, float]] = []
    duplicated: list[tuple[str, float]] = []
    extra: list[tuple[str, float]] = []
    for p, jts in j_by.items():
        rts = r_by.get(p, [])
        if len(jts) == len(rts) or len(jts) == 1 or not rts:
            idx = list(zip(range(len(jts)), range(len(rts)), strict=False))
            if len(jts) == 1 and len(rts) > 1:
                # One journaled copy: pair it with the recorded copy nearest in time.
                best = int(np.argmin([abs(rt - jts[0] - offset0) for rt in rts]))
                idx = [(0, best)]
        else:
            idx = _align(jts, rts, offset0)
        used_j = {a for a, _ in idx}
        used_r = {b for _, b in idx}
        pairs.extend((p, jts[a], rts[b]) for a, b in idx)
        missing.extend((p, t) for a, t in enumerate(jts) if a not in used_j)
        duplicated.extend((p, t) for b, t in enumerate(rts) if b not in used_r)
    for p, rts in r_by.items():
        if p not in j_by:
            extra.extend((p, t) for t in rts)

    missing.sort(key=lambda x: x[1])
    duplicated.sort(key=lambda x: x[1])
    extra.sort(key=lambda x: x[1])
    pairs.sort(key=lambda x: x[1])

    if not pairs:
        return MarkerMatch(
            0, missing, extra, duplicated, garbage, None, None, None, None, None, None, []
        )
    jt = np.array([q[1] for q in pairs])
    diffs = np.array([q[2] - q[1] for q in pairs])
    offset = float(np.median(diffs))
    res = np.abs(diffs - offset) * MS_PER_S
    worst_i = int(np.argmax(res))
    drift: float | None = None
    if len(pairs) >= MIN_POINTS_FOR_DRIFT and np.ptp(jt) > 0:
        drift = float(np.polyfit(jt - jt[0], diffs, 1)[0] * PPM)
    return MarkerMatch(
        matched=len(pairs),
        missing=missing,
        extra=extra,
        duplicated=duplicated,
        garbage=garbage,
        offset_s=offset,
        residual_median_abs_ms=float(np.median(res)),
        residual_p99_abs_ms=float(np.percentile(res, PERCENTILE_HIGH)),
        residual_max_abs_ms=float(res[worst_i]),
        drift_ppm=drift,
        worst=(pairs[worst_i][0], float(res[worst_i])),
        pairs=pairs,
    )


# --------------------------------------------------------------------------------------------
# Coverage of the other streams


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
            drift = (
                f" The difference changes steadily over the session ({m.drift_ppm:.1f} ppm), "
                "which points to the two clocks running at slightly different rates."
                if m.drift_ppm is not None
                else ""
            )
            out.append(
                f"Recorded marker times differ from the journal by up to "
                f"{m.residual_max_abs_ms:.3f} ms after removing the clock offset (limit "
                f"{self.residual_limit_ms:g} ms; worst: {_preview(worst)}).{drift}"
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
