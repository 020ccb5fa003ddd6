"""The streaming XDF reader gives what pyxdf gives: timestamps, clock offsets and values."""

from __future__ import annotations

import struct
from pathlib import Path

import numpy as np
import pytest
import pyxdf
from xdfwrite import FixtureStream, write_xdf

from runner.errors import RecordingError
from runner.recording.scan import Select, scan_xdf
from runner.recording.xdf import Recording, read_recording, read_stream_channels

TOLERANCE_S = 1e-9


def _pyxdf(path: Path, *, dejitter: bool = False) -> dict[int, dict]:
    streams, _ = pyxdf.load_xdf(str(path), synchronize_clocks=True, dejitter_timestamps=dejitter)
    return {int(s["info"]["stream_id"]): s for s in streams}


def _assert_same(rec: Recording, ref: dict[int, dict]) -> None:
    """Every stream: timestamps to 1e-9 s, clock offsets exactly, values exactly (and dtype)."""
    assert [s.stream_id for s in rec.streams] == list(ref)
    for s in rec.streams:
        want = ref[s.stream_id]
        ts = rec.timestamps(s.stream_id)
        assert ts.shape == want["time_stamps"].shape
        if len(ts):
            assert np.max(np.abs(ts - want["time_stamps"])) <= TOLERANCE_S
        times, values = rec.clock_offsets(s.stream_id)
        assert times == list(want["clock_times"])
        assert values == list(want["clock_values"])
        got = rec.values(s.stream_id)
        if s.channel_format == "string":
            assert got == want["time_series"]
        else:
            assert got.dtype == want["time_series"].dtype
            np.testing.assert_array_equal(got, want["time_series"])
        assert s.has_footer == ("footer" in want)
        assert s.name == want["info"]["name"][0]


def _regular(t0: float, n: int, srate: float) -> np.ndarray:
    """Timestamps each exactly the previous + 1/srate, so the writer leaves most of them out."""
    steps = np.full(n, 1.0 / srate)
    steps[0] = t0
    return np.add.accumulate(steps)


def _markers(stream_id: int = 1, *, offsets=None, channels: int = 1) -> FixtureStream:
    ts = [100.0 + 0.37 * k for k in range(60)]
    vals: list = [f'{{"event": "stimulus_onset", "trial": {k}}}' for k in range(60)]
    if channels > 1:
        vals = [[v, f"extra-{k}", "ü"] for k, v in enumerate(vals)]
    return FixtureStream(
        stream_id, "courier-markers", "Markers", "string", 0.0, ts, vals,
        source_id="trialdeck:courier", channel_count=channels,
        clock_offsets=offsets if offsets is not None else [(t, 3600.5) for t in (95, 110, 130)],
    )  # fmt: skip


def test_formats_chunks_and_deduced_timestamps_match_pyxdf(tmp_path):
    """Every numeric format, small chunks, deduced and jittered stamps, drifting offsets.

    Source: pyxdf.load_xdf(synchronize_clocks=True, dejitter_timestamps=False), the reference
    reader, on files written to the XDF 1.0 specification (tests/qa/xdfwrite.py).
    """
    rng = np.random.default_rng(21)
    streams = [_markers(channels=3)]
    n = 1500
    for k, fmt in enumerate(["int8", "int16", "int32", "int64", "float32", "double64"], start=2):
        ts = _regular(99.0 + 0.01 * k, n, 250.0)
        if k % 2:  # some streams jitter, so stored and deduced stamps mix within chunks
            ts = ts + np.where(rng.random(n) < 0.3, rng.uniform(0, 0.003, n), 0.0)
        hi = {"int8": 100, "int16": 30000, "int32": 2**30, "int64": 2**40}.get(fmt, 1)
        vals = (
            rng.integers(-hi, hi, size=(n, 3)) if fmt.startswith("int") else rng.normal(size=(n, 3))
        )
        drift = [
            (t, -12.25 + 20e-6 * (t - 99) + rng.normal(0, 30e-6)) for t in np.arange(99, 106, 0.5)
        ]
        streams.append(FixtureStream(k, f"s{k}", "EEG", fmt, 250.0, ts, vals, clock_offsets=drift))
    path = write_xdf(tmp_path / "formats.xdf", streams, chunk_samples=37)
    _assert_same(read_recording(path), _pyxdf(path))


