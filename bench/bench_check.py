"""Benchmark `trialdeck check` on 2,000 trials over 500 distinct stimuli.

Writes a protocol, a trial table and 500 diagram-like PNGs (600 x 450, lines and discs on a grey
ground, as node-link stimuli are) into a temporary folder, then times ``check_protocol`` cold
(every image decoded once) and warm (a shared cache: nothing decoded again). Target: under 10 s
cold on 2 cores.

Usage: ``python bench/bench_check.py [--trials N] [--stimuli N]``
"""

from __future__ import annotations

import argparse
import os
import random
import tempfile
import time
from pathlib import Path

from PIL import Image, ImageDraw

from runner.protocol.check import check_protocol
from runner.protocol.luminance import LuminanceCache

IMAGE_SIZE = (600, 450)
DENSITIES = ("sparse", "medium", "dense", "very-dense")
PROTOCOL = """\
study: courier-bench
screen: {{resolution: [1920, 1080], refresh_hz: 60, width_cm: 52.7, distance_cm: 60, background: "#808080"}}
stimulus_size: {{width_deg: 24}}
photodiode: {{corner: top-left, size_px: 48}}
markers: {{stream: courier-bench-markers}}
trials: {{table: table.csv, factors: [nodes, density]}}
answer: {{prompt: "How many stops lie on the shortest route?", max: 60}}
rating: {{points: 9, low: effortless, high: extremely hard, mid: moderate}}
timing: {{fixation_ms: [700, 1300], stimulus_limit_s: 40, answer_limit_s: 20, rating_limit_s: 15, gap_ms: 800}}
sequence:
  - page: {{text: "Welcome, dispatcher."}}
  - rest: {{seconds: 60, label: baseline}}
  - practice: {{where: {{set: practice}}, feedback: true}}
  - blocks: {{where: {{set: main}}, by: density, max_run: {{nodes: 2}}}}
  - page: {{text: "Thank you."}}
breaks: {{every_trials: {every}, min_s: 15}}
checks: {{luminance_tolerance: 0.2}}
"""


def make_images(folder: Path, count: int, rng: random.Random) -> list[str]:
    names = []
    for i in range(count):
        img = Image.new("RGB", IMAGE_SIZE, (128, 128, 128))
        draw = ImageDraw.Draw(img)
        points = [(rng.randrange(20, 580), rng.randrange(20, 430)) for _ in range(30)]
        for a, b in zip(points, points[1:], strict=False):
            draw.line([a, b], fill=(40, 40, 40), width=2)
        for x, y in points:
            draw.ellipse([x - 8, y - 8, x + 8, y + 8], fill=(240, 240, 240), outline=(20, 20, 20))
        name = f"img/s{i:03d}.png"
        img.save(folder / name)
        names.append(name)
    return names


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--trials", type=int, default=2000)
    parser.add_argument("--stimuli", type=int, default=500)
    args = parser.parse_args()
    rng = random.Random(7)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        (folder / "img").mkdir()
        t0 = time.perf_counter()
        names = make_images(folder, args.stimuli, rng)
        made = time.perf_counter() - t0
        rows = ["stimulus,expected,set,nodes,density"]
        for i in range(args.trials):
            part = "practice" if i < 8 else "main"
            rows.append(
                f"{names[i % len(names)]},{rng.randint(2, 30)},{part},{10 + 10 * (i % 5)},"
                f"{DENSITIES[i % len(DENSITIES)]}"
            )
        (folder / "table.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
        path = folder / "protocol.yaml"
        path.write_text(PROTOCOL.format(every=60), encoding="utf-8")
        cache = LuminanceCache()
        t0 = time.perf_counter()
        report = check_protocol(path, participants=24, cache=cache)
        cold = time.perf_counter() - t0
        t0 = time.perf_counter()
        again = check_protocol(path, participants=24, cache=cache)
        warm = time.perf_counter() - t0
    errors = sum(p.severity == "error" for p in report.problems)
    warnings = sum(p.severity == "warning" for p in report.problems)
    print(f"machine: {os.cpu_count()} cores")
    print(f"trials: {args.trials}, distinct stimuli: {args.stimuli} ({made:.1f} s to write)")
    print(f"check, cold cache: {cold:.2f} s ({cache.decoded} images decoded)")
    print(f"check, warm cache: {warm:.2f} s (decoded in total: {cache.decoded})")
    print(
        f"findings: {errors} error(s), {warnings} warning(s); same findings again:"
        f" {again.problems == report.problems}"
    )
    for line in report.facts:
        print(f"  {line}")


if __name__ == "__main__":
    main()
