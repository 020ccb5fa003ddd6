"""The test-fixture XDF writer produces files that the reference reader (pyxdf) reads exactly."""

from __future__ import annotations

import struct

import numpy as np
import pytest
import pyxdf
from xdfwrite import (
    BOUNDARY_UUID,
    MAGIC,
    TAG_SAMPLES,
    FixtureStream,
    chunk,
    samples_content,
    varlen,
    write_xdf,
)

SOURCE_ID = "trialdeck:courier-hops:station1"


def _eeg(n: int = 1000, srate: float = 500.0, t0: float = 100.0) -> FixtureStream:
    rng = np.random.default_rng(7)
    return FixtureStream(
        stream_id=2,
        name="depot-eeg",
        type="EEG",
        channel_format="float32",
        nominal_srate=srate,
        timestamps=t0 + np.arange(n) / srate,
        values=rng.normal(size=(n, 4)).astype(np.float32),
        source_id="eeg-amp-01",
        created_at=50.0,
    )


def _markers() -> FixtureStream:
    payloads = [
        '{"event":"session_start"}',
        '{"event":"stimulus_onset","trial":1,"stimulus":"stimuli/hops_n12_d2.png"}',
        "",
        "dépôt ✓",
    ]
    return FixtureStream(
        stream_id=1,
        name="courier-hops-markers",
        type="Markers",
        channel_format="string",
        nominal_srate=0.0,
        timestamps=[100.25, 101.5, 101.5000001, 103.75],
        values=payloads,
        source_id=SOURCE_ID,
        created_at=99.0,
    )


def _load(path):
    streams, header = pyxdf.load_xdf(str(path), synchronize_clocks=True, dejitter_timestamps=False)
    return {s["info"]["stream_id"]: s for s in streams}, header


@pytest.mark.parametrize(
    ("n", "expected"),
    [
        (0, b"\x01\x00"),
        (5, b"\x01\x05"),
        (255, b"\x01\xff"),
        (300, b"\x04\x2c\x01\x00\x00"),
        (2**32, b"\x08" + (2**32).to_bytes(8, "little")),
    ],
)
def test_varlen_matches_the_specification_layout(n, expected):
    """Variable-length integers are a width byte (1, 4 or 8) and a little-endian value.

    Source: XDF 1.0 specification (variable-length integers), worked by hand.
    """
    assert varlen(n) == expected


def test_chunk_length_counts_tag_and_content():
    """A chunk's length field counts the 2-byte tag plus the content.

    Source: XDF 1.0 specification (chunk layout), worked by hand.
    """
    assert chunk(5, b"abc") == b"\x01\x05" + b"\x05\x00" + b"abc"


def test_numeric_samples_chunk_bytes():
    """A double64 Samples chunk is stream id, count, then timestamp flag/double and values.

    Source: XDF 1.0 specification (Samples chunk), worked by hand.
    """
    s = FixtureStream(3, "ecg", "ECG", "double64", 0.0, [1.5, 2.5], np.array([[0.25], [-1.0]]))
    expected = (
        struct.pack("<I", 3)
        + b"\x01\x02"
        + b"\x08"
        + struct.pack("<d", 1.5)
        + struct.pack("<d", 0.25)
        + b"\x08"
        + struct.pack("<d", 2.5)
        + struct.pack("<d", -1.0)
    )
    assert samples_content(s, 0, 2) == expected


def test_pyxdf_reads_back_numeric_and_string_streams_exactly(tmp_path):
    """pyxdf returns the exact values, timestamps and header fields the writer was given.

    Source: XDF 1.0 specification; pyxdf.load_xdf and pyxdf.resolve_streams as reference reader.
    """
    eeg, mk = _eeg(), _markers()
    path = write_xdf(tmp_path / "r.xdf", [mk, eeg])
    got, header = _load(path)
    assert header["info"]["version"] == ["1.0"]
    np.testing.assert_array_equal(got[2]["time_series"], eeg.values)
    assert got[2]["time_series"].dtype == np.float32
    np.testing.assert_array_equal(got[2]["time_stamps"], eeg.timestamps)
    assert [v[0] for v in got[1]["time_series"]] == mk.values
    np.testing.assert_array_equal(got[1]["time_stamps"], mk.timestamps)
    infos = {i["stream_id"]: i for i in pyxdf.resolve_streams(str(path))}
    assert infos[1]["source_id"] == SOURCE_ID
    assert infos[1]["type"] == "Markers"
    assert infos[2]["nominal_srate"] == 500.0
    assert infos[2]["channel_count"] == 4
    assert float(infos[1]["created_at"]) == 99.0
    assert got[1]["footer"]["info"]["sample_count"] == ["4"]


