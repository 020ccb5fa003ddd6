"""Key presses through a real X server, from a separate process (test helper, run as a script).

Reads one JSON command per line on stdin and answers each with one JSON line on stdout:

* ``{"keys": ["4", "return"], "gap_ms": 5}``: press and release each key in turn (XTEST), ``gap_ms``
  apart; answers ``{"t": [...]}``, the LSL local_clock time taken just before each press was sent.
* ``{"hold": "5", "hold_ms": 700}``: press a key, keep it down, then release it; answers ``{"t": [t]}``.
* ``{"quit": true}``: exit.

The presses go through the X server's XTEST extension exactly as a keyboard's would, so the
program under test receives them through its ordinary input path.
"""

from __future__ import annotations

import json
import sys
import time

import pylsl
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


def main() -> None:
    d = xdisplay.Display(sys.argv[1] if len(sys.argv) > 1 else None)
    for line in sys.stdin:
        cmd = json.loads(line)
        if cmd.get("quit"):
            break
        times = []
        if "hold" in cmd:
            code = keycode(d, cmd["hold"])
            times.append(pylsl.local_clock())
            xtest.fake_input(d, X.KeyPress, code)
            d.sync()
            time.sleep(cmd.get("hold_ms", 500) / 1000)
            xtest.fake_input(d, X.KeyRelease, code)
            d.sync()
        else:
            gap = cmd.get("gap_ms", 0) / 1000
            for i, name in enumerate(cmd["keys"]):
                code = keycode(d, name)
                if i and gap:
                    time.sleep(gap)
                times.append(pylsl.local_clock())
                xtest.fake_input(d, X.KeyPress, code)
                d.sync()
                xtest.fake_input(d, X.KeyRelease, code)
                d.sync()
        print(json.dumps({"t": times}), flush=True)


if __name__ == "__main__":
    main()