def test_clock_reset_is_synchronised_per_segment_like_pyxdf(tmp_path):
    """A sender whose clock restarts mid-recording: two clock segments, as pyxdf splits them.

    Source: pyxdf.load_xdf clock-reset handling (handle_clock_resets=True, its defaults).
    """
    srate = 100.0
    a = _regular(500.0, 3000, srate)
    b = _regular(2.0, 3000, srate)  # the clock restarted near zero
    ts = np.concatenate([a, b])
    offsets = [(t, 1000.0 + 1e-5 * k) for k, t in enumerate(np.arange(500.0, 530.0, 1.0))]
    offsets += [(t, 1528.0 + 1e-5 * k) for k, t in enumerate(np.arange(2.0, 32.0, 1.0))]
    s = FixtureStream(2, "amp", "EEG", "float32", srate, ts, np.ones((len(ts), 2)),
                      clock_offsets=offsets)  # fmt: skip
    path = write_xdf(tmp_path / "reset.xdf", [_markers(), s], chunk_samples=100)
    rec = read_recording(path)
    _assert_same(rec, _pyxdf(path))
    assert (
        len(pyxdf.load_xdf(str(path), dejitter_timestamps=False)[0][1]["info"]["clock_segments"])
        == 2
    )
    assert any("clock was reset" in n for n in rec.notes)


def test_streams_without_offsets_keep_their_stamps_like_pyxdf(tmp_path):
    """No ClockOffset chunks (and one with a single offset): pyxdf's handling of both.

    Source: pyxdf.load_xdf (a stream without offsets is left as stored; one offset is an
    intercept).
    """
    one = _markers(1, offsets=[(100.0, 5.5)])
    none = FixtureStream(2, "amp", "EEG", "double64", 50.0, _regular(98.0, 800, 50.0),
                         np.arange(1600.0).reshape(800, 2))  # fmt: skip
    path = write_xdf(tmp_path / "nooff.xdf", [one, none])
    _assert_same(read_recording(path), _pyxdf(path))


def test_closing_outlet_repair_matches_pyxdf(tmp_path):
    """An extra sample beyond the footer count with an anomalous last offset is dropped.

    Source: pyxdf.load_xdf's pylsl#67 repair (_truncate_corrupted_offsets).
    """
    mk = _markers()
    mk.timestamps = [*mk.timestamps, 200.0]
    mk.values = [*mk.values, ""]
    mk.footer_sample_count = 60
    mk.clock_offsets = [(t, 3600.5) for t in np.arange(95.0, 125.0, 5.0)] + [(9000.0, 1e9)]
    path = write_xdf(tmp_path / "extra.xdf", [mk])
    rec = read_recording(path)
    _assert_same(rec, _pyxdf(path))
    assert rec.stream(1).sample_count == 60
    assert any("truncating extra samples" in n for n in rec.notes)


def _chunk_starts(data: bytes) -> list[tuple[int, int]]:
    """(byte offset, tag) of each chunk, walking the framing of the XDF specification."""
    out, pos = [], 4
    while pos < len(data):
        width = data[pos]
        length = struct.unpack_from({1: "<B", 4: "<I", 8: "<Q"}[width], data, pos + 1)[0]
        out.append((pos, struct.unpack_from("<H", data, pos + 1 + width)[0]))
        pos += 1 + width + length
    return out


@pytest.mark.parametrize("share", [0.3, 0.55, 0.8])
def test_truncated_file_reads_like_pyxdf(tmp_path, share):
    """A file cut inside a samples chunk: the intact chunks, as pyxdf recovers them.

    Source: pyxdf.load_xdf on the same cut file (it drops the cut chunk and stops at the end).
    """
    rng = np.random.default_rng(4)
    eeg = FixtureStream(2, "amp", "EEG", "float32", 500.0, _regular(99.0, 20000, 500.0),
                        rng.normal(size=(20000, 4)), clock_offsets=[(99.0, 0.25), (130.0, 0.25)])  # fmt: skip
    full = write_xdf(tmp_path / "full.xdf", [_markers(), eeg], chunk_samples=64).read_bytes()
    starts = [p for p, tag in _chunk_starts(full) if tag == 3 and p > len(full) * share]
    cut = tmp_path / "cut.xdf"
    cut.write_bytes(full[: starts[0] + 40])
    rec = read_recording(cut, allow_truncated=True)
    _assert_same(rec, _pyxdf(cut))
    assert rec.truncated and 0 < rec.stream(2).sample_count < 20000


