"""A real X server (Xvfb), a key injector in another process, and a marker listener (test helpers).

Used by the live-input tests: trialdeck runs under Xvfb exactly as on a lab display, keys arrive
through the X server from a separate process (XTEST), and markers are read by a separate LSL
inlet, as a recorder would.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

HERE = Path(__file__).resolve().parent


def xvfb_missing() -> str | None:
    """Why the live tests cannot run here, or None when they can."""
    if not shutil.which("Xvfb"):
        return "Xvfb is not installed (Debian package xvfb; .ci/run installs it)"
    try:
        import Xlib  # noqa: F401
    except ImportError:
        return "python-xlib is not installed (part of the test extra)"
    return None


@dataclass
class XServer:
    """A running private Xvfb: its DISPLAY string and its process (to kill it mid-test)."""

    display: str
    proc: subprocess.Popen


@contextmanager
def xserver(width: int = 1920, height: int = 1080) -> Iterator[XServer]:
    """Start a private Xvfb with one screen of ``width`` x ``height`` pixels."""
    read, write = os.pipe()
    proc = subprocess.Popen(
        [
            "Xvfb",
            "-displayfd",
            str(write),
            "-screen",
            "0",
            f"{width}x{height}x24",
            "-nolisten",
            "tcp",
        ],
        pass_fds=(write,),
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    os.close(write)
    try:
        number = b""
        with os.fdopen(read, "rb") as pipe:
            while not number.endswith(b"\n"):
                chunk = pipe.read(1)
                if not chunk:
                    raise RuntimeError("Xvfb did not start")
                number += chunk
        yield XServer(f":{int(number)}", proc)
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


@contextmanager
def xvfb(width: int = 1920, height: int = 1080) -> Iterator[str]:
    """Start a private Xvfb and yield its DISPLAY string (``:N``)."""
    with xserver(width, height) as server:
        yield server.display


class Injector:
    """A separate process that presses keys through the X server (see xinject.py)."""

    def __init__(self, display: str):
        self.proc = subprocess.Popen(
            [sys.executable, str(HERE / "xinject.py"), display],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            text=True,
        )
        # Injection time -> when a second X client saw the press arrive (None: it did not).
        self.delivered: dict[float, float | None] = {}

    def _ask(self, command: dict) -> list[float]:
        assert self.proc.stdin is not None and self.proc.stdout is not None
        self.proc.stdin.write(json.dumps(command) + "\n")
        self.proc.stdin.flush()
        line = self.proc.stdout.readline()
        if not line:
            raise RuntimeError("the key injector stopped")
        answer = json.loads(line)
        for t, seen in zip(answer["t"], answer.get("seen", []), strict=False):
            self.delivered[t] = seen
        return answer["t"]

    def keys(self, *names: str, gap_ms: float = 0.0) -> list[float]:
        """Press and release each key; the local_clock time of each press."""
        return self._ask({"keys": list(names), "gap_ms": gap_ms})

    def hold(self, name: str, hold_ms: float) -> float:
        return self._ask({"hold": name, "hold_ms": hold_ms})[0]

    def close(self) -> None:
        try:
            if self.proc.poll() is None:
                try:
                    self._ask_quit()
                finally:
                    self.proc.wait(timeout=10)
        finally:
            for pipe in (self.proc.stdin, self.proc.stdout):
                if pipe is not None:
                    pipe.close()

    def _ask_quit(self) -> None:
        assert self.proc.stdin is not None
        self.proc.stdin.write('{"quit": true}\n')
        self.proc.stdin.flush()


@dataclass
class Marker:
    payload: dict
    raw: str
    t: float


@dataclass
class MarkerListener:
    """A separate LSL inlet on a marker stream, collecting every marker on a thread."""

    source_id: str
    markers: list[Marker] = field(default_factory=list)
    _stop: threading.Event = field(default_factory=threading.Event)
    _cond: threading.Condition = field(default_factory=threading.Condition)

    def start(self, timeout: float = 30.0) -> None:
        import pylsl

        found = pylsl.resolve_byprop("source_id", self.source_id, timeout=timeout)
        if not found:
            raise RuntimeError(f"no marker stream with source_id {self.source_id!r}")
        self.inlet = pylsl.StreamInlet(found[0], max_buflen=360)
        self.inlet.open_stream(timeout=timeout)
        self._thread = threading.Thread(target=self._pull, daemon=True)
        self._thread.start()

    def _pull(self) -> None:
        while not self._stop.is_set():
            sample, ts = self.inlet.pull_sample(timeout=0.05)
            if sample is None:
                continue
            with self._cond:
                self.markers.append(Marker(json.loads(sample[0]), sample[0], ts))
                self._cond.notify_all()

    def wait_for(self, event: str, *, after: int = 0, timeout: float = 30.0, **match) -> Marker:
        """The first marker at index >= ``after`` with this event (and matching fields)."""
        deadline = time.monotonic() + timeout
        with self._cond:
            while True:
                for m in self.markers[after:]:
                    if m.payload.get("event") == event and all(
                        m.payload.get(k) == v for k, v in match.items()
                    ):
                        return m
                left = deadline - time.monotonic()
                if left <= 0:
                    seen = [m.payload.get("event") for m in self.markers[-8:]]
                    raise TimeoutError(f"no {event!r} marker; last seen {seen}")
                self._cond.wait(left)

    def wait_any(
        self, events: set[str], *, after: int = 0, timeout: float = 30.0
    ) -> tuple[int, Marker]:
        """The first marker at index >= ``after`` whose event is one of ``events``, and its index."""
        deadline = time.monotonic() + timeout
        with self._cond:
            while True:
                for i in range(after, len(self.markers)):
                    if self.markers[i].payload.get("event") in events:
                        return i, self.markers[i]
                left = deadline - time.monotonic()
                if left <= 0:
                    seen = [m.payload.get("event") for m in self.markers[-8:]]
                    raise TimeoutError(f"none of {sorted(events)}; last seen {seen}")
                self._cond.wait(left)

    def stop(self) -> None:
        self._stop.set()
        thread = getattr(self, "_thread", None)  # not there when start() found no stream
        if thread is not None:
            thread.join(timeout=5)
            self.inlet.close_stream()
