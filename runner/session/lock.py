"""One writer per session: an exclusive lock on a file inside the session folder.

``run`` and ``pilot`` (new sessions and ``--resume``) hold :class:`SessionLock` for as long as
they may write the session's journal. The lock is ``fcntl.flock`` on ``<session>/session.lock``,
taken without waiting: a second process asking for it is refused at once, and the lock file
names the process that holds it (pid, host, mode and start time, one JSON object). The
operating system drops the lock when its holder ends in any way (a normal exit, an exception,
``kill -9``, a power cut), so a stale lock file never blocks a resume; the file itself is left in
place (removing it would let a third process lock a different file of the same name).

The same mechanism keeps two sessions on one machine from sending markers under one LSL
``source_id`` (:func:`claim_source_id`): each source_id in use is a lock file in a folder private
to the user.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import os
import socket
import tempfile
from pathlib import Path
from typing import Any

from runner.errors import SessionBusyError

try:
    import fcntl
except ImportError:  # pragma: no cover - Windows: no flock; sessions go unlocked
    fcntl = None  # type: ignore[assignment]

__all__ = ["SessionLock", "claim_source_id", "lock_holder", "stream_lock_folder"]

OPEN_LOCK = os.O_RDWR | os.O_CREAT | getattr(os, "O_CLOEXEC", 0)
LOCK_MODE = 0o644
# Where the source_id locks of this user live (tests point it at a private folder).
STREAM_LOCKS_ENV = "TRIALDECK_STREAM_LOCKS"


def lock_holder(path: Path) -> dict[str, Any]:
    """What the lock file at ``path`` says about its holder ({} when unreadable)."""
    try:
        data = json.loads(path.read_text(encoding="utf-8") or "{}")
    except (OSError, ValueError):
        return {}
    return data if isinstance(data, dict) else {}


def describe_holder(info: dict[str, Any]) -> str:
    """``process 1234 (pilot, started 2026-12-02T11:20:00+00:00 on host lab-3)``."""
    pid = info.get("pid", "?")
    parts = [str(info[k]) for k in ("mode",) if info.get(k)]
    if info.get("started"):
        parts.append(f"started {info['started']}")
    if info.get("host"):
        parts.append(f"on host {info['host']}")
    return f"process {pid}" + (f" ({', '.join(parts)})" if parts else "")


class SessionLock:
    """An exclusive, non-blocking ``flock`` on one lock file, held until :meth:`release`.

    Use as a context manager or call :meth:`acquire` / :meth:`release`. ``what`` names the
    locked thing in the refusal ("the session at ...").
    """

    def __init__(
        self, path: Path, *, what: str, mode: str = "", create: bool = True, record: bool = True
    ):
        self.path = path
        self.what = what
        self.mode = mode
        self.create = create
        self.record = record  # write this process into the lock file once it holds the lock
        self._fd: int | None = None

    @property
    def held(self) -> bool:
        return self._fd is not None

    def acquire(self) -> bool:
        """Take the lock; False when there is no lock file and ``create`` is off.

        Raises
        ------
        SessionBusyError
            Another process holds the lock (its pid and start time are named).
        """
        if fcntl is None or self._fd is not None:
            return True
        flags = OPEN_LOCK if self.create else OPEN_LOCK & ~os.O_CREAT
        try:
            fd = os.open(self.path, flags, LOCK_MODE)
        except FileNotFoundError:
            if self.create:
                raise
            return False
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(fd)
            raise SessionBusyError(
                f"{self.what} is in use by {describe_holder(lock_holder(self.path))}; only one"
                " process may write it. Wait for that process to end (or end it), then try"
                " again."
            ) from None
        except BaseException:
            os.close(fd)
            raise
        self._fd = fd
        if self.record:
            self.write_holder()
        return True

    def write_holder(self) -> None:
        """Write this process (pid, host, mode, start time) into the held lock file."""
        if self._fd is None:
            return
        info = {
            "pid": os.getpid(),
            "host": socket.gethostname(),
            "mode": self.mode,
            "started": _dt.datetime.now(_dt.UTC).astimezone().isoformat(timespec="seconds"),
        }
        data = (json.dumps(info) + "\n").encode("utf-8")
        os.ftruncate(self._fd, 0)
        os.pwrite(self._fd, data, 0)

    def release(self) -> None:
        """Drop the lock (closing the file releases the flock); safe to call twice."""
        fd, self._fd = self._fd, None
        if fd is not None:
            os.close(fd)

    def __enter__(self) -> SessionLock:
        self.acquire()
        return self

    def __exit__(self, *exc: object) -> None:
        self.release()


def stream_lock_folder() -> Path:
    """The folder of this user's source_id locks (``$TRIALDECK_STREAM_LOCKS`` or a temp folder)."""
    named = os.environ.get(STREAM_LOCKS_ENV)
    if named:
        return Path(named)
    uid = os.getuid() if hasattr(os, "getuid") else 0
    return Path(tempfile.gettempdir()) / f"trialdeck-streams-{uid}"


def claim_source_id(candidates: list[str], *, mode: str) -> tuple[str, SessionLock]:
    """The first of ``candidates`` no other session on this machine is sending under, locked.

    Raises
    ------
    SessionBusyError
        Every candidate is in use (the last holder is named).
    """
    folder = stream_lock_folder()
    folder.mkdir(parents=True, exist_ok=True)
    last: SessionBusyError | None = None
    for source_id in candidates:
        digest = hashlib.sha256(source_id.encode("utf-8")).hexdigest()[:32]
        lock = SessionLock(
            folder / f"{digest}.lock", what=f"the marker source_id {source_id!r}", mode=mode
        )
        try:
            lock.acquire()
        except SessionBusyError as exc:
            last = exc
            continue
        return source_id, lock
    assert last is not None
    raise last