def test_only_the_selected_channels_are_kept(tmp_path):
    """Select keeps marker strings and the named channel; the rest is timestamps only.

    Source: pyxdf.load_xdf's full reading of the same file, column by column.
    """
    rng = np.random.default_rng(8)
    eeg = FixtureStream(2, "amp", "EEG", "float32", 500.0, _regular(99.0, 3000, 500.0),
                        rng.normal(size=(3000, 8)), clock_offsets=[(99.0, 0.0), (105.0, 0.0)])  # fmt: skip
    light = FixtureStream(3, "light", "Photodiode", "int16", 500.0, _regular(99.0, 3000, 500.0),
                          rng.integers(0, 900, size=(3000, 2)), source_id="sensor-1")  # fmt: skip
    path = write_xdf(tmp_path / "sel.xdf", [_markers(), eeg, light])
    ref = _pyxdf(path)
    rec = read_recording(path, values=Select(channels={"SENSOR-1": [1]}))
    assert rec.values(1) == ref[1]["time_series"]
    np.testing.assert_array_equal(rec.channel(3, 1), ref[3]["time_series"][:, 1])
    np.testing.assert_array_equal(rec.timestamps(2), ref[2]["time_stamps"])
    assert rec.kept_channels(2) == ()
    with pytest.raises(RecordingError, match="were not read"):
        rec.values(3)
    with pytest.raises(RecordingError, match="channel 1 of"):
        rec.channel(3, 0)


def test_read_stream_channels_gives_float32_on_dejittered_times(tmp_path):
    """Chosen channels as float32 with pyxdf's synchronised, dejittered times; others skipped.

    Source: pyxdf.load_xdf(synchronize_clocks=True, dejitter_timestamps=True) on the same file.
    """
    rng = np.random.default_rng(2)
    n = 5000
    stamps = _regular(99.0, n, 500.0)
    for a in range(0, n, 50):
        stamps[a : a + 50] += rng.uniform(0.002, 0.012)
    eeg = FixtureStream(2, "amp", "EEG", "double64", 500.0, stamps, rng.normal(size=(n, 6)),
                        clock_offsets=[(t, 0.5 + 1e-5 * t) for t in np.arange(99.0, 110.0)])  # fmt: skip
    eeg.desc_xml = (
        "<channels>"
        + "".join(f"<channel><label>C{k}</label></channel>" for k in range(6))
        + "</channels>"
    )
    path = write_xdf(tmp_path / "phys.xdf", [_markers(), eeg])
    got = read_stream_channels(path, "amp", [4, 1])
    ref = _pyxdf(path, dejitter=True)[2]
    assert got.values.dtype == np.float32
    np.testing.assert_array_equal(got.values, ref["time_series"][:, [4, 1]].astype(np.float32))
    assert np.max(np.abs(got.times - ref["time_stamps"])) <= TOLERANCE_S
    assert got.labels == ("C4", "C1")
    with pytest.raises(RecordingError, match="channel 7 does not exist"):
        read_stream_channels(path, "amp", [6])
    with pytest.raises(RecordingError, match="no numeric stream"):
        read_stream_channels(path, "gaze")


def test_scan_skips_unlisted_streams(tmp_path):
    """With only_listed, other streams are not read at all (not even their headers kept).

    Source: XDF specification (chunks carry their stream id, so they can be skipped unread).
    """
    path = write_xdf(tmp_path / "two.xdf", [_markers(1), _markers(2)])
    scan = scan_xdf(path, Select(strings=True, channels={"2": None}, only_listed=True))
    assert list(scan.streams) == [2]
    assert len(scan.streams[2].time_stamps) == 60


