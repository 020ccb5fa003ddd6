"""The physio pipeline's parts: configuration, windows, stream choice, XDF writing, output folder."""

from __future__ import annotations

import numpy as np
import pytest
import pyxdf
from protofix import merged, write_protocol

from runner.cli.app import main
from runner.contract.outputs import OutputRefused
from runner.errors import ProtocolError, RecordingError, UsageError
from runner.physio.config import PhysioConfig, StreamChoice, Window, load_config
from runner.physio.outputs import prepare
from runner.physio.pipeline import check_pairs, run_sessions
from runner.physio.signals import StreamHeader, channel_index, choose_stream, stream_headers
from runner.physio.synth import XdfWriter, eeg_channel_names
from runner.physio.windows import window_bounds
from runner.protocol.load import load_protocol

EVENTS = {"fixation_onset": 10.0, "stimulus_onset": 11.0, "decision": 14.0, "answer": 16.5}


def test_default_windows_follow_the_documented_defaults():
    """Baseline is the last 500 ms of fixation, the pupil window runs to the answer, EEG 0-2 s."""
    config = PhysioConfig()
    assert window_bounds(config.pupil.baseline, EVENTS) == (10.5, 11.0)
    assert window_bounds(config.pupil.window, EVENTS) == (11.0, 16.5)
    assert window_bounds(config.eeg.epoch, EVENTS) == (11.0, 13.0)
    assert window_bounds(config.cardiac.window, EVENTS) == (11.0, 16.5)


def test_windows_are_capped_scaled_and_missing_when_an_event_is_missing():
    """max_s cuts a window; a pilot's scale shortens it; a missing end event gives no window."""
    capped = Window(start="stimulus_onset", end="answer", max_s=2.0)
    assert window_bounds(capped, EVENTS) == (11.0, 13.0)
    assert window_bounds(capped, EVENTS, scale=0.5) == (11.0, 12.0)
    to_rating = Window(start="stimulus_onset", end="rating")
    assert window_bounds(to_rating, EVENTS) is None
    backwards = Window(start="answer", end="decision")
    assert window_bounds(backwards, EVENTS) is None


def test_a_window_needs_exactly_one_end():
    """A window with both duration_s and end (or neither) is refused."""
    with pytest.raises(ValueError):
        Window(start="stimulus_onset", duration_s=1.0, end="answer")
    with pytest.raises(ValueError):
        Window(start="stimulus_onset")


def test_config_file_errors_point_at_line_and_column(tmp_path):
    """A bad setting in a physio file is reported with its line, column and problem code."""
    path = tmp_path / "physio.yaml"
    path.write_text(
        "pupil:\n  baseline: {start: stimulus_onset, duration_s: 0.5}\n"
        "eeg:\n  reject_peak_to_peak_uv: -3\n  bandz: {}\n",
        encoding="utf-8",
    )
    with pytest.raises(ProtocolError) as info:
        load_config(path)
    found = {(p.code, p.line) for p in info.value.problems}
    assert ("out-of-range", 4) in found
    assert ("unknown-field", 5) in found
    assert all(p.file.endswith("physio.yaml") and p.column >= 1 for p in info.value.problems)


def test_config_file_refuses_an_unknown_event_and_bad_band(tmp_path):
    """A window at an event that is not a trial event, and a band with low above high, are errors."""
    path = tmp_path / "physio.yaml"
    path.write_text(
        "pupil:\n  window: {start: lunch, end: answer}\neeg:\n  bands: {theta: [8, 4]}\n",
        encoding="utf-8",
    )
    with pytest.raises(ProtocolError) as info:
        load_config(path)
    codes = sorted(p.code for p in info.value.problems)
    assert codes == ["bad-choice", "bad-value"]


def test_config_file_is_read(tmp_path):
    """A valid physio file gives its settings and the defaults for the rest."""
    path = tmp_path / "physio.yaml"
    path.write_text(
        "eeg:\n  bands: {beta: [13, 30]}\n  epoch: {start: stimulus_onset, duration_s: 1}\n"
    )
    config = load_config(path)
    assert config.eeg.bands == {"beta": (13.0, 30.0)}
    assert config.eeg.epoch.duration_s == 1.0
    assert config.pupil == PhysioConfig().pupil


def test_protocol_physio_section_is_optional_and_checked(tmp_path):
    """The protocol's physio section is read when present; a typo in it is a protocol error."""
    plain = load_protocol(write_protocol(tmp_path / "a", merged()))
    assert plain.model.physio is None
    good = merged(physio={"pupil": {"max_interpolated_share": 0.3}})
    loaded = load_protocol(write_protocol(tmp_path / "b", good))
    assert loaded.model.physio is not None
    assert loaded.model.physio.pupil.max_interpolated_share == 0.3
    bad = merged(physio={"pupill": {}})
    with pytest.raises(ProtocolError) as info:
        load_protocol(write_protocol(tmp_path / "c", bad))
    assert [p.code for p in info.value.problems] == ["unknown-field"]


