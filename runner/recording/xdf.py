"""Reading the lab's XDF recording, without pylsl or a display.

:func:`read_recording` gives a :class:`Recording` of :class:`RecordedStream` objects; a damaged
or truncated file is named with the byte where it goes wrong. The one reader underneath is the
streaming :func:`runner.recording.scan.scan_xdf` (one pass over the chunks, only the channels
asked for kept, pyxdf's clock synchronisation); :func:`read_stream_channels` reads selected
channels of one stream as float32 for per-trial analyses.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from runner.errors import RecordingError
from runner.recording.dejitter import dejitter
from runner.recording.scan import Select, XdfFormatError, scan_xdf

MARKER_TYPE = "Markers"
XDF_MAGIC = b"XDF:"


# Reading


@dataclass(frozen=True)
class RecordedStream:
    """What an XDF file says about one stream, plus a summary of its samples.

    Timestamps are in the recorder's clock after clock synchronisation (pyxdf's procedure).
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
    _kept: dict[int, tuple[int, ...]] = field(default_factory=dict, repr=False)
    _clock: dict[int, tuple[list[float], list[float]]] = field(default_factory=dict, repr=False)
    _headers: dict[int, tuple[dict[str, Any], dict[str, Any] | None]] = field(
        default_factory=dict, repr=False
    )

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
        """Samples of one stream: an array (samples, channels), or a list of lists of str.

        Raises
        ------
        RecordingError
            Not every channel of the stream was read (see ``values`` of :func:`read_recording`).
        """
        stream = self.stream(stream_id)
        if self._kept.get(stream_id) != tuple(range(stream.channel_count)):
            raise RecordingError(
                f"the samples of {stream.label()} in {self.path} were not read (only channels "
                f"{self._channel_list(stream_id)}); read the recording with those values."
            )
        return self._values[stream_id]

    def channel(self, stream_id: int, channel: int) -> Any:
        """One channel (0-based) of one stream: an array, or a list of str for a string stream.

        Raises
        ------
        RecordingError
            That channel was not read (see ``values`` of :func:`read_recording`).
        """
        stream = self.stream(stream_id)
        kept = self._kept.get(stream_id, ())
        if channel not in kept:
            raise RecordingError(
                f"channel {channel + 1} of {stream.label()} in {self.path} was not read (read: "
                f"{self._channel_list(stream_id)}); read the recording with that channel."
            )
        column = kept.index(channel)
        vals = self._values[stream_id]
        if isinstance(vals, list):
            return [row[column] for row in vals]
        return vals[:, column]

    def kept_channels(self, stream_id: int) -> tuple[int, ...]:
        """The 0-based channels of a stream whose values were read."""
        self.stream(stream_id)
        return self._kept.get(stream_id, ())

    def clock_offsets(self, stream_id: int) -> tuple[list[float], list[float]]:
        """The stream's ClockOffset (measurement times, offsets) after pyxdf's pylsl#67 repair."""
        self.stream(stream_id)
        return self._clock.get(stream_id, ([], []))

    def _channel_list(self, stream_id: int) -> str:
        kept = self._kept.get(stream_id, ())
        return ", ".join(str(c + 1) for c in kept) if kept else "none"

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


def stream_identity(info: dict[str, Any]) -> dict[str, str]:
    """The ``desc/session`` entries of a stream header (nested dicts as pyxdf gives them; text
    values only)."""
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