def test_damaged_chunk_mid_file_recovers_at_the_next_boundary_like_pyxdf(tmp_path):
    """A chunk whose length byte is garbage: skipped to the next boundary chunk, as pyxdf does,
    and named as damage (refused unless allowed).

    Source: pyxdf.load_xdf's recovery (_scan_forward to the Boundary chunk's UUID, XDF 1.0).
    """
    eeg = FixtureStream(2, "amp", "EEG", "int32", 100.0, _regular(99.0, 4000, 100.0),
                        np.arange(8000).reshape(4000, 2), clock_offsets=[(99.0, 1.0), (130.0, 1.0)])  # fmt: skip
    data = bytearray(
        write_xdf(tmp_path / "ok.xdf", [_markers(), eeg], chunk_samples=50).read_bytes()
    )
    at = [p for p, tag in _chunk_starts(bytes(data)) if tag == 3][len(data) // 40000]
    data[at] = 7  # not a length width of the specification
    path = tmp_path / "damaged.xdf"
    path.write_bytes(bytes(data))
    with pytest.raises(RecordingError, match=f"byte {at} does not start an XDF chunk"):
        read_recording(path)
    rec = read_recording(path, allow_truncated=True)
    _assert_same(rec, _pyxdf(path))
    assert 0 < rec.stream(2).sample_count < 4000


def test_samples_gathered_across_many_blocks_match_pyxdf(tmp_path, monkeypatch):
    """Kept samples gathered in blocks smaller than a chunk (so chunks straddle blocks) and joined
    give pyxdf's values, as stored and as float32.

    Source: pyxdf.load_xdf(synchronize_clocks=True, dejitter_timestamps=False), the reference
    reader.
    """
    monkeypatch.setattr("runner.recording.scan.ROWS_BLOCK_BYTES", 1000)
    rng = np.random.default_rng(8)
    n = 2000
    eeg = FixtureStream(2, "amp", "EEG", "double64", 500.0, _regular(99.0, n, 500.0),
                        rng.normal(size=(n, 5)), clock_offsets=[(99.0, 2.0), (102.0, 2.0)])  # fmt: skip
    path = write_xdf(tmp_path / "blocks.xdf", [_markers(), eeg], chunk_samples=73)
    ref = _pyxdf(path)
    _assert_same(read_recording(path), ref)
    as32 = read_recording(path, values=Select(channels={"amp": [1, 3]}), numeric_dtype=np.float32)
    np.testing.assert_array_equal(
        as32.channel(2, 3), ref[2]["time_series"][:, 3].astype(np.float32)
    )
    assert as32.channel(2, 1).dtype == np.float32


def test_stream_header_chunks_find_the_headers_pyxdf_reads(tmp_path):
    """Listing the headers reads the same streams as pyxdf, also from a file cut near its end.

    Source: pyxdf.load_xdf's ``info`` of each stream (stream id, name, type) on the same files.
    """
    from runner.recording.scan import XdfFormatError, stream_header_chunks

    rng = np.random.default_rng(8)
    eeg = FixtureStream(2, "amp", "EEG", "float32", 500.0, _regular(99.0, 5000, 500.0),
                        rng.normal(size=(5000, 4)), clock_offsets=[(99.0, 0.25), (105.0, 0.25)])  # fmt: skip
    ecg = FixtureStream(3, "heart", "ECG", "double64", 250.0, _regular(99.0, 2500, 250.0),
                        rng.normal(size=(2500, 1)))  # fmt: skip
    path = write_xdf(tmp_path / "three.xdf", [_markers(), eeg, ecg], chunk_samples=50)
    full = path.read_bytes()
    cut = tmp_path / "cut.xdf"
    cut.write_bytes(full[: int(len(full) * 0.9)])
    for f in (path, cut):
        ref = (
            _pyxdf(f)
            if f == path
            else {s.stream_id: None for s in read_recording(f, allow_truncated=True).streams}
        )
        chunks = stream_header_chunks(f)
        ids = [struct.unpack("<I", content[:4])[0] for _, content in chunks]
        assert ids == sorted(ref)
        for pos, _content in chunks:
            assert full[pos + 1 + full[pos] : pos + 3 + full[pos]] == b"\x02\x00"  # the header tag
        if f == path:
            for sid, (_, content) in zip(ids, chunks, strict=True):
                xml = content[4:].decode()
                assert f"<name>{ref[sid]['info']['name'][0]}</name>" in xml
                assert f"<type>{ref[sid]['info']['type'][0]}</type>" in xml
    not_xdf = tmp_path / "not.xdf"
    not_xdf.write_bytes(b"JUNK" + full[4:100])
    with pytest.raises(XdfFormatError):
        stream_header_chunks(not_xdf)
