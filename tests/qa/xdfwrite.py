"""A small XDF writer for test fixtures (test code, not product code).

It follows the open XDF 1.0 specification: the magic ``XDF:``, then chunks. A chunk is a
variable-length byte count (one byte giving the width 1, 4 or 8, then a little-endian unsigned
integer of that width, counting tag + content), a little-endian uint16 tag, then the content.
Tags: 1 FileHeader, 2 StreamHeader, 3 Samples, 4 ClockOffset, 5 Boundary, 6 StreamFooter; tags
2, 3, 4 and 6 begin with a little-endian uint32 stream id.

pyxdf (``pyxdf.load_xdf``) is the reference reader the tests check these files against.
"""

from __future__ import annotations

import struct
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from xml.sax.saxutils import escape

import numpy as np

MAGIC = b"XDF:"

TAG_FILE_HEADER = 1
TAG_STREAM_HEADER = 2
TAG_SAMPLES = 3
TAG_CLOCK_OFFSET = 4
TAG_BOUNDARY = 5
TAG_STREAM_FOOTER = 6

# The fixed 16-byte UUID that starts every Boundary chunk (XDF specification, "Boundary chunk");
# readers scan for it to resynchronise after a damaged chunk. pyxdf's _scan_forward looks for the
# same bytes, which test_xdfwrite checks by damaging a chunk and watching pyxdf recover.
BOUNDARY_UUID = bytes(
    [
        0x43,
        0xA5,
        0x46,
        0xDC,
        0xCB,
        0xF5,
        0x41,
        0x0F,
        0xB3,
        0x0E,
        0xD5,
        0x46,
        0x73,
        0x83,
        0xCB,
        0xE4,
    ]
)

FILE_HEADER_XML = '<?xml version="1.0"?><info><version>1.0</version></info>'

# Little-endian numpy dtypes for the numeric channel formats of the specification.
NUMERIC_FORMATS: dict[str, str] = {
    "int8": "<i1",
    "int16": "<i2",
    "int32": "<i4",
    "int64": "<i8",
    "float32": "<f4",
    "double64": "<f8",
}

TIMESTAMP_PRESENT = b"\x08"
TIMESTAMP_DEDUCED = b"\x00"

DEFAULT_CHUNK_SAMPLES = 64
DEFAULT_BOUNDARY_EVERY = 8


@dataclass
class FixtureStream:
    """One stream to write: header fields, timestamps (source clock, seconds) and values.

    ``values`` is an array of shape (samples, channels) (or (samples,) for one channel) for
    numeric formats, or a list with one entry per sample for ``string`` streams; an entry is a
    ``str``, ``bytes`` (written as-is, to make garbled samples) or a list of those per channel.
    ``clock_offsets`` holds (collection_time, offset) pairs written as ClockOffset chunks.
    """

    stream_id: int
    name: str
    type: str
    channel_format: str
    nominal_srate: float
    timestamps: Sequence[float] | np.ndarray
    values: object
    source_id: str = ""
    created_at: float = 0.0
    channel_count: int | None = None
    clock_offsets: list[tuple[float, float]] = field(default_factory=list)
    footer_sample_count: int | None = None  # to imitate a footer that disagrees with the data
    desc_xml: str = ""  # inner XML of the header's <desc> (e.g. a marker stream's session identity)

    def channels(self) -> int:
        if self.channel_count is not None:
            return self.channel_count
        if self.channel_format == "string":
            first = self.values[0] if len(self.values) else ""  # type: ignore[arg-type]
            return len(first) if isinstance(first, list) else 1
        arr = np.asarray(self.values)
        return 1 if arr.ndim == 1 else int(arr.shape[1])


def varlen(n: int) -> bytes:
    """Encode a variable-length unsigned integer: width byte (1, 4 or 8), then LE unsigned."""
    if n < 0:
        raise ValueError("variable-length integers are unsigned")
    if n <= 0xFF:
        return b"\x01" + struct.pack("<B", n)
    if n <= 0xFFFFFFFF:
        return b"\x04" + struct.pack("<I", n)
    return b"\x08" + struct.pack("<Q", n)


def chunk(tag: int, content: bytes) -> bytes:
    """Frame ``content`` as a chunk; the length counts the 2-byte tag plus the content."""
    return varlen(len(content) + 2) + struct.pack("<H", tag) + content


def _fmt(x: float) -> str:
    # repr gives the shortest string that reads back to the same double.
    return repr(float(x))


def stream_header_xml(s: FixtureStream) -> str:
    fields = [
        ("name", s.name),
        ("type", s.type),
        ("channel_count", str(s.channels())),
        ("nominal_srate", _fmt(s.nominal_srate)),
        ("channel_format", s.channel_format),
        ("source_id", s.source_id),
        ("created_at", _fmt(s.created_at)),
    ]
    body = "".join(f"<{k}>{escape(v)}</{k}>" for k, v in fields)
    return f'<?xml version="1.0"?><info>{body}<desc>{s.desc_xml}</desc></info>'


