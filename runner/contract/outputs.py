"""**Contract.** The rules every writer of an output folder follows (export, summary, stimuli,
``--frames`` of pilot and replay, replay's contact sheet). Standard library only.

* A folder a command creates (or finds empty) is marked as its own: :data:`MARKER_NAME` names the
  command and lists the files it wrote, relative to the folder.
* An existing folder is refused unless it is empty, carries that command's own marker, or
  ``force`` is given. Re-writing a folder of its own first removes the files the marker lists, so
  no stale file stays; files the user added are kept.
* A session folder (one holding ``journal.jsonl``), a folder inside one, and a folder holding
  session folders are refused, also with ``force``.
* Deleting never follows a symbolic link (the link itself is removed; nothing is deleted through
  a linked folder), and nothing is written through a linked folder inside the output folder.
* Files are written to a temporary file created exclusively (``O_EXCL``, ``O_NOFOLLOW``) beside
  the target and renamed over it (:func:`replace_file`), so a link at the target or at the
  temporary name is never written through.

The refusals are :class:`OutputRefused` (a :class:`runner.errors.StorageError`, exit 1) with a
stable ``reason``; docs/sessions.md ("What each writer refuses") lists them.
"""

from __future__ import annotations

import contextlib
import io
import json
import os
import stat
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Any, Literal, overload

from runner.contract.layout import JOURNAL_NAME, TMP_SUFFIX
from runner.errors import StorageError

__all__ = [
    "MARKER_NAME",
    "REASONS",
    "OutputFolder",
    "OutputRefused",
    "ensure_folder",
    "prepare_output_folder",
    "refuse_session_area",
    "remove_file",
    "replace_file",
]

#: **contract**: the marker file a command leaves in an output folder it made.
MARKER_NAME = ".trialdeck-output.json"
#: Largest marker file read (a marker lists file names; a larger one is not trialdeck's).
MAX_MARKER_BYTES = 16 * 1024 * 1024
#: How deep below an output folder session folders are looked for
#: (``<out>/<study>/sub-<p>/ses-<s>/journal.jsonl`` is 4 deep; one more for a folder above it).
SESSION_SEARCH_DEPTH = 5
#: At most this many entries are looked at when searching for session folders.
SESSION_SEARCH_ENTRIES = 200_000

#: Why a writer refused an output folder (:attr:`OutputRefused.reason`).
REASONS = {
    "not-a-folder": "the output path exists and is not a folder",
    "not-empty": "the folder holds files this command did not make (use --force to write anyway)",
    "session-folder": "the folder is a session folder or lies inside one",
    "holds-sessions": "the folder holds session folders",
    "link": "a symbolic link lies where the writer would write or delete",
    "bad-marker": "the folder's marker file cannot be read",
}


class OutputRefused(StorageError):
    """An output folder that a writer will not write into; ``reason`` is a key of :data:`REASONS`."""

    def __init__(self, reason: str, message: str):
        if reason not in REASONS:
            raise ValueError(f"unknown reason {reason!r}")
        self.reason = reason
        super().__init__(message)


def _is_link(path: Path) -> bool:
    try:
        return stat.S_ISLNK(os.lstat(path).st_mode)
    except OSError:
        return False


def _has_journal(folder: Path) -> bool:
    return os.path.lexists(folder / JOURNAL_NAME)


def _holds_sessions(root: Path) -> Path | None:
    """The first session folder found below ``root`` (links not followed), or None."""
    seen = 0
    level = [root]
    for _ in range(SESSION_SEARCH_DEPTH):
        nxt: list[Path] = []
        for folder in level:
            try:
                entries = list(os.scandir(folder))
            except OSError:
                continue
            for entry in entries:
                seen += 1
                if seen > SESSION_SEARCH_ENTRIES:
                    return None
                if entry.name == JOURNAL_NAME and folder != root:
                    return folder
                if entry.is_dir(follow_symlinks=False):
                    nxt.append(Path(entry.path))
        level = nxt
    return None


def refuse_session_area(out: Path, *, what: str = "output") -> None:
    """Refuse ``out`` when it is a session folder, lies inside one, or holds session folders.

    Raises
    ------
    OutputRefused
        ``session-folder`` or ``holds-sessions``.
    """
    resolved = Path(os.path.realpath(out))
    for folder in (resolved, *resolved.parents):
        if _has_journal(folder):
            where = "is" if folder == resolved else "lies inside"
            raise OutputRefused(
                "session-folder",
                f"the {what} folder {out} {where} the session folder {folder}; trialdeck never "
                "writes into a session. Choose a folder outside the sessions.",
            )
    if resolved.is_dir():
        found = _holds_sessions(resolved)
        if found is not None:
            raise OutputRefused(
                "holds-sessions",
                f"the {what} folder {out} holds the session folder {found}; trialdeck never "
                "writes among sessions. Choose a new folder outside the sessions.",
            )


