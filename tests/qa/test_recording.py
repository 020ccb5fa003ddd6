"""Checking a session journal against an XDF recording (runner.recording)."""

from __future__ import annotations

import json

import numpy as np
import pytest
import pyxdf
from xdfwrite import FixtureStream, write_xdf

from runner.errors import RecordingError
from runner.recording import (
    check_recording,
    find_marker_streams,
    match_markers,
    read_recording,
    stream_coverage,
)

STUDY = "courier-hops"
SOURCE_ID = f"trialdeck:{STUDY}:station1"
MARKER_NAME = f"{STUDY}-markers"
SESSION_START = 1000.0  # presenter local_clock, seconds
TRIALS = 8
TRIAL_S = 4.0
# Recorder clock = presenter clock + this (what the recorder's ClockOffset chunks measure).
PRESENTER_OFFSET = 250.125
EEG_SRATE = 500.0
GAZE_SRATE = 120.0
GAZE_OFFSET = -17.5
MARGIN_S = 3.0


def journal() -> list[tuple[str, float]]:
    """The journaled markers of a short invented dispatcher session (presenter clock)."""
    out = [(json.dumps({"event": "session_start"}), SESSION_START)]
    for k in range(1, TRIALS + 1):
        t = SESSION_START + 1.0 + (k - 1) * TRIAL_S
        stim = f"stimuli/hops_n{10 + k}_d{k % 3}.png"
        out.append((json.dumps({"event": "fixation_onset", "trial": k}), t))
        out.append(
            (json.dumps({"event": "stimulus_onset", "trial": k, "stimulus": stim}), t + 0.9166667)
        )
        out.append((json.dumps({"event": "answer", "trial": k, "depots": 3 + k}), t + 2.75))
        out.append((json.dumps({"event": "rating_onset", "trial": k}), t + 2.8))
        if k % 4 == 0:
            # Sent several times per session with the same payload: matched in time order.
            out.append((json.dumps({"event": "break_start"}), t + 3.5))
    out.append((json.dumps({"event": "session_end"}), SESSION_START + 1.0 + TRIALS * TRIAL_S))
    return out


def session_span() -> tuple[float, float]:
    times = [t for _, t in journal()]
    return min(times), max(times)


def marker_stream(
    samples: list[tuple[str | bytes, float]],
    *,
    stream_id: int = 1,
    created_at: float = SESSION_START - 5.0,
    offset: float = PRESENTER_OFFSET,
) -> FixtureStream:
    ts = [t for _, t in samples]
    lo, hi = (min(ts), max(ts)) if ts else (SESSION_START, SESSION_START)
    return FixtureStream(
        stream_id=stream_id,
        name=MARKER_NAME,
        type="Markers",
        channel_format="string",
        nominal_srate=0.0,
        timestamps=ts,
        values=[p for p, _ in samples],
        source_id=SOURCE_ID,
        created_at=created_at,
        clock_offsets=[(t, offset) for t in np.linspace(lo - 1.0, hi + 1.0, 6)],
    )


def eeg_stream(*, drop: tuple[float, float] | None = None, stream_id: int = 2) -> FixtureStream:
    """500 Hz EEG from a recorder-side amplifier (recorder clock), optionally with a hole."""
    lo, hi = session_span()
    t0 = lo + PRESENTER_OFFSET - MARGIN_S
    n = int((hi - lo + 2 * MARGIN_S) * EEG_SRATE)
    ts = t0 + np.arange(n) / EEG_SRATE
    vals = np.random.default_rng(3).normal(size=(n, 4)).astype(np.float32)
    if drop is not None:
        keep = ~((ts > drop[0] + PRESENTER_OFFSET) & (ts < drop[1] + PRESENTER_OFFSET))
        ts, vals = ts[keep], vals[keep]
    # The amplifier streams from the recording computer itself: its clock offsets are zero.
    offsets = [(t, 0.0) for t in np.linspace(ts[0], ts[-1], 5)]
    return FixtureStream(
        stream_id,
        "depot-eeg",
        "EEG",
        "float32",
        EEG_SRATE,
        ts,
        vals,
        source_id="amp-01",
        clock_offsets=offsets,
    )


