"""BIDS continuous data (export --with-data) checked against pyxdf, MNE, mne-bids, pandas and the
machine-readable BIDS schema."""

from __future__ import annotations

import gzip
import json
import re
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import pyxdf
from bidsschematools import schema, validator
from export_pilots import pilot_root

from runner.contract.events import EVENT_VALUES
from runner.data.continuous import SessionLabels, write_continuous
from runner.data.export import (
    DataOptions,
    ExportResult,
    export_sessions,
    find_session_folders,
    load_session,
    recording_origin,
)
from runner.errors import RecordingError, UsageError
from runner.recording import read_recording
from runner.session.journal import JOURNAL_NAME, read_journal

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "qa"))
from xdfwrite import FixtureStream, write_xdf  # noqa: E402

pytestmark = pytest.mark.slow  # runs sessions in real time

RECORDER_OFFSET_S = 5.25  # recorder clock minus presenter clock
EYE_OFFSET_S = -2.5  # recorder clock minus the eye tracker computer's clock
EEG_SRATE = 250.0
EYE_SRATE = 120.0
ECG_SRATE = 500.0
EEG_LEAD_S = 3.0  # the EEG starts this long before the first marker
EYE_LATE_S = 0.37  # the eye tracker starts this long after the EEG
ECG_EARLY_S = 0.21  # the ECG starts this long before the EEG
EEG_LABELS = ("Fz", "Cz", "Pz")
LINE_FREQ = 50.0


def _channels_xml(channels: list[tuple[str, str, str]]) -> str:
    items = "".join(
        f"<channel><label>{label}</label><unit>{unit}</unit><type>{kind}</type></channel>"
        for label, unit, kind in channels
    )
    return f"<channels>{items}</channels>"


