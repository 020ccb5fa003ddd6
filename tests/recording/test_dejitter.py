"""Dejittered timestamps agree with pyxdf's own dejittering of the same recorded stream."""

from __future__ import annotations

import numpy as np
import pytest
import pyxdf
from xdfwrite import FixtureStream, write_xdf

from runner.recording.dejitter import dejitter, segments

SRATE = 500.0


def _chunk_stamped(rng, n, t0, *, chunk=32, jitter_ms=(2.0, 12.0)):
    """Samples stamped per chunk on arrival: each chunk's stamps lag by a random delay."""
    true = t0 + np.arange(n) / SRATE
    stamps = true.copy()
    for start in range(0, n, chunk):
        stamps[start : start + chunk] += rng.uniform(*jitter_ms) / 1000
    return true, stamps


def test_dejitter_matches_pyxdf_on_a_chunk_stamped_stream_with_a_gap(tmp_path):
    """Two segments (a 3 s recording gap) of chunk-stamped EEG: same times as pyxdf, to 1 us.

    Source: pyxdf.load_xdf(dejitter_timestamps=True) on the same file, as the reference reader.
    """
    rng = np.random.default_rng(5)
    _, a = _chunk_stamped(rng, 4000, 1000.0)
    _, b = _chunk_stamped(rng, 3000, a[-1] + 3.0)
    stamps = np.concatenate([a, b])
    values = rng.normal(size=(len(stamps), 2)).astype(np.float32)
    path = write_xdf(
        tmp_path / "rec.xdf",
        [FixtureStream(1, "amp", "EEG", "float32", SRATE, stamps, values, source_id="amp-1")],
    )
    streams, _ = pyxdf.load_xdf(str(path), synchronize_clocks=False, dejitter_timestamps=True)
    reference = streams[0]["time_stamps"]
    assert segments(stamps, SRATE) == [(0, 3999), (4000, 6999)]
    assert np.max(np.abs(dejitter(stamps, SRATE) - reference)) < 1e-6


def test_dejittering_recovers_the_true_first_sample_better_than_its_raw_stamp():
    """The raw first stamp is late by the first chunk's delay; the fitted line is not.

    Source: common practice (no published source): the delays are drawn per chunk here, so the
    line through all stamps sits at their mean delay, and the raw first stamp anywhere within it.
    """
    rng = np.random.default_rng(9)
    true, stamps = _chunk_stamped(rng, 30000, 50.0, jitter_ms=(4.0, 6.0))
    fitted = dejitter(stamps, SRATE)
    mean_delay = 0.005
    assert fitted[0] - true[0] == pytest.approx(mean_delay, abs=0.0003)
    # Between the lines, every sample lands within half the delay spread of its true time.
    assert np.max(np.abs(fitted - true - mean_delay)) < 0.0011


def test_irregular_streams_are_left_alone():
    """A marker stream (rate 0) keeps its exact timestamps."""
    stamps = np.array([1.0, 1.7, 5.2])
    assert np.array_equal(dejitter(stamps, 0.0), stamps)