def read_recording(
    path: str | Path,
    *,
    allow_truncated: bool = False,
    values: Select | None = None,
    numeric_dtype: Any = None,
) -> Recording:
    """Read an XDF recording in one streaming pass and summarise its streams.

    Every stream's timestamps are read; of the sample values only what ``values`` names is
    kept, so a long many-channel recording needs little memory (``Select()`` keeps the marker
    strings only; ``Select(channels={"light": [0]})`` adds channel 1 of the stream named (or
    with source_id or type) ``light``).

    Clock synchronisation is on (each stream's ClockOffset chunks map its timestamps to the
    recorder's clock, as ``pyxdf.load_xdf(synchronize_clocks=True)`` does; the tests check the
    result against pyxdf). Dejitter is off for every stream: irregular marker streams must keep
    their exact timestamps, and dejittering a regular stream fits one straight line per segment,
    which would spread a data gap shorter than pyxdf's break threshold over the whole segment
    and hide it from :func:`stream_coverage`.

    Parameters
    ----------
    path : str or Path
        The ``.xdf`` file.
    allow_truncated : bool
        Read what a truncated file holds (noting it) instead of refusing it.
    values : Select, optional
        Which sample values to keep (default: every value of every stream).
    numeric_dtype : numpy dtype, optional
        Convert the kept numeric values to this type while reading (default: as stored).

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
    try:
        scan = scan_xdf(path, values, numeric_dtype=numeric_dtype)
    except (OSError, XdfFormatError, np.linalg.LinAlgError) as exc:
        raise RecordingError(
            f"The recording {path} could not be read as XDF ({type(exc).__name__}: {exc}); "
            "use a complete copy from the recording computer."
        ) from exc
    damage = scan.damage
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
    if scan.intact_chunks == 0:
        raise RecordingError(f"The recording {path} holds no data after its 'XDF:' start.")
    notes.extend(f"XDF reader: {m}" for m in scan.notes)

    rec = Recording(path=path, streams=[], notes=notes, truncated=damage is not None)
    for sid, entry in scan.streams.items():
        info = entry.info
        ts = entry.time_stamps
        offsets = np.asarray(entry.clock_values, dtype=np.float64)
        rec.streams.append(
            RecordedStream(
                stream_id=sid,
                name=_first(info, "name"),
                type=_first(info, "type"),
                source_id=_first(info, "source_id"),
                created_at=_first(info, "created_at"),
                nominal_srate=entry.srate,
                channel_count=entry.channel_count,
                channel_format=entry.channel_format,
                sample_count=len(ts),
                first_timestamp=float(ts[0]) if len(ts) else None,
                last_timestamp=float(ts[-1]) if len(ts) else None,
                clock_offset_s=float(np.median(offsets)) if len(offsets) else 0.0,
                clock_offset_count=len(offsets),
                has_footer=entry.footer is not None,
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
        rec._values[sid] = entry.values
        rec._kept[sid] = entry.kept
        rec._clock[sid] = (list(entry.clock_times), list(entry.clock_values))
        rec._headers[sid] = (entry.header, entry.footer)
    if not rec.streams and not (values is not None and values.only_listed):
        raise RecordingError(f"The recording {path} holds no streams.")
    return rec


# Selected channels of one stream, for per-trial analyses


@dataclass(frozen=True)
class StreamChannels:
    """Selected channels of one stream, read without the others.

    ``times`` are the samples' times on the recorder's clock (synchronised; dejittered for a
    regular stream unless asked otherwise); ``values`` is float32 of shape (samples, channels)
    in the order of ``channels`` (0-based); ``labels`` are the channels' labels from the header's
    ``desc/channels`` (``""`` where the header names none).
    """

    stream: RecordedStream
    channels: tuple[int, ...]
    labels: tuple[str, ...]
    times: np.ndarray
    values: np.ndarray
    notes: tuple[str, ...] = ()


def channel_labels(header: dict[str, Any], count: int) -> list[str]:
    """Labels from ``desc/channels/channel/label`` of a stream header (``""`` where missing)."""
    labels = [""] * count
    info = header.get("info")
    desc = info.get("desc") if isinstance(info, dict) else None
    node = desc[0] if isinstance(desc, list) and desc else None
    chans = node.get("channels") if isinstance(node, dict) else None
    group = chans[0] if isinstance(chans, list) and chans else None
    items = group.get("channel") if isinstance(group, dict) else None
    for i, item in enumerate(items if isinstance(items, list) else []):
        if i < count and isinstance(item, dict):
            labels[i] = _first(item, "label")
    return labels


def read_stream_channels(
    path: str | Path,
    stream: str,
    channels: Sequence[int] | None = None,
    *,
    allow_truncated: bool = False,
    dejittered: bool = True,
) -> StreamChannels:
    """Read chosen channels of one numeric stream as float32, skipping every other stream.

    Memory stays near the size of what is returned: samples are decoded chunk by chunk and only
    the chosen channels are kept (as float32) before the next chunk is read.

    Parameters
    ----------
    path : str or Path
        The ``.xdf`` file.
    stream : str
        The stream's name, source_id or type (case-insensitive) or its stream id; the first
        stream (in header order) that matches is read.
    channels : sequence of int, optional
        0-based channel indices (default: all channels).
    allow_truncated : bool
        Read the intact part of a truncated file.
    dejittered : bool
        Replace a regular stream's timestamps by pyxdf's dejittering line (default on).

    Returns
    -------
    StreamChannels

    Raises
    ------
    RecordingError
        The file cannot be read, no numeric stream matches, or a channel does not exist.
    """
    wanted = tuple(int(c) for c in channels) if channels is not None else None
    select = Select(strings=False, channels={stream: wanted}, only_listed=True)
    rec = read_recording(
        path, allow_truncated=allow_truncated, values=select, numeric_dtype=np.float32
    )
    numeric = [s for s in rec.streams if s.channel_format != "string"]
    if not numeric:
        found = ", ".join(f"{s.name!r} ({s.type})" for s in rec.streams) or "none"
        raise RecordingError(
            f"{rec.path} has no numeric stream named {stream!r} (by name, source_id, type or "
            f"stream id); streams matching: {found}."
        )
    info = numeric[0]
    chosen = wanted if wanted is not None else tuple(range(info.channel_count))
    bad = [c for c in chosen if not 0 <= c < info.channel_count]
    if bad:
        raise RecordingError(
            f"{info.label()} in {rec.path} has {info.channel_count} channels; channel "
            f"{bad[0] + 1} does not exist."
        )
    kept = rec.kept_channels(info.stream_id)
    raw = rec._values[info.stream_id]
    values = raw[:, [kept.index(c) for c in chosen]] if tuple(chosen) != kept else raw
    times = rec.timestamps(info.stream_id)
    if dejittered:
        times = dejitter(times, info.nominal_srate)
    header, _ = rec._headers[info.stream_id]
    labels = channel_labels(header, info.channel_count)
    return StreamChannels(
        stream=info,
        channels=tuple(chosen),
        labels=tuple(labels[c] for c in chosen),
        times=times,
        values=np.asarray(values, dtype=np.float32),
        notes=tuple(rec.notes),
    )
