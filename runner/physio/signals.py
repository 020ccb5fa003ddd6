"""The recording's signal streams: finding them by type and name, and reading their samples.

:func:`stream_headers` parses only the StreamHeader chunks (found by
:func:`runner.recording.scan.stream_header_chunks`), so finding streams in a large recording reads
a few kilobytes. Samples are read by the product's one
XDF reader, :func:`runner.recording.read_recording` (one streaming pass, pyxdf's clock
synchronisation including clock resets): :func:`read_chosen` asks it for the marker streams and
the chosen channels (as float32), :func:`signals_from` turns those into :class:`Signal` objects
(timestamps dejittered per segment like the EEG origin of :mod:`runner.data.origins`).
"""

from __future__ import annotations

import struct
from dataclasses import dataclass, field
from pathlib import Path
from xml.etree import ElementTree

import numpy as np

from runner.errors import RecordingError
from runner.physio.config import StreamChoice
from runner.recording.scan import Select, XdfFormatError, stream_header_chunks
from runner.recording.xdf import Recording

__all__ = [
    "Signal",
    "StreamHeader",
    "channel_index",
    "choose_stream",
    "read_chosen",
    "signals_from",
    "stream_headers",
]

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
    try:
        chunks = stream_header_chunks(path)
    except XdfFormatError:
        raise RecordingError(
            f"{path} is not an XDF recording (it does not start with 'XDF:')."
        ) from None
    except OSError as exc:
        raise RecordingError(f"the recording {path} cannot be read ({exc.strerror}).") from None
    headers: list[StreamHeader] = []
    for pos, content in chunks:
        try:
            headers.append(_parse_header(content))
        except (ElementTree.ParseError, struct.error) as exc:
            raise RecordingError(
                f"a stream header at byte {pos} of {path} cannot be read ({exc})."
            ) from None
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


def read_chosen(
    path: str | Path,
    wanted: dict[str, tuple[StreamHeader, list[int] | None]],
    marker_ids: set[int],
    *,
    allow_truncated: bool = False,
) -> Recording:
    """The recording as :func:`runner.recording.read_recording` reads it in one pass, keeping
    the marker streams ``marker_ids`` (for the clock model) and, as float32, the chosen channels
    of the ``wanted`` streams (``None``: every channel); other streams are skipped unread.

    Raises
    ------
    RecordingError
        The file cannot be read as XDF (or is truncated and ``allow_truncated`` is off).
    """
    from runner.recording import read_recording

    keep: dict[str, list[int] | None] = {str(sid): None for sid in marker_ids}
    for header, channels in wanted.values():
        key = str(header.stream_id)
        if channels is None or (key in keep and keep[key] is None):
            keep[key] = None
        else:
            keep[key] = sorted(set(keep.get(key) or []) | set(channels))
    select = Select(strings=True, channels=keep, only_listed=True)
    return read_recording(
        path, allow_truncated=allow_truncated, values=select, numeric_dtype=np.float32
    )


def signals_from(
    rec: Recording,
    wanted: dict[str, tuple[StreamHeader, list[int] | None]],
    times: dict[int, np.ndarray] | None = None,
) -> dict[str, Signal]:
    """The chosen streams of ``rec`` (read by :func:`read_chosen`) as :class:`Signal` objects:
    float32 samples, recorder-clock times dejittered per segment like the EEG origin of
    :mod:`runner.data.origins` (``times``: such times already computed, by stream id).

    Raises
    ------
    RecordingError
        A chosen stream holds text, not numbers.
    """
    from runner.recording.dejitter import dejitter

    out: dict[str, Signal] = {}
    for kind, (header, channels) in wanted.items():
        sid = header.stream_id
        stream = rec.stream(sid)
        if stream.channel_format == "string":
            raise RecordingError(f"stream {header.label()} holds no numbers in {rec.path}.")
        chans = list(range(stream.channel_count)) if channels is None else list(channels)
        if channels is None:
            data = rec.values(sid)
        else:
            data = np.stack([rec.channel(sid, c) for c in chans], axis=1)
        data = np.ascontiguousarray(data, dtype=np.float32)
        ts = (times or {}).get(sid)
        if ts is None:
            ts = rec.timestamps(sid)
            if len(ts) > 1 and header.nominal_srate > 0:
                ts = dejitter(ts, header.nominal_srate)
        out[kind] = Signal(header=header, times=ts, data=data, channels=chans)
    return out
