"""Time `export --recording --with-data` of a long session: EEG, eye tracker and ECG to BIDS.

Run: .venv/bin/python bench/bench_export_data.py [--minutes 60] [--channels 64]

As bench_alignment.py: a real headless pilot of a 300-trial protocol, its journal stretched to
the given minutes, and an XDF recording written to the specification (tests/qa/xdfwrite.py) with
the session's markers on a recorder clock three hours ahead drifting by 20 ppm. The recording
holds EEG of the given channel count at 1 kHz (float32, stamped per 50-sample chunk with arrival
jitter, channel labels and units in its header), an eye tracker at 500 Hz (left gaze x and y and
pupil diameter, float32) and ECG at 1 kHz (float64). Then `export --recording --with-data` runs in
a fresh process, timed, with its own peak memory (VmHWM, as bench_alignment.timed measures it). No target is set by the issue for this
command; the figures are reported in docs/performance.md.
"""

from __future__ import annotations

import argparse
import os
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

from bench_alignment import marker_fixture, stretch_journal, timed  # noqa: E402
from bench_audit import make_protocol, run_pilot  # noqa: E402

EEG_SRATE = 1000.0
EYE_SRATE = 500.0
ECG_SRATE = 1000.0


def _channels(labels: list[str], unit: str, kind: str) -> str:
    items = "".join(
        f"<channel><label>{x}</label><unit>{unit}</unit><type>{kind}</type></channel>"
        for x in labels
    )
    return f"<channels>{items}</channels>"


def write_recording(folder: Path, path: Path, channels: int) -> None:
    from xdfwrite import FixtureStream, write_xdf

    _records, mk, _rec, start, stop = marker_fixture(folder)
    rng = np.random.default_rng(1)
    n = int((stop - start) * EEG_SRATE)
    stamps = start + np.arange(n) / EEG_SRATE
    for a in range(0, n, 50):
        stamps[a : a + 50] += rng.uniform(0.002, 0.012)
    eeg = FixtureStream(
        2, "bench-eeg", "EEG", "float32", EEG_SRATE, stamps,
        rng.standard_normal((n, channels), dtype=np.float32) * np.float32(10), source_id="amp-1",
        clock_offsets=[(start, 0.0), (stop, 0.0)],
        desc_xml=_channels([f"E{i + 1}" for i in range(channels)], "microvolts", "EEG"),
    )  # fmt: skip
    del stamps
    m = int((stop - start - 1.0) * EYE_SRATE)
    eye_values = np.column_stack(
        [rng.uniform(0, 1920, m), rng.uniform(0, 1080, m), rng.normal(4.0, 0.3, m)]
    ).astype(np.float32)
    eye = FixtureStream(
        3, "bench-eyes", "Gaze", "float32", EYE_SRATE, start + 0.5 + np.arange(m) / EYE_SRATE,
        eye_values, source_id="eyes-1", clock_offsets=[(start, 0.0), (stop, 0.0)],
        desc_xml=_channels(["left_x", "left_y", "left_pupil_diameter"], "pixels", "Gaze"),
    )  # fmt: skip
    e = int((stop - start) * ECG_SRATE)
    ecg = FixtureStream(
        4, "bench-ecg", "ECG", "double64", ECG_SRATE, start - 0.2 + np.arange(e) / ECG_SRATE,
        rng.normal(0.0, 0.5, (e, 1)), source_id="ecg-1",
        clock_offsets=[(start, 0.0), (stop, 0.0)],
        desc_xml=_channels(["lead II"], "mV", "ECG"),
    )  # fmt: skip
    write_xdf(path, [mk, eeg, eye, ecg], chunk_samples=1000)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, default=60.0)
    ap.add_argument("--channels", type=int, default=64)
    ap.add_argument("--trials", type=int, default=300)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        first = run_pilot(make_protocol(root / "protocol", args.trials), root / "out")
        folder = stretch_journal(first, args.minutes, root / "long")
        xdf = root / "rec.xdf"
        t0 = time.perf_counter()
        write_recording(folder, xdf, args.channels)
        print(
            f"fixture: {args.minutes:g} min, {args.channels} ch EEG at 1 kHz, eye tracker at "
            f"500 Hz, ECG at 1 kHz; {xdf.stat().st_size / 1e9:.2f} GB written in "
            f"{time.perf_counter() - t0:.0f} s"
        )
        out = root / "bids"
        cmd = ["export", str(folder), "--out", str(out), "--recording", str(xdf), "--with-data"]
        wall, gb, text = timed([*cmd, "--line-freq", "50"])
        ok = "EEG (BrainVision)" in text
        sizes = sum(p.stat().st_size for p in out.rglob("*") if p.is_file()) / 1e9
        print(
            f"export --recording --with-data: {wall:.1f} s, peak {gb:.2f} GB, {sizes:.2f} GB "
            f"written; {'ok' if ok else text[-500:]}"
        )
        print(f"machine: {os.cpu_count()} cores, load average {os.getloadavg()[0]:.2f} at the end")


if __name__ == "__main__":
    main()