def gaze_stream(stream_id: int = 3) -> FixtureStream:
    """120 Hz gaze (x, y, pupil) from the eye-tracker machine, with its own clock offset."""
    lo, hi = session_span()
    t0 = lo + PRESENTER_OFFSET - GAZE_OFFSET - MARGIN_S
    n = int((hi - lo + 2 * MARGIN_S) * GAZE_SRATE)
    ts = t0 + np.arange(n) / GAZE_SRATE
    vals = np.column_stack([np.full(n, 960.0), np.full(n, 540.0), np.linspace(3.0, 4.0, n)])
    offsets = [(t, GAZE_OFFSET) for t in np.linspace(ts[0], ts[-1], 5)]
    return FixtureStream(
        stream_id,
        "depot-gaze",
        "Gaze",
        "double64",
        GAZE_SRATE,
        ts,
        vals,
        source_id="tracker-01",
        clock_offsets=offsets,
    )


@pytest.fixture
def complete(tmp_path):
    return write_xdf(
        tmp_path / "complete.xdf", [marker_stream(journal()), eeg_stream(), gaze_stream()]
    )


def run_check(path, **kw):
    rec = read_recording(path)
    return rec, check_recording(rec, journal(), source_id=SOURCE_ID, name=MARKER_NAME, **kw)


# --------------------------------------------------------------------------------------------


def test_complete_recording_has_no_problems(complete):
    """A recording with every marker and full EEG and gaze gives no findings and tiny residuals.

    Source: XDF specification for the file layout; pyxdf.load_xdf as the reference reader.
    """
    rec, report = run_check(complete)
    assert report.problems() == []
    m = report.match
    assert m.matched == len(journal())
    assert not (m.missing or m.extra or m.duplicated or m.garbage)
    assert m.offset_s == pytest.approx(PRESENTER_OFFSET, abs=1e-9)
    assert m.residual_max_abs_ms < 1e-6
    assert {c.name: c.covers_span for c in report.coverage} == {
        "depot-eeg": True,
        "depot-gaze": True,
    }
    assert all(c.gaps == [] for c in report.coverage)
    assert report.choice.note == ""
    json.loads(json.dumps(report.as_dict()))


def test_stream_summaries_agree_with_pyxdf(complete):
    """Stream fields, counts and effective rates agree with pyxdf's own view of the file.

    Source: pyxdf.resolve_streams and pyxdf.load_xdf (effective_srate with dejitter on).
    """
    rec = read_recording(complete)
    ref_infos = {i["stream_id"]: i for i in pyxdf.resolve_streams(str(complete))}
    ref, _ = pyxdf.load_xdf(str(complete))
    ref_by = {int(s["info"]["stream_id"]): s for s in ref}
    for s in rec.streams:
        info = ref_infos[s.stream_id]
        assert (s.name, s.type, s.source_id, s.channel_count) == (
            info["name"],
            info["type"],
            info["source_id"],
            info["channel_count"],
        )
        assert s.sample_count == len(ref_by[s.stream_id]["time_stamps"])
    cov = {c.name: c for c in stream_coverage(rec, (0.0, 0.0))}
    for c in cov.values():
        assert c.effective_srate == pytest.approx(
            ref_by[c.stream_id]["info"]["effective_srate"], rel=1e-9
        )
    marker_ids = pyxdf.match_streaminfos(list(ref_infos.values()), [{"type": "Markers"}])
    assert marker_ids == find_marker_streams(rec, source_id=None, name=None).candidates


def test_gaze_clock_offset_is_applied(complete):
    """Gaze timestamps come back in the recorder's clock after pyxdf's synchronisation.

    Source: XDF specification (ClockOffset chunks); pyxdf.load_xdf clock synchronisation.
    """
    rec = read_recording(complete)
    gaze = next(s for s in rec.streams if s.name == "depot-gaze")
    np.testing.assert_allclose(
        rec.timestamps(gaze.stream_id),
        np.asarray(gaze_stream().timestamps) + GAZE_OFFSET,
        rtol=0,
        atol=1e-9,
    )
    assert gaze.clock_offset_s == GAZE_OFFSET


