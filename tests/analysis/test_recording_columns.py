"""The optional events.tsv columns an export with a recording adds: sample and photodiode_onset."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import pyxdf
from conftest import MINI_PROTOCOL, run_pilot

from runner.cli import main
from runner.data.export import export_sessions
from runner.recording.photodiode import light_onsets

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "qa"))
from xdfwrite import FixtureStream, write_xdf  # noqa: E402

pytestmark = pytest.mark.slow  # runs a session in real time

OFFSET_S = 2 * 3600.0 + 0.375  # recorder clock minus presenter clock
DRIFT = 30e-6
EEG_SRATE = 500.0
LIGHT_SRATE = 1000.0
LATENCY_S = 0.0213
EEG_START_AFTER_S = 1.5  # the EEG starts after the session did: early rows have no sample


@pytest.fixture(scope="module")
def session(tmp_path_factory) -> Path:
    return run_pilot(MINI_PROTOCOL, tmp_path_factory.mktemp("out"), speed=20).folder


def _journal(folder: Path) -> list[dict]:
    lines = (folder / "journal.jsonl").read_text(encoding="utf-8").splitlines()
    return [json.loads(x) for x in lines]


def _recording(folder: Path, path: Path) -> Path:
    """Markers on a drifting recorder clock, chunk-stamped 500 Hz EEG, and a 1 kHz light sensor
    (channel 2) lit LATENCY_S after each patch-lighting flip, with noise."""
    records = _journal(folder)
    markers = [(r["marker"], r["t"]) for r in records if "marker" in r]
    flips = [(r["t"], bool(r.get("photodiode"))) for r in records if r["event"] == "flip"]
    lo, hi = markers[0][1], markers[-1][1]

    def rec(t):
        return t + OFFSET_S + DRIFT * (t - lo)

    info = records[0]["markers"]
    mk = FixtureStream(
        1, info["name"], "Markers", "string", 0.0, [t for _, t in markers],
        [p for p, _ in markers], source_id=info["source_id"], created_at=lo - 10,
        clock_offsets=[(t, rec(t) - t) for t in np.linspace(lo - 1, hi + 1, 30)],
    )  # fmt: skip
    rng = np.random.default_rng(31)
    start = rec(lo) + EEG_START_AFTER_S
    n = int((rec(hi) + 2.0 - start) * EEG_SRATE)
    stamps = start + np.arange(n) / EEG_SRATE
    for a in range(0, n, 20):
        stamps[a : a + 20] += rng.uniform(0.002, 0.010)
    eeg = FixtureStream(
        2, "depot-eeg", "EEG", "float32", EEG_SRATE, stamps, rng.normal(size=(n, 3)),
        source_id="amp-01", clock_offsets=[(start, 0.0), (stamps[-1], 0.0)],
    )  # fmt: skip
    times = np.arange(rec(lo) - 1.0, rec(hi) + 1.0, 1 / LIGHT_SRATE)
    lit = np.zeros(len(times), dtype=bool)
    for (t, on), (t_next, _) in zip(flips, flips[1:] + [(flips[-1][0] + 1.0, False)], strict=True):
        if on:
            lit[(times >= rec(t) + LATENCY_S) & (times < rec(t_next) + LATENCY_S)] = True
    light = np.column_stack(
        [rng.normal(size=len(times)), 0.2 + 1.5 * lit + rng.normal(0, 0.04, len(times))]
    ).astype(np.float32)
    sensor = FixtureStream(
        3, "courier-light", "Photodiode", "float32", LIGHT_SRATE, times, light,
        source_id="light-1", clock_offsets=[(times[0], 0.0), (times[-1], 0.0)],
    )  # fmt: skip
    return write_xdf(path, [mk, eeg, sensor])


def _events(out: Path) -> tuple[pd.DataFrame, dict]:
    (tsv,) = out.glob("sub-*/ses-*/*/*_events.tsv")
    side = json.loads(tsv.with_suffix(".json").read_text(encoding="utf-8"))
    return pd.read_csv(tsv, sep="\t", na_values="n/a", keep_default_na=False), side


def test_sample_column_is_the_nearest_dejittered_eeg_sample(session, tmp_path):
    """Each row's sample is the nearest EEG sample to its onset; rows before the EEG are n/a.

    Source: numpy.searchsorted on the EEG timestamps of
    pyxdf.load_xdf(synchronize_clocks=True, dejitter_timestamps=True), the reference reading.
    """
    xdf = _recording(session, tmp_path / "rec.xdf")
    out = tmp_path / "bids"
    export_sessions([session], out, recordings=[xdf], sample=True)
    events, side = _events(out)
    assert list(events.columns)[-1] == "sample" and "Description" in side["sample"]
    streams, _ = pyxdf.load_xdf(str(xdf), synchronize_clocks=True, dejitter_timestamps=True)
    eeg = next(s for s in streams if s["info"]["type"][0] == "EEG")["time_stamps"]
    half = 0.5 / EEG_SRATE
    outside = 0
    for row in events.itertuples():
        t = row.onset + eeg[0]  # onsets count from the first dejittered EEG sample
        if t < eeg[0] - half or t > eeg[-1] + half:
            assert pd.isna(row.sample)
            outside += 1
            continue
        i = int(np.searchsorted(eeg, t))
        near = [j for j in (i - 1, i) if 0 <= j < len(eeg)]
        best = min(near, key=lambda j: abs(eeg[j] - t))
        # Onsets are written to 1 us: a row that close to a midpoint may go either way.
        ties = {j for j in near if abs(abs(eeg[j] - t) - abs(eeg[best] - t)) < 2e-6}
        assert int(row.sample) in ties | {best}
    assert outside >= 1 and events["sample"].notna().sum() > 10


def test_photodiode_column_recovers_the_display_latency(session, tmp_path):
    """photodiode_onset - onset is the simulated display latency within one sensor sample on
    every row whose onset lit the patch, and n/a on every other row.

    Source: common practice (no published source): the latency is known by construction (with
    sensor noise); the rows that lit the patch are the journal's flips that turned it on.
    """
    xdf = _recording(session, tmp_path / "rec.xdf")
    out = tmp_path / "bids"
    export_sessions([session], out, recordings=[xdf], photodiode="courier-light:2")
    events, side = _events(out)
    assert list(events.columns)[-1] == "photodiode_onset"
    assert side["photodiode_onset"]["Units"] == "s"
    has = events[events["photodiode_onset"].notna()]
    lag = has["photodiode_onset"] - has["onset"]
    assert np.all(np.abs(lag - LATENCY_S) <= 1 / LIGHT_SRATE)
    flips = [(r["t"], bool(r.get("photodiode"))) for r in _journal(session) if r["event"] == "flip"]
    assert len(has) == len(light_onsets(flips)) > 0


def test_export_photodiode_options_and_messages_match_audit(session, tmp_path, capsys):
    """export and audit refuse --photodiode without --recording or with a bad channel in the
    same words, and name a missing sensor stream in the same sentence.

    Source: common practice (no published source): issue 11, item 7 (options agree across
    commands).
    """
    xdf = _recording(session, tmp_path / "rec.xdf")
    cases = [
        (["--photodiode", "courier-light"], 2),
        (["--recording", str(xdf), "--photodiode", "courier-light:0"], 2),
        (["--recording", str(xdf), "--photodiode", "nowhere:1"], 1),
    ]
    for k, (extra, code) in enumerate(cases):
        assert main(["audit", str(session), *extra]) == code
        audit_err = capsys.readouterr()
        said = audit_err.err + audit_err.out
        assert main(["export", str(session), "--out", str(tmp_path / f"b{k}"), *extra]) == code
        export_err = capsys.readouterr().err
        sentence = export_err.strip().splitlines()[-1].split(": ", 1)[-1]
        assert sentence.rstrip(".")[:60] in said
    assert main(["export", str(session), "--out", str(tmp_path / "s"), "--sample"]) == 2
    assert "--sample needs --recording" in capsys.readouterr().err
