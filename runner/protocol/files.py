"""Input files as `check`, `pilot` and `run` read them: one rule for all three.

* Only regular files are read (a folder, FIFO, device or socket is refused before it is
  opened, so nothing hangs or reads without end), and never more than a size cap.
* A stimulus must be a PNG, JPEG, BMP or GIF image (:data:`STIMULUS_FORMATS`) that decodes
  completely, at most :data:`MAX_STIMULUS_PIXELS` pixels. SVG is refused: the presenter shows
  pixel images only, so a drawing is exported as PNG first.

docs/protocol.md ("Files and images") states the same limits.
"""

from __future__ import annotations

import os
import stat
import warnings
from dataclasses import dataclass
from pathlib import Path

from PIL import Image, UnidentifiedImageError

__all__ = [
    "MAX_STIMULUS_BYTES",
    "MAX_STIMULUS_PIXELS",
    "STIMULUS_FORMATS",
    "FileProblem",
    "ImageInfo",
    "check_image",
    "read_regular",
    "real_path",
    "regular_file",
]

#: Largest stimulus, in pixels (width x height): 50 megapixels, far above any screen, and
#: small enough that a decoded image (4 bytes a pixel, 200 MB) fits in memory mid-session.
MAX_STIMULUS_PIXELS = 50_000_000
#: Largest stimulus file read, in bytes.
MAX_STIMULUS_BYTES = 256 * 1024 * 1024
#: Image formats the presenter shows (Pillow's format names).
STIMULUS_FORMATS = ("PNG", "JPEG", "BMP", "GIF")

_KINDS = (
    (stat.S_ISDIR, "a folder"),
    (stat.S_ISFIFO, "a FIFO (named pipe)"),
    (stat.S_ISCHR, "a character device"),
    (stat.S_ISBLK, "a block device"),
    (stat.S_ISSOCK, "a socket"),
)


class FileProblem(Exception):
    """An input file that cannot be used; ``code`` is a key of ``runner.errors.PROBLEM_CODES``."""

    def __init__(self, code: str, message: str):
        self.code = code
        self.message = message
        super().__init__(message)


def real_path(path: Path) -> Path:
    """``path`` made absolute with links resolved; a loop of links stays unresolved (no error),
    so reading it then reports the loop."""
    return Path(os.path.realpath(path))


def regular_file(path: Path, what: str) -> os.stat_result:
    """The ``stat`` of ``path`` when it is a regular file (links followed), else FileProblem.

    Raises
    ------
    FileProblem
        ``missing-file``, ``not-a-file`` (a folder, FIFO, device or socket) or
        ``unreadable-file`` (for example a loop of symbolic links).
    """
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise FileProblem(code="missing-file", message=f"the {what} does not exist") from None
    except OSError as exc:
        raise FileProblem(
            code="unreadable-file", message=f"the {what} cannot be read ({exc.strerror or exc})"
        ) from None
    for test, kind in _KINDS:
        if test(st.st_mode):
            raise FileProblem(code="not-a-file", message=f"the {what} is {kind}, not a file")
    if not stat.S_ISREG(st.st_mode):
        raise FileProblem(code="not-a-file", message=f"the {what} is not a regular file")
    return st


def read_regular(path: Path, what: str, max_bytes: int) -> bytes:
    """The bytes of a regular file of at most ``max_bytes``.

    Raises
    ------
    FileProblem
        See :func:`regular_file`; ``file-too-large`` above ``max_bytes``.
    """
    st = regular_file(path, what)
    if st.st_size > max_bytes:
        raise FileProblem(
            code="file-too-large", message=f"the {what} is larger than {_size(max_bytes)}"
        )
    try:
        # O_NONBLOCK: should the file have become a FIFO since the check, opening does not wait.
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
        with os.fdopen(fd, "rb") as fh:
            data = fh.read(max_bytes + 1)
    except OSError as exc:
        raise FileProblem(
            code="unreadable-file", message=f"the {what} cannot be read ({exc.strerror or exc})"
        ) from None
    if len(data) > max_bytes:
        raise FileProblem(
            code="file-too-large", message=f"the {what} is larger than {_size(max_bytes)}"
        )
    return data