def test_missing_markers_are_reported(tmp_path):
    """Markers sent before the recorder connected show up as missing, with a sentence.

    Source: XDF specification for the fixture; pyxdf.load_xdf as the reference reader.
    """
    j = journal()
    path = write_xdf(tmp_path / "late.xdf", [marker_stream(j[3:]), eeg_stream()])
    _, report = run_check(path)
    assert report.match.missing == j[:3]
    assert report.match.matched == len(j) - 3
    text = " ".join(report.problems())
    assert "3 journaled markers never reached the recording" in text
    assert "start the recorder before the session" in text


def test_restart_duplicate_stream_picks_the_one_covering_the_session(tmp_path):
    """Of two same-name, same-source_id streams, the one whose markers cover the session wins.

    Source: XDF specification for the fixture; pyxdf.load_xdf as the reference reader.
    """
    aborted = [(json.dumps({"event": "session_start"}), 400.0), ('{"event":"abort"}', 430.0)]
    old = marker_stream(aborted, stream_id=1, created_at=390.0)
    new = marker_stream(journal(), stream_id=4, created_at=SESSION_START - 5.0)
    path = write_xdf(tmp_path / "restart.xdf", [old, eeg_stream(), new])
    rec, report = run_check(path)
    assert report.choice.stream_ids == [4]
    assert report.choice.candidates == [1, 4]
    note = report.choice.note
    assert note.startswith(f"2 marker streams named {MARKER_NAME!r}; chose stream 4")
    assert "whose markers cover the session" in note
    assert "stream 1 (created_at 390.0, 2 markers) lies outside the session" in note
    assert report.problems() == []
    # Without a span the most recently created stream is taken.
    latest = find_marker_streams(rec, source_id=SOURCE_ID, name=None)
    assert latest.stream_ids == [4] and "most recently created" in latest.note


def test_restart_split_session_is_combined(tmp_path):
    """A session split across two outlets of the same source_id is checked on their union.

    Source: XDF specification for the fixture; pyxdf.load_xdf as the reference reader.
    """
    j = journal()
    half = len(j) // 2
    first = marker_stream(j[:half], stream_id=1, created_at=SESSION_START - 5.0)
    second = marker_stream(j[half:], stream_id=3, created_at=j[half][1] - 2.0)
    path = write_xdf(tmp_path / "split.xdf", [first, eeg_stream(), second])
    rec, report = run_check(path)
    assert report.choice.combined and report.choice.stream_ids == [1, 3]
    assert report.match.matched == len(j) and not report.match.missing
    assert (
        "a restart split the session, so the check combined streams 1 (created_at 995.0) and 3"
        in report.choice.note
    )
    assert report.problems() == [report.choice.note]
    alone = check_recording(rec, j, source_id=SOURCE_ID, name=MARKER_NAME, combine_restarts=False)
    assert not alone.choice.combined
    assert len(alone.match.missing) in (half, len(j) - half)


@pytest.mark.parametrize(
    ("hole_s", "max_gap_s", "expected_gaps"),
    [
        (0.8, 0.5, 1),
        (0.3, 0.5, 0),
        (0.3, 0.2, 1),
        (0.0, 0.5, 0),
    ],
)
def test_eeg_gap_is_found(tmp_path, hole_s, max_gap_s, expected_gaps):
    """A hole in the EEG longer than the gap threshold is reported with its length.

    Source: common practice (no published source) for the threshold; pyxdf reads the fixture.
    """
    lo, _ = session_span()
    drop = (lo + 10.0, lo + 10.0 + hole_s) if hole_s else None
    path = write_xdf(tmp_path / "gap.xdf", [marker_stream(journal()), eeg_stream(drop=drop)])
    _, report = run_check(path, max_gap_s=max_gap_s)
    (eeg,) = report.coverage
    assert len(eeg.gaps) == expected_gaps
    if expected_gaps:
        # The hole removes samples strictly inside it, so the gap spans it plus < 2 intervals.
        assert hole_s - 1e-9 <= eeg.gap_total_s < hole_s + 2 / EEG_SRATE
        assert any("has 1 gap longer than" in p for p in report.problems())
    else:
        assert report.problems() == []