@pytest.mark.parametrize("fmt", ["int8", "int16", "int32", "int64", "float32", "double64"])
def test_every_numeric_format_round_trips(tmp_path, fmt):
    """Each numeric channel format is packed little-endian as pyxdf expects.

    Source: XDF 1.0 specification (channel formats); pyxdf.load_xdf as reference reader.
    """
    vals = np.array([[-3, 0], [7, 100], [1, -100]])
    s = FixtureStream(1, "gaze", "Gaze", fmt, 120.0, [0.0, 1 / 120, 2 / 120], vals)
    got, _ = _load(write_xdf(tmp_path / f"{fmt}.xdf", [s]))
    np.testing.assert_array_equal(got[1]["time_series"], vals)


def test_deduced_timestamps_are_used_and_reconstructed(tmp_path):
    """Regular timestamps are written as byte 0 (previous + 1/srate) and read back exactly.

    Source: XDF 1.0 specification (timestamp compression); pyxdf.load_xdf as reference reader.
    """
    n, srate = 200, 250.0
    ts = np.empty(n)
    ts[0] = 10.0
    for k in range(1, n):
        ts[k] = ts[k - 1] + 1.0 / srate  # the sum pyxdf forms, so deduction is exact
    s = FixtureStream(1, "ecg", "ECG", "float32", srate, ts, np.zeros((n, 1)))
    content = samples_content(s, 0, n)
    assert len(content) < n * (1 + 8 + 4)  # most timestamps were left out
    got, _ = _load(write_xdf(tmp_path / "ecg.xdf", [s], chunk_samples=50))
    np.testing.assert_array_equal(got[1]["time_stamps"], ts)


def test_clock_offsets_are_applied_by_pyxdf(tmp_path):
    """ClockOffset chunks make pyxdf shift timestamps by the offset (constant offset case).

    Source: XDF 1.0 specification (ClockOffset chunk); pyxdf.load_xdf clock synchronisation.
    """
    mk = _markers()
    mk.clock_offsets = [(95.0 + 5 * k, 12.5) for k in range(4)]
    got, _ = _load(write_xdf(tmp_path / "o.xdf", [mk]))
    np.testing.assert_allclose(
        got[1]["time_stamps"], np.asarray(mk.timestamps) + 12.5, rtol=0, atol=1e-9
    )
    assert got[1]["clock_values"] == [12.5] * 4


def test_boundary_chunks_let_pyxdf_recover_from_a_damaged_chunk(tmp_path):
    """After a damaged Samples chunk pyxdf scans to the next Boundary UUID and reads on.

    Source: XDF 1.0 specification (Boundary chunk UUID); pyxdf's scan-forward recovery.
    """
    eeg = _eeg(n=640)
    path = write_xdf(tmp_path / "b.xdf", [eeg], chunk_samples=64, boundary_every=2)
    data = bytearray(path.read_bytes())
    # Damage the sample count of the second Samples chunk so its content cannot be parsed.
    first = data.index(bytes([TAG_SAMPLES, 0]))
    second = data.index(bytes([TAG_SAMPLES, 0]), first + 2)
    count_at = second + 2 + 4
    data[count_at] = 7  # an invalid varlen width
    path.write_bytes(bytes(data))
    assert data.count(BOUNDARY_UUID) == 5
    assert data.startswith(MAGIC)
    got, _ = _load(path)
    ts = got[2]["time_stamps"]
    # Chunk 2 (damaged) is lost; pyxdf resynchronises at the boundary after it, so it keeps
    # chunk 1 and chunks 3..10.
    assert len(ts) == 640 - 64
    np.testing.assert_array_equal(ts[:64], eeg.timestamps[:64])
    np.testing.assert_array_equal(ts[64:], eeg.timestamps[128:])
