"""Time the recording check on a synthetic 5-minute session (markers + 32-channel EEG + gaze).

Run: /work/venv/bin/python bench/bench_recording.py
Prints the file size, the time to write the fixture, to read it and to run the check.
"""

from __future__ import annotations

import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parent.parent
# Runs as a plain script: make the package and the test-fixture writer importable.
sys.path[:0] = [str(REPO), str(REPO / "tests" / "qa")]
from xdfwrite import FixtureStream, write_xdf  # noqa: E402

from runner.recording import check_recording, read_recording  # noqa: E402

MINUTES = 5
EEG_SRATE = 500.0
EEG_CHANNELS = 32
GAZE_SRATE = 120.0
TRIAL_S = 6.0
OFFSET = 250.125
START = 1000.0


def main() -> None:
    dur = MINUTES * 60.0
    journal = []
    for k in range(1, int(dur / TRIAL_S)):
        t = START + k * TRIAL_S
        journal.append((json.dumps({"event": "stimulus_onset", "trial": k}), t))
        journal.append((json.dumps({"event": "answer", "trial": k}), t + 2.5))
    times = [t for _, t in journal]
    offs = [(t, OFFSET) for t in np.linspace(START, START + dur, 60)]
    mk = FixtureStream(
        1,
        "courier-hops-markers",
        "Markers",
        "string",
        0.0,
        times,
        [p for p, _ in journal],
        source_id="trialdeck:courier-hops:station1",
        clock_offsets=offs,
    )
    n = int((dur + 10) * EEG_SRATE)
    eeg_t = START + OFFSET - 5 + np.arange(n) / EEG_SRATE
    eeg = FixtureStream(
        2,
        "depot-eeg",
        "EEG",
        "float32",
        EEG_SRATE,
        eeg_t,
        np.zeros((n, EEG_CHANNELS), dtype=np.float32),
        clock_offsets=[(t, 0.0) for t in eeg_t[:: int(EEG_SRATE * 5)]],
    )
    g = int((dur + 10) * GAZE_SRATE)
    gaze_t = START + OFFSET - 5 + np.arange(g) / GAZE_SRATE
    gaze = FixtureStream(
        3,
        "depot-gaze",
        "Gaze",
        "double64",
        GAZE_SRATE,
        gaze_t,
        np.zeros((g, 3)),
        clock_offsets=[(t, 0.0) for t in gaze_t[::600]],
    )
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "bench.xdf"
        t0 = time.perf_counter()
        write_xdf(path, [mk, eeg, gaze], chunk_samples=256)
        t1 = time.perf_counter()
        rec = read_recording(path)
        t2 = time.perf_counter()
        report = check_recording(rec, journal, source_id=None, name="courier-hops-markers")
        t3 = time.perf_counter()
        size_mb = path.stat().st_size / 1e6
    print(
        f"session {MINUTES} min, {len(journal)} markers, EEG {n} samples x {EEG_CHANNELS} ch, "
        f"gaze {g} samples; file {size_mb:.1f} MB"
    )
    print(
        f"write fixture {t1 - t0:.2f} s, read_recording {t2 - t1:.2f} s, "
        f"check_recording {t3 - t2:.3f} s, problems {len(report.problems())}"
    )


if __name__ == "__main__":
    main()