def _read_marker(out: Path) -> dict[str, Any] | None:
    path = out / MARKER_NAME
    try:
        st = os.lstat(path)
    except FileNotFoundError:
        return None
    except OSError as exc:
        raise OutputRefused("bad-marker", f"cannot read {path}: {exc.strerror}.") from None
    if not stat.S_ISREG(st.st_mode) or st.st_size > MAX_MARKER_BYTES:
        raise OutputRefused(
            "bad-marker",
            f"{path} is not a marker trialdeck wrote; remove it or choose a new folder.",
        )
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        raise OutputRefused(
            "bad-marker",
            f"{path} cannot be read as trialdeck's marker; remove it or choose a new folder.",
        ) from None
    if not isinstance(data, dict) or not isinstance(data.get("command"), str):
        raise OutputRefused("bad-marker", f"{path} is not a marker trialdeck wrote.")
    return data


def _safe_relative(name: object) -> tuple[str, ...] | None:
    """The parts of a marker's file name when it is a plain relative path inside the folder."""
    if not isinstance(name, str) or not name or "\x00" in name:
        return None
    parts = tuple(name.split("/"))
    if name.startswith("/") or any(p in ("", ".", "..") for p in parts):
        return None
    if parts == (MARKER_NAME,):
        return None
    return parts


def remove_file(root: Path, parts: tuple[str, ...]) -> bool:
    """Remove ``root/parts...`` without following links; True when something was removed.

    Every folder between ``root`` and the file must be a real folder (not a link), or nothing
    is removed; a link at the file's place is removed itself, its target is untouched; a folder
    there is left alone. Folders emptied by the removal are removed, up to ``root``.
    """
    folder = root
    for part in parts[:-1]:
        folder = folder / part
        try:
            if not stat.S_ISDIR(os.lstat(folder).st_mode):
                return False
        except OSError:
            return False
    target = folder / parts[-1]
    try:
        if stat.S_ISDIR(os.lstat(target).st_mode):
            return False
        os.unlink(target)
    except FileNotFoundError:
        return False
    while folder != root:
        try:
            os.rmdir(folder)
        except OSError:
            break
        folder = folder.parent
    return True


@dataclass
class OutputFolder:
    """An output folder a writer may write into (from :func:`prepare_output_folder`)."""

    root: Path
    command: str
    owned: bool  # created, found empty, or marked by the same command: the marker is kept
    created: bool
    removed: list[Path] = field(default_factory=list)

    def folder(self, *parts: str) -> Path:
        """``root/parts``, created when missing; see :func:`ensure_folder`."""
        return ensure_folder(self.root, parts)

    def finish(self, files: Iterable[Path]) -> None:
        """Record the files written (those inside the folder) in the marker, if the folder is ours."""
        if not self.owned:
            return
        root = Path(os.path.realpath(self.root))
        names: list[str] = []
        for f in files:
            p = Path(os.path.realpath(Path(f).parent)) / Path(f).name
            try:
                rel = p.relative_to(root)
            except ValueError:
                continue
            if rel.parts and rel.parts != (MARKER_NAME,):
                names.append("/".join(rel.parts))
        _write_marker(self.root, self.command, sorted(set(names)))


def ensure_folder(root: Path, parts: Iterable[str]) -> Path:
    """``root/parts``, each folder created when missing; a link or file on the way is refused.

    Raises
    ------
    OutputRefused
        ``link``: a part of the way is a symbolic link (or a file), so writing there could
        land outside ``root``.
    StorageError
        A folder cannot be created.
    """
    path = Path(root)
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise StorageError(f"cannot create the folder {path}: {exc.strerror}.") from None
    for part in parts:
        path = path / part
        try:
            st = os.lstat(path)
        except FileNotFoundError:
            try:
                os.mkdir(path)
            except FileExistsError:
                st = os.lstat(path)
            except OSError as exc:
                raise StorageError(f"cannot create the folder {path}: {exc.strerror}.") from None
            else:
                continue
        if not stat.S_ISDIR(st.st_mode):
            raise OutputRefused(
                "link",
                f"{path} is a symbolic link or a file, not a folder; trialdeck does not write "
                "through links. Remove it or choose a new output folder.",
            )
    return path


def _write_marker(root: Path, command: str, files: list[str]) -> None:
    text = json.dumps({"command": command, "files": files}, indent=1) + "\n"
    try:
        with replace_file(root / MARKER_NAME) as fh:
            fh.write(text)
    except OSError as exc:
        raise StorageError(f"cannot write {root / MARKER_NAME}: {exc.strerror}.") from None