def _recording(
    path: Path,
    folder: Path,
    *,
    eeg_gap: bool = False,
    ecg_streams: int = 1,
    eye_labels: tuple[str, ...] = ("left_x", "left_y", "left_pupil_diameter"),
    eeg_unit: str | None = "microvolts",
    eeg_types: tuple[str, ...] = ("EEG",) * len(EEG_LABELS),
) -> Path:
    """An XDF file: the session's markers, chunk-stamped EEG, an eye tracker on another clock
    (with a blink), and ECG, each with channel descriptions in its header."""
    read = read_journal(folder / JOURNAL_NAME)
    markers = [(r["marker"], r["t"]) for r in read.records if "marker" in r]
    lo, hi = markers[0][1], markers[-1][1]
    info = read.header["markers"]
    rng = np.random.default_rng(7)
    streams = [
        FixtureStream(
            1, info["name"], "Markers", "string", 0.0, [t for _, t in markers],
            [p for p, _ in markers], source_id=info["source_id"], created_at=lo - 10.0,
            clock_offsets=[(t, RECORDER_OFFSET_S) for t in np.linspace(lo - 1, hi + 1, 5)],
        )
    ]  # fmt: skip
    first = lo + RECORDER_OFFSET_S - EEG_LEAD_S
    span = hi - lo + 2 * EEG_LEAD_S
    n = int(span * EEG_SRATE)
    true_times = first + np.arange(n) / EEG_SRATE
    stamps = true_times.copy()
    for start in range(0, n, 25):  # chunks stamped on arrival, 2-14 ms late
        stamps[start : start + 25] += rng.uniform(0.002, 0.014)
    if eeg_gap:
        stamps[n // 2 :] += 5.0
    eeg = rng.normal(0.0, 20.0, (n, len(EEG_LABELS))).astype(np.float32)  # microvolts
    streams.append(
        FixtureStream(
            2, "depot-eeg", "EEG", "float32", EEG_SRATE, stamps, eeg, source_id="amp-01",
            clock_offsets=[(first, 0.0), (true_times[-1], 0.0)],
            desc_xml=""
            if eeg_unit is None
            else _channels_xml(
                [(c, eeg_unit, k) for c, k in zip(EEG_LABELS, eeg_types, strict=True)]
            ),
        )
    )  # fmt: skip
    eye_first = first + EYE_LATE_S - EYE_OFFSET_S  # on the eye tracker's clock
    m = int((span - 1.0) * EYE_SRATE)
    eye = np.column_stack(
        [rng.normal(4.0, 0.3, m) if "pupil" in c else rng.uniform(0, 800, m) for c in eye_labels]
    ).astype(np.float32)
    for i, c in enumerate(eye_labels):
        if "pupil" in c:
            eye[m // 3 : m // 3 + 12, i] = np.nan  # a blink: no pupil
    streams.append(
        FixtureStream(
            3, "depot-eyes", "Gaze", "float32", EYE_SRATE, eye_first + np.arange(m) / EYE_SRATE,
            eye, source_id="eyes-01",
            clock_offsets=[(eye_first, EYE_OFFSET_S), (eye_first + m / EYE_SRATE, EYE_OFFSET_S)],
            desc_xml=_channels_xml(
                [(c, "mm" if "pupil" in c else "pixels", "Gaze") for c in eye_labels]
            ),
        )
    )  # fmt: skip
    for k in range(ecg_streams):
        ecg_first = first - ECG_EARLY_S
        e = int((span - 0.5) * ECG_SRATE)
        streams.append(
            FixtureStream(
                4 + k, f"depot-ecg{k}", "ECG", "double64", ECG_SRATE,
                ecg_first + np.arange(e) / ECG_SRATE, rng.normal(0.0, 0.5, (e, 1)),
                source_id=f"ecg-0{k}",
                clock_offsets=[(ecg_first, 0.0), (ecg_first + e / ECG_SRATE, 0.0)],
                desc_xml=_channels_xml([("lead II", "mV", "ECG")]),
            )
        )  # fmt: skip
    return write_xdf(path, streams)


@pytest.fixture(scope="session")
def pilots(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return pilot_root(tmp_path_factory.getbasetemp())


@pytest.fixture(scope="module")
def exported(pilots: Path, tmp_path_factory: pytest.TempPathFactory):
    """One session exported with its recording's data: (export result, xdf path, folder)."""
    folder = find_session_folders([pilots])[0]
    base = tmp_path_factory.mktemp("bidsdata")
    xdf = _recording(base / "rec.xdf", folder)
    out = base / "bids"
    result = export_sessions(
        [folder], out, recordings=[xdf], with_data=DataOptions(line_freq=LINE_FREQ)
    )
    return result, xdf, out


@pytest.fixture(scope="module")
def reference(exported) -> dict[str, dict]:
    """pyxdf's reading of the fixture with clock synchronisation and dejittering, by type."""
    _, xdf, _ = exported
    streams, _ = pyxdf.load_xdf(str(xdf), synchronize_clocks=True, dejitter_timestamps=True)
    return {s["info"]["type"][0]: s for s in streams}


def _one(out: Path, pattern: str) -> Path:
    (path,) = sorted(out.glob(f"sub-*/ses-*/eeg/{pattern}"))
    return path


def _physio(tsv: Path) -> tuple[dict, pd.DataFrame]:
    side = json.loads(tsv.with_name(tsv.name.replace(".tsv.gz", ".json")).read_text("utf-8"))
    table = pd.read_csv(tsv, sep="\t", header=None, names=side["Columns"], na_values="n/a")
    return side, table


def test_brainvision_equals_the_xdf_eeg(exported, reference):
    """The BrainVision file read back by MNE holds pyxdf's EEG samples (float32 microvolts, to
    the written precision), the header's channel names, and the dejittered sampling rate.

    Source: mne.io.read_raw_brainvision as reader; pyxdf.load_xdf(synchronize_clocks=True,
    dejitter_timestamps=True) as reference for the samples and their times.
    """
    import mne

    _, _, out = exported
    raw = mne.io.read_raw_brainvision(_one(out, "*_eeg.vhdr"), preload=True, verbose=False)
    ref = reference["EEG"]
    assert raw.ch_names == list(EEG_LABELS)
    assert set(raw.get_channel_types()) == {"eeg"}
    expected = np.asarray(ref["time_series"], dtype=np.float64)
    assert raw.get_data().shape == expected.T.shape
    np.testing.assert_allclose(raw.get_data().T * 1e6, expected, rtol=1e-6, atol=1e-5)
    ts = ref["time_stamps"]
    assert raw.info["sfreq"] == pytest.approx((len(ts) - 1) / (ts[-1] - ts[0]), rel=1e-9)
    assert raw.info["sfreq"] == pytest.approx(EEG_SRATE, rel=1e-4)  # chunk jitter, 15 s


def test_eeg_sidecars_follow_the_schema_and_give_the_line_frequency(exported, bids_schema):
    """eeg.json holds every field the schema requires of it, PowerLineFrequency from the option,
    and channels.tsv lists the header's channels with the schema's required columns first.

    Source: BIDS schema via bidsschematools (rules.sidecars.eeg, rules.tabular_data.eeg).
    """
    _, _, out = exported
    side = json.loads(_one(out, "*_eeg.json").read_text("utf-8"))
    for group in bids_schema.rules.sidecars.eeg.values():
        if _applies(group.selectors, {"datatype": "eeg", "suffix": "eeg"}, side):
            for name, level in group.fields.items():
                if _level(level) == "required":
                    assert name in side, name
    assert side["PowerLineFrequency"] == LINE_FREQ
    assert side["Manufacturer"] == "n/a"  # not the file format's maker
    assert side["TaskName"] == "minitest"
    channels = pd.read_csv(_one(out, "*_channels.tsv"), sep="\t")
    rule = bids_schema.rules.tabular_data.eeg.EEGChannels
    initial = [bids_schema.objects.columns[c].name for c in rule.initial_columns]
    assert list(channels.columns[: len(initial)]) == initial
    assert list(channels["name"]) == list(EEG_LABELS)


def test_physio_files_equal_pyxdf_samples(exported, reference):
    """The eye-tracking and ECG physio.tsv.gz files read back with pandas hold pyxdf's samples
    (float32 and float64 exactly, n/a for the blink), and the timestamp column is pyxdf's
    dejittered time minus the first dejittered EEG sample.

    Source: pandas.read_csv as reader; pyxdf.load_xdf(synchronize_clocks=True,
    dejitter_timestamps=True) as reference.
    """
    _, _, out = exported
    zero = float(reference["EEG"]["time_stamps"][0])
    side, eye = _physio(_one(out, "*_recording-eye1_physio.tsv.gz"))
    ref = reference["Gaze"]
    assert side["Columns"] == ["timestamp", "x_coordinate", "y_coordinate", "pupil_size"]
    values = eye[["x_coordinate", "y_coordinate", "pupil_size"]].to_numpy()
    np.testing.assert_array_equal(values.astype(np.float32), ref["time_series"])
    assert eye["pupil_size"].isna().sum() == 12
    np.testing.assert_allclose(eye["timestamp"], ref["time_stamps"] - zero, atol=2e-6, rtol=0)
    side, ecg = _physio(_one(out, "*_recording-ecg_physio.tsv.gz"))
    assert side["Columns"] == ["cardiac"]
    np.testing.assert_array_equal(ecg["cardiac"].to_numpy(), reference["ECG"]["time_series"][:, 0])
    assert side["cardiac"]["Units"] == "mV"


def test_physio_start_times_agree_with_the_event_onsets(exported, reference):
    """Each physio StartTime and SamplingFrequency put its samples on the events' time axis:
    an event's onset minus StartTime equals its recorded marker time minus the stream's first
    dejittered sample (pyxdf), for every stimulus row.

    Source: BIDS specification, physiological recordings: StartTime relative to the first sample
    of the neural data; pyxdf.load_xdf(synchronize_clocks=True, dejitter_timestamps=True).
    """
    result, _, out = exported
    markers = reference["Markers"]
    recorded = {
        v[0]: float(t) for v, t in zip(markers["time_series"], markers["time_stamps"], strict=True)
    }
    events = pd.read_csv(result.events[0][0], sep="\t", na_values="n/a", keep_default_na=False)
    stim = events[events["trial_type"] == "stimulus"]
    assert len(stim) >= 3
    session = result.sessions[0]
    onsets = {r["t"]: r["marker"] for r in _marker_records(session.folder)}
    for pattern, kind in (
        ("*_recording-eye1_physio.json", "Gaze"),
        ("*_recording-ecg_physio.json", "ECG"),
    ):
        side = json.loads(_one(out, pattern).read_text("utf-8"))
        ts = reference[kind]["time_stamps"]
        assert side["SamplingFrequency"] == pytest.approx((len(ts) - 1) / (ts[-1] - ts[0]))
        for onset in stim["onset"]:
            payload = min(
                (p for p in onsets.values() if '"stimulus_onset"' in p),
                key=lambda p: abs(recorded[p] - float(reference["EEG"]["time_stamps"][0]) - onset),
            )
            assert onset - side["StartTime"] == pytest.approx(recorded[payload] - ts[0], abs=2e-6)
    assert json.loads(_one(out, "*_recording-ecg_physio.json").read_text("utf-8"))["StartTime"] < 0


def _marker_records(folder: Path) -> list[dict]:
    return [r for r in read_journal(folder / JOURNAL_NAME).records if "marker" in r]


def test_mne_bids_reads_the_dataset_with_our_event_codes(exported):
    """mne_bids.read_raw_bids reads the exported dataset: the EEG with annotations from our
    events.tsv whose event ids are the fixed value codes, at the events.tsv onsets.

    Source: mne_bids.read_raw_bids (annotations from events.tsv, ids from its value column) and
    mne.events_from_annotations.
    """
    import mne
    from mne_bids import BIDSPath, read_raw_bids

    result, _, out = exported
    session = result.sessions[0]
    path = BIDSPath(
        subject=session.participant, session=session.session, task="minitest",
        datatype="eeg", suffix="eeg", extension=".vhdr", root=out,
    )  # fmt: skip
    raw, event_id = read_raw_bids(path, return_event_dict=True, verbose=False)
    events = pd.read_csv(result.events[0][0], sep="\t", na_values="n/a", keep_default_na=False)
    assert list(events.columns[:4]) == ["onset", "duration", "trial_type", "value"]
    assert "sample" not in events.columns  # a column mne-bids writes; this file is trialdeck's
    sidecar = json.loads(result.events[0][1].read_text("utf-8"))
    assert sidecar["StimulusPresentation"]["SoftwareName"] == "trialdeck"
    assert list(raw.annotations.description) == list(events["trial_type"])
    np.testing.assert_allclose(raw.annotations.onset, events["onset"], atol=1e-6)
    _, ids = mne.events_from_annotations(raw, event_id=event_id, verbose=False)
    assert ids == {k: EVENT_VALUES[k] for k in set(events["trial_type"])}
    assert raw.info["line_freq"] == LINE_FREQ


def test_dataset_with_data_passes_the_schemas_rules(exported, bids_schema):
    """Every file of the export passes bidsschematools' own dataset validation (filename rules,
    .bidsignore), every sidecar has
    the fields the schema's sidecar rules require for it (physio: SamplingFrequency, StartTime,
    Columns; eye tracking: RecordedEye, SampleCoordinateSystem), eye-tracking columns start
    with the schema's initial columns, pupil_size says diameter or area, and the physio files
    have no header line.

    Source: BIDS schema via bidsschematools (validator.validate_bids on the folder;
    rules.sidecars.continuous; rules.tabular_data.physio;
    rules.checks.eyetrack.PupilSizeDescription).
    """
    _, _, out = exported
    result = validator.validate_bids(str(out))
    assert result["path_tracking"] == []
    assert any(p.endswith("_eeg.vhdr") for p in result["path_listing"])
    physio = sorted(out.glob("sub-*/ses-*/eeg/*_physio.json"))
    assert len(physio) == 2
    for side_path in physio:
        side = json.loads(side_path.read_text("utf-8"))
        for group in bids_schema.rules.sidecars.continuous.values():
            if _applies(group.selectors, {"suffix": "physio", "datatype": "eeg"}, side):
                for name, level in group.fields.items():
                    if _level(level) == "required":
                        assert name in side, (side_path.name, name)
        tsv = side_path.with_name(side_path.name.replace(".json", ".tsv.gz"))
        with gzip.open(tsv, "rt", encoding="utf-8") as fh:
            first = fh.readline().split("\t")
        assert all(c == "n/a" or _is_number(c) for c in first)  # no header line
        if side.get("PhysioType") == "eyetrack":
            rule = bids_schema.rules.tabular_data.physio.PhysioEyeTracking
            names = [bids_schema.objects.columns[c].name for c in rule.initial_columns]
            assert side["Columns"][: len(names)] == names
            assert side["RecordedEye"] in bids_schema.objects.metadata.RecordedEye.enum
            assert (
                side["SampleCoordinateSystem"] == "custom"
            )  # the mini protocol has no screen size
            assert re.match(".*(area|diameter).*", side["pupil_size"]["Description"])
    desc = json.loads((out / "dataset_description.json").read_text("utf-8"))
    assert desc["GeneratedBy"][0]["Name"] == "trialdeck"
    assert desc["BIDSVersion"] == "1.11.0"  # eye-tracking physio came with BIDS 1.11.0


def test_gaze_is_on_screen_when_the_screen_is_known(exported, tmp_path):
    """With the screen's size and distance known, gaze is declared gaze-on-screen, which the
    schema's EyetrackingStimulusPresentation check ties to those events sidecar fields.

    Source: BIDS schema via bidsschematools (rules.checks.eyetrack.EyetrackingStimulusPresentation).
    """
    result, xdf, _ = exported
    session = load_session(result.sessions[0].folder, decode=None)
    rec = read_recording(xdf)
    origin = recording_origin(session, xdf, loaded=rec)
    out = tmp_path / "b"
    written = write_continuous(
        rec, origin, out, SessionLabels("P01", "1", "t"), options=DataOptions(),
        screen_known=True,
    )  # fmt: skip
    (eye,) = [side for _, side in written.physio if "eye1" in side.name]
    assert json.loads(eye.read_text("utf-8"))["SampleCoordinateSystem"] == "gaze-on-screen"
    eeg = json.loads(next(p for p in written.eeg if p.name.endswith("_eeg.json")).read_text())
    assert eeg["PowerLineFrequency"] == "n/a"


def test_refusals_name_the_stream_or_option(pilots, tmp_path, capsys):
    """A break in the EEG, several ECG streams without --ecg-stream, eye channels that name no
    eye, and --with-data without a recording are refused with a reason, not a traceback.

    Source: XDF specification for the fixtures (read by pyxdf); the CLI's exit codes.
    """
    from runner.cli import main

    folder = find_session_folders([pilots])[0]
    gap = _recording(tmp_path / "gap.xdf", folder, eeg_gap=True)
    with pytest.raises(RecordingError, match="break"):
        export_sessions([folder], tmp_path / "a", recordings=[gap], with_data=DataOptions())
    two = _recording(tmp_path / "two.xdf", folder, ecg_streams=2)
    with pytest.raises(RecordingError, match="--ecg-stream"):
        export_sessions([folder], tmp_path / "b", recordings=[two], with_data=DataOptions())
    chosen = export_sessions(
        [folder], tmp_path / "c", recordings=[two], with_data=DataOptions(ecg_stream="ecg-01")
    )
    assert isinstance(chosen, ExportResult) and len(chosen.data[0].physio) == 2
    plain = _recording(tmp_path / "plain.xdf", folder, eye_labels=("gaze_x", "gaze_y", "pupil"))
    with pytest.raises(RecordingError, match="--recorded-eye"):
        export_sessions([folder], tmp_path / "d", recordings=[plain], with_data=DataOptions())
    right = export_sessions(
        [folder], tmp_path / "e", recordings=[plain], with_data=DataOptions(recorded_eye="right")
    )
    (side,) = [s for _, s in right.data[0].physio if "eye1" in s.name]
    assert json.loads(side.read_text("utf-8"))["RecordedEye"] == "right"
    with pytest.raises(UsageError):
        export_sessions([folder], tmp_path / "f", with_data=DataOptions())
    assert main(["export", str(folder), "--out", str(tmp_path / "g"), "--line-freq", "50"]) == 2
    assert "--with-data" in capsys.readouterr().err


@pytest.mark.parametrize(
    ("unit", "volts", "names"),
    [("mV", 1e-3, list(EEG_LABELS)), (None, 1e-6, ["EEG1", "EEG2", "EEG3"])],
)
def test_eeg_units_and_names_come_from_the_header_or_defaults(pilots, tmp_path, unit, volts, names):
    """EEG in millivolts is scaled to volts by the header's unit; a header without channel
    descriptions gives EEG1.. names in microvolts (the XDF meta-data default for EEG).

    Source: mne.io.read_raw_brainvision as reader (data in volts); pyxdf.load_xdf as reference
    for the stored samples; XDF meta-data conventions for EEG streams (unit microvolts).
    """
    import mne

    folder = find_session_folders([pilots])[0]
    xdf = _recording(tmp_path / "rec.xdf", folder, eeg_unit=unit)
    export_sessions([folder], tmp_path / "b", recordings=[xdf], with_data=DataOptions())
    raw = mne.io.read_raw_brainvision(
        _one(tmp_path / "b", "*_eeg.vhdr"), preload=True, verbose=False
    )
    streams, _ = pyxdf.load_xdf(str(xdf))
    stored = next(s for s in streams if s["info"]["type"][0] == "EEG")["time_series"]
    assert raw.ch_names == names
    np.testing.assert_allclose(raw.get_data().T, stored * volts, rtol=1e-6, atol=1e-12)


def test_channel_types_come_from_the_header(pilots, tmp_path):
    """EOG and MISC channels keep their types in the BrainVision file and channels.tsv, and a
    MISC channel keeps its stored values (no voltage scaling).

    Source: mne.io.read_raw_brainvision and mne_bids.read_raw_bids as readers; pyxdf.load_xdf as
    reference for the stored samples.
    """
    from mne_bids import BIDSPath, read_raw_bids

    folder = find_session_folders([pilots])[0]
    xdf = _recording(tmp_path / "rec.xdf", folder, eeg_types=("EEG", "EOG", "MISC"))
    out = tmp_path / "b"
    result = export_sessions([folder], out, recordings=[xdf], with_data=DataOptions())
    session = result.sessions[0]
    path = BIDSPath(
        subject=session.participant, session=session.session, task="minitest",
        datatype="eeg", suffix="eeg", extension=".vhdr", root=out,
    )  # fmt: skip
    raw = read_raw_bids(path, verbose=False)
    assert raw.get_channel_types() == ["eeg", "eog", "misc"]
    channels = pd.read_csv(_one(out, "*_channels.tsv"), sep="\t")
    assert list(channels["type"]) == ["EEG", "EOG", "MISC"]
    streams, _ = pyxdf.load_xdf(str(xdf))
    stored = next(s for s in streams if s["info"]["type"][0] == "EEG")["time_series"]
    data = raw.get_data()
    np.testing.assert_allclose(data[:2].T, stored[:, :2] * 1e-6, rtol=1e-6, atol=1e-12)
    np.testing.assert_allclose(data[2], stored[:, 2], rtol=1e-6, atol=1e-6)


@pytest.mark.parametrize(
    ("labels", "expected"),
    [
        (
            ("left_x", "left_y", "right_x", "right_y", "right_pupil_area"),
            {
                "eye1": ("eyetrack", "left", ["timestamp", "x_coordinate", "y_coordinate"]),
                "eye2": (
                    "eyetrack",
                    "right",
                    ["timestamp", "x_coordinate", "y_coordinate", "pupil_size"],
                ),
            },
        ),
        (("left_pupil",), {"pupil": ("generic", None, ["pupil_size"])}),
        (
            ("ScreenX", "ScreenY", "gaze_x", "pupil"),
            {
                "eye1": (
                    "eyetrack",
                    "right",
                    ["timestamp", "x_coordinate", "y_coordinate", "pupil_size"],
                )
            },
        ),
        (
            ("left_x", "right_x", "right_y"),
            {"eye1": ("eyetrack", "right", ["timestamp", "x_coordinate", "y_coordinate"])},
        ),
    ],
)
def test_eye_channels_are_named_from_the_header(pilots, tmp_path, labels, expected):
    """Eye-tracking channels become BIDS columns by their header labels: one file per eye
    (eye1 left, eye2 right), pupil without gaze as generic physio, the eye from --recorded-eye
    when labels name none, and a second channel for the same column or a lone coordinate left
    out with a note.

    Source: BIDS schema via bidsschematools (rules.tabular_data.physio.PhysioEyeTracking,
    objects.metadata.RecordedEye); pyxdf reads the fixture headers.
    """
    folder = find_session_folders([pilots])[0]
    xdf = _recording(tmp_path / "rec.xdf", folder, eye_labels=labels)
    eye = "right" if "ScreenX" in labels else None
    result = export_sessions(
        [folder], tmp_path / "b", recordings=[xdf], with_data=DataOptions(recorded_eye=eye)
    )
    found = {}
    for tsv, side in result.data[0].physio:
        if "_recording-ecg_" in tsv.name:
            continue
        label = re.search(r"_recording-(\w+?)_physio", tsv.name).group(1)
        meta = json.loads(side.read_text("utf-8"))
        found[label] = (meta["PhysioType"], meta.get("RecordedEye"), meta["Columns"])
        _, table = _physio(tsv)
        assert list(table.columns) == meta["Columns"]
    assert found == expected
    notes = " ".join(result.data[0].notes)
    if "ScreenX" in labels:
        assert "'gaze_x' also reads as the right eye's x_coordinate" in notes
    if labels[:2] == ("left_x", "right_x"):
        assert "the left eye has only one gaze coordinate" in notes


def test_cli_exports_with_data_and_names_the_files(pilots, tmp_path, capsys):
    """`trialdeck export --recording FILE --with-data --line-freq 60` exits 0 and names the
    BrainVision and physio files it wrote.

    Source: the CLI's documented output (docs/analysis.md); mne.io.read_raw_brainvision reads
    the named header.
    """
    import mne

    from runner.cli import main

    folder = find_session_folders([pilots])[0]
    xdf = _recording(tmp_path / "rec.xdf", folder)
    out = tmp_path / "bids"
    args = ["export", str(folder), "--out", str(out), "--recording", str(xdf), "--with-data"]
    assert main([*args, "--line-freq", "60"]) == 0
    lines = capsys.readouterr().out.splitlines()
    (vhdr,) = [ln.split(": ", 1)[1] for ln in lines if ln.startswith("EEG (BrainVision): ")]
    raw = mne.io.read_raw_brainvision(vhdr, verbose=False)
    assert raw.ch_names == list(EEG_LABELS)
    physio = [ln for ln in lines if ln.startswith("Physio: ")]
    assert len(physio) == 2 and all(Path(ln.split(": ", 1)[1]).is_file() for ln in physio)
    assert main([*args, "--datatype", "beh", "--force"]) == 2


def test_official_validator_passes_the_dataset_with_data(pilots, tmp_path, capsys):
    """The official bids-validator finds no error in an export with data and copied stimuli
    (runs where the validator is installed: BIDS_VALIDATOR=path or bids-validator on PATH).

    Source: bids-validator (the BIDS project's validator); its exit code is 0 without errors.
    """
    import os
    import shutil
    import subprocess

    from runner.cli import main

    tool = os.environ.get("BIDS_VALIDATOR") or shutil.which("bids-validator")
    if not tool:
        pytest.skip("bids-validator is not installed (set BIDS_VALIDATOR to its path)")
    folders = find_session_folders([pilots])[:2]
    args = ["export", *map(str, folders), "--out", str(tmp_path / "bids"), "--with-data"]
    for i, folder in enumerate(folders):
        args += ["--recording", str(_recording(tmp_path / f"rec{i}.xdf", folder))]
    assert main([*args, "--line-freq", "50", "--copy-stimuli"]) == 0
    capsys.readouterr()
    done = subprocess.run(
        [tool, str(tmp_path / "bids")], capture_output=True, text=True, timeout=600, check=False
    )
    assert done.returncode == 0, done.stdout[-3000:]
    assert "[ERR]" not in done.stdout


@pytest.fixture(scope="module")
def bids_schema():
    return schema.load_schema()


def _level(level) -> str:
    return level if isinstance(level, str) else level.get("level", "")


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


# The selector forms the sidecar rules used here are written in (checked: an unknown form fails).
_EQ = re.compile(r'^(\w+(?:\.\w+)?) == "(\w+)"$')
_INTERSECTS = re.compile(r"^intersects\(\[(\w+)\], \[([^\]]*)\]\)$")


def _applies(selectors, entities: dict[str, str], sidecar: dict) -> bool:
    """Evaluate the schema's simple selectors (``x == "y"``, ``intersects([x], [...])``,
    ``false``) for one file."""
    for sel in selectors:
        sel = sel.replace("'", '"')
        if sel == "false":
            return False
        if m := _EQ.match(sel):
            key, want = m.groups()
            have = (
                sidecar.get(key.split(".", 1)[1])
                if key.startswith("sidecar.")
                else entities.get(key)
            )
            if have != want:
                return False
            continue
        if m := _INTERSECTS.match(sel):
            key, options = m.groups()
            if entities.get(key) not in re.findall(r'"(\w+)"', options):
                return False
            continue
        raise AssertionError(f"selector form not handled by this test: {sel}")
    return True