@pytest.mark.parametrize(
    ("srate", "step_s", "expected_threshold", "gaps"),
    [
        (500.0, 0.6, 0.5, 1),
        (1.0, 1.5, 2.0, 0),
        (1.0, 2.5, 2.0, 1),
    ],
)
def test_gap_threshold_is_at_least_two_sample_intervals(
    tmp_path, srate, step_s, expected_threshold, gaps
):
    """The gap threshold is max(max_gap_s, 2 / srate), so slow streams are not flagged per sample.

    Source: common practice (no published source); rule as stated in the recording-check docs.
    """
    ts = np.concatenate([np.arange(20) / srate, 19 / srate + step_s + np.arange(20) / srate])
    s = FixtureStream(1, "temp", "Temperature", "float32", srate, ts, np.zeros((40, 1)))
    rec = read_recording(write_xdf(tmp_path / "t.xdf", [s]))
    (cov,) = stream_coverage(rec, (ts[0], ts[-1]), max_gap_s=0.5)
    assert cov.gap_threshold_s == expected_threshold
    assert len(cov.gaps) == gaps


@pytest.mark.parametrize("garbage", ["", b'\xff\xfe{"ev', "3", '["not", "an object"]'])
def test_garbage_final_marker_is_reported_not_fatal(tmp_path, garbage):
    """A final marker sample that is not a JSON object is reported as garbage, not an error.

    Source: XDF specification for the fixture; pyxdf.load_xdf as the reference reader.
    """
    j = journal()
    samples: list[tuple[str | bytes, float]] = [*j, (garbage, j[-1][1] + 0.5)]
    path = write_xdf(tmp_path / "garbage.xdf", [marker_stream(samples), eeg_stream()])
    _, report = run_check(path)
    assert len(report.match.garbage) == 1
    assert report.match.matched == len(j)
    (sentence,) = report.problems()
    assert sentence.startswith("1 recorded marker sample is not a JSON object")
    assert "as the last sample" in sentence


def test_pyxdf_dropping_a_garbage_sample_is_noted(tmp_path):
    """When pyxdf itself drops a final sample beyond the footer count, the note says so.

    Source: pyxdf.load_xdf (truncation of extra samples with an anomalous last clock offset).
    """
    j = journal()
    mk = marker_stream([*j, ("", j[-1][1] + 0.5)])
    mk.footer_sample_count = len(j)
    mk.clock_offsets = [*mk.clock_offsets, (j[-1][1] + 9000.0, 1e9)]
    path = write_xdf(tmp_path / "dropped.xdf", [mk, eeg_stream()])
    _, report = run_check(path)
    assert report.match.garbage == []
    assert any("truncating extra samples" in p for p in report.problems())


def test_clock_offsets_with_jitter_leave_near_zero_residuals(tmp_path):
    """Noisy but constant clock offsets are fitted by pyxdf; residuals stay far below 1 ms.

    Source: pyxdf.load_xdf clock synchronisation (robust linear fit of ClockOffset chunks).
    """
    j = journal()
    mk = marker_stream(j)
    rng = np.random.default_rng(11)
    times = np.linspace(SESSION_START - 5, SESSION_START + 40, 46)
    mk.clock_offsets = [(t, PRESENTER_OFFSET + rng.normal(0, 50e-6)) for t in times]
    path = write_xdf(tmp_path / "jitter.xdf", [mk, eeg_stream()])
    _, report = run_check(path)
    assert report.match.offset_s == pytest.approx(PRESENTER_OFFSET, abs=1e-4)
    assert report.match.residual_max_abs_ms < 0.05
    assert report.problems() == []


