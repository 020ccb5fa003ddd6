"""**Contract.** The journal line format.

UTF-8 JSON, one object per line. Every line starts ``{"seq":N,"prev":"<hash>","event":"<name>"``,
followed by ``"t"`` and then ``"trial"`` when the line has them (:data:`LEAD_FIELDS`), and ends
with ``,"h":"<hash>"}``: ``seq`` counts lines from 0 (the header), ``prev`` is the
previous line's ``h`` (32 zeros for the header), and ``h`` is the first 32 hex digits of sha256
over ``prev`` followed by the line's text without its ``,"h":"..."`` part.
"""

from __future__ import annotations

import hashlib
import json
import math
from typing import Any

JOURNAL_FORMAT = "trialdeck-journal/1"
GENESIS = "0" * 32
HASH_CHARS = 32
HASH_FIELD = ',"h":"'
LINE_END = '"}'
# Bytes of the trailing ,"h":"<hash>"} of every line.
HASH_TAIL = len(HASH_FIELD) + HASH_CHARS + len(LINE_END)
HASH_FIELD_B = HASH_FIELD.encode("ascii")
EVENT_FIELD_B = b',"event":"'
# Fields written right after seq and prev, in this order, whenever a line has them; readers may
# take an event's time and trial from this fixed prefix without decoding the whole line.
LEAD_FIELDS = ("event", "t", "trial")


def num(x: Any) -> float | None:
    """``x`` as a finite float, or None (journals are data from disk: never trust a type)."""
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        return None
    v = float(x)
    return v if math.isfinite(v) else None


def as_int(x: Any) -> int | None:
    """``x`` if it is an int (not a bool), else None."""
    return x if isinstance(x, int) and not isinstance(x, bool) else None


def line_hash(prev: str, body: str) -> str:
    """Hash of one journal line: sha256(prev + body), first 32 hex digits."""
    return hashlib.sha256((prev + body).encode("utf-8")).hexdigest()[:HASH_CHARS]


def line_hash_bytes(prev: bytes, raw: bytes) -> bytes:
    """The hash a raw line (without newline) should carry, from its bytes; ASCII hex."""
    body = raw[:-HASH_TAIL] + b"}"
    return hashlib.sha256(prev + body).hexdigest()[:HASH_CHARS].encode("ascii")


def encode_line(record: dict[str, Any], seq: int, prev: str) -> tuple[str, str]:
    """Serialise a record with its chain fields. Returns (line without newline, its hash)."""
    obj: dict[str, Any] = {"seq": seq, "prev": prev}
    for key in LEAD_FIELDS:
        if key in record:
            obj[key] = record[key]
    obj.update(record)  # keys already placed keep their place
    body = json.dumps(obj, ensure_ascii=False, separators=(",", ":"), allow_nan=False)
    h = line_hash(prev, body)
    return body[:-1] + f"{HASH_FIELD}{h}{LINE_END}", h


def split_hash(line: str) -> tuple[str, str] | None:
    """Split a raw line into (body as hashed, hash), or None when it has no trailing hash field."""
    if (
        len(line) < HASH_TAIL
        or not line.endswith(LINE_END)
        or line[-HASH_TAIL : -HASH_CHARS - 2] != HASH_FIELD
    ):
        return None
    return line[:-HASH_TAIL] + "}", line[-HASH_CHARS - 2 : -2]


def stored_hash(raw: bytes) -> bytes | None:
    """The ``h`` a raw line carries (ASCII bytes), or None when it has no trailing hash field."""
    if len(raw) < HASH_TAIL or not raw.endswith(b'"}'):
        return None
    if raw[-HASH_TAIL : -HASH_CHARS - 2] != HASH_FIELD_B:
        return None
    return raw[-HASH_CHARS - 2 : -2]


def line_event(raw: bytes) -> bytes:
    """The event name of a raw line, from its fixed prefix (empty when there is none)."""
    start = raw.find(EVENT_FIELD_B)
    if start < 0:
        return b""
    start += len(EVENT_FIELD_B)
    return raw[start : raw.find(b'"', start)]
