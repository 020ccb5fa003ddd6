"""Time write_summary on a large synthetic pool: 200 sessions x 200 main trials.

Run: /work/venv/bin/python bench/bench_summary.py
Prints the time to build the pool and the time of write_summary (tables, 8 plots, report).
The target, together with the export step, is under 10 s.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path[:0] = [str(REPO), str(REPO / "tests" / "analysis")]

from synthetic import make_pool  # noqa: E402

from runner.data.summary import write_summary  # noqa: E402

N_SESSIONS = 200
N_TRIALS = 200
REPEATS = 3


def main() -> None:
    start = time.perf_counter()
    trials, sessions = make_pool(N_SESSIONS, N_TRIALS, seed=1)
    built = time.perf_counter() - start
    print(
        f"pool: {len(sessions)} sessions, {len(trials)} rows (practice included), built in {built:.2f} s"
    )
    times = []
    for _ in range(REPEATS):
        with tempfile.TemporaryDirectory() as tmp:
            start = time.perf_counter()
            paths = write_summary(
                trials,
                sessions,
                Path(tmp),
                factors=["nodes", "density"],
                level_order={"density": ["sparse", "medium", "dense"]},
            )
            times.append(time.perf_counter() - start)
            size = sum(p.stat().st_size for p in paths)
    print(f"write_summary: {len(paths)} files, {size / 1e6:.2f} MB")
    print(
        "write_summary time (s): "
        + ", ".join(f"{t:.2f}" for t in times)
        + f"; best {min(times):.2f}, target with export < 10"
    )


if __name__ == "__main__":
    main()