def test_clock_drift_is_modelled_not_reported_as_late_markers(tmp_path):
    """A 200 ppm drift between clocks is measured as drift; residuals after the model stay tiny.

    Source: pyxdf.load_xdf clock synchronisation; expected slope worked by hand (200 ppm over
    33 s puts the ends 3.3 ms either side of a constant offset).
    """
    j = journal()
    mk = marker_stream(j)
    drift = 200e-6
    times = np.linspace(SESSION_START - 5, SESSION_START + 40, 10)
    mk.clock_offsets = [(t, PRESENTER_OFFSET + drift * (t - SESSION_START)) for t in times]
    path = write_xdf(tmp_path / "drift.xdf", [mk, eeg_stream()])
    _, report = run_check(path)
    m = report.match
    assert m.drift_ppm == pytest.approx(200.0, rel=1e-3)
    constant = max(abs(r - t - m.offset_s) for _, t, r in m.pairs) * 1000
    assert 3.0 < constant < 3.7  # what a constant offset would have left
    assert m.residual_max_abs_ms < 0.01
    assert report.problems() == []


# --------------------------------------------------------------------------------------------
# match_markers on its own


def test_residual_statistics_worked_example():
    """Offset is the median difference; residuals are taken from the least-squares clock line,
    and their median, p99 and max match a hand calculation.

    Source: ordinary least squares worked by hand: differences [0, 0, 2, 0, -1] ms at 0..40 s
    give slope -0.02 ms/s through (20 s, 0.2 ms), so residuals [-0.6, -0.4, 1.8, 0, -0.8] ms;
    numpy.percentile's default (Hyndman and Fan 1996, definition 7): p99 of the absolute values
    is 0.8 + 0.96 * (1.8 - 0.8) = 1.76.
    """
    j = [(f'{{"event":"e","trial":{k}}}', 10.0 * k) for k in range(5)]
    err = [0.0, 0.0, 0.002, 0.0, -0.001]
    r = [(p, t + 5.0 + e) for (p, t), e in zip(j, err, strict=True)]
    m = match_markers(j, r)
    assert m.offset_s == pytest.approx(5.0, abs=1e-12)
    assert m.residual_median_abs_ms == pytest.approx(0.6, abs=1e-9)
    assert m.residual_p99_abs_ms == pytest.approx(1.76, abs=1e-9)
    assert m.residual_max_abs_ms == pytest.approx(1.8, abs=1e-9)
    assert m.drift_ppm == pytest.approx(-20.0, abs=1e-6)
    assert m.worst is not None and m.worst[0] == j[2][0]


BRK = '{"event":"break_start"}'
A = '{"event":"a","trial":1}'


@pytest.mark.parametrize(
    ("journaled", "recorded", "missing", "duplicated", "extra", "garbage", "matched"),
    [
        ([(A, 1.0)], [(A, 1.0)], [], [], [], [], 1),
        ([(A, 1.0)], [], [(A, 1.0)], [], [], [], 0),
        ([(A, 1.0)], [(A, 1.0), (A, 1.0)], [], [(A, 1.0)], [], [], 1),
        ([(A, 1.0)], [(A, 1.0), ('{"event":"b"}', 2.0)], [], [], [('{"event":"b"}', 2.0)], [], 1),
        ([(A, 1.0)], [(A, 1.0), ("", 3.0)], [], [], [], [("", 3.0)], 1),
        # Repeated payloads: the first break was lost; the unique marker anchors the offset.
        (
            [(A, 1.0), (BRK, 10.0), (BRK, 20.0), (BRK, 30.0)],
            [(A, 1.0), (BRK, 20.0), (BRK, 30.0)],
            [(BRK, 10.0)],
            [],
            [],
            [],
            3,
        ),
        # Repeated payloads with one doubled copy.
        (
            [(BRK, 10.0), (BRK, 20.0)],
            [(BRK, 10.0), (BRK, 20.0), (BRK, 20.0005)],
            [],
            [(BRK, 20.0005)],
            [],
            [],
            2,
        ),
        ([(BRK, 10.0), (BRK, 20.0)], [(BRK, 10.0), (BRK, 20.0)], [], [], [], [], 2),
    ],
)
def test_match_markers_table(journaled, recorded, missing, duplicated, extra, garbage, matched):
    """Missing, duplicated, extra and garbage markers are sorted into the right lists.

    Source: common practice (no published source); cases worked by hand.
    """
    m = match_markers(journaled, recorded)
    assert (m.missing, m.duplicated, m.extra, m.garbage, m.matched) == (
        missing,
        duplicated,
        extra,
        garbage,
        matched,
    )


