"""The recording's signal streams: finding them by type and name, and reading their samples.

:func:`stream_headers` walks the XDF chunk framing and parses only the StreamHeader chunks, so
finding streams in a large recording reads a few kilobytes. :func:`read_signals` is the one place
that reads samples (as float32, timestamps on the recorder's clock after clock synchronisation,
dejittered per segment like the EEG origin of :mod:`runner.data.origins`); it can be switched to a
streaming reader without touching its callers.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any
from xml.etree import ElementTree

import numpy as np

from runner.errors import RecordingError
from runner.physio.config import StreamChoice

__all__ = [
    "Signal",
    "StreamHeader",
    "channel_index",
    "choose_stream",
    "read_signals",
    "stream_headers",
]

XDF_MAGIC = b"XDF:"
TAG_STREAM_HEADER = 2
VARLEN_WIDTHS = {1: "<B", 4: "<I", 8: "<Q"}
MAX_HEADER_BYTES = 16 * 1024 * 1024
#: Channel labels that name a pupil-size channel, when the configuration names none.
PUPIL_LABEL_HINTS = ("pupil", "diameter", "area")
ECG_LABEL_HINTS = ("ecg", "ekg")
PHOTODIODE_LABEL_HINTS = ("photodiode", "light", "diode")
RR_LABEL_HINTS = ("rr", "ibi", "interval")


@dataclass(frozen=True)
class StreamHeader:
    """What a StreamHeader chunk says about one stream (channel labels and units from its desc)."""

    stream_id: int
    name: str
    type: str
    channel_count: int
    nominal_srate: float
    channel_format: str
    source_id: str = ""
    labels: tuple[str, ...] = ()
    units: tuple[str, ...] = ()
    created_at: str = ""
    identity: tuple[tuple[str, str], ...] = ()  # desc/session entries (trialdeck's marker streams)

    def label(self) -> str:
        return f"{self.name!r} (type {self.type!r}, id {self.stream_id})"


@dataclass
class Signal:
    """Samples of one stream: ``times`` (s, recorder clock) and ``data`` (samples, channels)."""

    header: StreamHeader
    times: np.ndarray
    data: np.ndarray
    channels: list[int] = field(default_factory=list)

    @property
    def srate(self) -> float:
        """The nominal rate, or the measured one for an irregular stream."""
        if self.header.nominal_srate > 0:
            return self.header.nominal_srate
        if len(self.times) > 1:
            return float((len(self.times) - 1) / (self.times[-1] - self.times[0]))
        return 0.0

    @property
    def labels(self) -> list[str]:
        return [_label(self.header, i) for i in self.channels]

    @property
    def units(self) -> list[str]:
        return [self.header.units[i] if i < len(self.header.units) else "" for i in self.channels]


def _label(header: StreamHeader, i: int) -> str:
    return header.labels[i] if i < len(header.labels) and header.labels[i] else f"ch{i + 1}"


def _text(node: ElementTree.Element | None, key: str) -> str:
    found = node.find(key) if node is not None else None
    return (found.text or "").strip() if found is not None else ""


def _parse_header(content: bytes) -> StreamHeader:
    sid = struct.unpack("<I", content[:4])[0]
    root = ElementTree.fromstring(content[4:].decode("utf-8", errors="replace"))
    labels: list[str] = []
    units: list[str] = []
    chans = root.find("desc/channels")
    if chans is not None:
        for ch in chans.findall("channel"):
            labels.append(_text(ch, "label"))
            units.append(_text(ch, "unit"))
    session = root.find("desc/session")
    identity = tuple(
        (child.tag, (child.text or "").strip())
        for child in (session if session is not None else [])
    )
    try:
        srate = float(_text(root, "nominal_srate") or 0.0)
        count = int(_text(root, "channel_count") or 0)
    except ValueError:
        srate, count = 0.0, 0
    return StreamHeader(
        stream_id=sid,
        name=_text(root, "name"),
        type=_text(root, "type"),
        channel_count=count,
        nominal_srate=srate,
        channel_format=_text(root, "channel_format"),
        source_id=_text(root, "source_id"),
        labels=tuple(labels),
        units=tuple(units),
        created_at=_text(root, "created_at"),
        identity=identity,
    )


def stream_headers(path: str | Path) -> list[StreamHeader]:
    """Every stream header of an XDF file, in file order, without reading any samples.

    Raises
    ------
    RecordingError
        The file is missing, not XDF, or a header cannot be parsed.
    """
    path = Path(path)
    if not path.is_file():
        raise RecordingError(f"the recording {path} does not exist; check the path.")
    size = path.stat().st_size
    headers: list[StreamHeader] = []
    with path.open("rb") as f:
        if f.read(len(XDF_MAGIC)) != XDF_MAGIC:
            raise RecordingError(f"{path} is not an XDF recording (it does not start with 'XDF:').")
        pos = len(XDF_MAGIC)
        while pos < size:
            width_byte = f.read(1)
            if not width_byte or width_byte[0] not in VARLEN_WIDTHS:
                break  # damage: read_recording names it; the headers before it are used
            width = width_byte[0]
            raw = f.read(width)
            tag_raw = f.read(2)
            if len(raw) < width or len(tag_raw) < 2:
                break
            length = struct.unpack(VARLEN_WIDTHS[width], raw)[0]
            tag = struct.unpack("<H", tag_raw)[0]
            if tag == TAG_STREAM_HEADER and length - 2 <= MAX_HEADER_BYTES:
                content = f.read(length - 2)
                try:
                    headers.append(_parse_header(content))
                except (ElementTree.ParseError, struct.error) as exc:
                    raise RecordingError(
                        f"a stream header at byte {pos} of {path} cannot be read ({exc})."
                    ) from None
            pos += 1 + width + length
            f.seek(pos)
    return headers


def choose_stream(
    headers: list[StreamHeader], choice: StreamChoice, kind: str, *, option: str
) -> StreamHeader | None:
    """The one stream of ``kind`` (``"eeg"``, ``"pupil"``...) that ``choice`` selects, or None.

    Raises
    ------
    RecordingError
        Several streams match (one line listing them and how to choose), or ``choice.name``
        names no stream of those types.
    """
    wanted = {t.strip().lower() for t in choice.types}
    matches = [h for h in headers if h.type.strip().lower() in wanted]
    if choice.name is not None:
        named = [h for h in matches if h.name == choice.name]
        if not named:
            known = ", ".join(h.label() for h in matches) or "none of these types"
            raise RecordingError(
                f"no {kind} stream is named {choice.name!r} (types {', '.join(choice.types)}; "
                f"found: {known})."
            )
        matches = named
    if len(matches) > 1:
        listed = ", ".join(h.label() for h in matches)
        raise RecordingError(
            f"{len(matches)} {kind} streams match ({listed}); choose one with {option} NAME "
            f"or streams.{kind}.name in the physio configuration."
        )
    return matches[0] if matches else None


def channel_index(header: StreamHeader, choice: StreamChoice, hints: tuple[str, ...]) -> int:
    """The channel of a one-signal stream: ``choice.channel`` by label, else the first label
    containing one of ``hints``, else the only (or first) channel.

    Raises
    ------
    RecordingError
        ``choice.channel`` is not a label of the stream.
    """
    labels = [_label(header, i) for i in range(header.channel_count)]
    if choice.channel is not None:
        if choice.channel in labels:
            return labels.index(choice.channel)
        raise RecordingError(
            f"stream {header.label()} has no channel {choice.channel!r} (channels: "
            f"{', '.join(labels) or 'none'})."
        )
    for i, lab in enumerate(labels):
        if any(h in lab.lower() for h in hints):
            return i
    return 0


NUMERIC_DTYPES = {
    "float32": "<f4",
    "double64": "<f8",
    "int8": "<i1",
    "int16": "<i2",
    "int32": "<i4",
    "int64": "<i8",
}
TAG_SAMPLES = 3
TAG_CLOCK_OFFSET = 4
TIMESTAMP_BYTES = 8


@dataclass
class _Stream:
    header: StreamHeader
    count: int = 0
    times: np.ndarray = field(default_factory=lambda: np.zeros(0))
    values: Any = None  # float32 array (samples, channels), or a list of str for markers
    filled: int = 0
    offsets: list[tuple[float, float]] = field(default_factory=list)
    last: float = 0.0


def _varlen(f: Any) -> int:
    width = f.read(1)
    if not width or width[0] not in VARLEN_WIDTHS:
        raise RecordingError("a chunk length is not a valid XDF length")
    return int(struct.unpack(VARLEN_WIDTHS[width[0]], f.read(width[0]))[0])


def _varlen_buf(buf: bytes, pos: int) -> tuple[int, int]:
    width = buf[pos]
    if width not in VARLEN_WIDTHS:
        raise RecordingError("a sample count is not a valid XDF length")
    return int(struct.unpack_from(VARLEN_WIDTHS[width], buf, pos + 1)[0]), pos + 1 + width


def _walk(f: Any, size: int) -> Any:
    """(tag, content start, content length) of each chunk; stops at damage or the end."""
    pos = len(XDF_MAGIC)
    f.seek(pos)
    while pos < size:
        try:
            length = _varlen(f)
        except (RecordingError, struct.error):
            return
        tag_raw = f.read(2)
        if len(tag_raw) < 2 or length < 2:
            return
        start = f.tell()
        if start + length - 2 > size:
            return
        yield struct.unpack("<H", tag_raw)[0], start, length - 2
        pos = start + length - 2
        f.seek(pos)


def _numeric_chunk(st: _Stream, buf: bytes, pos: int) -> None:
    """Decode the samples of one numeric Samples chunk into the stream's arrays."""
    n, pos = _varlen_buf(buf, pos)
    h = st.header
    item = np.dtype(NUMERIC_DTYPES[h.channel_format])
    width = h.channel_count * item.itemsize
    body = memoryview(buf)[pos:]
    dest = slice(st.filled, st.filled + n)
    if len(body) == n * (1 + TIMESTAMP_BYTES + width) and all(
        body[k * (1 + TIMESTAMP_BYTES + width)] == TIMESTAMP_BYTES for k in (0, n - 1)
    ):
        rec = np.dtype([("f", "u1"), ("t", "<f8"), ("v", item, (h.channel_count,))])
        arr = np.frombuffer(body, dtype=rec)
        if np.all(arr["f"] == TIMESTAMP_BYTES):
            st.times[dest] = arr["t"]
            st.values[dest] = arr["v"]
            st.filled += n
            st.last = float(arr["t"][-1]) if n else st.last
            return
    # Mixed or left-out timestamps: sample by sample (the specification's general case).
    tdiff = 1.0 / h.nominal_srate if h.nominal_srate > 0 else 0.0
    k = 0
    for i in range(n):
        if body[k] != 0:
            st.last = struct.unpack_from("<d", body, k + 1)[0]
            k += 1 + TIMESTAMP_BYTES
        else:
            st.last = st.last + tdiff
            k += 1
        st.times[st.filled + i] = st.last
        st.values[st.filled + i] = np.frombuffer(body[k : k + width], dtype=item)
        k += width
    st.filled += n