def _header(sid: int, name: str, type_: str, labels=("a",)) -> StreamHeader:
    return StreamHeader(sid, name, type_, len(labels), 500.0, "float32", labels=tuple(labels))


def test_stream_choice_by_type_and_name():
    """Streams are found by type (any case); several matches need a name; a wrong name is named."""
    headers = [_header(1, "amp-a", "EEG"), _header(2, "amp-b", "eeg"), _header(3, "eyes", "Gaze")]
    with pytest.raises(RecordingError) as info:
        choose_stream(headers, StreamChoice(types=["EEG"]), "eeg", option="--eeg-stream")
    message = str(info.value)
    assert "'amp-a'" in message and "'amp-b'" in message and "--eeg-stream" in message
    assert "\n" not in message
    picked = choose_stream(headers, StreamChoice(types=["EEG"], name="amp-b"), "eeg", option="x")
    assert picked is not None and picked.stream_id == 2
    assert choose_stream(headers, StreamChoice(types=["ECG"]), "ecg", option="x") is None
    with pytest.raises(RecordingError):
        choose_stream(headers, StreamChoice(types=["EEG"], name="amp-c"), "eeg", option="x")


def test_channel_by_label_hint_or_name():
    """A pupil channel is found by its label; a named channel that is missing is an error."""
    h = _header(3, "eyes", "Gaze", labels=("gaze_x", "gaze_y", "pupil_diameter"))
    assert channel_index(h, StreamChoice(types=["Gaze"]), ("pupil",)) == 2
    assert channel_index(h, StreamChoice(types=["Gaze"], channel="gaze_y"), ("pupil",)) == 1
    with pytest.raises(RecordingError):
        channel_index(h, StreamChoice(types=["Gaze"], channel="left"), ("pupil",))


def test_xdf_writer_reads_back_with_pyxdf(tmp_path):
    """Numbers, markers, labels and clock offsets written by XdfWriter read back unchanged.

    Source: pyxdf.load_xdf, the reference XDF reader (XDF 1.0 specification).
    """
    path = tmp_path / "x.xdf"
    w = XdfWriter(path)
    names = eeg_channel_names(3)
    w.header(
        1,
        name="eeg",
        type="EEG",
        channel_format="float32",
        srate=100.0,
        labels=names,
        units=["microvolts"] * 3,
    )
    ts = 50.0 + np.arange(250) / 100.0
    values = np.random.default_rng(1).normal(size=(250, 3)).astype(np.float32)
    w.samples(1, ts, values, chunk=64)
    w.clock_offsets(1, [(50.0, 0.0), (52.0, 0.0)])
    w.header(2, name="m", type="Markers", channel_format="string", srate=0.0, labels=["marker"])
    w.strings(2, [50.5, 51.25], ['{"event":"a"}', '{"event":"b","trial":1}'])
    w.clock_offsets(2, [(50.0, 1.5), (52.0, 1.5)])
    w.close()
    streams, _ = pyxdf.load_xdf(str(path), synchronize_clocks=True, dejitter_timestamps=False)
    by_name = {s["info"]["name"][0]: s for s in streams}
    np.testing.assert_array_equal(by_name["eeg"]["time_series"], values)
    np.testing.assert_allclose(by_name["eeg"]["time_stamps"], ts)
    assert [v[0] for v in by_name["m"]["time_series"]] == [
        '{"event":"a"}',
        '{"event":"b","trial":1}',
    ]
    np.testing.assert_allclose(by_name["m"]["time_stamps"], [52.0, 52.75])
    chans = by_name["eeg"]["info"]["desc"][0]["channels"][0]["channel"]
    assert [c["label"][0] for c in chans] == names
    headers = stream_headers(path)
    assert [(h.name, h.type, h.labels) for h in headers] == [
        ("eeg", "EEG", tuple(names)),
        ("m", "Markers", ("marker",)),
    ]


def test_output_folder_is_refused_when_not_empty(tmp_path):
    """A folder holding other files is refused without force, and accepted with it."""
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("mine", encoding="utf-8")
    with pytest.raises(OutputRefused) as info:
        prepare(out)
    assert info.value.reason == "not-empty"
    assert prepare(out, force=True).root == out


def test_command_refuses_a_non_empty_folder(tmp_path, capsys):
    """`trialdeck physio` exits 1 naming --force when --out holds other files, before any work."""
    session = tmp_path / "s"
    session.mkdir()
    (session / "journal.jsonl").write_text("", encoding="utf-8")
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("mine", encoding="utf-8")
    code = main(["physio", str(session), "--recording", str(tmp_path / "r.xdf"), "--out", str(out)])
    assert code == 1
    assert "--force" in capsys.readouterr().err


def test_recordings_pair_with_sessions_in_order(tmp_path):
    """A recording count that differs from the session count is a usage error."""
    with pytest.raises(UsageError):
        check_pairs([tmp_path / "a", tmp_path / "b"], [tmp_path / "a.xdf"])


@pytest.mark.slow
def test_scheduler_without_a_cluster_is_one_clear_error():
    """An address where no Dask scheduler listens gives a usage error, not a traceback."""
    pytest.importorskip("dask.distributed")
    with pytest.raises(UsageError) as info:
        list(run_sessions([], scheduler="tcp://127.0.0.1:9"))
    assert "\n" not in str(info.value)


