"""End to end: a pilot, a simulated recording with known per-trial effects, `trialdeck physio`."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest
from conftest import run_pilot
from protofix import merged, write_protocol

from runner.cli.app import main
from runner.physio.pipeline import SessionJob, process_session, run_sessions
from runner.physio.synth import SynthSettings, simulate_recording

pytestmark = pytest.mark.slow

SPEED = 4.0
# Large invented effects, so that a handful of trials shows them above the simulated noise.
SETTINGS = SynthSettings(
    pupil_dilation_mm=(0.1, 0.6),
    theta_uv=(2.0, 20.0),
    alpha_uv=(8.0, 8.0),
    eeg_noise_uv=2.0,
    seed=5,
)
PROTOCOL = merged(
    timing={"fixation_ms": [2000, 2400], "gap_ms": 400, "feedback_ms": 200},
    sequence=[
        {"rest": {"seconds": 8, "label": "baseline"}},
        {"practice": {"where": {"set": "practice"}, "feedback": True}},
        {"blocks": {"where": {"set": "main"}, "by": "density"}},
    ],
    physio={"eeg": {"groups": {"front": ["Fz", "F3", "F4"], "back": ["Pz", "P3", "P4"]}}},
)


@pytest.fixture(scope="module")
def piloted(tmp_path_factory):
    """One pilot session of a five-trial protocol and its simulated recording."""
    root = tmp_path_factory.mktemp("physio-e2e")
    protocol = write_protocol(root / "study", PROTOCOL)
    result = run_pilot(protocol, root / "sessions", speed=SPEED)
    assert result.status == "completed"
    truth = simulate_recording(result.folder, root / "rec.xdf", SETTINGS)
    return result.folder, root / "rec.xdf", truth, root


def _rows(path: Path) -> list[dict[str, str]]:
    with path.open(encoding="utf-8", newline="") as fh:
        return list(csv.DictReader(fh))


def test_physio_recovers_the_simulated_effects(piloted):
    """Per-trial pupil peaks, frontal theta and block heart rates follow the simulated truth.

    Source: the effects written by runner.physio.synth (pupil plateau in mm, theta amplitude in
    uV, beat times); a sinusoid of amplitude A carries power A^2/2 (Parseval), so theta power is
    a straight-line function of A^2 (plus the background's power) across trials.
    """
    folder, rec, truth, root = piloted
    out = root / "out"
    assert main(["physio", str(folder), "--recording", str(rec), "--out", str(out)]) == 0
    rows = _rows(out / "physio_trials.csv")
    assert [int(r["trial"]) for r in rows] == truth.trials
    # Pupil: the plateau is reached within the window, so the peak change is the dilation
    # (tolerance: 0.05 mm for noise plus 10 % for the rise still under way).
    checked = 0
    for r, want in zip(rows, truth.pupil_dilation_mm, strict=True):
        if r["pupil_peak_change_mm"]:
            assert abs(float(r["pupil_peak_change_mm"]) - want) <= 0.05 + 0.1 * want, r["trial"]
            checked += 1
    assert checked >= 4
    # EEG: the protocol's physio section named the groups 'front' and 'back'.
    theta = [r["eeg_theta_front_log10_uv2_per_hz"] for r in rows]
    kept = [(float(v), a) for v, a in zip(theta, truth.theta_uv, strict=True) if v]
    assert len(kept) >= 4
    got, amp = np.array(kept).T
    # Band power is linear in A^2 plus the background's power, so it correlates with A^2.
    assert np.corrcoef(10**got, amp**2)[0, 1] > 0.95
    # Heart rate of each measured block: the simulated beats inside it.
    blocks = _rows(out / "physio_blocks.csv")
    measured = [b for b in blocks if b["hr_bpm"]]
    assert measured
    for b in measured:
        start = float(b["start_s"]) + truth.eeg_first_time
        end = float(b["end_s"]) + truth.eeg_first_time
        inside = truth.beat_times[(truth.beat_times >= start) & (truth.beat_times <= end)]
        want = 60.0 / np.mean(np.diff(inside))
        assert abs(float(b["hr_bpm"]) - want) < 3.0, b


def test_sidecars_describe_every_column(piloted):
    """Each column of both tables has Description, Units and Kind in its JSON sidecar."""
    folder, rec, _truth, root = piloted
    out = root / "out-sidecars"
    assert main(["physio", str(folder), "--recording", str(rec), "--out", str(out)]) == 0
    for name in ("physio_trials", "physio_blocks"):
        with (out / f"{name}.csv").open(encoding="utf-8") as fh:
            header = next(csv.reader(fh))
        side = json.loads((out / f"{name}.json").read_text(encoding="utf-8"))
        assert list(side) == header
        for col in side.values():
            assert set(col) == {"Description", "Units", "Kind"}
            assert col["Kind"] in {"key", "trial", "measure", "quality", "flag"}
    kinds = json.loads((out / "physio_trials.json").read_text(encoding="utf-8"))
    assert kinds["pupil_mean_change_mm"]["Kind"] == "measure"
    assert kinds["pupil_valid_share"]["Kind"] == "quality"
    for row in _rows(out / "physio_trials.csv"):
        fine = not row["pupil_flags"] and not row["hr_flags"] and row["eeg_kept"] == "1"
        assert row["valid"] == ("1" if fine else "0")
    # The protocol's physio_valid_share_below rule reads the same column.
    import pandas as pd

    from runner.data.exclusions import physio_validity

    table = pd.read_csv(out / "physio_trials.csv", dtype={"participant": str, "session": str})
    assert physio_validity(table) == {("P01", "1"): pytest.approx(table["valid"].mean())}
    assert sorted(p.name for p in (out / "qa").iterdir()) == [
        "sub-P01_ses-1_ecg.png",
        "sub-P01_ses-1_eeg.png",
        "sub-P01_ses-1_pupil.png",
    ]


def test_worker_processes_give_the_same_rows(piloted):
    """Two sessions in two worker processes give the rows of the same work done here."""
    folder, rec, _truth, _root = piloted
    jobs = [SessionJob(folder=folder, recording=rec), SessionJob(folder=folder, recording=rec)]
    here = process_session(jobs[0])
    there = list(run_sessions(jobs, workers=2))
    assert [r.trials for r in there] == [here.trials, here.trials]
    assert [r.periods for r in there] == [here.periods, here.periods]


def test_dask_cluster_gives_the_same_rows(piloted):
    """A session sent to a Dask LocalCluster (in this process) gives the rows of the work done here."""
    distributed = pytest.importorskip("dask.distributed")
    folder, rec, _truth, _root = piloted
    job = SessionJob(folder=folder, recording=rec)
    here = process_session(job)
    with distributed.LocalCluster(
        n_workers=1, processes=False, threads_per_worker=1, dashboard_address=None
    ) as cluster:
        there = list(run_sessions([job], scheduler=cluster.scheduler_address))
    assert there[0].trials == here.trials


def test_demo_shows_the_path_to_per_trial_physiology(tmp_path, capsys, monkeypatch):
    """`trialdeck demo` writes a simulated recording and a physio table with a row per trial."""
    import shutil

    from conftest import REPO

    monkeypatch.chdir(tmp_path)
    shutil.copytree(REPO / "configs", tmp_path / "configs")
    shutil.copytree(REPO / "stimuli_demo", tmp_path / "stimuli_demo")
    assert main(["demo", "--speed", "50", "--out", "ds", "--physio-out", "dp"]) == 0
    out = capsys.readouterr().out
    assert "Simulated recording" in out and "trialdeck physio" in out
    trials = _rows(tmp_path / "ds" / "courier-hops" / "sub-P01" / "ses-1" / "trials.csv")
    physio = _rows(tmp_path / "dp" / "physio_trials.csv")
    assert [r["trial"] for r in physio] == [r["trial"] for r in trials]
    assert [r["stimulus"] for r in physio] == [r["stimulus"] for r in trials]
    assert sum(1 for r in physio if r["pupil_mean_change_mm"]) >= len(physio) // 2


def _physio_read(rec):
    """The physio path's one read of ``rec``: markers plus every numeric stream, all channels."""
    from runner.physio.signals import read_chosen, stream_headers

    headers = stream_headers(rec)
    wanted = {str(h.stream_id): (h, None) for h in headers if h.channel_format != "string"}
    markers = {h.stream_id for h in headers if h.type == "Markers"}
    return headers, wanted, read_chosen(rec, wanted, markers)


def test_physio_read_equals_pyxdf(piloted):
    """The physio path's streams (via the one reader) read back as pyxdf reads them: clocks
    synchronised, float32 samples, marker strings.

    Source: pyxdf.load_xdf (synchronize_clocks=True), the reference XDF reader.
    """
    import pyxdf

    from runner.physio.signals import signals_from

    _folder, rec, _truth, _root = piloted
    _headers, wanted, got = _physio_read(rec)
    signals = signals_from(got, wanted)
    ref, _ = pyxdf.load_xdf(str(rec), synchronize_clocks=True, dejitter_timestamps=False)
    assert len(ref) == len(got.streams)
    for entry in ref:
        sid = int(entry["info"]["stream_id"])
        np.testing.assert_allclose(got.timestamps(sid), entry["time_stamps"], rtol=0, atol=1e-9)
        if entry["info"]["channel_format"][0] == "string":
            assert got.values(sid) == entry["time_series"]
        else:
            expected = np.asarray(entry["time_series"], dtype=np.float32)
            np.testing.assert_array_equal(got.values(sid), expected)
            np.testing.assert_array_equal(signals[str(sid)].data, expected)
            assert signals[str(sid)].data.dtype == np.float32


def test_physio_origin_equals_the_export_origin(piloted):
    """The clock model and time zero the physio path fits to its one read (markers and chosen
    streams only) equal those export's recording_origin fits to the whole file."""
    from runner.data.origins import recording_origin
    from runner.data.sessions import load_session
    from runner.physio.windows import session_times

    folder, rec, _truth, _root = piloted
    session = load_session(folder)
    headers, _wanted, got = _physio_read(rec)
    eeg = next(h.stream_id for h in headers if h.type == "EEG")
    mine = session_times(session, rec, rec=got, zero_stream=eeg).origin
    theirs = recording_origin(session, rec)
    assert mine.zero == pytest.approx(theirs.zero, abs=1e-9)
    assert mine.t0 == pytest.approx(theirs.t0, abs=1e-9)
    for _payload, t in session.markers(on_timeline=True):
        assert mine.onset(t) == pytest.approx(theirs.onset(t), abs=1e-9)


def test_the_same_session_twice_is_refused(piloted, capsys):
    """Giving one session folder twice is a usage error before any work, naming both."""
    folder, rec, _truth, root = piloted
    out = root / "out-twice"
    args = ["physio", str(folder), str(folder), "--recording", str(rec), "--recording", str(rec)]
    assert main([*args, "--out", str(out)]) == 2
    assert "give each session once" in capsys.readouterr().err
    assert not out.exists()
