"""Time audit and export of a one-hour session with 64-channel EEG at 1 kHz and a photodiode.

Run: .venv/bin/python bench/bench_alignment.py [--minutes 60] [--channels 64]

A real headless pilot of a 300-trial protocol is run once; its journal is rewritten through the
journal writer with every time stretched so the session spans the given minutes (the hash chain
stays valid). An XDF recording is then written to the XDF specification (tests/qa/xdfwrite.py):
the session's markers on a recorder clock three hours ahead and drifting by 20 ppm, EEG of the
given channel count at 1 kHz stamped per chunk with arrival jitter, and a 1 kHz photodiode
channel that lights 18 ms after each patch-lighting flip. Then `audit --recording --photodiode`
and `export --recording --sample --photodiode` run on it, each timed, with the peak memory of a fresh process (its own high-water mark, VmHWM).
Targets: each under 20 s and 2 GB.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "tests" / "qa"))
sys.path.insert(0, str(REPO / "bench"))
os.environ.setdefault("SDL_VIDEODRIVER", "dummy")
os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
os.environ.setdefault("PYGAME_HIDE_SUPPORT_PROMPT", "1")

from bench_audit import make_protocol, run_pilot  # noqa: E402

OFFSET_S = 3 * 3600.0 + 0.25
DRIFT = 20e-6
LATENCY_S = 0.018
SRATE = 1000.0
TARGET_S = 20.0
TARGET_GB = 2.0


def stretch_journal(folder: Path, minutes: float, out: Path) -> Path:
    """Copy the session to ``out`` with every ``t`` stretched to span ``minutes``."""
    from runner.journal.read import read_journal
    from runner.journal.writer import Journal

    read = read_journal(folder / "journal.jsonl")
    header = {
        k: v for k, v in read.header.items() if k not in ("seq", "prev", "h", "event", "format")
    }
    times = [r["t"] for r in read.records if "t" in r]
    t0, t1 = min(times), max(times)
    k = minutes * 60.0 / (t1 - t0)
    dest = out / folder.relative_to(folder.parent.parent.parent)
    dest.parent.mkdir(parents=True, exist_ok=True)
    journal = Journal.create(dest, header)
    for r in read.records[1:]:
        fields = {f: v for f, v in r.items() if f not in ("seq", "prev", "h", "event")}
        if "t" in fields:
            fields["t"] = t0 + (fields["t"] - t0) * k
        journal.append(r["event"], **fields)
    journal.close()
    for name in ("protocol.yaml", "trial_table.csv"):
        (dest / name).write_bytes((folder / name).read_bytes())
    return dest


def marker_fixture(folder: Path) -> tuple[list[dict], object, object, float, float]:
    """The journal's records, its marker stream on the drifting recorder clock (a fixture
    stream), the presenter-to-recorder clock mapping, and the recorder times 5 s before the first
    and after the last marker (the span the other streams cover)."""
    from xdfwrite import FixtureStream

    records = [json.loads(x) for x in (folder / "journal.jsonl").read_text().splitlines()]
    markers = [(r["marker"], r["t"]) for r in records if "marker" in r]
    lo, hi = markers[0][1], markers[-1][1]
    info = records[0]["markers"]

    def rec(t):
        return t + OFFSET_S + DRIFT * (t - lo)

    mk = FixtureStream(
        1, info["name"], "Markers", "string", 0.0, [t for _, t in markers], [p for p, _ in markers],
        source_id=info["source_id"], created_at=lo - 10,
        clock_offsets=[(t, rec(t) - t) for t in np.linspace(lo - 5, hi + 5, 200)],
    )  # fmt: skip
    return records, mk, rec, rec(lo) - 5.0, rec(hi) + 5.0


def write_recording(folder: Path, path: Path, channels: int) -> None:
    from xdfwrite import FixtureStream, write_xdf

    records, mk, rec, start, stop = marker_fixture(folder)
    flips = [(r["t"], bool(r.get("photodiode"))) for r in records if r["event"] == "flip"]
    n = int((stop - start) * SRATE)
    rng = np.random.default_rng(1)
    true = start + np.arange(n) / SRATE
    stamps = true.copy()
    for a in range(0, n, 50):
        stamps[a : a + 50] += rng.uniform(0.002, 0.012)
    eeg = FixtureStream(
        2, "bench-eeg", "EEG", "float32", SRATE, stamps,
        rng.standard_normal((n, channels), dtype=np.float32) * np.float32(10), source_id="amp-1",
        clock_offsets=[(start, 0.0), (stop, 0.0)],
    )  # fmt: skip
    lit = np.zeros(n, dtype=bool)
    for (t, on), (t_next, _) in zip(flips, flips[1:] + [(flips[-1][0] + 1, False)], strict=True):
        if on:
            a, b = np.searchsorted(true, [rec(t) + LATENCY_S, rec(t_next) + LATENCY_S])
            lit[a:b] = True
    light = FixtureStream(
        3, "bench-light", "Photodiode", "float32", SRATE, true,
        (0.3 + 2.0 * lit + rng.normal(0, 0.05, n)).astype(np.float32), source_id="light-1",
        clock_offsets=[(start, 0.0), (stop, 0.0)],
    )  # fmt: skip
    write_xdf(path, [mk, eeg, light], chunk_samples=1000)


def timed(cmd: list[str]) -> tuple[float, float, str]:
    """Run a trialdeck command in a fresh process: wall time (s), peak memory (GB), output."""
    # The peak is the process's own high-water mark (VmHWM of /proc/self/status on Linux).
    # ru_maxrss is only the fallback: Linux carries the parent's peak across fork and exec into
    # it, so it reported this script's own memory (the fixture writing) instead of the command's.
    code = (
        "import resource, sys\n"
        "sys.argv = ['trialdeck'] + sys.argv[1:]\n"
        "def peak_kb():\n"
        "    try:\n"
        "        with open('/proc/self/status') as f:\n"
        "            return next(int(x.split()[1]) for x in f if x.startswith('VmHWM'))\n"
        "    except (OSError, StopIteration):\n"
        "        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss\n"
        "try:\n"
        "    from runner.cli import main\n"
        "    rc = main(sys.argv[1:])\n"
        "finally:\n"
        "    print('PEAK_KB', peak_kb(), file=sys.stderr)\n"
        "sys.exit(rc)\n"
    )
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-c", code, *cmd], capture_output=True, text=True)
    wall = time.perf_counter() - t0
    peak = [int(x.split()[1]) for x in proc.stderr.splitlines() if x.startswith("PEAK_KB")]
    return wall, (peak[0] / 2**20 if peak else float("nan")), proc.stdout + proc.stderr


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, default=60.0)
    ap.add_argument("--channels", type=int, default=64)
    ap.add_argument("--trials", type=int, default=300)
    ap.add_argument("--keep", type=Path, help="write the fixture here and keep it (for profiling)")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        root = args.keep or Path(tmp)
        first = run_pilot(make_protocol(root / "protocol", args.trials), root / "out")
        folder = stretch_journal(first, args.minutes, root / "long")
        xdf = root / "rec.xdf"
        t0 = time.perf_counter()
        write_recording(folder, xdf, args.channels)
        print(
            f"fixture: {args.minutes:g} min, {args.channels} ch EEG + photodiode at 1 kHz, "
            f"{xdf.stat().st_size / 1e9:.2f} GB written in {time.perf_counter() - t0:.0f} s"
        )
        audit = ["audit", str(folder), "--recording", str(xdf), "--photodiode", "bench-light"]
        wall, gb, out = timed(audit)
        line = next((x for x in out.splitlines() if "photodiode bench-light" in x), "").strip()
        print(f"audit --recording --photodiode: {wall:.1f} s, peak {gb:.2f} GB; {line}")
        export = ["export", str(folder), "--out", str(root / "bids"), "--recording", str(xdf),
                  "--sample", "--photodiode", "bench-light"]  # fmt: skip
        wall2, gb2, out2 = timed(export)
        ok = "Exported 1 session" in out2
        print(
            f"export --recording --sample --photodiode: {wall2:.1f} s, peak {gb2:.2f} GB; {'ok' if ok else out2[-300:]}"
        )
        load = os.getloadavg()[0]
        print(f"machine: {os.cpu_count()} cores, load average {load:.2f} at the end")
        met = max(wall, wall2) < TARGET_S and max(gb, gb2) < TARGET_GB
        print(f"targets under {TARGET_S:g} s and {TARGET_GB:g} GB: {'met' if met else 'NOT met'}")


if __name__ == "__main__":
    main()