def _check_codes(tmp_path, **changes):
    from runner.protocol.check import check_protocol

    report = check_protocol(write_protocol(tmp_path, merged(**changes)))
    return {(p.code, p.severity) for p in report.problems if p.code.startswith("physio-")}


def test_check_is_silent_without_a_physio_section(tmp_path):
    """A protocol without a physio section gets no physio warnings, however short its fixation."""
    assert _check_codes(tmp_path, timing={"fixation_ms": [100, 200]}) == set()


def test_check_warns_when_the_protocol_cannot_support_a_measure(tmp_path):
    """Short fixation, short rest and few trials per condition are warnings with their codes."""
    codes = _check_codes(
        tmp_path,
        timing={"fixation_ms": [300, 400]},
        sequence=[
            {"rest": {"seconds": 20, "label": "baseline"}},
            {"blocks": {"where": {"set": "main"}, "by": "density"}},
        ],
        physio={"eeg": {"min_epochs_per_condition": 3}},
    )
    assert codes == {
        ("physio-baseline-too-long", "warning"),
        ("physio-period-too-short", "warning"),
        ("physio-few-epochs", "warning"),
    }


def test_check_accepts_a_protocol_that_supports_its_measures(tmp_path):
    """Fixations longer than the baseline, a 2-minute rest and enough trials give no warning."""
    codes = _check_codes(
        tmp_path,
        timing={"fixation_ms": [600, 800]},
        sequence=[
            {"rest": {"seconds": 120, "label": "baseline"}},
            {"blocks": {"where": {"set": "main"}, "by": "density"}},
        ],
        physio={"eeg": {"min_epochs_per_condition": 2}},
    )
    assert codes == set()


def test_scheduler_without_dask_installed_is_one_clear_error(monkeypatch):
    """Without dask.distributed, --scheduler is one usage error naming the extra to install."""
    import sys

    monkeypatch.setitem(sys.modules, "dask.distributed", None)
    with pytest.raises(UsageError) as info:
        list(run_sessions([], scheduler="tcp://127.0.0.1:8786"))
    assert "trialdeck[dask]" in str(info.value) and "\n" not in str(info.value)


def test_physio_read_follows_a_clock_reset_like_pyxdf(tmp_path):
    """The physio path's one read of a recording whose sender clock restarted mid-session gives
    pyxdf's synchronised timestamps (two clock segments) and the chosen channel as float32.

    Source: pyxdf.load_xdf clock-reset handling (synchronize_clocks=True, its defaults).
    """
    from runner.physio.signals import read_chosen, signals_from

    path = tmp_path / "reset.xdf"
    w = XdfWriter(path)
    w.header(1, name="eye", type="Pupil", channel_format="float32", srate=100.0,
             labels=["gaze_x", "pupil"])  # fmt: skip
    ts = np.concatenate([500.0 + np.arange(3000) / 100.0, 2.0 + np.arange(3000) / 100.0])
    values = np.random.default_rng(4).normal(size=(6000, 2)).astype(np.float32)
    w.samples(1, ts, values, chunk=100)
    w.clock_offsets(1, [(500.0 + k, 1000.0 + 1e-5 * k) for k in range(30)])
    w.clock_offsets(1, [(2.0 + k, 1528.0 + 1e-5 * k) for k in range(30)])
    w.header(2, name="m", type="Markers", channel_format="string", srate=0.0, labels=["marker"])
    w.strings(2, [501.0, 503.0], ['{"event":"a"}', '{"event":"b"}'])
    w.clock_offsets(2, [(500.0, 1000.0), (530.0, 1000.0)])
    w.close()
    headers = stream_headers(path)
    wanted = {"pupil": (headers[0], [1])}
    rec = read_chosen(path, wanted, {2})
    ref, _ = pyxdf.load_xdf(str(path), synchronize_clocks=True, dejitter_timestamps=False)
    by_name = {s["info"]["name"][0]: s for s in ref}
    assert len(by_name["eye"]["info"]["clock_segments"]) == 2
    np.testing.assert_allclose(rec.timestamps(1), by_name["eye"]["time_stamps"], rtol=0, atol=1e-9)
    np.testing.assert_allclose(rec.timestamps(2), by_name["m"]["time_stamps"], rtol=0, atol=1e-9)
    signal = signals_from(rec, wanted)["pupil"]
    assert signal.data.dtype == np.float32
    np.testing.assert_array_equal(signal.data[:, 0], by_name["eye"]["time_series"][:, 1])


def test_window_events_are_the_contract_trial_events():
    """The config's typed event names are exactly the contract's list of a trial's marked events."""
    import typing

    from runner.contract.events import MARKED_EVENTS, TRIAL_EVENTS
    from runner.physio.config import TrialEvent

    assert typing.get_args(TrialEvent) == TRIAL_EVENTS
    assert set(TRIAL_EVENTS) <= MARKED_EVENTS