def _string_chunk(st: _Stream, buf: bytes, pos: int) -> None:
    n, pos = _varlen_buf(buf, pos)
    tdiff = 1.0 / st.header.nominal_srate if st.header.nominal_srate > 0 else 0.0
    for i in range(n):
        if buf[pos] != 0:
            st.last = struct.unpack_from("<d", buf, pos + 1)[0]
            pos += 1 + TIMESTAMP_BYTES
        else:
            st.last += tdiff
            pos += 1
        row = []
        for _ in range(max(st.header.channel_count, 1)):
            length, pos = _varlen_buf(buf, pos)
            row.append(buf[pos : pos + length].decode("utf-8", errors="replace"))
            pos += length
        st.times[st.filled + i] = st.last
        st.values.append(row)
    st.filled += n


def _sync(times: np.ndarray, offsets: list[tuple[float, float]]) -> np.ndarray:
    """Timestamps moved onto the recorder's clock: a straight line fitted to the ClockOffset
    measurements (as pyxdf's clock synchronisation does for a recording without clock resets)."""
    if not offsets or not len(times):
        return times
    at = np.array([o[0] for o in offsets])
    value = np.array([o[1] for o in offsets])
    if len(offsets) < 2 or np.ptp(at) == 0:
        return times + float(np.mean(value))
    slope, intercept = np.polyfit(at, value, 1)
    return times + (intercept + slope * times)


