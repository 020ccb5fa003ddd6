"""Key presses through a real X server, from a separate process (test helper, run as a script).

Reads one JSON command per line on stdin and answers each with one JSON line on stdout:

* ``{"keys": ["4", "return"], "gap_ms": 5}``: press and release each key in turn (XTEST), ``gap_ms``
  apart; answers ``{"t": [...], "seen": [...]}``: the LSL local_clock time taken just before each
  press was sent, and the time this process, listening on the window under the pointer as a
  second X client, received the press from the X server (when the server delivered it).
* ``{"hold": "5", "hold_ms": 700}``: press a key, keep it down, then release it; answers ``{"t": [t]}``.
* ``{"quit": true}``: exit.

The presses go through the X server's XTEST extension exactly as a keyboard's would, so the
program under test receives them through its ordinary input path.
"""

from __future__ import annotations

import json
import sys
import threading
import time

import pylsl
import Xlib.threaded  # noqa: F401 - the witness connection is read on its own thread
from Xlib import XK, X
from Xlib import display as xdisplay
from Xlib.ext import xtest

KEYSYMS = {
    "return": "Return",
    "space": "space",
    "escape": "Escape",
    "backspace": "BackSpace",
    "tab": "Tab",
}


def keycode(d: xdisplay.Display, name: str) -> int:
    sym = XK.string_to_keysym(KEYSYMS.get(name, name))
    if not sym:
        raise SystemExit(f"unknown key {name!r}")
    return d.keysym_to_keycode(sym)


class Witness:
    """A second X connection listening, on a thread, for key presses on the window under the
    pointer: each press is stamped when it arrives from the X server."""

    def __init__(self, name: str | None):
        self.d = xdisplay.Display(name)
        self.window = None
        self.arrived: list[tuple[int, float]] = []  # (keycode, local_clock at arrival)
        self.cond = threading.Condition()
        threading.Thread(target=self._listen, daemon=True).start()

    def _listen(self) -> None:
        while True:
            ev = self.d.next_event()
            t = pylsl.local_clock()
            if ev.type == X.KeyPress:
                with self.cond:
                    self.arrived.append((ev.detail, t))
                    self.cond.notify_all()

    def watch(self) -> int:
        """Listen on the window under the pointer; return how many presses arrived so far."""
        child = self.d.screen().root.query_pointer().child
        if child and child != self.window:
            child.change_attributes(event_mask=X.KeyPressMask)
            self.d.sync()
            self.window = child
        with self.cond:
            return len(self.arrived)

    def seen(self, start: int, codes: list[int], timeout: float = 2.0) -> list[float | None]:
        """When each press of ``codes`` arrived here (presses from index ``start`` on)."""
        with self.cond:
            self.cond.wait_for(lambda: len(self.arrived) >= start + len(codes), timeout)
            got = self.arrived[start : start + len(codes)]
        out: list[float | None] = [
            t if c == code else None for (c, t), code in zip(got, codes, strict=False)
        ]
        return out + [None] * (len(codes) - len(out))


def main() -> None:
    name = sys.argv[1] if len(sys.argv) > 1 else None
    d = xdisplay.Display(name)
    witness = Witness(name)
    for line in sys.stdin:
        cmd = json.loads(line)
        if cmd.get("quit"):
            break
        start = witness.watch()
        times = []
        codes = []
        if "hold" in cmd:
            code = keycode(d, cmd["hold"])
            codes.append(code)
            times.append(pylsl.local_clock())
            xtest.fake_input(d, X.KeyPress, code)
            d.sync()
            time.sleep(cmd.get("hold_ms", 500) / 1000)
            xtest.fake_input(d, X.KeyRelease, code)
            d.sync()
        else:
            gap = cmd.get("gap_ms", 0) / 1000
            for i, name_ in enumerate(cmd["keys"]):
                code = keycode(d, name_)
                codes.append(code)
                if i and gap:
                    time.sleep(gap)
                times.append(pylsl.local_clock())
                xtest.fake_input(d, X.KeyPress, code)
                d.sync()
                xtest.fake_input(d, X.KeyRelease, code)
                d.sync()
        print(json.dumps({"t": times, "seen": witness.seen(start, codes)}), flush=True)


if __name__ == "__main__":
    main()