# --------------------------------------------------------------------------------------------
# Files that cannot be read


def _write_bytes(tmp_path, name, data):
    p = tmp_path / name
    p.write_bytes(data)
    return p


@pytest.mark.parametrize(
    ("make", "fragment"),
    [
        (lambda d, ok: d / "nowhere.xdf", "does not exist"),
        (lambda d, ok: _write_bytes(d, "empty.xdf", b""), "is empty (0 bytes)"),
        (lambda d, ok: _write_bytes(d, "notes.xdf", b"onset,duration\n1,2\n"), "is not an XDF"),
        (lambda d, ok: _write_bytes(d, "magic.xdf", b"XDF:"), "holds no data"),
        (lambda d, ok: _write_bytes(d, "cut.xdf", ok[: len(ok) // 2]), "damaged or truncated"),
        (lambda d, ok: _write_bytes(d, "cut2.xdf", ok[:-3]), "needs"),
        (
            lambda d, ok: _write_bytes(d, "junk.xdf", ok + b"\x07junk"),
            "does not start an XDF chunk",
        ),
    ],
)
def test_unreadable_files_raise_recording_error(tmp_path, complete, make, fragment):
    """Missing, empty, non-XDF and truncated files raise RecordingError with a plain sentence.

    Source: XDF specification (magic and chunk framing); common practice for the messages.
    """
    path = make(tmp_path, complete.read_bytes())
    with pytest.raises(RecordingError) as info:
        read_recording(path)
    message = str(info.value)
    assert fragment in message
    assert message.endswith(".")


def test_truncated_file_can_be_read_when_allowed(tmp_path, complete):
    """With allow_truncated the intact part is read and the truncation becomes a finding.

    Source: pyxdf.load_xdf recovery from a chopped-off file.
    """
    data = complete.read_bytes()
    path = _write_bytes(tmp_path, "cut.xdf", data[: int(len(data) * 0.8)])
    rec = read_recording(path, allow_truncated=True)
    assert rec.truncated
    assert any("only the intact part was read" in n for n in rec.notes)
    full = read_recording(complete)
    eeg = next(s for s in rec.streams if s.type == "EEG")
    assert 0 < eeg.sample_count < next(s for s in full.streams if s.type == "EEG").sample_count
    assert not eeg.has_footer


def test_no_matching_marker_stream_names_what_is_there(complete):
    """Asking for an unknown stream raises RecordingError listing the marker streams present.

    Source: common practice (no published source).
    """
    rec = read_recording(complete)
    with pytest.raises(RecordingError, match=f"it holds {MARKER_NAME!r}"):
        find_marker_streams(rec, source_id="trialdeck:other:station9", name=None)


def test_stream_without_clock_offsets_is_noted(tmp_path):
    """A stream with no ClockOffset chunks gets one plain note instead of pyxdf's message.

    Source: pyxdf.load_xdf (synchronisation needs ClockOffset chunks; XDF specification).
    """
    eeg = eeg_stream()
    eeg.clock_offsets = []
    rec = read_recording(write_xdf(tmp_path / "nooff.xdf", [marker_stream(journal()), eeg]))
    assert rec.notes == [
        "Stream 2 ('depot-eeg') has no clock offset measurements, so its timestamps could not "
        "be moved onto the recorder's clock and were used as stored; check the recorder's "
        "settings if that stream came from another computer."
    ]