def read_streams(path: str | Path, ids: set[int]) -> dict[int, _Stream]:
    """Samples of the streams ``ids``, read in two passes over the chunk framing (count, then
    fill preallocated arrays; numeric chunks whose samples all carry a timestamp are decoded at
    once), timestamps synchronised to the recorder's clock. Other streams are skipped unread.

    Raises
    ------
    RecordingError
        The file is not XDF or a chunk of a chosen stream cannot be decoded.
    """
    path = Path(path)
    headers = {h.stream_id: h for h in stream_headers(path)}
    streams = {sid: _Stream(headers[sid]) for sid in ids if sid in headers}
    size = path.stat().st_size
    with path.open("rb") as f:
        for tag, start, length in list(_walk(f, size)):
            if tag not in (TAG_SAMPLES, TAG_CLOCK_OFFSET) or length < 4:
                continue
            f.seek(start)
            head = f.read(min(length, 4 + 9))
            sid = struct.unpack_from("<I", head, 0)[0]
            st = streams.get(sid)
            if st is None:
                continue
            if tag == TAG_CLOCK_OFFSET and length >= 20:
                st.offsets.append(struct.unpack_from("<dd", head + f.read(20 - len(head)), 4))
            elif tag == TAG_SAMPLES:
                st.count += _varlen_buf(head, 4)[0]
        for st in streams.values():
            h = st.header
            st.times = np.zeros(st.count)
            if h.channel_format == "string":
                st.values = []
            elif h.channel_format in NUMERIC_DTYPES:
                st.values = np.zeros(
                    (st.count, h.channel_count), dtype=NUMERIC_DTYPES[h.channel_format]
                )
            else:
                raise RecordingError(f"stream {h.label()} has an unknown channel format.")
        for tag, start, length in list(_walk(f, size)):
            if tag != TAG_SAMPLES:
                continue
            f.seek(start)
            sid = struct.unpack("<I", f.read(4))[0]
            st = streams.get(sid)
            if st is None:
                continue
            buf = f.read(length - 4)
            try:
                if st.header.channel_format == "string":
                    _string_chunk(st, buf, 0)
                else:
                    _numeric_chunk(st, buf, 0)
            except (IndexError, ValueError, struct.error) as exc:
                raise RecordingError(
                    f"a Samples chunk of stream {st.header.label()} in {path} cannot be "
                    f"decoded ({exc})."
                ) from None
    for st in streams.values():
        st.times = _sync(st.times[: st.filled], st.offsets)
        if isinstance(st.values, np.ndarray):
            st.values = st.values[: st.filled]
    return streams


