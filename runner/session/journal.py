"""The session journal: an append-only JSON-lines file, the single source of truth of a session.

Line 1 is the header. Every line carries ``seq`` (0, 1, 2, ...), ``prev`` (the previous line's
hash) and, last, ``h``: the first 32 hex digits of sha256 over the previous hash and the line's
text without its ``h`` field. A truncated, edited, removed or reordered line therefore breaks the
chain at a line that can be named. Lines are flushed at once and fsynced at every trial end and on
every exit path.
"""

from __future__ import annotations

import hashlib
import json
import os
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from runner.errors import JournalError, SessionExistsError, StorageError

JOURNAL_NAME = "journal.jsonl"
JOURNAL_FORMAT = "trialdeck-journal/1"
GENESIS = "0" * 32
HASH_CHARS = 32


def line_hash(prev: str, body: str) -> str:
    """Hash of one journal line: sha256(prev + body), first 32 hex digits."""
    return hashlib.sha256((prev + body).encode("utf-8")).hexdigest()[:HASH_CHARS]


def encode_line(record: dict[str, Any], seq: int, prev: str) -> tuple[str, str]:
    """Serialise a record with its chain fields. Returns (line without newline, its hash)."""
    obj = {"seq": seq, "prev": prev, **record}
    body = json.dumps(obj, ensure_ascii=False, separators=(",", ":"), allow_nan=False)
    h = line_hash(prev, body)
    return body[:-1] + f',"h":"{h}"}}', h


def split_hash(line: str) -> tuple[str, str] | None:
    """Split a raw line into (body as hashed, hash), or None when it has no trailing hash field."""
    tail = len(',"h":"') + HASH_CHARS + len('"}')
    if len(line) < tail or not line.endswith('"}') or line[-tail : -HASH_CHARS - 2] != ',"h":"':
        return None
    return line[:-tail] + "}", line[-HASH_CHARS - 2 : -2]


class Journal:
    """Writer of one session's journal.

    Use :meth:`create` for a new session (refuses an existing journal) or :meth:`reopen` to
    continue one (resume). Every :meth:`append` writes and flushes one line; :meth:`sync` fsyncs.
    """

    def __init__(self, path: Path, handle: Any, seq: int, prev: str):
        self.path = path
        self._fh = handle
        self._seq = seq
        self._prev = prev
        self.closed = False

    @classmethod
    def create(cls, folder: Path, header: dict[str, Any]) -> Journal:
        """Create ``folder`` and its journal with ``header`` as line 1; never overwrite."""
        path = folder / JOURNAL_NAME
        if path.exists():
            raise SessionExistsError(
                f"a session already exists at {folder}; trialdeck never overwrites a session."
                " Use another --session label, or --resume to continue an interrupted one."
            )
        try:
            folder.mkdir(parents=True, exist_ok=True)
            fh = open(path, "x", encoding="utf-8")  # noqa: SIM115 - lives as long as the session
        except FileExistsError:
            raise SessionExistsError(
                f"a session already exists at {folder}; trialdeck never overwrites a session."
            ) from None
        except OSError as exc:
            raise StorageError(
                f"cannot create the session folder {folder}: {exc.strerror}."
            ) from None
        journal = cls(path, fh, 0, GENESIS)
        journal.append("header", format=JOURNAL_FORMAT, **header)
        journal.sync()
        return journal

    @classmethod
    def reopen(cls, path: Path) -> Journal:
        """Open an existing journal for appending after its last intact line.

        A torn last line (a crash mid-write) is cut off first, so the chain continues cleanly; the
        cut bytes are returned in the ``torn`` attribute for the caller to journal.
        """
        read = read_journal(path)
        if read.header is None:
            raise JournalError(f"{path} has no readable header line; it cannot be resumed.")
        if read.chain_errors:
            raise JournalError(
                f"{path} fails its integrity check ({read.chain_errors[0]}); it cannot be resumed."
            )
        good_bytes = read.good_bytes
        torn = b""
        with open(path, "rb") as fh:
            data = fh.read()
        if len(data) > good_bytes:
            torn = data[good_bytes:]
            with open(path, "r+b") as fh:
                fh.truncate(good_bytes)
                fh.flush()
                os.fsync(fh.fileno())
        fh2 = open(path, "a", encoding="utf-8")  # noqa: SIM115
        last = read.records[-1]
        journal = cls(path, fh2, int(last["seq"]) + 1, str(last["h"]))
        journal.torn = torn
        return journal

    @property
    def next_seq(self) -> int:
        return self._seq

    def append(self, event: str, **fields: Any) -> dict[str, Any]:
        """Write one event line and flush it to the operating system. Returns the record."""
        if self.closed:
            raise JournalError("the journal is already closed")
        record = {"event": event, **fields}
        line, h = encode_line(record, self._seq, self._prev)
        try:
            self._fh.write(line + "\n")
            self._fh.flush()
        except OSError as exc:
            raise StorageError(f"writing the journal failed: {exc.strerror or exc}.") from exc
        self._seq += 1
        self._prev = h
        return record

    def sync(self) -> None:
        """Make everything written so far durable (fsync)."""
        try:
            self._fh.flush()
            os.fsync(self._fh.fileno())
        except OSError as exc:
            raise StorageError(
                f"saving the journal to disk failed: {exc.strerror or exc}."
            ) from exc

    def close(self) -> None:
        if not self.closed:
            try:
                self.sync()
            finally:
                self._fh.close()
                self.closed = True