def prepare_output_folder(
    out: str | Path,
    command: str,
    *,
    force: bool = False,
    keep: Iterable[Path] = (),
    what: str = "output",
) -> OutputFolder:
    """Check that ``command`` may write into ``out``, create it, and clear its earlier output.

    Parameters
    ----------
    out : str or Path
        The output folder.
    command : str
        The command writing it, as its marker names it (``"trialdeck export"``).
    force : bool
        Write into an existing folder that is not empty and not this command's own.
    keep : iterable of Path
        Files that do not make a folder "not empty" (a stimulus spec kept in its output folder).
    what : str
        What the folder is, for messages (``"export"``, ``"frames"``).

    Returns
    -------
    OutputFolder

    Raises
    ------
    OutputRefused
        See :data:`REASONS`.
    StorageError
        The folder cannot be created or its earlier output cannot be removed.
    """
    out = Path(out)
    try:
        st: os.stat_result | None = os.stat(out)
    except FileNotFoundError:
        st = None
    except OSError as exc:
        raise StorageError(f"cannot use the {what} folder {out}: {exc.strerror}.") from None
    if _is_link(out) and st is None:
        raise OutputRefused(
            "link",
            f"the {what} folder {out} is a broken symbolic link; remove it or choose another.",
        )
    if st is not None and not stat.S_ISDIR(st.st_mode):
        raise OutputRefused(
            "not-a-folder", f"the {what} path {out} exists and is not a folder; give a folder."
        )
    refuse_session_area(out, what=what)
    if st is None:
        try:
            out.mkdir(parents=True)
        except OSError as exc:
            raise StorageError(f"cannot create the {what} folder {out}: {exc.strerror}.") from None
        _write_marker(out, command, [])
        return OutputFolder(out, command, owned=True, created=True)
    kept = {os.path.realpath(k) for k in keep}
    try:
        marker = _read_marker(out)
    except OutputRefused:
        if not force:
            raise
        marker = None  # with --force an unreadable marker is written over, never followed
    try:
        others = [
            e.name
            for e in os.scandir(out)
            if e.name != MARKER_NAME and os.path.realpath(e.path) not in kept
        ]
    except OSError as exc:
        raise StorageError(f"cannot list the {what} folder {out}: {exc.strerror}.") from None
    ours = marker is not None and marker.get("command") == command
    if others and not ours and not force:
        made = f" (it was made by `{marker['command']}`)" if marker is not None else ""
        raise OutputRefused(
            "not-empty",
            f"the {what} folder {out} is not empty{made}; trialdeck does not write over files it "
            "did not make. Choose a new folder, or add --force to write into it anyway.",
        )
    folder = OutputFolder(out, command, owned=ours or not others, created=False)
    if ours and marker is not None:
        listed = marker.get("files")
        try:
            for name in listed if isinstance(listed, list) else []:
                parts = _safe_relative(name)
                if parts is not None and remove_file(out, parts):
                    folder.removed.append(out.joinpath(*parts))
        except OSError as exc:
            raise StorageError(
                f"cannot remove the earlier output in {out}: {exc.strerror}."
            ) from None
    if folder.owned:
        _write_marker(out, command, [])
    return folder


def _open_exclusive(tmp: Path) -> int:
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0)
    flags |= getattr(os, "O_BINARY", 0)
    try:
        return os.open(tmp, flags, 0o666)
    except FileExistsError:
        pass
    st = os.lstat(tmp)
    if stat.S_ISREG(st.st_mode) and st.st_nlink == 1:
        # A temporary file an interrupted write left behind: remove it (never through a link).
        os.unlink(tmp)
        return os.open(tmp, flags, 0o666)
    raise OutputRefused(
        "link",
        f"{tmp} already exists and is not a file trialdeck left (a link, a folder, or a linked "
        "file); trialdeck does not write through it. Remove it and try again.",
    )


@overload
def replace_file(
    path: Path, *, binary: Literal[False] = False, durable: bool = False
) -> contextlib.AbstractContextManager[IO[str]]: ...
@overload
def replace_file(
    path: Path, *, binary: Literal[True], durable: bool = False
) -> contextlib.AbstractContextManager[IO[bytes]]: ...
def replace_file(
    path: Path, *, binary: bool = False, durable: bool = False
) -> contextlib.AbstractContextManager[IO[Any]]:
    """Write ``path`` whole or not at all: a temporary file ``NAME.tmp`` beside it, created with
    ``O_EXCL`` (and ``O_NOFOLLOW``), is written, then renamed over ``path``.

    A link at ``path`` is replaced, not written through; a link (or folder) at ``NAME.tmp`` is
    refused; a plain ``NAME.tmp`` left by an interrupted write is removed first. ``durable``
    flushes the file to the disk before the rename. On an error the temporary file is removed.

    Raises
    ------
    OutputRefused
        ``link``: ``NAME.tmp`` exists and is not a left-over temporary file.
    OSError
        The file cannot be written.
    """
    return _replace_file(Path(path), binary, durable)


@contextlib.contextmanager
def _replace_file(path: Path, binary: bool, durable: bool) -> Iterator[IO[Any]]:
    tmp = path.with_name(path.name + TMP_SUFFIX)
    fd = _open_exclusive(tmp)
    done = False
    try:
        raw = os.fdopen(fd, "wb")
        fh: IO[Any] = raw if binary else io.TextIOWrapper(raw, encoding="utf-8", newline="")
        with fh:
            yield fh
            fh.flush()
            if durable:
                os.fsync(raw.fileno())
        os.replace(tmp, path)
        done = True
    finally:
        if not done:
            with contextlib.suppress(OSError):
                os.unlink(tmp)
