"""Time the audit of 100 sessions of 200 trials (target: under 5 s).

Run: /work/venv/bin/python bench/bench_audit.py [--sessions N] [--trials N]

A real headless pilot of a 200-trial protocol (the invented courier study's test images) is run
once; its session folder is copied to 100 participant folders, and all of them are audited in
one call, as `trialdeck audit` does. Prints the pilot's size and the audit's time.
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
os.environ.setdefault("SDL_VIDEODRIVER", "dummy")
os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
os.environ.setdefault("PYGAME_HIDE_SUPPORT_PROMPT", "1")

MINI = REPO / "tests" / "data" / "mini"
TARGET_S = 5.0
PILOT_SPEED = 50.0

PROTOCOL = """\
study: bench-hops
screen: {resolution: [1920, 1080], refresh_hz: 60, background: "#8c8c8c"}
stimulus_size: {width_px: 900}
markers: {stream: bench-hops-markers}
trials: {table: table.csv, factors: [nodes, density]}
answer: {prompt: "How many stops?", max: 20, unsure_key: u}
rating: {points: 9, question: "How hard was that?", low: "very easy", high: "very hard"}
timing: {fixation_ms: [300, 500], stimulus_limit_s: 20, answer_limit_s: 10, gap_ms: 300}
sequence:
  - blocks: {by: density, order: balanced-latin}
"""


def make_protocol(folder: Path, trials: int) -> Path:
    """A protocol with ``trials`` rows over the mini test images, in two density blocks."""
    shutil.copytree(MINI / "img", folder / "img")
    images = sorted((folder / "img").glob("*.png"))
    rows = ["stimulus,expected,nodes,density"]
    for k in range(trials):
        img = images[k % len(images)]
        rows.append(f"img/{img.name},{1 + k % 9},{4 + k % 5},{'dense' if k % 2 else 'sparse'}")
    (folder / "table.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    (folder / "bench.yaml").write_text(PROTOCOL, encoding="utf-8")
    return folder / "bench.yaml"


def run_pilot(protocol: Path, out: Path) -> Path:
    from runner.present.display import display_for
    from runner.protocol.load import load_protocol
    from runner.session.console import Console
    from runner.session.run import RunOptions, run_session

    loaded = load_protocol(protocol)
    opts = RunOptions(participant="B001", out=out, mode="pilot", speed=PILOT_SPEED)
    result = run_session(
        loaded,
        opts,
        open_presenter=lambda: display_for(loaded, fullscreen=False),
        console=Console(quiet=True),
    )
    if result.status != "completed":
        raise SystemExit(f"the benchmark pilot did not complete: {result.status}")
    return result.folder


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sessions", type=int, default=100)
    ap.add_argument("--trials", type=int, default=200)
    args = ap.parse_args()
    from runner.qa.audit import audit_sessions

    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        protocol = make_protocol(root / "protocol", args.trials)
        t0 = time.perf_counter()
        first = run_pilot(protocol, root / "out")
        pilot_s = time.perf_counter() - t0
        journal = first / "journal.jsonl"
        lines = journal.read_bytes().count(b"\n")
        folders = [first]
        for k in range(2, args.sessions + 1):
            dest = first.parent.parent / f"sub-B{k:03d}" / "ses-1"
            shutil.copytree(first, dest)
            folders.append(dest)
        t0, c0 = time.perf_counter(), time.process_time()
        audits = audit_sessions(folders)
        audit_s, cpu_s = time.perf_counter() - t0, time.process_time() - c0
        sound = sum(a.ok for a in audits)
        print(
            f"pilot: {args.trials} trials, {lines} journal lines, "
            f"{journal.stat().st_size / 1e6:.2f} MB, ran in {pilot_s:.1f} s"
        )
        print(
            f"audit: {len(folders)} sessions ({len(folders) * lines} journal lines) in "
            f"{audit_s:.2f} s, {audit_s / len(folders) * 1000:.1f} ms per session; "
            f"{sound} sound; CPU time {cpu_s:.2f} s"
        )
        load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
        print(f"machine: {os.cpu_count()} cores, load average {load:.2f} at the end")
        print(f"target under {TARGET_S:g} s: {'met' if audit_s < TARGET_S else 'NOT met'}")


if __name__ == "__main__":
    main()
