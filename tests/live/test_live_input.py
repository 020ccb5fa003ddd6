"""A live `trialdeck run` under a real X server, driven by key presses from another process.

Each test starts a private Xvfb, runs the real command line in a subprocess on it, presses keys
through the X server (XTEST, from the injector process in xinject.py) in reaction to the markers
a separate LSL inlet receives, and then reads the session's journal, trials.csv and the inlet's
markers. Skipped, with the reason, where Xvfb or python-xlib is missing (.ci/run installs Xvfb).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest
import yaml
from conftest import MINI_PROTOCOL
from xharness import Injector, MarkerListener, xserver, xvfb, xvfb_missing

from runner.journal.read import read_journal
from runner.session.markers import make_source_id

pytestmark = [
    pytest.mark.slow,
    pytest.mark.skipif(xvfb_missing() is not None, reason=str(xvfb_missing())),
]

STATION = "livetest"
KEY_TOLERANCE_S = 0.002  # every key's journaled time within 2 ms of its injection
# The program's clock reading for a press comes after the poll that found it; the poll before
# began a little before its own reading, and the witness stamps arrival after parsing the event.
READ_SLACK_S = 0.00025
# What the participant types in each trial; trial 4's count is one key held down for 600 ms.
TYPED = {1: "12", 2: "9", 3: "15", 4: "7", 5: "20"}
HELD_TRIAL = 4
HOLD_MS = 600
RATING = {1: "3", 2: "5", 3: "8", 4: "2", 5: "6"}


def _cli() -> list[str]:
    script = Path(sys.executable).with_name("trialdeck")
    return [str(script)] if script.exists() else [sys.executable, "-m", "runner"]


def _env(display: str, tmp: Path) -> dict[str, str]:
    env = dict(os.environ, DISPLAY=display, SDL_AUDIODRIVER="dummy")
    env.pop("SDL_VIDEODRIVER", None)  # the test suite's dummy driver must not reach the run
    runtime = tmp / "xdg"
    runtime.mkdir(mode=0o700, exist_ok=True)
    env["XDG_RUNTIME_DIR"] = str(runtime)
    return env


def _protocol(tmp: Path, mode: str, *, study: str) -> Path:
    """The mini protocol with answers typed after the stimulus or over it."""
    folder = tmp / "protocol"
    shutil.copytree(MINI_PROTOCOL.parent, folder)
    path = folder / MINI_PROTOCOL.name
    data = yaml.safe_load(path.read_text("utf-8"))
    data["answer"]["mode"] = mode
    if mode == "over":
        # Room beside the stimulus for the answer box (check refuses a box over the stimulus).
        data["stimulus_size"] = {"width_px": 400}
    data["study"] = study
    data["markers"]["stream"] = f"{study}-markers"
    path.write_text(yaml.safe_dump(data, sort_keys=False), "utf-8")
    return path


def _start(protocol: Path, out: Path, display: str, tmp: Path, *extra: str) -> subprocess.Popen:
    cmd = [*_cli(), "run", str(protocol), "--participant", "P01", "--out", str(out)]
    cmd += ["--station", STATION, *extra]
    return subprocess.Popen(
        cmd,
        env=_env(display, tmp),
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
    )


def _journal(out: Path) -> list[dict]:
    (path,) = out.glob("*/sub-P01/ses-1/journal.jsonl")
    return read_journal(path).records


def _drive(mode: str, inj: Injector, lst: MarkerListener) -> dict[str, object]:
    """Go through the session as a participant would; return what was pressed and when."""
    pressed: list[tuple[str, float, str]] = []  # (key, injection time, what it was for)

    def press(*keys: str, why: str, gap_ms: float = 0.0) -> list[float]:
        times = inj.keys(*keys, gap_ms=gap_ms)
        pressed.extend((k, t, why) for k, t in zip(keys, times, strict=True))
        return times

    lst.wait_for("page_onset")
    time.sleep(0.3)
    press("space", why="page")
    early_key = "4" if mode == "over" else "space"
    seen = 0
    for trial in range(1, 6):
        seen, m = lst.wait_any({"fixation_onset", "break_start"}, after=seen)
        if m.payload["event"] == "break_start":
            time.sleep(1.3)  # the break's minimum (1 s) must pass before its key counts
            press("space", why="break")
            seen, m = lst.wait_any({"fixation_onset"}, after=seen)
        assert m.payload["trial"] == trial
        time.sleep(0.05)
        press(early_key, why=f"fixation:{trial}")
        seen, _ = lst.wait_any({"stimulus_onset"}, after=seen)
        time.sleep(0.3)
        if mode == "after":
            press("space", why=f"decision:{trial}")
            seen, _ = lst.wait_any({"answer_onset"}, after=seen)
            time.sleep(0.1)
        if trial == HELD_TRIAL:
            t = inj.hold(TYPED[trial], HOLD_MS)
            pressed.append((TYPED[trial], t, f"typed:{trial}"))
            press("return", why=f"confirm:{trial}")
        else:
            # A burst: the digits and Return 3 ms apart, while the typed digit is redrawn.
            press(*TYPED[trial], "return", gap_ms=3, why=f"typed:{trial}")
        seen, _ = lst.wait_any({"rating_onset"}, after=seen)
        time.sleep(0.1)
        press(RATING[trial], why=f"rating:{trial}")
        seen, _ = lst.wait_any({"rating"}, after=seen)
    lst.wait_any({"page_onset"}, after=seen)
    time.sleep(0.3)
    press("space", why="page")
    return {"pressed": pressed}


@pytest.mark.parametrize("mode", ["over", "after"])
def test_live_run_takes_every_key_at_its_true_time(tmp_path, mode):
    """Keys before onset are anticipations, bursts and held keys are right, times within 2 ms."""
    study = f"live-{mode}"
    protocol = _protocol(tmp_path, mode, study=study)
    out = tmp_path / "out"
    with xvfb(800, 600) as display:
        proc = _start(
            protocol,
            out,
            display,
            tmp_path,
            "--allow-timing-mismatch",  # Xvfb has no vsync; flips are then paced
            "--wait-for-recorder",
            "60",
        )
        lst = MarkerListener(make_source_id(study, STATION))
        inj = Injector(display)
        try:
            lst.start(timeout=60)
            driven = _drive(mode, inj, lst)
            inj_delivered = dict(inj.delivered)
            output, _ = proc.communicate(timeout=90)
        finally:
            if proc.poll() is None:
                proc.kill()
                proc.communicate()
            inj.close()
            lst.stop()
    assert proc.returncode == 0, output
    records = _journal(out)
    by = lambda name: [r for r in records if r.get("event") == name]  # noqa: E731
    header = records[0]
    assert header["screen"]["desktop_size"] == [800, 600]
    assert header["timing"]["refresh"]["vsync"] == "emulated"
    assert header["screen"]["frame_clock"] == "paced"

    # Keys during the fixation: journaled as anticipations, never the response.
    early_key = "4" if mode == "over" else "space"
    pressed: list[tuple[str, float, str]] = driven["pressed"]  # type: ignore[assignment]
    antic = {r["trial"]: r for r in by("anticipation")}
    assert sorted(antic) == [1, 2, 3, 4, 5]
    for r in antic.values():
        assert r["key"] == early_key and r["screen"] == "fixation"
    onsets = {r["trial"]: r["t"] for r in by("stimulus_onset")}
    for r in by("decision"):
        assert r["t"] > onsets[r["trial"]] + 0.2  # the press 300 ms after onset, not the early one
        assert r["rt_ms"] > 200

    # Answers as typed: bursts all kept and confirmed, the held key counted once.
    rows = {int(r["trial"]): r["record"] for r in by("trial_end")}
    assert {t: rows[t]["answer"] for t in rows} == {t: int(v) for t, v in TYPED.items()}
    assert {t: rows[t]["rating"] for t in rows} == {t: int(v) for t, v in RATING.items()}
    held_typing = [r for r in by("typing") if r["trial"] == HELD_TRIAL]
    assert [r["key"] for r in held_typing] == [TYPED[HELD_TRIAL]]
    assert not [r for r in by("anticipation") if r["key"] == TYPED[HELD_TRIAL]]

    # Every key's journaled time within 2 ms of its injection, or, for a key that came in while
    # the program could not read input (a flip or a drawing took longer), the injection inside
    # the blind window journaled with it: the journal never claims more precision than it has.
    journaled: dict[str, list[tuple[float, float]]] = {}
    for r in by("anticipation"):
        journaled[f"fixation:{r['trial']}"] = [(r["t"], r["blind_ms"])]
    for r in by("decision"):
        if mode == "after":
            journaled[f"decision:{r['trial']}"] = [(r["t"], r["blind_ms"])]
    for r in by("typing"):
        journaled.setdefault(f"typed:{r['trial']}", []).append((r["key_t"], r["key_blind_ms"]))
    for r in by("answer"):
        key = f"confirm:{r['trial']}" if r["trial"] == HELD_TRIAL else f"typed:{r['trial']}"
        journaled.setdefault(key, []).append((r["t"], r["blind_ms"]))
    for r in by("rating"):
        journaled[f"rating:{r['trial']}"] = [(r["t"], r["blind_ms"])]
    injected: dict[str, list[float]] = {}
    for _key, t, why in pressed:
        if why not in ("page", "break"):
            injected.setdefault(why, []).append(t)
    assert sorted(journaled) == sorted(injected)
    # A press reaches the program when the X server delivers it, which on a busy machine can be
    # milliseconds after the injector sent it; a second X client in the injector process stamps
    # that delivery. Each key is measured from its delivery (from its injection if unseen).
    keys = []
    for why, ts in injected.items():
        for inj, (t, blind) in zip(ts, journaled[why], strict=True):
            seen = inj_delivered.get(inj)
            keys.append((why, inj, max(inj, seen) if seen is not None else inj, t, blind / 1000.0))
    report = [
        (why, round((t - inj) * 1000, 3), round((t - dlv) * 1000, 3), round(b * 1000, 3))
        for why, inj, dlv, t, b in keys
    ]
    for why, inj, delivered, t, blind in keys:
        assert inj <= t, (why, report)
        assert t - delivered <= max(KEY_TOLERANCE_S, blind + READ_SLACK_S), (why, report)
    within = sum(t - dlv <= KEY_TOLERANCE_S for _, _, dlv, t, _ in keys)
    print(  # noqa: T201
        f"{within} of {len(keys)} keys within 2 ms of their delivery;"
        " (ms after injection, ms after delivery, blind ms):"
    )
    print(report)  # noqa: T201

    # Some keys came in while the screen was being redrawn for the digit before them.
    typing_flips = [r["t"] for r in by("typing")]
    during_redraw = [
        t
        for why, ts in injected.items()
        if why.startswith("typed:") and why != f"typed:{HELD_TRIAL}"
        for t in ts[1:]
        if any(0 <= f - t <= 0.017 for f in typing_flips)
    ]
    assert during_redraw, "no key was injected while a typed digit was being redrawn"

    # Every marker bit-identical between the journal and the separate inlet.
    sent = [(r["marker"], r["t"]) for r in records if "marker" in r]
    received = [(m.raw, m.t) for m in lst.markers]
    assert received == sent

    # The audit counts the anticipations.
    from runner.qa.audit import audit_session

    audit = audit_session(next(out.glob("*/sub-P01/ses-1")))
    assert audit.facts["responses"]["anticipations"] == 5


def test_desktop_size_other_than_the_protocol_is_refused(tmp_path):
    """A 1024x768 desktop under an 800x600 protocol is refused before anything is created."""
    out = tmp_path / "out"
    with xvfb(1024, 768) as display:
        proc = _start(MINI_PROTOCOL, out, display, tmp_path, "--allow-timing-mismatch")
        output, _ = proc.communicate(timeout=60)
    assert proc.returncode == 1, output
    assert "1024x768" in output and "--allow-display-mismatch" in output
    assert not out.exists()


GEOMETRY = """
import json, pygame
from runner.present.display import Display
from runner.present.painter import Style
from runner.session.views import FixationView
style = Style.from_colours("#8c8c8c", "#000000", "#1f6feb", 28, photodiode_corner="top-left",
                           photodiode_px=40)
