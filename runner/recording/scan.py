"""A streaming XDF reader: one pass over the chunks, keeping only what the caller asks for.

A one-hour recording with 64 EEG channels at 1 kHz holds about a gigabyte of samples; reading
every stream whole (as ``pyxdf.load_xdf`` does) needs several times that in memory. The audit
and export need the timestamps of every stream but sample values only of the marker streams and
of one photodiode channel, so :func:`scan_xdf` walks the chunks once and keeps, per stream:

* the header and footer XML (as nested dicts, the layout ``pyxdf`` gives);
* the ClockOffset pairs;
* every timestamp (a sample stored without one gets the previous timestamp plus 1/srate, the
  XDF 1.0 compression rule, as pyxdf reconstructs it);
* only the channels asked for (:class:`Select`).

Then it applies the clock synchronisation ``pyxdf.load_xdf(synchronize_clocks=True)`` applies
(pyxdf 1.17: the pylsl#67 repair of a corrupted last clock offset with extra samples, clock
reset detection, a robust Huber line per clock segment of the offsets, and timestamps left as
stored for a stream without offsets), so timestamps and values equal pyxdf's reading; the test
suite checks that against pyxdf itself on many fixtures (tests/recording/test_scan.py).

Numeric sample chunks are decoded with numpy views (no per-sample Python loop when a chunk stores
all timestamps, or only its first); string streams are decoded per sample.
"""

from __future__ import annotations

import os
import struct
from collections import defaultdict
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, BinaryIO
from xml.etree.ElementTree import ParseError, fromstring

import numpy as np

__all__ = [
    "ALL_CHANNELS",
    "ScannedStream",
    "Select",
    "XdfScan",
    "scan_xdf",
    "stream_header_chunks",
]

XDF_MAGIC = b"XDF:"
TAG_FILE_HEADER = 1
TAG_STREAM_HEADER = 2
TAG_SAMPLES = 3
TAG_CLOCK_OFFSET = 4
TAG_BOUNDARY = 5
TAG_STREAM_FOOTER = 6
TAG_BYTES = 2
STREAM_TAGS = (TAG_STREAM_HEADER, TAG_SAMPLES, TAG_CLOCK_OFFSET, TAG_STREAM_FOOTER)
KNOWN_TAGS = frozenset({1, 2, 3, 4, 5, 6})
VARLEN_WIDTHS = (1, 4, 8)
# The 16 bytes of every Boundary chunk (XDF specification); a reader resynchronises on them.
BOUNDARY_UUID = bytes.fromhex("43a546dccbf5410fb30ed5467383cbe4")
SCAN_BLOCK = 2**20
# Kept samples are gathered in blocks of about this many bytes and joined once at the end, each
# block freed as soon as it is copied: the peak is the result plus one block, not twice the
# result (as joining thousands of per-chunk arrays is).
ROWS_BLOCK_BYTES = 2**26
FORMATS: dict[str, str] = {
    "int8": "<i1",
    "int16": "<i2",
    "int32": "<i4",
    "int64": "<i8",
    "float32": "<f4",
    "double64": "<f8",
}
STRING_FORMAT = "string"

# pyxdf.load_xdf's defaults for clock synchronisation (pyxdf 1.17).
RESET_THRESHOLD_STDS = 5.0
RESET_THRESHOLD_SECONDS = 5.0
RESET_THRESHOLD_OFFSET_STDS = 10.0
RESET_THRESHOLD_OFFSET_SECONDS = 1.0
WINSOR_THRESHOLD = 0.0001
ROBUST_FIT_ITERATIONS = 1000
CORRUPT_TIME_RATIO = 10.0
CORRUPT_VALUE_Z = 10.0
MAD_TO_SD = 1.4826


class _All:
    """Marker for "every channel of the stream"."""

    def __repr__(self) -> str:
        return "ALL_CHANNELS"


ALL_CHANNELS = _All()
# What to keep of one stream: None = skip it entirely, () = timestamps only, a tuple of 0-based
# channel indices, or ALL_CHANNELS.
Keep = tuple[int, ...] | _All | None


