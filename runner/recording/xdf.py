"""Reading the lab's XDF recording (pyxdf is the only reader), without pylsl or a display.

:func:`read_recording` gives a :class:`Recording` of :class:`RecordedStream` objects; a damaged
or truncated file is named with the byte where it goes wrong.
"""

from __future__ import annotations

import logging
import struct
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any
from xml.etree.ElementTree import ParseError

import numpy as np
import pyxdf

from runner.errors import RecordingError

MARKER_TYPE = "Markers"
XDF_MAGIC = b"XDF:"
# Chunk tags of the XDF 1.0 specification; anything else means the byte layout is off.
KNOWN_TAGS = frozenset({1, 2, 3, 4, 5, 6})
VARLEN_WIDTHS = {1: "<B", 4: "<I", 8: "<Q"}
TAG_BYTES = 2
PYXDF_LOGGER = "pyxdf"
PYXDF_NO_OFFSET_MESSAGE = "Segments and clock-segments differ"


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
    # What the stream's header says about the session that sent it (trialdeck's marker streams
    # carry study, participant, session, protocol_hash and mode in desc/session); empty otherwise.
    identity: dict[str, str] = field(default_factory=dict)
    # The header's desc/channels/channel entries (label, unit, type, ... as text), one per
    # channel in order; empty when the header describes no channels.
    channels: tuple[dict[str, str], ...] = ()

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


def stream_identity(info: dict[str, Any]) -> dict[str, str]:
    """The ``desc/session`` entries of a stream header as read by pyxdf (text values only)."""
    desc = info.get("desc")
    node = desc[0] if isinstance(desc, list) and desc else None
    session = node.get("session") if isinstance(node, dict) else None
    entry = session[0] if isinstance(session, list) and session else None
    if not isinstance(entry, dict):
        return {}
    out: dict[str, str] = {}
    for key, value in entry.items():
        if isinstance(value, list) and value and isinstance(value[0], str):
            out[key] = value[0]
    return out


def stream_channels(info: dict[str, Any]) -> tuple[dict[str, str], ...]:
    """The ``desc/channels/channel`` entries of a stream header as read by pyxdf (text values)."""
    desc = info.get("desc")
    node = desc[0] if isinstance(desc, list) and desc else None
    channels = node.get("channels") if isinstance(node, dict) else None
    entry = channels[0] if isinstance(channels, list) and channels else None
    items = entry.get("channel") if isinstance(entry, dict) else None
    if not isinstance(items, list):
        return ()
    out: list[dict[str, str]] = []
    for item in items:
        fields: dict[str, str] = {}
        if isinstance(item, dict):
            for key, value in item.items():
                if isinstance(value, list) and value and isinstance(value[0], str):
                    fields[key] = value[0]
        out.append(fields)
    return tuple(out)


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
                f"{sentence}; read it anyway with --allow-truncated (audit and export), or use a complete "
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
                identity=stream_identity(info),
                channels=stream_channels(info),
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
