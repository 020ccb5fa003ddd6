"""Benchmark of the stimulus kit: 60 stimuli of up to 200 nodes and 1,000 links.

Run with ``python bench/bench_stimuli.py`` from the repository root. It builds the stimuli into
a temporary folder and prints the figures (total and per-stimulus times, how many drawings met
the readability limits). Target: under 60 s on 2 cores.
"""

from __future__ import annotations

import os
import platform
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from runner.graphs.build import build  # noqa: E402
from runner.graphs.spec import parse_spec  # noqa: E402

TARGET_S = 60.0

# 4 sizes x 3 densities x 5 instances = 60 stimuli; the largest have 200 nodes x 5.0 = 1,000
# links. Graphs that dense cannot be drawn without links passing near nodes at this canvas
# size, so the readability policy is keep_best with few attempts (the count is printed).
SPEC = """\
seed: 99
canvas: {size_px: [1000, 1000], margin_px: 40, background: "#8c8c8c"}
style: {node_size_px: 7, link_width_px: 1.0, target_size_px: 22}
readability:
  min_node_distance_px: 14
  link_clearance_px: 6
  attempts: 2
  if_unreadable: keep_best
count_targets: false
formats: [png]
sets:
  - name: bench
    family: scale_free
    layout: stress
    sizes: [50, 100, 150, 200]
    densities: {low: 1.5, mid: 3.0, high: 5.0}
    instances: 5
    pairs: {strategy: path_length, path_links: [2, 6]}
"""


def main() -> int:
    spec = parse_spec(SPEC, file="bench-spec")
    load = os.getloadavg()
    times: list[float] = []
    last = [time.perf_counter()]

    def tick(done: int, total: int, name: str) -> None:
        now = time.perf_counter()
        times.append(now - last[0])
        last[0] = now

    with tempfile.TemporaryDirectory() as tmp:
        start = time.perf_counter()
        cpu_start = time.process_time()
        last[0] = start
        rows = build(spec, Path(tmp), progress=tick)
        total = time.perf_counter() - start
        cpu = time.process_time() - cpu_start
        png_kb = [os.path.getsize(Path(tmp) / r["stimulus"]) / 1024 for r in rows]
    readable = sum(
        int(r["node_link_overlaps"]) == 0 and int(r["close_node_pairs"]) == 0 for r in rows
    )
    print(
        f"machine: {platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}"
    )
    print(
        f"stimuli: {len(rows)}, largest: {max(int(r['nodes']) for r in rows)} nodes, "
        f"{max(int(r['links']) for r in rows)} links"
    )
    print(
        f"total: {total:.1f} s (target < {TARGET_S:.0f} s) -> {'PASS' if total < TARGET_S else 'FAIL'}"
    )
    # Wall time depends on what else runs on the machine; CPU time (all threads) does less.
    print(f"cpu time: {cpu:.1f} s, load average before the run: {load[0]:.2f}")
    print(f"per stimulus: median {statistics.median(times):.2f} s, max {max(times):.2f} s")
    for n in sorted({int(r["nodes"]) for r in rows}):
        sel = [t for t, r in zip(times, rows, strict=True) if int(r["nodes"]) == n]
        print(f"  {n:>3} nodes: mean {statistics.mean(sel):.2f} s")
    print(f"met readability limits: {readable}/{len(rows)} (others kept as best of 2 attempts)")
    print(f"PNG size: median {statistics.median(png_kb):.0f} kB, max {max(png_kb):.0f} kB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