@dataclass(frozen=True)
class Select:
    """Which sample values :func:`scan_xdf` keeps; timestamps of kept streams are always kept.

    ``strings``: keep every channel of string-format streams (marker streams).
    ``channels``: per stream key, the 0-based channels to keep (``None``: all of them). A key
    matches a stream's name, source_id or type (case-insensitively) or its stream id as text.
    ``numeric``: keep every channel of every numeric stream (what pyxdf reads).
    ``only_listed``: skip the streams no key of ``channels`` names (not even their timestamps).
    """

    strings: bool = True
    channels: Mapping[str, Sequence[int] | None] = field(default_factory=dict)
    numeric: bool = False
    only_listed: bool = False

    @classmethod
    def everything(cls) -> Select:
        """Every value of every stream."""
        return cls(strings=True, numeric=True)

    def keys_for(self, info: Mapping[str, str], stream_id: int) -> list[str]:
        names = {info.get(k, "").strip().lower() for k in ("name", "source_id", "type")}
        names.discard("")
        names.add(str(stream_id))
        return [k for k in self.channels if k.strip().lower() in names]

    def keep(self, info: Mapping[str, str], stream_id: int) -> Keep:
        """What to keep of the stream with header ``info`` (text fields) and id ``stream_id``."""
        keys = self.keys_for(info, stream_id)
        if self.only_listed and not keys:
            return None
        is_string = info.get("channel_format", "") == STRING_FORMAT
        if self.numeric or (is_string and self.strings):
            return ALL_CHANNELS
        chosen: set[int] = set()
        for k in keys:
            listed = self.channels[k]
            if listed is None:
                return ALL_CHANNELS
            chosen.update(int(c) for c in listed)
        return tuple(sorted(chosen))