@dataclass
class JournalRead:
    """What :func:`read_journal` found. ``records`` are the intact lines up to the first break."""

    path: Path
    header: dict[str, Any] | None
    records: list[dict[str, Any]] = field(default_factory=list)
    chain_errors: list[str] = field(default_factory=list)
    torn_tail: bool = False
    good_bytes: int = 0

    def events(self, *names: str) -> Iterator[dict[str, Any]]:
        for r in self.records:
            if not names or r.get("event") in names:
                yield r


def read_journal(path: Path) -> JournalRead:
    """Read a journal and verify its chain.

    A last line without a newline that does not parse is a torn write (crash) and is reported in
    ``torn_tail`` rather than as corruption; every other break is listed in ``chain_errors`` with
    its line number, and reading stops there.
    """
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise JournalError(f"there is no journal at {path}.") from None
    except OSError as exc:
        raise JournalError(f"the journal {path} cannot be read: {exc.strerror}.") from None
    out = JournalRead(path=path, header=None)
    prev = GENESIS
    offset = 0
    lines = data.split(b"\n")
    for n, raw in enumerate(lines, start=1):
        is_last = n == len(lines)
        if is_last and raw == b"":
            break
        end = offset + len(raw) + (0 if is_last else 1)
        try:
            text = raw.decode("utf-8")
            parts = split_hash(text)
            obj = json.loads(text)
        except (UnicodeDecodeError, json.JSONDecodeError):
            if is_last:
                out.torn_tail = True
            else:
                out.chain_errors.append(f"line {n} is not a complete JSON line")
            break
        if parts is None or not isinstance(obj, dict):
            out.chain_errors.append(f"line {n} has no integrity hash")
            break
        body, h = parts
        if obj.get("seq") != n - 1:
            out.chain_errors.append(
                f"line {n} has sequence number {obj.get('seq')!r}, expected {n - 1} (a line was removed, added or moved)"
            )
            break
        if obj.get("prev") != prev:
            out.chain_errors.append(
                f"line {n} does not follow line {n - 1} (a line was removed, added or moved)"
            )
            break
        if line_hash(prev, body) != h:
            out.chain_errors.append(
                f"line {n} was changed after it was written (its hash does not match)"
            )
            break
        if is_last:
            # A complete-looking line without its newline: written, but the newline was lost.
            out.torn_tail = True
            break
        out.records.append(obj)
        prev = h
        offset = end
        out.good_bytes = offset
    if out.records and out.records[0].get("event") == "header":
        out.header = out.records[0]
    elif out.records:
        out.chain_errors.insert(0, "line 1 is not a journal header")
    return out
