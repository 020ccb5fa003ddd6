"""Time `trialdeck physio` on a one-hour session: 64-channel EEG at 1 kHz, pupil at 500 Hz, ECG at
1 kHz, 300 trials. Targets: under 60 s and under 3 GB for one session.

Run: .venv/bin/python bench/bench_physio.py [--sessions N --jobs J]

The session journal is written like bench/bench_export.py's (runner's Journal class, the engine's
event structure, 300 trials, about an hour); its recording is simulated by
:func:`runner.physio.synth.simulate_recording` (invented signals), padded to at least an hour.
Neither is timed. Then ``trialdeck physio`` runs in a child process (figures included); its wall
time and the child's own peak resident memory (``VmHWM``) are printed. With ``--sessions N`` the
same session and recording are processed N times in J worker processes
(:func:`runner.physio.pipeline.run_sessions`, without figures).
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "bench"))

import bench_export  # noqa: E402

from runner.physio.pipeline import SessionJob, run_sessions  # noqa: E402
from runner.physio.synth import SynthSettings, simulate_recording  # noqa: E402

N_TRIALS = 300
TARGET_S = 60.0
TARGET_GB = 3.0
SETTINGS = SynthSettings(
    eeg_channels=64, eeg_srate=1000.0, pupil_srate=500.0, ecg_srate=1000.0, min_duration_s=3600.0
)


# The child's own high-water mark (VmHWM of /proc/self/status), as bench_alignment.py measures it:
# ru_maxrss of a child carries this script's peak (writing the recording) across fork and exec.
PEAK_CODE = (
    "import sys\n"
    "from runner.cli import main\n"
    "try:\n"
    "    rc = main(sys.argv[1:])\n"
    "finally:\n"
    "    with open('/proc/self/status') as f:\n"
    "        kb = next(int(x.split()[1]) for x in f if x.startswith('VmHWM'))\n"
    "    print('PEAK_KB', kb, file=sys.stderr)\n"
    "sys.exit(rc)\n"
)


def _run(args: list[str]) -> tuple[float, float, float]:
    """Wall seconds, CPU seconds and peak memory (GB, the child's own VmHWM) of ``trialdeck``
    with ``args`` in a child process (CPU includes its worker processes)."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    done = subprocess.run(
        [sys.executable, "-c", PEAK_CODE, *args],
        check=True,
        cwd=REPO,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
    )
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime + after.ru_stime) - (before.ru_utime + before.ru_stime)
    kb = next(int(x.split()[1]) for x in done.stderr.splitlines() if x.startswith("PEAK_KB"))
    return wall, cpu, kb / 1024**2


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--sessions", type=int, default=0, help="also N copies in J workers")
    parser.add_argument("--jobs", type=int, default=2)
    opts = parser.parse_args()
    bench_export.N_TRIALS_RUN = N_TRIALS
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        folder = bench_export.write_session(root / "sessions", 0, np.random.default_rng(3))
        rec = root / "rec.xdf"
        start = time.perf_counter()
        truth = simulate_recording(folder, rec, SETTINGS)
        made = time.perf_counter() - start
        size = rec.stat().st_size / 1024**3
        span = (truth.beat_times[-1] - truth.beat_times[0]) / 60
        print(
            f"recording: {size:.2f} GB, {span:.0f} min, {len(truth.trials)} trials "
            f"(simulated in {made:.0f} s, not timed)"
        )
        wall, cpu, peak = _run([
            "physio", str(folder), "--recording", str(rec), "--out", str(root / "out"),
        ])  # fmt: skip
        verdict = "OK" if wall < TARGET_S and peak < TARGET_GB else "OVER TARGET"
        print(
            f"physio, 1 session: {wall:.1f} s wall, {cpu:.1f} s CPU, peak RSS {peak:.2f} GB "
            f"(targets {TARGET_S:.0f} s, {TARGET_GB:.0f} GB): {verdict}"
        )
        if opts.sessions:
            # The command refuses the same session twice, so the copies go through
            # run_sessions (what the command calls) without figures, in worker processes.
            jobs = [SessionJob(folder=folder, recording=rec) for _ in range(opts.sessions)]
            start = time.perf_counter()
            cpu0 = time.process_time()
            before = resource.getrusage(resource.RUSAGE_CHILDREN)
            rows = sum(len(r.trials) for r in run_sessions(jobs, workers=opts.jobs))
            wall = time.perf_counter() - start
            after = resource.getrusage(resource.RUSAGE_CHILDREN)
            cpu = time.process_time() - cpu0
            cpu += (after.ru_utime + after.ru_stime) - (before.ru_utime + before.ru_stime)
            print(
                f"physio, {opts.sessions} sessions, {opts.jobs} worker processes: {wall:.1f} s "
                f"wall ({wall / opts.sessions:.1f} s per session), {cpu:.0f} s CPU, {rows} rows, "
                f"peak RSS of one worker {after.ru_maxrss / 1024**2:.2f} GB"
            )
    print(f"machine: {os.cpu_count()} cores, load average {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