class _Rows:
    """Rows of one dtype and row shape, appended chunk by chunk into large blocks."""

    def __init__(self, shape: tuple[int, ...], dtype: np.dtype) -> None:
        self.shape = shape
        self.dtype = np.dtype(dtype)
        row_bytes = self.dtype.itemsize * int(np.prod(shape, dtype=np.int64))
        self.capacity = max(ROWS_BLOCK_BYTES // max(row_bytes, 1), 1)
        self.blocks: list[np.ndarray] = []
        self.fill = 0  # rows used in the last block

    def append(self, rows: np.ndarray) -> None:
        """Copy ``rows`` in (converted to this dtype)."""
        done, n = 0, len(rows)
        while done < n:
            if not self.blocks or self.fill == self.capacity:
                self.blocks.append(np.empty((self.capacity, *self.shape), self.dtype))
                self.fill = 0
            take = min(n - done, self.capacity - self.fill)
            self.blocks[-1][self.fill : self.fill + take] = rows[done : done + take]
            self.fill += take
            done += take

    def join(self) -> np.ndarray:
        """All rows as one array; the blocks are released while it is filled."""
        total = self.capacity * (len(self.blocks) - 1) + self.fill if self.blocks else 0
        out = np.empty((total, *self.shape), self.dtype)
        pos = 0
        while self.blocks:
            block = self.blocks.pop(0)
            size = len(block) if self.blocks else self.fill
            out[pos : pos + size] = block[:size]
            pos += size
            del block
        return out


@dataclass
class ScannedStream:
    """One stream as scanned: header and footer, clock offsets, timestamps, kept channels.

    ``time_stamps`` are synchronised (recorder clock) once :func:`scan_xdf` returns. ``values``
    holds the kept channels only, in the order of ``kept`` (an array (samples, channels) for
    numeric streams, a list of per-sample lists of str for string streams); ``kept`` is ``()``
    when no values were kept.
    """

    stream_id: int
    header: dict[str, Any]
    channel_format: str
    channel_count: int
    srate: float
    kept: tuple[int, ...]
    numeric_dtype: np.dtype | None = None
    footer: dict[str, Any] | None = None
    clock_times: list[float] = field(default_factory=list)
    clock_values: list[float] = field(default_factory=list)
    time_stamps: np.ndarray = field(default_factory=lambda: np.zeros((0,)))
    values: Any = None
    clock_segments: list[tuple[int, int]] = field(default_factory=list)
    _stamps: _Rows | None = field(default=None, repr=False)
    _rows: _Rows | None = field(default=None, repr=False)
    _strings: list[list[str]] = field(default_factory=list, repr=False)
    _last_timestamp: float = 0.0

    @property
    def info(self) -> dict[str, Any]:
        node = self.header.get("info")
        return node if isinstance(node, dict) else {}

    @property
    def tdiff(self) -> float:
        return 1.0 / self.srate if self.srate > 0 else 0.0

    @property
    def is_string(self) -> bool:
        return self.channel_format == STRING_FORMAT

    def add(self, stamps: np.ndarray, values: Any) -> None:
        """Keep one chunk's timestamps and kept values (copied: they may view the chunk)."""
        if self._stamps is None:
            self._stamps = _Rows((), np.dtype(np.float64))
        self._stamps.append(stamps)
        if self.is_string:
            self._strings.extend(values)
            return
        if self._rows is None:
            fmt = np.dtype(FORMATS[self.channel_format]).newbyteorder("=")
            self._rows = _Rows((len(self.kept),), self.numeric_dtype or fmt)
        self._rows.append(values)


@dataclass
class XdfScan:
    """What :func:`scan_xdf` read: the streams in header order, the reader's notes, and where
    the file's framing is damaged (None: intact)."""

    streams: dict[int, ScannedStream]
    notes: list[str] = field(default_factory=list)
    # The first place where the chunk framing goes wrong (a truncated or damaged file), and the
    # number of intact chunks before it.
    damage: str | None = None
    intact_chunks: int = 0


class XdfFormatError(ValueError):
    """Bytes that cannot be read as XDF (the caller turns it into a RecordingError)."""


# --------------------------------------------------------------------------------------------
# Low-level reading


def _read_varlen(f: BinaryIO) -> int:
    width = f.read(1)
    if not width:
        raise EOFError
    size = {1: "<B", 4: "<I", 8: "<Q"}.get(width[0])
    if size is None:
        raise XdfFormatError(f"invalid variable-length integer width {width[0]}")
    raw = f.read(struct.calcsize(size))
    if len(raw) < struct.calcsize(size):
        raise XdfFormatError("the file ends inside a length")
    return int(struct.unpack(size, raw)[0])


#: A StreamHeader chunk larger than this is skipped by :func:`stream_header_chunks` (a header is
#: XML of a few kilobytes; anything this size is damage).
MAX_HEADER_BYTES = 16 * 1024 * 1024


def stream_header_chunks(path: Path) -> list[tuple[int, bytes]]:
    """Byte position and content of every StreamHeader chunk, in file order, reading no samples.

    Only the chunk framing is walked (a seek per chunk), so listing the streams of a large
    recording reads a few kilobytes. The walk stops quietly at the first damaged chunk: the
    headers before it are returned, and :func:`scan_xdf` names the damage when the samples are
    read. The content starts with the stream id (little-endian uint32), then the header's XML.

    Raises
    ------
    XdfFormatError
        The file does not start with ``XDF:``.
    OSError
        The file cannot be opened or read.
    """
    size = path.stat().st_size
    chunks: list[tuple[int, bytes]] = []
    with path.open("rb") as f:
        if f.read(len(XDF_MAGIC)) != XDF_MAGIC:
            raise XdfFormatError("it does not start with 'XDF:'")
        pos = len(XDF_MAGIC)
        while pos < size:
            try:
                length = _read_varlen(f)
            except (EOFError, XdfFormatError):
                break
            tag_raw = f.read(TAG_BYTES)
            if len(tag_raw) < TAG_BYTES:
                break
            tag = struct.unpack("<H", tag_raw)[0]
            end = f.tell() + length - TAG_BYTES
            if tag == TAG_STREAM_HEADER and length - TAG_BYTES <= MAX_HEADER_BYTES:
                content = f.read(length - TAG_BYTES)
                if len(content) < length - TAG_BYTES:
                    break
                chunks.append((pos, content))
            pos = end
            f.seek(pos)
    return chunks


def _varlen_from(buf: bytes | memoryview, pos: int) -> tuple[int, int]:
    width = buf[pos]
    size = {1: "<B", 4: "<I", 8: "<Q"}.get(width)
    if size is None:
        raise XdfFormatError(f"invalid variable-length integer width {width}")
    return int(struct.unpack_from(size, buf, pos + 1)[0]), pos + 1 + struct.calcsize(size)


def _scan_forward(f: BinaryIO) -> bool:
    """Move past the next Boundary chunk's UUID; False at the end of the file."""
    while True:
        start = f.tell()
        block = f.read(SCAN_BLOCK)
        at = block.find(BOUNDARY_UUID)
        if at != -1:
            f.seek(start + at + len(BOUNDARY_UUID))
            return True
        if len(block) < SCAN_BLOCK:
            return False
        # Step back so a UUID straddling two blocks is found.
        f.seek(f.tell() - len(BOUNDARY_UUID) + 1)


def xml_to_dict(node: Any) -> dict[str, Any]:
    """An attribute-less XML element as nested dicts of lists (the layout pyxdf gives)."""
    children: dict[str, list[Any]] = defaultdict(list)
    for child in node:
        for key, value in xml_to_dict(child).items():
            children[key].append(value)
    return {node.tag: children or node.text}


def text_fields(header: dict[str, Any]) -> dict[str, str]:
    """The header's top-level text fields (name, type, channel_format, ...)."""
    info = header.get("info")
    out: dict[str, str] = {}
    if isinstance(info, dict):
        for key, value in info.items():
            if isinstance(value, list) and value and isinstance(value[0], str):
                out[key] = value[0]
    return out


# --------------------------------------------------------------------------------------------
# Samples chunks


def _deduced(first: float, tdiff: float, count: int) -> np.ndarray:
    """``count`` timestamps after ``first``, each the previous plus ``tdiff`` (added one by one,
    as a sequential reader does)."""
    steps = np.full(count + 1, tdiff)
    steps[0] = first
    return np.add.accumulate(steps)[1:]


def _numeric_chunk(s: ScannedStream, buf: bytes, keep: Keep) -> tuple[np.ndarray, Any]:
    n, pos = _varlen_from(buf, 0)
    nch = s.channel_count
    dt = np.dtype(FORMATS[s.channel_format])
    out_dtype = s.numeric_dtype or dt.newbyteorder("=")
    width = nch * dt.itemsize
    rest = len(buf) - pos
    stamps: np.ndarray | None = None
    block: np.ndarray | None = None
    if n == 0:
        stamps = np.zeros((0,))
        block = np.zeros((0, nch), dtype=dt)
    elif rest == n * (9 + width):
        rows = np.frombuffer(buf, np.dtype([("f", "u1"), ("t", "<f8"), ("v", dt, (nch,))]), n, pos)
        if np.all(rows["f"] != 0):
            stamps = rows["t"].astype(np.float64)
            block = rows["v"]
    elif rest == 9 + width + (n - 1) * (1 + width) and buf[pos] != 0:
        rows = np.frombuffer(
            buf, np.dtype([("f", "u1"), ("v", dt, (nch,))]), n - 1, pos + 9 + width
        )
        if np.all(rows["f"] == 0):
            first = struct.unpack_from("<d", buf, pos + 1)[0]
            stamps = np.concatenate(([first], _deduced(first, s.tdiff, n - 1)))
            head = np.frombuffer(buf, dt, nch, pos + 9).reshape(1, nch)
            block = np.concatenate((head, rows["v"]))
    elif rest == n * (1 + width):
        rows = np.frombuffer(buf, np.dtype([("f", "u1"), ("v", dt, (nch,))]), n, pos)
        if np.all(rows["f"] == 0):
            stamps = _deduced(s._last_timestamp, s.tdiff, n)
            block = rows["v"]
    if stamps is None or block is None:
        stamps, starts = _mixed_stamps(s, buf, pos, n, width)
        values = _gather(buf, starts, dt, nch, keep, out_dtype)
    else:
        values = _pick(block, keep)
    s._last_timestamp = float(stamps[-1]) if len(stamps) else s._last_timestamp
    return stamps, values


_DOUBLE = struct.Struct("<d")


def _mixed_stamps(
    s: ScannedStream, buf: bytes, pos: int, n: int, width: int
) -> tuple[np.ndarray, np.ndarray]:
    """Sample by sample, for chunks that mix stored and deduced timestamps: each timestamp and
    the byte offset of each sample's values (deduced ones added one by one, as pyxdf does)."""
    unpack = _DOUBLE.unpack_from
    tdiff = s.tdiff
    last = s._last_timestamp
    stamps = [0.0] * n
    starts = [0] * n
    for k in range(n):
        if buf[pos]:
            last = unpack(buf, pos + 1)[0]
            pos += 9
        else:
            last += tdiff
            pos += 1
        stamps[k] = last
        starts[k] = pos
        pos += width
    if pos > len(buf):
        raise XdfFormatError("a samples chunk is shorter than its samples")
    return np.array(stamps), np.array(starts, dtype=np.int64)


def _gather(
    buf: bytes, starts: np.ndarray, dt: np.dtype, nch: int, keep: Keep, out_dtype: np.dtype
) -> np.ndarray:
    """The kept channels of samples whose values start at ``starts`` (only their bytes read)."""
    cols = list(range(nch)) if isinstance(keep, _All) else list(keep or ())
    if not cols:
        return np.zeros((len(starts), 0), dtype=out_dtype)
    size = dt.itemsize
    offsets = (np.asarray(cols)[:, None] * size + np.arange(size)).ravel()
    picked = np.frombuffer(buf, np.uint8)[starts[:, None] + offsets]
    return picked.view(dt).reshape(len(starts), len(cols)).astype(out_dtype)


def _pick(block: np.ndarray, keep: Keep) -> np.ndarray:
    """The kept columns of a decoded chunk (every one: the chunk itself, not copied)."""
    if isinstance(keep, _All):
        return block
    return block[:, list(keep or ())]


def _string_chunk(s: ScannedStream, buf: bytes, keep: Keep) -> tuple[np.ndarray, list[list[str]]]:
    n, pos = _varlen_from(buf, 0)
    stamps = np.zeros(n)
    values: list[list[str]] = []
    wanted = range(s.channel_count) if isinstance(keep, _All) else tuple(keep or ())
    last = s._last_timestamp
    for k in range(n):
        if buf[pos] != 0:
            last = struct.unpack_from("<d", buf, pos + 1)[0]
            pos += 9
        else:
            last = last + s.tdiff
            pos += 1
        stamps[k] = last
        row: list[str] = []
        for _ in range(s.channel_count):
            size, pos = _varlen_from(buf, pos)
            if pos + size > len(buf):
                raise XdfFormatError("a string sample runs past its chunk")
            row.append(bytes(buf[pos : pos + size]).decode(errors="replace"))
            pos += size
        values.append([row[c] for c in wanted])
    s._last_timestamp = last
    return stamps, values


# --------------------------------------------------------------------------------------------
# The pass over the file


def scan_xdf(
    path: str | Path,
    select: Select | None = None,
    *,
    numeric_dtype: np.dtype | type | None = None,
    synchronize_clocks: bool = True,
) -> XdfScan:
    """Read an XDF file in one pass, keeping the values ``select`` names.

    Parameters
    ----------
    path : str or Path
        The ``.xdf`` file (checked to start with ``XDF:``).
    select : Select, optional
        What to keep; default :meth:`Select.everything`.
    numeric_dtype : numpy dtype, optional
        Convert kept numeric channels to this type chunk by chunk (e.g. ``np.float32``);
        default: the stream's own format.
    synchronize_clocks : bool
        Map timestamps onto the recorder's clock as pyxdf does (default on).

    Returns
    -------
    XdfScan

    Raises
    ------
    XdfFormatError
        A stream header that is not XML, a ClockOffset chunk of an unknown stream, or bytes
        that are not XDF where a chunk must start. Damage inside a samples chunk or a footer is
        skipped up to the next Boundary chunk and noted (pyxdf's recovery).
    """
    select = select or Select.everything()
    dtype = np.dtype(numeric_dtype) if numeric_dtype is not None else None
    streams: dict[int, ScannedStream] = {}
    keeps: dict[int, Keep] = {}
    notes: list[str] = []
    damage: str | None = None
    intact = 0
    with Path(path).open("rb") as f:
        size = os.fstat(f.fileno()).st_size
        if f.read(len(XDF_MAGIC)) != XDF_MAGIC:
            raise XdfFormatError("the file does not start with 'XDF:'")
        while True:
            at = f.tell()
            try:
                chunklen = _read_varlen(f)
            except EOFError:
                break
            except XdfFormatError as exc:
                f.seek(at)
                width = f.read(1)[0]
                if damage is None:
                    damage = (
                        f"the file ends inside the length of chunk {intact + 1}"
                        if width in VARLEN_WIDTHS
                        else f"byte {at} does not start an XDF chunk (length width {width}, "
                        "expected 1, 4 or 8)"
                    )
                notes.append(f"{exc} at byte {at}; skipped to the next boundary chunk.")
                if f.read(1):
                    f.seek(-1, 1)
                    if _scan_forward(f):
                        continue
                break
            tag_raw = f.read(2)
            if len(tag_raw) < 2:
                damage = damage or f"the file ends inside the tag of chunk {intact + 1}"
                break
            tag = struct.unpack("<H", tag_raw)[0]
            end = f.tell() + chunklen - 2
            if damage is None:
                if tag not in KNOWN_TAGS or chunklen < 2:
                    damage = f"chunk {intact + 1} at byte {at} has an unknown tag {tag}"
                elif end > size:
                    damage = (
                        f"chunk {intact + 1} at byte {at} needs {end - size} more bytes than "
                        "the file has"
                    )
                else:
                    intact += 1
            if chunklen < 2:
                break
            content_len = chunklen - 2
            sid = -1
            if tag in STREAM_TAGS:
                raw_id = f.read(4)
                if len(raw_id) < 4:
                    break
                sid = struct.unpack("<I", raw_id)[0]
                content_len -= 4
                if sid in keeps and keeps[sid] is None:
                    f.seek(content_len, 1)
                    continue
            if end > size and tag != TAG_SAMPLES:
                break  # a header, offset or footer cut short by the end of the file
            if tag == TAG_STREAM_HEADER:
                _read_header(f, sid, content_len, select, dtype, streams, keeps)
            elif tag == TAG_SAMPLES:
                start = f.tell()
                buf = f.read(content_len)
                try:
                    s = streams[sid]
                    if len(buf) < content_len:
                        raise XdfFormatError("the file ends inside a samples chunk")
                    if s.is_string:
                        stamps, values = _string_chunk(s, buf, keeps[sid])
                    else:
                        stamps, values = _numeric_chunk(s, buf, keeps[sid])
                except (KeyError, IndexError, ValueError, struct.error) as exc:
                    notes.append(
                        f"found likely XDF file corruption in the samples chunk at byte {at} "
                        f"({type(exc).__name__}: {exc}); skipped to the next boundary chunk."
                    )
                    f.seek(start)
                    _scan_forward(f)
                    continue
                s.add(stamps, values)
            elif tag == TAG_CLOCK_OFFSET:
                raw = f.read(content_len)
                if len(raw) < 16:
                    break
                if sid not in streams:
                    raise XdfFormatError(f"a clock offset at byte {at} names unknown stream {sid}")
                t, v = struct.unpack_from("<dd", raw)
                streams[sid].clock_times.append(t)
                streams[sid].clock_values.append(v)
            elif tag == TAG_STREAM_FOOTER:
                raw = f.read(content_len)
                try:
                    footer = xml_to_dict(fromstring(raw))
                except ParseError as exc:
                    notes.append(
                        f"found likely XDF file corruption ({exc}), ignoring corrupted XML "
                        "element in footer."
                    )
                    continue
                if sid in streams:
                    streams[sid].footer = footer
            else:
                f.seek(content_len, 1)
    for s in streams.values():
        _finish(s)
    if synchronize_clocks:
        notes.extend(_truncate_corrupted_offsets(streams.values()))
        notes.extend(_clock_sync(streams.values()))
    return XdfScan(streams, notes, damage, intact)


def _read_header(
    f: BinaryIO,
    sid: int,
    length: int,
    select: Select,
    dtype: np.dtype | None,
    streams: dict[int, ScannedStream],
    keeps: dict[int, Keep],
) -> None:
    raw = f.read(length)
    try:
        header = xml_to_dict(fromstring(raw.decode("utf-8", "replace")))
    except ParseError as exc:
        raise XdfFormatError(f"the header of stream {sid} is not XML ({exc})") from exc
    fields = text_fields(header)
    fmt = fields.get("channel_format", "")
    if fmt != STRING_FORMAT and fmt not in FORMATS:
        raise XdfFormatError(f"stream {sid} has an unknown channel_format {fmt!r}")
    try:
        nch = int(fields.get("channel_count", ""))
        srate = float(fields.get("nominal_srate", ""))
    except ValueError as exc:
        raise XdfFormatError(f"the header of stream {sid} lacks a number ({exc})") from exc
    keep = select.keep(fields, sid)
    keeps[sid] = keep
    if keep is None:
        return
    kept = tuple(range(nch)) if isinstance(keep, _All) else tuple(c for c in keep if c < nch)
    if not isinstance(keep, _All):
        keeps[sid] = kept
    streams[sid] = ScannedStream(
        stream_id=sid,
        header=header,
        channel_format=fmt,
        channel_count=nch,
        srate=srate,
        kept=kept,
        numeric_dtype=dtype,
    )


def _finish(s: ScannedStream) -> None:
    """Join the chunks (pyxdf's empty shapes for a stream without samples)."""
    if s._stamps is not None:
        s.time_stamps = s._stamps.join()
        if s.is_string:
            s.values = s._strings
        else:
            assert s._rows is not None  # set with the first chunk
            s.values = s._rows.join()
    else:
        s.time_stamps = np.zeros((0,))
        s.values = [] if s.is_string else np.zeros((0, len(s.kept)), dtype=s.numeric_dtype)
    s._stamps = None
    s._rows = None
    s._strings = []


# --------------------------------------------------------------------------------------------
# Clock synchronisation, as pyxdf 1.17 applies it (pyxdf is BSD-2-licensed; the procedure below
# follows its _truncate_corrupted_offsets, _detect_clock_resets, _clock_sync and _robust_fit so
# that timestamps agree with pyxdf's to rounding).


def _corrupted_last_offset(times: np.ndarray, values: np.ndarray) -> bool:
    """pyxdf's test for an anomalous last clock offset (time interval or MAD z-score)."""
    if len(times) < 3:
        return False
    intervals = np.diff(times)
    median_interval = np.median(intervals[:-1])
    last_interval = np.abs(intervals[-1])
    if median_interval > 0:
        ratio = last_interval / median_interval
    else:
        ratio = np.inf if last_interval > 0 else 1.0
    median_val = np.median(values[:-1])
    mad = np.median(np.abs(values[:-1] - median_val))
    z = np.abs(values[-1] - median_val) / (MAD_TO_SD * mad) if mad > np.finfo(float).eps else 0.0
    return bool(ratio > CORRUPT_TIME_RATIO or z > CORRUPT_VALUE_Z)


def _truncate_corrupted_offsets(streams: Iterable[ScannedStream]) -> list[str]:
    """Drop the extra samples and the last clock offset that a closing outlet leaves
    (pylsl#67): only when the samples exceed the footer's count and that offset is anomalous."""
    notes = []
    for s in streams:
        footer = (s.footer or {}).get("info") or {}
        count = footer.get("sample_count", [None])[0] if isinstance(footer, dict) else None
        if count is None:
            continue
        n_footer = int(count)
        if len(s.time_stamps) <= n_footer or len(s.clock_times) < 3:
            continue
        if not _corrupted_last_offset(np.asarray(s.clock_times), np.asarray(s.clock_values)):
            continue
        notes.append(
            f"Stream {s.stream_id}: last clock offset is statistically anomalous, truncating "
            "(see pylsl#67, liblsl#246)."
        )
        s.clock_times = s.clock_times[:-1]
        s.clock_values = s.clock_values[:-1]
        notes.append(
            f"Stream {s.stream_id}: sample count ({len(s.time_stamps)}) exceeds footer "
            f"sample_count ({n_footer}), truncating extra samples."
        )
        s.time_stamps = s.time_stamps[:n_footer]
        s.values = s.values[:n_footer]
    return notes


def _glitches(diff: np.ndarray, thresh_stds: float, thresh_secs: float) -> np.ndarray:
    median = np.median(diff)
    shifted = diff - median
    mad = np.median(np.abs(shifted)) + np.finfo(float).eps
    return (np.abs(shifted / mad) > thresh_stds) & (np.abs(shifted) > thresh_secs)


def clock_reset_ranges(times: Sequence[float], values: Sequence[float]) -> list[tuple[int, int]]:
    """Inclusive index ranges of the clock offsets between clock resets (pyxdf's rule: the
    measurement time goes backwards, or both a time gap and a value jump stand out)."""
    time_diff = np.diff(times)
    value_diff = np.diff(values)
    resets = (time_diff < 0) | (
        _glitches(time_diff, RESET_THRESHOLD_STDS, RESET_THRESHOLD_SECONDS)
        & _glitches(value_diff, RESET_THRESHOLD_OFFSET_STDS, RESET_THRESHOLD_OFFSET_SECONDS)
    )
    cuts = np.where(resets)[0]
    starts = np.hstack(([0], cuts + 1))
    ends = np.hstack((cuts, len(resets)))
    return list(zip(starts.tolist(), ends.tolist(), strict=True))


def robust_fit(a: np.ndarray, y: np.ndarray, rho: float = 1, iters: int = ROBUST_FIT_ITERATIONS):
    """Huber-loss linear regression by ADMM (Boyd et al.), step for step as pyxdf's."""
    a = np.copy(a)
    offset = np.min(a[:, 1])
    a[:, 1] -= offset
    aty = np.dot(a.T, y)
    lower = np.linalg.cholesky(np.dot(a.T, a))
    upper = lower.T
    z = np.zeros_like(y)
    u = z
    x = z
    for _ in range(iters):
        x = np.linalg.solve(upper, (np.linalg.solve(lower, aty + np.dot(a.T, z - u))))
        d = np.dot(a, x) - y + u
        d_inv = np.zeros_like(d)
        np.divide(1, d, out=d_inv, where=d != 0)
        tmp = np.maximum(0, (1 - (1 + 1 / rho) * np.abs(d_inv)))
        z = rho / (1 + rho) * d + 1 / (1 + rho) * tmp * d
        u = d - z
    x[0] -= x[1] * offset
    return x


def _clock_sync(streams: Iterable[ScannedStream]) -> list[str]:
    notes = []
    for s in streams:
        times, values = s.clock_times, s.clock_values
        if not len(s.time_stamps) or not times:
            continue
        ranges = clock_reset_ranges(times, values) if len(times) > 1 else [(0, len(times) - 1)]
        coef: list[Any] = []
        for first, last in ranges:
            if first != last:
                stop = last + 1
                design = np.column_stack(
                    [np.ones(stop - first), np.array(times[first:stop]) / WINSOR_THRESHOLD]
                )
                target = np.array(values[first:stop]) / WINSOR_THRESHOLD
                try:
                    fitted = robust_fit(design, target)
                    fitted[0] *= WINSOR_THRESHOLD
                except np.linalg.LinAlgError:
                    notes.append(
                        f"Stream {s.stream_id}: Clock offsets {(first, last)} cannot be used "
                        "for synchronization"
                    )
                    fitted = [0, 0]
                coef.append(fitted)
            else:
                coef.append((values[first], 0))
        ts = s.time_stamps
        if len(ranges) == 1:
            ts += coef[0][0] + (coef[0][1] * ts)
            s.clock_segments.append((0, len(ts) - 1))
            continue
        ts_start = 0
        for c, (first, last) in zip(coef, ranges, strict=True):
            stop = last + 1
            if stop < len(times):
                # Break at the first timestamp closer to the next segment's first offset time.
                cond = np.less(
                    np.abs(ts[ts_start:] - times[last]), np.abs(ts[ts_start:] - times[stop])
                )
                ts_stop = ts_start + len(cond) if all(cond) else ts_start + np.argmin(cond).item()
            else:
                ts_stop = len(ts)
            if ts_start == ts_stop:
                notes.append(
                    f"Stream {s.stream_id}: No samples in clock offsets {(first, last)}, "
                    "skipping..."
                )
            else:
                s.clock_segments.append((ts_start, ts_stop - 1))
                piece = slice(ts_start, ts_stop)
                ts_start = ts_stop
                ts[piece] += c[0] + c[1] * ts[piece]
        notes.append(
            f"Stream {s.stream_id}: its clock was reset during the recording; its timestamps "
            f"were synchronised in {len(s.clock_segments)} segments."
        )
    return notes
