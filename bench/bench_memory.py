"""Peak memory and onset delays of long pilots with many large stimuli.

Run: /work/venv/bin/python bench/bench_memory.py [--trials 500] [--stimuli 50 150 300] [--speed 50]
Makes (once, cached under the system temp folder) up to 300 distinct 2000x2000 PNG stimuli, then
for each stimulus count runs a headless pilot of --trials trials in a subprocess at 1920x1080 and
prints its peak resident memory (from the operating system's accounting of the child) and how
many onsets had to wait for a stimulus decode. Targets: peak < 400 MB and flat across counts;
onsets delayed by loading: 0.
"""

from __future__ import annotations

import argparse
import json
import os
import random
import subprocess
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("SDL_VIDEODRIVER", "dummy")
os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
REPO = Path(__file__).resolve().parent.parent
SIZE = 2000
CACHE = Path(tempfile.gettempdir()) / "trialdeck-bench-stimuli"
KIB = 1024

PROTOCOL = """study: bench-memory
screen: {resolution: [1920, 1080], refresh_hz: 60, background: "#8c8c8c"}
stimulus_size: {width_px: 1000}
markers: {stream: bench-memory-markers}
trials: {table: table.csv, factors: [level], allow_outside: true}
answer: {max: 60}
timing: {fixation_ms: [700, 1300], gap_ms: 800, stimulus_limit_s: 40}
sequence:
  - trials: {shuffle: false, no_repeat: false}
"""


def make_stimuli(n: int) -> list[Path]:
    import pygame

    CACHE.mkdir(exist_ok=True)
    paths = [CACHE / f"stim{i:03d}.png" for i in range(n)]
    missing = [p for p in paths if not p.exists()]
    if missing:
        pygame.display.init()
        pygame.display.set_mode((64, 64))
        for p in missing:
            rng = random.Random(p.name)
            surf = pygame.Surface((SIZE, SIZE))
            surf.fill((140, 140, 140))
            pts = [(rng.randrange(SIZE), rng.randrange(SIZE)) for _ in range(120)]
            for a, b in zip(pts, pts[1:], strict=False):
                pygame.draw.line(surf, (30, 30, 30), a, b, 4)
            for x, y in pts:
                pygame.draw.circle(surf, (20, 60, 140), (x, y), 18)
            tmp = p.with_suffix(".tmp.png")
            pygame.image.save(surf, str(tmp))
            tmp.replace(p)
        pygame.display.quit()
    return paths


def run(folder: Path, stimuli: list[Path], trials: int, speed: float) -> dict[str, float]:
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "p.yaml").write_text(PROTOCOL)
    rows = ["stimulus,expected,level"]
    rows += [f"{stimuli[i % len(stimuli)]},5,{i % 3}" for i in range(trials)]
    (folder / "table.csv").write_text("\n".join(rows) + "\n")
    (folder / "p.yaml").write_text(
        PROTOCOL.replace("factors: [level]}", "factors: [level], allow_outside: true}")
    )
    out = folder / "out"
    cmd = [
        sys.executable,
        "-m",
        "runner",
        "pilot",
        str(folder / "p.yaml"),
        "--participant",
        "P01",
        "--out",
        str(out),
        "--speed",
        str(speed),
    ]
    start = time.perf_counter()
    err = open(folder / "stderr.txt", "wb")  # noqa: SIM115 - closed right after the child ends
    proc = subprocess.Popen(cmd, cwd=REPO, stdout=subprocess.DEVNULL, stderr=err)
    _, status, usage = os.wait4(proc.pid, 0)
    proc.returncode = os.waitstatus_to_exitcode(status)
    seconds = time.perf_counter() - start
    err.close()
    if proc.returncode != 0:
        raise SystemExit((folder / "stderr.txt").read_text(errors="replace"))
    journal = out / "bench-memory" / "sub-P01" / "ses-1" / "journal.jsonl"
    waits, onsets, worst = 0, 0, 0.0
    with open(journal, encoding="utf-8") as fh:
        for line in fh:
            rec = json.loads(line)
            if rec.get("event") == "stimulus_onset":
                onsets += 1
                w = float(rec.get("load_wait_ms", 0.0))
                waits += w > 0
                worst = max(worst, w)
    # ru_maxrss is in KiB on Linux.
    return {
        "exit": proc.returncode,
        "peak_mb": usage.ru_maxrss * KIB / 2**20,
        "onsets": onsets,
        "waits": waits,
        "worst_wait_ms": worst,
        "seconds": seconds,
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--trials", type=int, default=500)
    parser.add_argument("--stimuli", type=int, nargs="+", default=[50, 150, 300])
    parser.add_argument("--speed", type=float, default=50.0)
    args = parser.parse_args()
    t0 = time.perf_counter()
    stimuli = make_stimuli(max(args.stimuli))
    print(
        f"{len(stimuli)} stimuli of {SIZE}x{SIZE} ready in {time.perf_counter() - t0:.1f} s ({CACHE})"
    )
    with tempfile.TemporaryDirectory() as tmp:
        for n in args.stimuli:
            r = run(Path(tmp) / f"n{n}", stimuli[:n], args.trials, args.speed)
            print(
                f"{n:>4} distinct stimuli, {r['onsets']} trials: peak RSS {r['peak_mb']:.0f} MB,"
                f" onsets that waited for decoding {r['waits']} (worst {r['worst_wait_ms']:.1f} ms),"
                f" exit {r['exit']}, {r['seconds']:.0f} s"
            )


if __name__ == "__main__":
    main()
