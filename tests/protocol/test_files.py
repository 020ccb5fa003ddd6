"""Input files as check and pilot read them: regular files only, size caps, image limits."""

from __future__ import annotations

import os
import struct
import zlib
from pathlib import Path

import pytest
from PIL import Image

from runner.protocol.files import (
    MAX_STIMULUS_PIXELS,
    FileProblem,
    check_image,
    read_regular,
)


def _png_header_only(width: int, height: int) -> bytes:
    """A PNG whose header claims ``width`` x ``height`` pixels and whose data is empty.

    Source: W3C PNG specification (signature, IHDR, IDAT, IEND chunks with CRC-32).
    """

    def chunk(tag: bytes, data: bytes) -> bytes:
        return struct.pack(">I", len(data)) + tag + data + struct.pack(">I", zlib.crc32(tag + data))

    ihdr = struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, 0)
    return (
        b"\x89PNG\r\n\x1a\n"
        + chunk(b"IHDR", ihdr)
        + chunk(b"IDAT", zlib.compress(b""))
        + chunk(b"IEND", b"")
    )


@pytest.mark.parametrize(
    ("size", "code"),
    [((20000, 20000), "image-too-large"), ((7072, 7072), "image-too-large")],
)
def test_images_above_the_pixel_limit_are_refused_before_decoding(tmp_path, size, code):
    """A header above MAX_STIMULUS_PIXELS (here 400 and 50.01 megapixels) is refused unread."""
    assert size[0] * size[1] > MAX_STIMULUS_PIXELS
    path = tmp_path / "huge.png"
    path.write_bytes(_png_header_only(*size))
    with pytest.raises(FileProblem) as info:
        check_image(path)
    assert info.value.code == code


def test_a_whole_image_passes_with_its_format_and_size(tmp_path):
    """A complete PNG and JPEG pass and report their format and size as Pillow reads them.

    Source: Pillow (the reference encoder writes the files).
    """
    for name, fmt in (("a.png", "PNG"), ("a.jpg", "JPEG")):
        Image.new("RGB", (31, 17), (120, 130, 140)).save(tmp_path / name)
        info = check_image(tmp_path / name)
        assert (info.format, info.width, info.height) == (fmt, 31, 17)


@pytest.mark.parametrize(
    ("make", "code"),
    [
        (lambda p: os.mkfifo(p), "not-a-file"),
        (lambda p: p.mkdir(), "not-a-file"),
        (lambda p: p.symlink_to("/dev/zero"), "not-a-file"),
        (lambda p: (p.symlink_to(p.name), None)[1], "unreadable-file"),
        (lambda p: None, "missing-file"),
        (lambda p: p.write_bytes(b"x" * 101), "file-too-large"),
    ],
    ids=["fifo", "folder", "dev-zero", "link-loop", "missing", "too-large"],
)
def test_only_regular_files_are_read_and_never_beyond_the_cap(tmp_path: Path, make, code):
    """Folders, FIFOs, devices and link loops are refused before opening; the cap holds."""
    path = tmp_path / "input"
    make(path)
    with pytest.raises(FileProblem) as info:
        read_regular(path, "trial table", 100)
    assert info.value.code == code