def as_recording(path: str | Path, streams: dict[int, _Stream]) -> Any:
    """The streams as a :class:`runner.recording.xdf.Recording` (for the clock model)."""
    from runner.recording.xdf import RecordedStream, Recording

    rec = Recording(path=Path(path), streams=[])
    for sid, st in sorted(streams.items()):
        h = st.header
        ts = st.times
        rec.streams.append(
            RecordedStream(
                stream_id=sid,
                name=h.name,
                type=h.type,
                source_id=h.source_id,
                created_at=h.created_at,
                nominal_srate=h.nominal_srate,
                channel_count=h.channel_count,
                channel_format=h.channel_format,
                sample_count=len(ts),
                first_timestamp=float(ts[0]) if len(ts) else None,
                last_timestamp=float(ts[-1]) if len(ts) else None,
                clock_offset_s=float(np.median([o[1] for o in st.offsets])) if st.offsets else 0.0,
                clock_offset_count=len(st.offsets),
                identity=dict(h.identity),
            )
        )
        rec._timestamps[sid] = ts
        rec._values[sid] = st.values
        if st.values is not None:
            rec._kept[sid] = tuple(range(h.channel_count))
    return rec


def read_signals(
    path: str | Path,
    wanted: dict[str, tuple[StreamHeader, list[int] | None]],
    loaded: dict[int, _Stream] | None = None,
) -> dict[str, Signal]:
    """The samples of the chosen streams as :class:`Signal` objects (float32, recorder-clock
    times, dejittered per segment like the EEG origin of :mod:`runner.data.origins`).

    ``loaded`` are streams already read by :func:`read_streams` (the others are read now).

    Raises
    ------
    RecordingError
        The file cannot be read as XDF.
    """
    from runner.recording.dejitter import dejitter

    loaded = dict(loaded or {})
    missing = {h.stream_id for h, _ in wanted.values()} - set(loaded)
    if missing:
        loaded.update(read_streams(path, missing))
    out: dict[str, Signal] = {}
    for kind, (header, channels) in wanted.items():
        st = loaded.get(header.stream_id)
        if st is None or not isinstance(st.values, np.ndarray):
            raise RecordingError(f"stream {header.label()} holds no numbers in {path}.")
        data = st.values
        if data.dtype != np.float32:
            data = data.astype(np.float32)
        chans = list(range(data.shape[1])) if channels is None else list(channels)
        if channels is not None:
            data = np.ascontiguousarray(data[:, chans])
        times = st.times
        if len(times) > 1 and header.nominal_srate > 0:
            times = dejitter(times, header.nominal_srate)
        out[kind] = Signal(header=header, times=times, data=data, channels=chans)
    return out
