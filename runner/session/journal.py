"""The session journal: an append-only JSON-lines file, the single source of truth of a session.

Line 1 is the header. Every line carries ``seq`` (0, 1, 2, ...), ``prev`` (the previous line's
hash) and, last, ``h``: the first 32 hex digits of sha256 over the previous hash and the line's
text without its ``h`` field. A truncated, edited, removed or reordered line therefore breaks the
chain at a line that can be named. Lines go to the operating system at once (a killed process loses
at most the line it was writing) and are fsynced at every trial end and on every exit path.
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from runner.errors import JournalError, SessionExistsError, StorageError

JOURNAL_NAME = "journal.jsonl"
JOURNAL_FORMAT = "trialdeck-journal/1"
GENESIS = "0" * 32
HASH_CHARS = 32
FILE_MODE = 0o644
# Read access too: a journal whose folder was removed is copied back from its open file.
OPEN_NEW = os.O_RDWR | os.O_APPEND | os.O_CREAT | os.O_EXCL | getattr(os, "O_CLOEXEC", 0)
OPEN_APPEND = os.O_RDWR | os.O_APPEND | getattr(os, "O_CLOEXEC", 0)
COPY_CHUNK = 1 << 20


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
    continue one (resume). Every :meth:`append` writes one whole line straight to the operating
    system (no user-space buffer, so a crash or kill loses at most the line being written);
    :meth:`sync` fsyncs.

    When a write fails (disk full, file-size limit, folder removed) and ``on_error`` is set, the
    journal cuts off any partial line, calls ``on_error(exc)`` and tries again when it returns,
    for as long as it returns; ``on_error`` gives up by raising. Once a write works again
    ``on_recover()`` is called (it may append). Without ``on_error`` a failed write raises
    :class:`StorageError`.
    """

    def __init__(self, path: Path, fd: int, seq: int, prev: str, offset: int):
        self.path = path
        self._fd = fd
        self._seq = seq
        self._prev = prev
        self._offset = offset  # bytes of complete lines in the file
        self.closed = False
        self.torn = b""
        self.on_error: Callable[[StorageError], None] | None = None
        self.on_recover: Callable[[], None] | None = None
        self._in_handler = False
        self._failed = False
        self.failures = 0

    @classmethod
    def create(cls, folder: Path, header: dict[str, Any]) -> Journal:
        """Create ``folder`` and its journal with ``header`` as line 1; never overwrite."""
        path = folder / JOURNAL_NAME
        if path.exists():
            raise SessionExistsError(
                f"a session already exists at {folder}; trialdeck never overwrites a session."
                " Use --resume to continue an interrupted session, or another --session label."
            )
        try:
            folder.mkdir(parents=True, exist_ok=True)
            fd = os.open(path, OPEN_NEW, FILE_MODE)
        except FileExistsError:
            raise SessionExistsError(
                f"a session already exists at {folder}; trialdeck never overwrites a session."
                " Use --resume to continue an interrupted session, or another --session label."
            ) from None
        except OSError as exc:
            raise StorageError(
                f"cannot create the session folder {folder}: {exc.strerror}."
            ) from None
        journal = cls(path, fd, 0, GENESIS, 0)
        journal.append("header", format=JOURNAL_FORMAT, **header)
        journal.sync()
        return journal

    @classmethod
    def reopen(cls, path: Path) -> Journal:
        """Open an existing journal for appending after its last intact line.

        A torn last line (a crash mid-write) is cut off first, so the chain continues cleanly; the
        cut bytes are kept in the ``torn`` attribute for the caller to journal.
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
        try:
            fd = os.open(path, OPEN_APPEND)
        except OSError as exc:
            raise StorageError(f"cannot open the journal {path}: {exc.strerror}.") from None
        last = read.records[-1]
        journal = cls(path, fd, int(last["seq"]) + 1, str(last["h"]), good_bytes)
        journal.torn = torn
        return journal

    @property
    def next_seq(self) -> int:
        return self._seq

    @property
    def last_hash(self) -> str:
        return self._prev

    def append(self, event: str, **fields: Any) -> dict[str, Any]:
        """Write one event line and hand it to the operating system. Returns the record."""
        if self.closed:
            raise JournalError("the journal is already closed")
        record = {"event": event, **fields}
        line, h = encode_line(record, self._seq, self._prev)
        data = (line + "\n").encode("utf-8")
        self._retrying(lambda: self._write_all(data), "writing the journal failed")
        self._offset += len(data)
        self._seq += 1
        self._prev = h
        self._recovered()
        return record

    def sync(self) -> None:
        """Make everything written so far durable (fsync)."""
        self._retrying(self._fsync, "saving the journal to disk failed")
        self._recovered()

    def close(self) -> None:
        if not self.closed:
            try:
                self.sync()
            finally:
                os.close(self._fd)
                self.closed = True

    # -- failure handling ---------------------------------------------------------------------
    def _write_all(self, data: bytes) -> None:
        self._check_linked()
        view = memoryview(data)
        while view:
            n = os.write(self._fd, view)
            view = view[n:]

    def _fsync(self) -> None:
        self._check_linked()
        os.fsync(self._fd)

    def _check_linked(self) -> None:
        # A removed session folder leaves an open file with no name: writes "succeed" but the
        # data would vanish when the file is closed, so treat it as a failed write.
        if os.fstat(self._fd).st_nlink == 0:
            raise FileNotFoundError(errno.ENOENT, "the session folder was removed")

    def _retrying(self, action: Callable[[], None], what: str) -> None:
        while True:
            try:
                if self._failed:
                    self._repair()
                action()
                return
            except OSError as exc:
                self._failed = True
                self.failures += 1
                err = StorageError(f"{what}: {exc.strerror or exc}.")
                if self.on_error is None or self._in_handler:
                    raise err from exc
                self._in_handler = True
                try:
                    self.on_error(err)
                finally:
                    self._in_handler = False

    def _repair(self) -> None:
        """Before a retry: cut a partial line, or rebuild a removed journal from the open file."""
        st = os.fstat(self._fd)
        if st.st_nlink == 0:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            new_fd = os.open(self.path, OPEN_NEW, FILE_MODE)
            try:
                done = 0
                while done < self._offset:
                    chunk = os.pread(self._fd, min(COPY_CHUNK, self._offset - done), done)
                    if not chunk:
                        break
                    os.write(new_fd, chunk)
                    done += len(chunk)
                os.fsync(new_fd)
            except OSError:
                os.close(new_fd)
                os.unlink(self.path)
                raise
            os.close(self._fd)
            self._fd = new_fd
        elif st.st_size > self._offset:
            os.ftruncate(self._fd, self._offset)

    def _recovered(self) -> None:
        if self._failed:
            self._failed = False
            if self.on_recover is not None:
                self.on_recover()


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
