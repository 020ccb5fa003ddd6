"""Benchmark: a headless pilot of 200 trials, with a real LSL inlet connected.

Prints
- |rt_ms - sim_rt_ms|: detection error of the input path (target p99 <= 1 ms);
- flip return to marker push, for markers of screen changes (target p99 <= 0.2 ms);
- marker delivery latency to an inlet on this machine (push to pull).

Run: .venv/bin/python bench/bench_pilot.py [--trials 200] [--speed 10]
"""

from __future__ import annotations

import argparse
import csv
import json
import os
import platform
import shutil
import statistics
import sys
import tempfile
import threading
from pathlib import Path

os.environ.setdefault("SDL_VIDEODRIVER", "dummy")
os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
REPO = Path(__file__).resolve().parent.parent
LSL_CFG = Path(tempfile.gettempdir()) / f"trialdeck-bench-{os.getpid()}.cfg"
LSL_CFG.write_text(
    "[multicast]\nResolveScope = machine\n[lab]\nSessionID = bench-pilot\n[log]\nlevel = -3\n"
)
os.environ["LSLAPICFG"] = str(LSL_CFG)

import pylsl  # noqa: E402

from runner.present.display import display_for  # noqa: E402
from runner.protocol.load import load_protocol  # noqa: E402
from runner.session.console import Console  # noqa: E402
from runner.session.journal import read_journal  # noqa: E402
from runner.session.markers import make_source_id  # noqa: E402
from runner.session.run import RunOptions, run_session  # noqa: E402

FLIP_MARKERS = {
    "page_onset",
    "rest_start",
    "rest_end",
    "break_start",
    "fixation_onset",
    "stimulus_onset",
    "stimulus_offset",
    "rating_onset",
    "feedback_onset",
    "gap_onset",
}


def pct(values, q):
    s = sorted(values)
    return s[min(len(s) - 1, round(q / 100 * (len(s) - 1)))]


def make_protocol(folder: Path, n_trials: int) -> Path:
    src = REPO / "stimuli_demo"
    shutil.copytree(src / "images", folder / "images")
    with open(src / "manifest.csv", newline="") as fh:
        rows = [r for r in csv.DictReader(fh) if r["set"] == "main"]
    with open(folder / "table.csv", "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["stimulus", "expected", "nodes", "density"])
        for i in range(n_trials):
            r = rows[i % len(rows)]
            w.writerow([r["stimulus"], r["expected"], r["nodes"], r["density"]])
    (folder / "bench.yaml").write_text(
        "study: bench-pilot\n"
        "screen: {resolution: [1920, 1080], refresh_hz: 60, background: '#8c8c8c'}\n"
        "stimulus_size: {width_px: 900}\n"
        "markers: {stream: bench-pilot-markers}\n"
        "trials: {table: table.csv, factors: [nodes, density]}\n"
        "answer: {max: 60}\n"
        "timing: {fixation_ms: [700, 1300], gap_ms: 800}\n"
        "sequence:\n  - trials: {shuffle: true}\n"
    )
    return folder / "bench.yaml"


class Inlet(threading.Thread):
    def __init__(self, source_id):
        super().__init__(daemon=True)
        self.source_id = source_id
        self.got: list[tuple[str, float, float]] = []
        self.stop = threading.Event()

    def run(self):
        found = []
        while not found:
            found = pylsl.resolve_byprop("source_id", self.source_id, timeout=1)
        inlet = pylsl.StreamInlet(found[0], max_buflen=60)
        inlet.open_stream(timeout=5)
        while not self.stop.is_set():
            s, ts = inlet.pull_sample(timeout=0.2)
            if s is not None:
                self.got.append((s[0], ts, pylsl.local_clock()))
                if json.loads(s[0])["event"] == "session_end":
                    return


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--trials", type=int, default=200)
    ap.add_argument("--speed", type=float, default=10.0)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        protocol = make_protocol(tmp / "proto", args.trials)
        loaded = load_protocol(protocol)
        inlet = Inlet(make_source_id(loaded.model.study, "bench"))
        inlet.start()
        opts = RunOptions(
            participant="P01",
            out=tmp / "out",
            mode="pilot",
            speed=args.speed,
            wait_for_recorder=30,
            station="bench",
        )
        result = run_session(
            loaded,
            opts,
            open_presenter=lambda: display_for(loaded, fullscreen=False),
            console=Console(quiet=True),
        )
        inlet.join(timeout=10)
        inlet.stop.set()
        with open(result.trials_csv, newline="") as fh:
            rows = list(csv.DictReader(fh))
        errors = [
            abs(float(r["rt_ms"]) - float(r["sim_rt_ms"]))
            for r in rows
            if r["rt_ms"] and r["sim_rt_ms"]
        ]
        read = read_journal(result.journal)
        flip_push = [
            r["push_us"] for r in read.records if r.get("event") in FLIP_MARKERS and "push_us" in r
        ]
        pushed_at = {
            (r["marker"], r["t"]): r["t"] + r["push_us"] / 1e6
            for r in read.records
            if "marker" in r
        }
        latency = [
            (recv - pushed_at[(p, ts)]) * 1000 for p, ts, recv in inlet.got if (p, ts) in pushed_at
        ]
    print(
        f"machine: {platform.machine()} {platform.processor() or ''} cores={os.cpu_count()} python={sys.version.split()[0]}"
    )
    print(
        f"session: {result.status}, {result.trials_done} trials, speed {args.speed:g}, late flips {result.late_flips}"
    )
    print(
        f"|rt_ms - sim_rt_ms| over {len(errors)} responses: median {statistics.median(errors):.3f} ms, "
        f"p99 {pct(errors, 99):.3f} ms, max {max(errors):.3f} ms"
    )
    print(
        f"flip return -> marker push over {len(flip_push)} screen markers: median {statistics.median(flip_push):.1f} us, "
        f"p99 {pct(flip_push, 99):.1f} us, max {max(flip_push):.1f} us"
    )
    print(
        f"marker delivery to a loopback inlet over {len(latency)} markers: median {statistics.median(latency):.3f} ms, "
        f"p99 {pct(latency, 99):.3f} ms"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
