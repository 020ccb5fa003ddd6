"""Per-frame CPU time of the presenter at 1920x1080 with the largest demo stimulus.

Run: /work/venv/bin/python bench/bench_frame.py [--frames N]
Draws the stimulus screen (stimulus, typed count, hint and photodiode patch) and flips, N times,
once as full redraws (what an onset costs) and once as typing updates (only the answer box changes),
under the SDL dummy driver, and prints the thread CPU time and wall time per frame (median, p99,
max). Frame pacing sleeps are not included: this is the work each frame costs. Targets: median
<= 1 ms, p99 <= 3 ms.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
from pathlib import Path

os.environ.setdefault("SDL_VIDEODRIVER", "dummy")
os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

import pygame  # noqa: E402

from runner.present.display import display_for  # noqa: E402
from runner.protocol.load import load_protocol  # noqa: E402
from runner.session.views import StimulusView  # noqa: E402

DEMO = REPO / "configs" / "demo.yaml"
FRAMES = 1200
WARMUP = 30


def _largest(loaded) -> str:
    best, area = "", -1
    for row in loaded.table.rows:
        path = str(loaded.table.stimulus_path(row))
        w, h = pygame.image.load(path).get_size()
        if w * h > area:
            best, area = path, w * h
    return best


def _stats(values: list[float]) -> str:
    s = sorted(v * 1000 for v in values)
    p99 = s[min(len(s) - 1, int(0.99 * len(s)))]
    return f"median {statistics.median(s):.3f} ms, p99 {p99:.3f} ms, max {s[-1]:.3f} ms"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--frames", type=int, default=FRAMES)
    args = parser.parse_args()
    loaded = load_protocol(DEMO)
    display = display_for(loaded, fullscreen=False)
    path = _largest(loaded)
    display.prepare(path)
    display.wait_ready(path)
    views = [
        StimulusView(path, typed=str(n % 60), prompt="How many stops?", hint="Enter to confirm")
        for n in range(60)
    ]
    try:
        size = pygame.image.load(path).get_size()
        print(
            f"presenter frame at {display.size[0]}x{display.size[1]}, stimulus {Path(path).name}"
            f" ({size[0]}x{size[1]} scaled into {display.stimulus_rect.size}), {args.frames} frames each"
        )
        for label, full in (("full redraw (onset)", True), ("typing update", False)):
            cpu, wall = [], []
            for i in range(args.frames + WARMUP):
                view = views[i % len(views)]
                if full:
                    display.painter.forget()
                c0, w0 = time.thread_time(), time.perf_counter()
                display.painter.draw(display.surface, view, photodiode=True)
                pygame.display.flip()
                c1, w1 = time.thread_time(), time.perf_counter()
                if i >= WARMUP:
                    cpu.append(c1 - c0)
                    wall.append(w1 - w0)
            print(f"  {label}: CPU per frame {_stats(cpu)}")
            print(f"  {label}: wall per frame {_stats(wall)}")
        print(f"  onset waits for decoding: {display.images.waits_at_onset}")
    finally:
        display.close()


if __name__ == "__main__":
    main()
