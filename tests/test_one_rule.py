"""One rule for input (issue 13 item 17): what `check` passes, `pilot` completes; what `check`
refuses, `pilot` refuses too and creates nothing for.

Every case copies the mini protocol, spoils (or varies) one thing, and runs `trialdeck check`
and `trialdeck pilot` as real commands with a time limit: neither may print a traceback or hang.
"""

from __future__ import annotations

import os
import shutil
import struct
import subprocess
import sys
import zlib
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import pytest
from conftest import REPO, TEST_DATA

pytestmark = pytest.mark.slow

LIMIT_S = 120  # far above a normal run (a few seconds); a hang fails instead of blocking CI


def _png_header_only(width: int, height: int) -> bytes:
    """A PNG whose header claims ``width`` x ``height`` pixels, with one empty data chunk.

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


def _edit(path: Path, old: str, new: str) -> None:
    text = path.read_text(encoding="utf-8")
    assert old in text, (path, old)
    path.write_text(text.replace(old, new), encoding="utf-8")


def _replace(path: Path, make: Callable[[Path], None]) -> None:
    path.unlink()
    make(path)


def _fifo(path: Path) -> None:
    os.mkfifo(path)


def _loop(path: Path) -> None:
    path.symlink_to(path.name + ".other")
    (path.parent / (path.name + ".other")).symlink_to(path.name)


def _dev_zero(path: Path) -> None:
    path.symlink_to("/dev/zero")


def _folder(path: Path) -> None:
    path.mkdir()


PAGE = '  - page: {text: "Welcome. Count the stops on the shortest route."}'
PAGE_FILE = "  - page: {file: welcome.md}"


def _page_file(p: Path) -> None:
    _edit(p / "mini.yaml", PAGE, PAGE_FILE)
    (p / "welcome.md").write_text("Welcome.\n", encoding="utf-8")


def _page_as(make: Callable[[Path], None]) -> Callable[[Path], None]:
    def setup(p: Path) -> None:
        _edit(p / "mini.yaml", PAGE, PAGE_FILE)
        make(p / "welcome.md")

    return setup


@dataclass
class Case:
    """A protocol folder change and whether `check` should pass it."""

    name: str
    setup: Callable[[Path], None]
    passes: bool
    protocol: str = "mini.yaml"


def _stimulus(make: Callable[[Path], None]) -> Callable[[Path], None]:
    return lambda p: _replace(p / "img" / "route3.png", make)


CASES = [
    Case("the mini protocol as it is", lambda p: None, True),
    Case(
        "a break key other than space",
        lambda p: _edit(p / "mini.yaml", "min_s: 1}", "min_s: 1, key: b}"),
        True,
    ),
    Case("a page read from a file", _page_file, True),
    Case(
        "a text file named .png",
        _stimulus(lambda f: f.write_text("not an image\n", encoding="utf-8")),
        False,
    ),
    Case(
        "a truncated png",
        _stimulus(
            lambda f: f.write_bytes((TEST_DATA / "mini" / "img" / "route3.png").read_bytes()[:300])
        ),
        False,
    ),
    Case("a 0-byte png", _stimulus(lambda f: f.write_bytes(b"")), False),
    Case(
        "an SVG drawing as stimulus",
        _stimulus(
            lambda f: f.write_text(
                '<svg xmlns="http://www.w3.org/2000/svg" width="40" height="40">'
                '<circle cx="20" cy="20" r="9"/></svg>\n',
                encoding="utf-8",
            )
        ),
        False,
    ),
    Case(
        "a 20000x20000 px png",
        _stimulus(lambda f: f.write_bytes(_png_header_only(20000, 20000))),
        False,
    ),
    Case("a stimulus that is a folder", _stimulus(_folder), False),
    Case("a stimulus that is a FIFO", _stimulus(_fifo), False),
    Case(
        "a 5000-digit integer in the table",
        lambda p: _edit(p / "table.csv", "img/route3.png,3,", "img/route3.png," + "9" * 5000 + ","),
        False,
    ),
    Case(
        "a 5000-digit integer in the protocol",
        lambda p: _edit(p / "mini.yaml", "max: 20", "max: " + "9" * 5000),
        False,
    ),
    Case(
        "a stray quote in the table",
        lambda p: _edit(p / "table.csv", "img/route2.png,2,main", 'img/route2.png,2,"main'),
        False,
    ),
    Case(
        "an empty blocking-factor cell",
        lambda p: _edit(
            p / "table.csv", "img/route4.png,4,main,6,sparse", "img/route4.png,4,main,6,"
        ),
        False,
    ),
    Case(
        "a semicolon-delimited table",
        lambda p: (p / "table.csv").write_text(
            (TEST_DATA / "mini" / "table.csv").read_text(encoding="utf-8").replace(",", ";"),
            encoding="utf-8",
        ),
        False,
    ),
    Case("the protocol is a symlink loop", lambda p: _replace(p / "mini.yaml", _loop), False),
    Case("the protocol is a FIFO", lambda p: _replace(p / "mini.yaml", _fifo), False),
    Case("the protocol is /dev/zero", lambda p: _replace(p / "mini.yaml", _dev_zero), False),
    Case("the protocol is a folder", lambda p: _replace(p / "mini.yaml", _folder), False),
    Case("the table is a symlink loop", lambda p: _replace(p / "table.csv", _loop), False),
    Case("the table is a FIFO", lambda p: _replace(p / "table.csv", _fifo), False),
    Case("the table is /dev/zero", lambda p: _replace(p / "table.csv", _dev_zero), False),
    Case("the table is a folder", lambda p: _replace(p / "table.csv", _folder), False),
    Case("the page file is a symlink loop", _page_as(_loop), False),
    Case("the page file is a FIFO", _page_as(_fifo), False),
    Case("the page file is /dev/zero", _page_as(_dev_zero), False),
    Case("the page file is a folder", _page_as(_folder), False),
]


def _run(cwd: Path, *args: str) -> subprocess.CompletedProcess[str]:
    env = dict(os.environ, PYTHONPATH=str(REPO))
    return subprocess.run(
        [sys.executable, "-m", "runner.cli", *args],
        capture_output=True,
        text=True,
        cwd=cwd,
        env=env,
        timeout=LIMIT_S,
    )


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_check_and_pilot_agree(case: Case, tmp_path: Path) -> None:
    """`check` and `pilot` agree: an error means exit 1 and nothing created, a pass means the
    pilot completes; neither prints a traceback or hangs."""
    folder = tmp_path / "study"
    shutil.copytree(TEST_DATA / "mini", folder)
    case.setup(folder)
    protocol = str(folder / case.protocol)
    checked = _run(tmp_path, "check", protocol)
    for proc in (checked,):
        assert "Traceback" not in proc.stderr and "internal error" not in proc.stderr, proc.stderr
    assert checked.returncode == (0 if case.passes else 1), checked.stdout + checked.stderr
    out = tmp_path / "sessions"
    piloted = _run(
        tmp_path, "pilot", protocol, "--participant", "P01", "--out", str(out), "--speed", "50"
    )
    assert "Traceback" not in piloted.stderr and "internal error" not in piloted.stderr
    if case.passes:
        assert piloted.returncode == 0, piloted.stdout + piloted.stderr
        assert "Session completed: 5 of 5 trials." in piloted.stdout
    else:
        assert piloted.returncode == 1, piloted.stdout + piloted.stderr
        assert not out.exists(), sorted(out.rglob("*"))