d = Display(resolution=(800, 600), refresh_hz=60, style=style, stimulus_box=(480, 360),
            fullscreen=True, measure_flips=30)
d.show(FixationView(), photodiode=True)
s = d.surface
print(json.dumps({
    "screen": list(d.screen_size), "window": list(s.get_size()), "origin": list(d.origin),
    "vsync": d.refresh.vsync, "blocking": d.blocking,
    "corner": list(s.get_at((0, 0)))[:3], "past_patch": list(s.get_at((40, 40)))[:3],
    "centre": list(s.get_at((512, 384)))[:3], "canvas_size": list(d.canvas.get_size()),
}))
d.close()
"""


def test_native_desktop_with_the_protocol_drawn_one_to_one(tmp_path):
    """A 1024x768 desktop opens at 1024x768, the 800x600 screen centred, the patch in the corner.

    Source: pixel arithmetic ((1024 - 800) / 2, (768 - 600) / 2) and the protocol's colours.
    """
    with xvfb(1024, 768) as display:
        done = subprocess.run(
            [sys.executable, "-c", GEOMETRY],
            env=_env(display, tmp_path),
            capture_output=True,
            text=True,
            timeout=60,
        )
    assert done.returncode == 0, done.stderr
    got = json.loads(done.stdout.strip().splitlines()[-1])
    assert got["screen"] == got["window"] == [1024, 768]
    assert got["canvas_size"] == [800, 600] and got["origin"] == [112, 84]
    assert got["corner"] == [255, 255, 255]  # the patch, in the real screen's corner
    assert got["past_patch"] == [0x8C, 0x8C, 0x8C]
    assert got["centre"] == [0, 0, 0]  # the fixation cross at the screen's centre
    assert got["vsync"] == "emulated" and got["blocking"] is False


def test_losing_the_display_closes_the_session(tmp_path):
    """Killing the X server mid-session journals session_end (display_lost) and trials.csv."""
    out = tmp_path / "out"
    with xserver(800, 600) as server:
        proc = _start(
            MINI_PROTOCOL,
            out,
            server.display,
            tmp_path,
            "--allow-timing-mismatch",
            "--wait-for-recorder",
            "60",
        )
        lst = MarkerListener(make_source_id("mini-test", STATION))
        try:
            lst.start(timeout=60)
            lst.wait_for("page_onset")
            server.proc.kill()
            output, _ = proc.communicate(timeout=60)
        finally:
            if proc.poll() is None:
                proc.kill()
                proc.communicate()
            lst.stop()
    assert proc.returncode == 1, output
    assert "connection to the display was lost" in output
    records = _journal(out)
    end = records[-1]
    assert end["event"] == "session_end"
    assert (end["status"], end["reason"]) == ("failed", "display_lost")
    assert (next(out.glob("*/sub-P01/ses-1")) / "trials.csv").exists()