def stream_footer_xml(s: FixtureStream) -> str:
    ts = np.asarray(s.timestamps, dtype=np.float64)
    count = len(ts) if s.footer_sample_count is None else s.footer_sample_count
    first = _fmt(ts[0]) if len(ts) else "0.0"
    last = _fmt(ts[-1]) if len(ts) else "0.0"
    offsets = "".join(
        f"<offset><time>{_fmt(t)}</time><value>{_fmt(v)}</value></offset>"
        for t, v in s.clock_offsets
    )
    return (
        '<?xml version="1.0"?><info>'
        f"<first_timestamp>{first}</first_timestamp><last_timestamp>{last}</last_timestamp>"
        f"<sample_count>{count}</sample_count><clock_offsets>{offsets}</clock_offsets></info>"
    )


def _string_bytes(entry: object, nch: int) -> list[bytes]:
    items = entry if isinstance(entry, list) else [entry]
    if len(items) != nch:
        raise ValueError(f"a string sample has {len(items)} channels, expected {nch}")
    return [x if isinstance(x, bytes) else str(x).encode("utf-8") for x in items]


def samples_content(s: FixtureStream, start: int, stop: int) -> bytes:
    """Content of one Samples chunk (stream id, count, samples) for samples [start, stop)."""
    ts = np.asarray(s.timestamps, dtype=np.float64)
    nch = s.channels()
    out = bytearray(struct.pack("<I", s.stream_id))
    out += varlen(stop - start)
    tdiff = 1.0 / float(s.nominal_srate) if s.nominal_srate > 0 else 0.0
    if s.channel_format == "string":
        rows: list[bytes] = []
        for k in range(start, stop):
            row = bytearray()
            for raw in _string_bytes(s.values[k], nch):  # type: ignore[index]
                row += varlen(len(raw)) + raw
            rows.append(bytes(row))
    else:
        # asarray (not astype) so a stream already in its format is not copied for every chunk.
        arr = np.asarray(s.values, dtype=NUMERIC_FORMATS[s.channel_format])
        arr = arr.reshape(len(ts), nch)
        rows = [arr[k].tobytes() for k in range(start, stop)]
    for i, k in enumerate(range(start, stop)):
        # Within a chunk, a timestamp exactly previous + 1/srate may be left out (byte 0):
        # that is the specification's compression and pyxdf reconstructs it the same way.
        if i > 0 and tdiff > 0 and ts[k] == ts[k - 1] + tdiff:
            out += TIMESTAMP_DEDUCED
        else:
            out += TIMESTAMP_PRESENT + struct.pack("<d", ts[k])
        out += rows[i]
    return bytes(out)


def write_xdf(
    path: str | Path,
    streams: list[FixtureStream],
    *,
    chunk_samples: int = DEFAULT_CHUNK_SAMPLES,
    boundary_every: int = DEFAULT_BOUNDARY_EVERY,
    footers: bool = True,
) -> Path:
    """Write ``streams`` to an XDF file at ``path`` and return the path.

    Headers come first, then Samples and ClockOffset chunks interleaved in time order as a
    recorder would write them, a Boundary chunk after every ``boundary_every`` data chunks, and
    StreamFooters at the end (unless ``footers`` is false, as when a recorder was killed).
    """
    path = Path(path)
    events: list[tuple[float, int, bytes]] = []
    order = 0
    for s in streams:
        ts = np.asarray(s.timestamps, dtype=np.float64)
        for start in range(0, len(ts), chunk_samples):
            stop = min(start + chunk_samples, len(ts))
            events.append(
                (float(ts[start]), order, chunk(TAG_SAMPLES, samples_content(s, start, stop)))
            )
            order += 1
        for t, v in s.clock_offsets:
            content = struct.pack("<I", s.stream_id) + struct.pack("<dd", t, v)
            events.append((float(t), order, chunk(TAG_CLOCK_OFFSET, content)))
            order += 1
    events.sort(key=lambda e: (e[0], e[1]))

    out = bytearray(MAGIC)
    out += chunk(TAG_FILE_HEADER, FILE_HEADER_XML.encode("utf-8"))
    for s in streams:
        content = struct.pack("<I", s.stream_id) + stream_header_xml(s).encode("utf-8")
        out += chunk(TAG_STREAM_HEADER, content)
    for i, (_, _, data) in enumerate(events, start=1):
        out += data
        if boundary_every > 0 and i % boundary_every == 0:
            out += chunk(TAG_BOUNDARY, BOUNDARY_UUID)
    if footers:
        for s in streams:
            content = struct.pack("<I", s.stream_id) + stream_footer_xml(s).encode("utf-8")
            out += chunk(TAG_STREAM_FOOTER, content)
    path.write_bytes(bytes(out))
    return path
