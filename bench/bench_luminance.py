"""Benchmark: mean screen luminance for 2,000 trials that show 500 distinct 1000 x 1000 PNGs.

Generates the images in a temporary folder (not timed), then computes the mean luminance of
each trial's stimulus screen (grey background, image centred, photodiode patch) through one
shared LuminanceCache, so each file is decoded once. Prints the figures; target: well under
10 s on a 2-core machine.

Run from the repository root: PYTHONPATH=. /work/venv/bin/python bench/bench_luminance.py
"""

from __future__ import annotations

import os
import platform
import random
import tempfile
import time
from pathlib import Path

import numpy as np
from PIL import Image, ImageDraw

from runner.protocol.luminance import LuminanceCache, mean_luminance_of_screen

N_IMAGES = 500
N_TRIALS = 2000
IMAGE_PX = 1000
SCREEN = (1920, 1080)
BACKGROUND = "#808080"
PHOTODIODE = ((0, 0, 48, 48), "#ffffff")
NODES_PER_IMAGE = 40


def make_image(path: Path, index: int) -> None:
    """Draw an invented route-map diagram: depots (discs) joined by links, every one different."""
    rng = random.Random(index)
    transparent = index % 2 == 1
    mode = "RGBA" if transparent else "RGB"
    fill = (0, 0, 0, 0) if transparent else (250, 250, 245)
    img = Image.new(mode, (IMAGE_PX, IMAGE_PX), fill)
    draw = ImageDraw.Draw(img)
    points = [(rng.randrange(40, 960), rng.randrange(40, 960)) for _ in range(NODES_PER_IMAGE)]
    for a, b in zip(points, points[1:] + points[:1], strict=True):
        draw.line([a, b], fill=(60, 60, 60, 200), width=3)
    for k, (x, y) in enumerate(points):
        colour = (200, 40, 40, 255) if k < 2 else (30, 90, 160, 230)
        draw.ellipse([x - 12, y - 12, x + 12, y + 12], fill=colour)
    img.save(path, compress_level=1)


def main() -> None:
    with tempfile.TemporaryDirectory(prefix="trialdeck-bench-lum-") as folder:
        root = Path(folder)
        start = time.perf_counter()
        paths = []
        for i in range(N_IMAGES):
            path = root / f"route_{i:03d}.png"
            make_image(path, i)
            paths.append(path)
        generated = time.perf_counter() - start
        size_mb = sum(p.stat().st_size for p in paths) / 1e6

        order = [paths[i % N_IMAGES] for i in range(N_TRIALS)]
        random.Random(1).shuffle(order)
        image_rect = (
            (SCREEN[0] - IMAGE_PX) // 2,
            (SCREEN[1] - IMAGE_PX) // 2,
            IMAGE_PX,
            IMAGE_PX,
        )
        cache = LuminanceCache()
        load_before = os.getloadavg()[0]
        start = time.perf_counter()
        values = [
            mean_luminance_of_screen(
                SCREEN, BACKGROUND, patches=[PHOTODIODE], image=(path, image_rect), cache=cache
            )
            for path in order
        ]
        elapsed = time.perf_counter() - start

    print(
        f"machine: {platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}, "
        f"load average before timing {load_before:.2f} (other work shares these cores)"
    )
    print(
        f"generated {N_IMAGES} PNGs of {IMAGE_PX}x{IMAGE_PX} ({size_mb:.1f} MB) in {generated:.1f} s"
    )
    print(
        f"screen luminance of {N_TRIALS} trials: {elapsed:.2f} s "
        f"({1000 * elapsed / N_TRIALS:.2f} ms per trial), files decoded: {cache.decoded}"
    )
    print(
        f"luminance range over trials: {min(values):.4f} .. {max(values):.4f}, "
        f"mean {float(np.mean(values)):.4f}"
    )


if __name__ == "__main__":
    main()
