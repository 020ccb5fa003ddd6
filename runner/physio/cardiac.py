"""Cardiac measures: R-peaks (NeuroKit2), heart rate per window, HRV per block or rest."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Shortest window (s) for each measure; sources in docs/physio.md.
MIN_WINDOW_S: dict[str, float] = {"hr": 2.0, "rmssd": 10.0, "sdnn": 30.0, "hf": 60.0, "lf": 120.0}


@dataclass(frozen=True)
class HeartRate:
    """Mean heart rate over a window; None when flagged."""

    bpm: float | None
    beats: int
    flags: tuple[str, ...]


@dataclass(frozen=True)
class HRV:
    """Heart-rate variability over a window; a measure is None when its window is too short."""

    window_s: float
    beats: int
    rmssd_ms: float | None
    sdnn_ms: float | None
    hf_ms2: float | None
    lf_ms2: float | None
    flags: tuple[str, ...]


def r_peaks(ecg: np.ndarray, srate: float) -> np.ndarray:
    """Sample indices of R-peaks found by NeuroKit2."""
    raise NotImplementedError("r_peaks is being written (branch physio-measures)")


def beats_from_rr(rr_ms: np.ndarray, times: np.ndarray) -> np.ndarray:
    """Beat times (s) from a device's RR-interval stream."""
    raise NotImplementedError("beats_from_rr is being written (branch physio-measures)")


def heart_rate(beat_times: np.ndarray, start: float, end: float) -> HeartRate:
    """Time-weighted mean heart rate between start and end (s)."""
    raise NotImplementedError("heart_rate is being written (branch physio-measures)")


def hrv(beat_times: np.ndarray, start: float, end: float) -> HRV:
    """RMSSD, SDNN, HF and LF power between start and end (s)."""
    raise NotImplementedError("hrv is being written (branch physio-measures)")
