"""Time write_summary on a large synthetic pool: 200 sessions x 200 main trials.

Run: .venv/bin/python bench/bench_summary.py [--physio]
Prints the time to build the pool and the time of write_summary (tables, 8 plots, report).
The target, together with the export step, is under 10 s.

With ``--physio`` a synthetic physio_trials.csv (two measures) is written and passed in, so the
pilot report's models run too (difficulty drivers, mixed model, two-lines test of response time,
accuracy and both measures, 12 plots); the target is under 15 s. The first run includes the
one-time imports (statsmodels, scipy) a fresh `trialdeck summary` process pays.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path[:0] = [str(REPO), str(REPO / "tests" / "analysis")]

from synthetic import make_pool  # noqa: E402
from synthetic_physio import write_physio  # noqa: E402

from runner.data.load_curve import read_physio  # noqa: E402
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
    physio = None
    physio_dir = tempfile.TemporaryDirectory()
    if "--physio" in sys.argv[1:]:
        folder = Path(physio_dir.name)
        main_trials = trials[trials["part"] == "main"]
        physio = read_physio(write_physio(main_trials, folder))
        print(f"physiology: {len(physio.frame)} rows, measures {', '.join(physio.measures)}")
    times = []
    cpu = []
    for _ in range(REPEATS):
        with tempfile.TemporaryDirectory() as tmp:
            start = time.perf_counter()
            cpu_start = time.process_time()
            paths = write_summary(
                trials,
                sessions,
                Path(tmp),
                factors=["nodes", "density"],
                level_order={"density": ["sparse", "medium", "dense"]},
                physio=physio,
            )
            times.append(time.perf_counter() - start)
            cpu.append(time.process_time() - cpu_start)
            size = sum(p.stat().st_size for p in paths)
    print(f"write_summary: {len(paths)} files, {size / 1e6:.2f} MB")
    print(
        "write_summary time (s): "
        + ", ".join(f"{t:.2f}" for t in times)
        + f"; first (with imports) {times[0]:.2f}, best {min(times):.2f}; target "
        + ("< 15 with physiology" if physio is not None else "with export < 10")
    )
    print("write_summary CPU time of this process (s): " + ", ".join(f"{t:.2f}" for t in cpu))
    physio_dir.cleanup()


if __name__ == "__main__":
    main()
