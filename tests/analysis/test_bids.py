"""BIDS events export checked against the machine-readable BIDS schema, pyxdf and trials.csv."""

from __future__ import annotations

import csv
import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import pyxdf
from bidsschematools import rules, schema, validator
from export_pilots import pilot_root

from runner.data.export import (
    ROW_KINDS,
    bids_events,
    export_sessions,
    find_session_folders,
    load_session,
    recording_origin,
    session_origin,
    write_bids_events,
)
from runner.errors import RecordingError
from runner.session.events import MARKED_EVENTS
from runner.session.journal import JOURNAL_NAME, read_journal

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "qa"))
from xdfwrite import FixtureStream, write_xdf  # noqa: E402

pytestmark = pytest.mark.slow  # runs sessions in real time

NA = "n/a"
RECORDER_OFFSET_S = 5.25  # recorder clock minus presenter clock in the XDF fixture
EEG_SRATE = 250.0
EEG_LEAD_S = 3.0  # the EEG starts this long before the session


@pytest.fixture(scope="module")
def bids_schema():
    return schema.load_schema()


@pytest.fixture(scope="session")
def pilots(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return pilot_root(tmp_path_factory.getbasetemp())


@pytest.fixture(scope="session")
def bids_out(pilots: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("bids")
    export_sessions([pilots], out)
    return out


def _tsv(path: Path) -> tuple[list[str], list[dict[str, str]]]:
    with open(path, newline="", encoding="utf-8") as fh:
        reader = csv.DictReader(fh, delimiter="\t")
        return list(reader.fieldnames or []), list(reader)


def _events_files(out: Path) -> list[Path]:
    return sorted(out.glob("sub-*/ses-*/*/*_events.tsv"))


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def test_required_columns_lead_and_units_follow_the_schema(bids_out, bids_schema):
    """Every column the schema requires for events is there, the schema's initial columns come
    first, and the sidecar units of onset, duration and response_time are the schema's units.

    Source: BIDS schema via bidsschematools (rules.tabular_data.events.Events, objects.columns).
    """
    rule = bids_schema.rules.tabular_data.events.Events
    required = [c for c, level in rule.columns.items() if level == "required"]
    assert required == ["onset", "duration"]
    files = _events_files(bids_out)
    assert len(files) == 5
    for path in files:
        columns, _ = _tsv(path)
        assert columns[: len(rule.initial_columns)] == list(rule.initial_columns)
        assert set(required) <= set(columns)
        sidecar = json.loads(path.with_suffix(".json").read_text(encoding="utf-8"))
        for name in ("onset", "duration", "response_time"):
            assert sidecar[name]["Units"] == bids_schema.objects.columns[name].unit
        assert rule.additional_columns == "allowed"


def test_values_have_the_schema_types_and_n_a_for_missing(bids_out, bids_schema):
    """Number columns hold numbers or n/a, duration is never below the schema minimum, string
    columns are never empty, and missing values are written n/a.

    Source: BIDS schema via bidsschematools (objects.columns types and minimum); BIDS n/a rule.
    """
    cols = bids_schema.objects.columns
    trial_types: set[str] = set()
    for path in _events_files(bids_out):
        columns, rows = _tsv(path)
        assert rows
        for row in rows:
            assert all(v != "" for v in row.values())
            for name in ("onset", "duration", "response_time"):
                assert cols[name].type == "number"
                assert row[name] == NA or _is_number(row[name])
            if row["duration"] != NA:
                assert float(row["duration"]) >= cols["duration"].minimum
            assert _is_number(row["onset"])
        trial_types |= {r["trial_type"] for r in rows}
    assert cols["trial_type"].type == "string"
    assert trial_types <= set(ROW_KINDS)
    assert {"fixation", "stimulus", "decision", "answer", "rating", "rest", "break"} <= trial_types


def test_file_names_match_the_schemas_filename_rules(bids_out, bids_schema, tmp_path, pilots):
    """Events files (beh and eeg) match the schema's events filename rule, with the entities
    and datatype they were written with.

    Source: BIDS schema filename rules (rules.files.raw.events) turned into regular expressions
    by bidsschematools.rules, matched by bidsschematools.validator.validate_all.
    """
    regexes = rules.regexify_filename_rules(bids_schema.rules.files.raw.events, bids_schema, 1)
    eeg_out = tmp_path / "eeg"
    export_sessions([pilots], eeg_out, datatype="eeg", task="routes")
    for root, datatype, task in ((bids_out, "beh", "minitest"), (eeg_out, "eeg", "routes")):
        paths = [str(p.relative_to(root)) for p in sorted(root.glob("sub-*/ses-*/*/*_events.*"))]
        assert len(paths) == 10
        result = validator.validate_all(paths, regexes)
        assert result["path_tracking"] == []
        for match in result["match_listing"]:
            assert match["datatype"] == datatype and match["task"] == task
            assert match["suffix"] == "events"
            folder = match["path"].split("/")
            assert folder[0] == f"sub-{match['subject']}" and folder[1] == f"ses-{match['session']}"
    bad = validator.validate_all(
        ["sub-P01/ses-1/beh/sub-P01_ses-1_task-mini-test_events.tsv"], regexes
    )
    assert bad["path_tracking"]


def test_dataset_description_has_the_schemas_required_fields(bids_out, bids_schema):
    """dataset_description.json holds every field the schema requires of it.

    Source: BIDS schema via bidsschematools (rules.json.dataset.dataset_description).
    """
    fields = bids_schema.rules.json.dataset.dataset_description.fields
    required = [
        k for k, v in fields.items() if v == "required" or getattr(v, "level", "") == "required"
    ]
    assert "Name" in required and "BIDSVersion" in required
    desc = json.loads((bids_out / "dataset_description.json").read_text(encoding="utf-8"))
    assert all(k in desc for k in required)
    assert "trials.csv" in (bids_out / ".bidsignore").read_text(encoding="utf-8").split()


def test_sidecar_describes_every_column_and_every_level(bids_out):
    """Each column of the TSV has a Description in the sidecar, and every trial_type and factor
    value found in the file is listed in that column's Levels.

    Source: BIDS specification, tabular files: column descriptions with Description/Levels/Units.
    """
    for path in _events_files(bids_out):
        columns, rows = _tsv(path)
        sidecar = json.loads(path.with_suffix(".json").read_text(encoding="utf-8"))
        for c in columns:
            assert sidecar[c]["Description"]
        for c in ("trial_type", "nodes", "density"):
            values = {r[c] for r in rows} - {NA}
            assert values and values <= set(sidecar[c]["Levels"])
        assert sidecar["StimulusPresentation"]["SoftwareName"] == "trialdeck"
        assert sidecar["StimulusPresentation"]["ScreenResolution"] == [800, 600]
        assert "session start" in sidecar["onset"]["Description"]


def test_stimulus_rows_carry_the_trials_csv_times(pilots, bids_out):
    """Stimulus rows: onset is onset_lsl minus the session start, response_time is rt_ms in
    seconds (n/a where trials.csv has none), stim_file the trial-table path.

    Source: common practice (no published source): two derivations of one journal must agree.
    """
    for folder in find_session_folders([pilots]):
        read = read_journal(folder / JOURNAL_NAME)
        t0 = next(read.events("session_start"))["t"]
        with open(folder / "trials.csv", newline="", encoding="utf-8") as fh:
            trials = {int(r["trial"]): r for r in csv.DictReader(fh)}
        h = read.header
        (path,) = list(bids_out.glob(f"sub-{h['participant']}/ses-{h['session']}/beh/*.tsv"))
        _, rows = _tsv(path)
        stim = [r for r in rows if r["trial_type"] == "stimulus" and r["completed"] == "1"]
        assert len(stim) == len(trials)
        for r in stim:
            ref = trials[int(r["trial"])]
            assert float(r["onset"]) == pytest.approx(float(ref["onset_lsl"]) - t0, abs=1e-6)
            if ref["rt_ms"]:
                assert float(r["response_time"]) == pytest.approx(
                    float(ref["rt_ms"]) / 1000, abs=1e-6
                )
            else:
                assert r["response_time"] == NA
            assert r["stim_file"] == ref["stimulus"]
            assert r["nodes"] == ref["nodes"] and r["outcome"] == ref["outcome"]
        assert all(r["stim_file"] == NA for r in rows if r["trial_type"] != "stimulus")


def test_marked_rows_are_at_their_marker_times(pilots):
    """Every row opened by a marked event lies at that marker's journaled LSL time.

    Source: common practice (no published source): a marker's timestamp equals the journal line's t (docs/markers.md).
    """
    for folder in find_session_folders([pilots]):
        session = load_session(folder)
        origin = session_origin(session)
        times: dict[str, list[float]] = {}
        for r in read_journal(folder / JOURNAL_NAME).records:
            if "marker" in r:
                times.setdefault(r["event"], []).append(r["t"])
        events = bids_events(session, origin)
        marked = events[events["event"].isin(MARKED_EVENTS)]
        assert len(marked) > 20
        for _, row in marked.iterrows():
            t = row["onset"] + origin.t0
            assert min(abs(t - x) for x in times[row["event"]]) < 1e-9


def _recording(path: Path, session_folder: Path) -> tuple[Path, float]:
    """An XDF file: the session's markers on the recorder clock, and a 250 Hz EEG stream."""
    read = read_journal(session_folder / JOURNAL_NAME)
    markers = [(r["marker"], r["t"]) for r in read.records if "marker" in r]
    lo, hi = markers[0][1], markers[-1][1]
    info = read.header["markers"]
    marker_stream = FixtureStream(
        stream_id=1,
        name=info["name"],
        type="Markers",
        channel_format="string",
        nominal_srate=0.0,
        timestamps=[t for _, t in markers],
        values=[p for p, _ in markers],
        source_id=info["source_id"],
        created_at=lo - 10.0,
        clock_offsets=[(t, RECORDER_OFFSET_S) for t in np.linspace(lo - 1, hi + 1, 5)],
    )
    first = lo + RECORDER_OFFSET_S - EEG_LEAD_S
    n = int((hi - lo + 2 * EEG_LEAD_S) * EEG_SRATE)
    eeg = FixtureStream(
        stream_id=2,
        name="depot-eeg",
        type="EEG",
        channel_format="float32",
        nominal_srate=EEG_SRATE,
        timestamps=first + np.arange(n) / EEG_SRATE,
        values=np.zeros((n, 2), dtype=np.float32),
        source_id="amp-01",
        clock_offsets=[(first, 0.0), (first + n / EEG_SRATE, 0.0)],
    )
    return write_xdf(path, [marker_stream, eeg]), first


def test_recording_origin_counts_from_the_first_eeg_sample(pilots, tmp_path):
    """With a recording, onset = (journal time + marker clock offset) - first EEG timestamp, with
    the first timestamp as pyxdf reads it, and the sidecar names that origin.

    Source: XDF specification for the fixture; pyxdf.load_xdf (clock synchronisation) as reference.
    """
    folder = find_session_folders([pilots])[0]
    xdf, _ = _recording(tmp_path / "rec.xdf", folder)
    streams, _ = pyxdf.load_xdf(str(xdf))
    eeg = next(s for s in streams if s["info"]["type"][0] == "EEG")
    first_ref = float(eeg["time_stamps"][0])
    session = load_session(folder)
    origin = recording_origin(session, xdf)
    assert origin.kind == "recording"
    assert origin.details["marker_offset_s"] == pytest.approx(RECORDER_OFFSET_S, abs=1e-6)
    assert origin.details["eeg_first_timestamp"] == pytest.approx(first_ref, abs=1e-9)
    tsv, side = write_bids_events(session, tmp_path / "b", datatype="eeg", origin=origin)
    _, rows = _tsv(tsv)
    start = next(r for r in rows if r["trial_type"] == "session")
    expected = session.start_t + RECORDER_OFFSET_S - first_ref
    assert float(start["onset"]) == pytest.approx(expected, abs=2e-6)
    assert float(start["onset"]) == pytest.approx(EEG_LEAD_S, abs=1e-3)
    text = json.loads(side.read_text(encoding="utf-8"))["onset"]["Description"]
    assert "first sample of EEG stream 'depot-eeg'" in text and "rec.xdf" in text


def test_recording_without_eeg_or_markers_is_refused(pilots, tmp_path):
    """A recording without an EEG stream, or from another session, is refused with a reason.

    Source: XDF specification for the fixture; pyxdf.load_xdf reads it.
    """
    folders = find_session_folders([pilots])
    xdf, _ = _recording(tmp_path / "rec.xdf", folders[0])
    with pytest.raises(RecordingError):
        recording_origin(load_session(folders[1]), xdf)
    read = read_journal(folders[0] / JOURNAL_NAME)
    markers = [(r["marker"], r["t"]) for r in read.records if "marker" in r]
    only_markers = FixtureStream(
        1, read.header["markers"]["name"], "Markers", "string", 0.0,
        [t for _, t in markers], [p for p, _ in markers],
        source_id=read.header["markers"]["source_id"],
    )  # fmt: skip
    path = write_xdf(tmp_path / "no-eeg.xdf", [only_markers])
    with pytest.raises(RecordingError, match="no EEG stream"):
        recording_origin(load_session(folders[0]), path)


def test_event_values_are_one_fixed_code_per_trial_type_in_every_session(bids_out: Path):
    """Every row's value is its trial_type's fixed code, identical across sessions whose event
    sets differ (an aborted session has abort rows, the others none), so sessions pool.

    Source: common practice (no published source): integer event codes shared across recordings
    are what MNE's events arrays and epoch pooling need; the codes are listed in docs/markers.md.
    """
    from runner.contract.events import EVENT_VALUES

    seen: dict[str, set[str]] = {}
    kinds_per_file = []
    for path in _events_files(bids_out):
        columns, rows = _tsv(path)
        assert columns[:4] == ["onset", "duration", "trial_type", "value"]
        kinds_per_file.append({r["trial_type"] for r in rows})
        for r in rows:
            seen.setdefault(r["trial_type"], set()).add(r["value"])
    assert len({frozenset(k) for k in kinds_per_file}) > 1  # the event sets do differ
    assert seen == {k: {str(EVENT_VALUES[k])} for k in seen}
    assert len(set(EVENT_VALUES.values())) == len(EVENT_VALUES)


@pytest.mark.slow
def test_stimulus_presentation_gives_the_screen_in_metres(tmp_path: Path, bids_schema):
    """The sidecar's StimulusPresentation holds the screen size and distance in metres, the
    resolution and refresh rate, with only fields the BIDS schema defines for it.

    Source: BIDS schema (bidsschematools), objects.metadata.StimulusPresentation and its
    ScreenSize / ScreenDistance definitions (metres).
    """
    import json

    from conftest import run_pilot as run_one
    from protofix import BASE_PROTOCOL, write_protocol

    protocol = json.loads(json.dumps(BASE_PROTOCOL))
    protocol["screen"] |= {"width_cm": 52.7, "distance_cm": 60}
    path = write_protocol(tmp_path / "study", protocol)
    run_one(path, tmp_path / "sessions", speed=50.0)
    out = tmp_path / "bids"
    export_sessions([tmp_path / "sessions"], out)
    (sidecar_path,) = out.glob("sub-*/ses-*/*/*_events.json")
    pres = json.loads(sidecar_path.read_text(encoding="utf-8"))["StimulusPresentation"]
    allowed = set(bids_schema.objects.metadata["StimulusPresentation"]["properties"])
    assert set(pres) <= allowed
    assert pres["ScreenSize"] == [0.527, round(0.527 * 480 / 640, 4)]
    assert pres["ScreenDistance"] == 0.6
    assert pres["ScreenResolution"] == [640, 480] and pres["ScreenRefreshRate"] == 60.0


@pytest.mark.parametrize("sign", [-1.0, 1.0])
def test_onsets_agree_with_pyxdf_under_drift_lost_markers_and_chunk_jitter(pilots, tmp_path, sign):
    """Every onset agrees with pyxdf's synchronised, dejittered reading to within 0.5 ms, with the
    clocks drifting as much as 50 ppm does over an hour (180 ms end to end, squeezed into the
    short test session), an offset of hours, chunk-stamped EEG and a fifth of the markers lost
    (those onsets come from the clock model).

    Source: pyxdf.load_xdf(synchronize_clocks=True, dejitter_timestamps=True) as the reference for
    recorded markers and the EEG origin; the drift line that generated the clock offsets for lost
    markers (XDF specification for the ClockOffset chunks).
    """
    folder = find_session_folders([pilots])[0]
    read = read_journal(folder / JOURNAL_NAME)
    markers = [(r["marker"], r["t"]) for r in read.records if "marker" in r]
    lo, hi = markers[0][1], markers[-1][1]
    offset = 3 * 3600.0 + 0.123
    drift = sign * 50e-6 * 3600.0 / (hi - lo)  # the clocks part by 180 ms over the session
    drift_ppm = drift * 1e6

    def to_recorder(t):
        return t + offset + drift * (t - lo)

    rng = np.random.default_rng(int(50 + sign))
    kept = [m for i, m in enumerate(markers) if i < 2 or rng.random() > 0.2]
    info = read.header["markers"]
    offsets_at = np.linspace(lo - 1, hi + 1, 40)
    marker_stream = FixtureStream(
        1, info["name"], "Markers", "string", 0.0,
        [t for _, t in kept], [p for p, _ in kept], source_id=info["source_id"],
        created_at=lo - 10.0,
        clock_offsets=[(t, to_recorder(t) - t) for t in offsets_at],
    )  # fmt: skip
    first_true = to_recorder(lo) - EEG_LEAD_S
    n = int((hi - lo + 2 * EEG_LEAD_S) * EEG_SRATE)
    true_times = first_true + np.arange(n) / EEG_SRATE
    stamps = true_times.copy()
    for start in range(0, n, 25):  # chunks stamped on arrival, 2-14 ms late
        stamps[start : start + 25] += rng.uniform(0.002, 0.014)
    eeg = FixtureStream(
        2, "depot-eeg", "EEG", "float32", EEG_SRATE, stamps, np.zeros((n, 1), dtype=np.float32),
        source_id="amp-01", clock_offsets=[(first_true, 0.0), (true_times[-1], 0.0)],
    )  # fmt: skip
    xdf = write_xdf(tmp_path / "drift.xdf", [marker_stream, eeg])

    streams, _ = pyxdf.load_xdf(str(xdf), synchronize_clocks=True, dejitter_timestamps=True)
    ref_eeg = next(s for s in streams if s["info"]["type"][0] == "EEG")
    ref_mk = next(s for s in streams if s["info"]["type"][0] == "Markers")
    zero = float(ref_eeg["time_stamps"][0])
    recorded: dict[str, list[float]] = {}
    for value, t in zip(ref_mk["time_series"], ref_mk["time_stamps"], strict=True):
        recorded.setdefault(value[0], []).append(float(t))
    session = load_session(folder)
    origin = recording_origin(session, xdf)
    assert origin.details["clock_drift_ppm"] == pytest.approx(drift_ppm, rel=1e-3)
    tsv, _ = write_bids_events(session, tmp_path / "b", datatype="eeg", origin=origin)
    events = pd.read_csv(tsv, sep="\t", na_values="n/a", keep_default_na=False)
    kept_set = set(kept)
    worst = 0.0
    checked_lost = 0
    for row in events.itertuples():
        # The journal marker of this row: the one of that event closest to its onset.
        candidates = [(p, jt) for p, jt in markers if json.loads(p)["event"] == row.event]
        payload, t = min(candidates, key=lambda m: abs(to_recorder(m[1]) - zero - row.onset))
        if (payload, t) in kept_set:
            rec_t = min(recorded[payload], key=lambda r: abs(r - to_recorder(t)))
            expected = rec_t - zero
        else:
            expected = to_recorder(t) - zero
            checked_lost += 1
        worst = max(worst, abs(row.onset - expected))
    assert checked_lost > 5
    assert worst < 0.0005


@pytest.mark.slow
def test_copied_stimuli_are_where_stim_file_says_and_checked(pilots, tmp_path, capsys):
    """`export --copy-stimuli` puts every stim_file under stimuli/, byte-identical to the shown
    image; a stimulus changed since the session is refused instead of copied.

    Source: BIDS specification, "stim_file": a path relative to the dataset's /stimuli folder;
    the journaled SHA-256 (hashlib) identifies the image each session showed.
    """
    import shutil

    from runner.cli import main

    out = tmp_path / "bids"
    assert main(["export", str(pilots), "--out", str(out), "--copy-stimuli"]) == 0
    capsys.readouterr()
    named = set()
    for path in _events_files(out):
        _, rows = _tsv(path)
        named |= {r["stim_file"] for r in rows if r["stim_file"] != "n/a"}
    assert named
    source = Path(__file__).resolve().parent.parent / "data" / "mini"
    for name in named:
        assert (out / "stimuli" / name).read_bytes() == (source / name).read_bytes()

    moved = tmp_path / "moved"
    shutil.copytree(source / "img", moved / "img")
    first = sorted(named)[0]
    (moved / first).write_bytes((moved / first).read_bytes() + b"\0")
    code = main(
        [
            "export", str(pilots), "--out", str(tmp_path / "bids2"), "--copy-stimuli",
            "--stimuli-dir", str(moved),
        ]
    )  # fmt: skip
    err = capsys.readouterr().err
    assert code == 1 and "differs from the one" in err and "Traceback" not in err


@pytest.mark.slow
def test_export_reads_a_truncated_recording_only_when_allowed(pilots, tmp_path, capsys):
    """A file cut inside its last footer is refused by export with the option export itself
    has; with --allow-truncated the intact part gives the origin.

    Source: XDF specification (chunk framing) for the fixture; pyxdf reads the intact part.
    """
    from runner.cli import main

    folder = find_session_folders([pilots])[0]
    xdf, _ = _recording(tmp_path / "rec.xdf", folder)
    data = xdf.read_bytes()
    cut = tmp_path / "cut.xdf"
    cut.write_bytes(data[:-20])
    args = ["export", str(folder), "--out", str(tmp_path / "a"), "--recording", str(cut)]
    assert main(args) == 1
    err = capsys.readouterr().err
    assert "--allow-truncated" in err and "Traceback" not in err
    args = ["export", str(folder), "--out", str(tmp_path / "b"), "--recording", str(cut)]
    assert main([*args, "--allow-truncated"]) == 0
    assert "first EEG sample" in capsys.readouterr().out


def test_mne_bids_reads_the_event_codes_and_mne_pools_sessions(bids_out: Path):
    """mne-bids reads each events.tsv into annotations whose event ids are the fixed values, the
    same in sessions with different event sets, so MNE pools their stimulus epochs.

    Source: mne_bids.read.events_file_to_annotation_kwargs (it takes event ids from the value
    column) and mne.concatenate_epochs, which refuses epochs whose event ids disagree.
    """
    mne = pytest.importorskip("mne", reason="MNE is part of the test extra")
    mne_bids_read = pytest.importorskip("mne_bids.read", reason="mne-bids is in the test extra")
    from runner.contract.events import EVENT_VALUES

    epochs = []
    event_sets = []
    for path in _events_files(bids_out):
        kw = mne_bids_read.events_file_to_annotation_kwargs(path, verbose=False)
        ids = kw["event_id"]
        assert ids == {k: EVENT_VALUES[k] for k in ids}
        event_sets.append(frozenset(ids))
        sfreq = 100.0
        length = float(np.nanmax(kw["onset"])) + 2.0
        info = mne.create_info(["light"], sfreq, ch_types="misc")
        raw = mne.io.RawArray(np.zeros((1, int(length * sfreq))), info, verbose=False)
        raw.set_annotations(
            mne.Annotations(kw["onset"], np.nan_to_num(kw["duration"]), kw["description"])
        )
        events, found = mne.events_from_annotations(raw, event_id=ids, verbose=False)
        stim = {"stimulus": found["stimulus"]}
        ep = mne.Epochs(raw, events, stim, tmin=0.0, tmax=0.5, baseline=None, verbose=False)
        epochs.append(ep.load_data().set_annotations(None))
    assert len(set(event_sets)) > 1  # the sessions' event sets differ
    pooled = mne.concatenate_epochs(epochs, verbose=False)
    assert pooled.event_id == {"stimulus": EVENT_VALUES["stimulus"]}
    assert len(pooled) == sum(len(e) for e in epochs) > 0
