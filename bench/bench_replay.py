"""Time `replay --frames` of a 100-trial session, headless (target: under 30 s).

Run: /work/venv/bin/python bench/bench_replay.py [--trials N]

A real headless pilot of a 100-trial protocol is run first (see bench_audit.py for the
protocol); then its screens are replayed untimed with frame export and a contact sheet, as
`trialdeck replay SESSION_DIR --frames DIR` does without a display. Prints the times.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_audit import make_protocol, run_pilot  # noqa: E402

TARGET_S = 30.0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=100)
    args = ap.parse_args()
    from runner.qa.replay import plan_replay, replay_session

    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        protocol = make_protocol(root / "protocol", args.trials)
        t0 = time.perf_counter()
        folder = run_pilot(protocol, root / "out")
        pilot_s = time.perf_counter() - t0
        t0 = time.perf_counter()
        plan = plan_replay(folder)
        plan_s = time.perf_counter() - t0
        t0 = time.perf_counter()
        result = replay_session(plan, timed=False, frames_dir=root / "frames")
        replay_s = time.perf_counter() - t0
        total = plan_s + replay_s
        w, h = plan.model.screen.resolution
        print(
            f"pilot: {args.trials} trials, {len(plan.screens)} journaled screens, ran in "
            f"{pilot_s:.1f} s"
        )
        print(
            f"replay --frames: {len(result.frames)} PNG frames at {w}x{h} + contact sheet in "
            f"{total:.2f} s (plan {plan_s:.2f} s, draw and save {replay_s:.2f} s, "
            f"{replay_s / max(1, len(result.frames)) * 1000:.1f} ms per frame)"
        )
        print(f"target under {TARGET_S:g} s: {'met' if total < TARGET_S else 'NOT met'}")


if __name__ == "__main__":
    main()