def _size(n: int) -> str:
    return f"{n // 2**20} MB" if n >= 2**20 else f"{n // 1024} kB"


@dataclass(frozen=True)
class ImageInfo:
    """A stimulus that decodes: its format and size in pixels."""

    format: str
    width: int
    height: int


_checked: dict[tuple[str, int, int], ImageInfo] = {}


def check_image(path: Path) -> ImageInfo:
    """Check that ``path`` is a stimulus the presenter can show, decoding it completely.

    Each file (by path, size and modification time) is decoded once per process.

    Raises
    ------
    FileProblem
        ``missing-file``, ``not-a-file``, ``unreadable-file``, ``file-too-large``;
        ``unsupported-image`` (SVG, text, or another format than :data:`STIMULUS_FORMATS`),
        ``image-too-large`` (above :data:`MAX_STIMULUS_PIXELS`) or ``undecodable-stimulus``
        (empty, truncated or damaged).
    """
    st = regular_file(path, "stimulus file")
    key = (str(path), st.st_size, st.st_mtime_ns)
    known = _checked.get(key)
    if known is not None:
        return known
    if st.st_size == 0:
        raise FileProblem(
            code="undecodable-stimulus", message="the stimulus file is empty (0 bytes)"
        )
    if st.st_size > MAX_STIMULUS_BYTES:
        raise FileProblem(
            code="file-too-large",
            message=f"the stimulus file is larger than {_size(MAX_STIMULUS_BYTES)}",
        )
    with open(path, "rb") as fh:
        head = fh.read(256)
    text = head.lstrip().lower()
    if text[:5] == b"<?xml" or text[:4] == b"<svg" or b"<svg" in text:
        raise FileProblem(
            code="unsupported-image",
            message="the stimulus is an SVG drawing; the presenter shows pixel images only, so export "
            "it as PNG",
        )
    info = _decode(path, head)
    _checked[key] = info
    return info


#: How files of :data:`STIMULUS_FORMATS` begin: such a file that does not decode is damaged.
_SIGNATURES = (b"\x89PNG", b"\xff\xd8\xff", b"BM", b"GIF8")


def _decode(path: Path, head: bytes) -> ImageInfo:
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            with Image.open(path) as img:
                fmt, (w, h) = str(img.format), img.size
                if fmt not in STIMULUS_FORMATS:
                    raise FileProblem(
                        code="unsupported-image",
                        message=f"the stimulus is a {fmt} image; use PNG, JPEG, BMP or GIF",
                    )
                if w * h > MAX_STIMULUS_PIXELS:
                    raise FileProblem(
                        code="image-too-large",
                        message=f"the stimulus is {w}x{h} px ({w * h / 1e6:.0f} megapixels), more than "
                        f"the {MAX_STIMULUS_PIXELS // 1_000_000} megapixels trialdeck shows; "
                        "scale it down",
                    )
                img.verify()
            with Image.open(path) as img:
                img.load()  # the whole image: a truncated file fails here, not mid-session
    except UnidentifiedImageError:
        if head.startswith(_SIGNATURES):
            raise FileProblem(
                code="undecodable-stimulus",
                message="the stimulus is a damaged image (it cannot be decoded)",
            ) from None
        raise FileProblem(
            code="unsupported-image", message="the stimulus is not an image (PNG, JPEG, BMP or GIF)"
        ) from None
    except (Image.DecompressionBombError, Image.DecompressionBombWarning):
        raise FileProblem(
            code="image-too-large",
            message=f"the stimulus has more than the {MAX_STIMULUS_PIXELS // 1_000_000} megapixels "
            "trialdeck shows; scale it down",
        ) from None
    except (OSError, ValueError, SyntaxError, EOFError) as exc:
        raise FileProblem(
            code="undecodable-stimulus",
            message=f"the stimulus cannot be decoded ({exc}); it may be truncated",
        ) from None
    return ImageInfo(fmt, w, h)
