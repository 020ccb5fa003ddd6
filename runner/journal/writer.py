"""The journal writer: an append-only JSON-lines file, the single source of truth of a session.

Line 1 is the header. Every line carries ``seq`` (0, 1, 2, ...), ``prev`` (the previous line's
hash) and, last, ``h`` (the line format is :mod:`runner.contract.line`). A truncated, edited,
removed or reordered line therefore breaks the chain at a line that can be named. Lines go to the
operating system at once (a killed process loses at most the line it was writing) and are fsynced
at every trial end and on every exit path.
"""

from __future__ import annotations

import errno
import os
from collections.abc import Callable
from pathlib import Path
from typing import Any

from runner.contract.layout import JOURNAL_NAME
from runner.contract.line import GENESIS, JOURNAL_FORMAT, encode_line
from runner.errors import JournalError, SessionExistsError, StorageError
from runner.journal.read import read_journal

FILE_MODE = 0o644
# Read access too: a journal whose folder was removed is copied back from its open file.
OPEN_NEW = os.O_RDWR | os.O_APPEND | os.O_CREAT | os.O_EXCL | getattr(os, "O_CLOEXEC", 0)
OPEN_APPEND = os.O_RDWR | os.O_APPEND | getattr(os, "O_CLOEXEC", 0)
COPY_CHUNK = 1 << 20


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
