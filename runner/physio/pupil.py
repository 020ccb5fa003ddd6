"""Pupil size: blink and dropout cleaning, subtractive baseline, per-trial change.

Practice follows Mathot, Fabius, Van Heusden and Van der Stigchel (2018), "Safe and sensible
preprocessing and baseline correction of pupil-size data", Behavior Research Methods 50:94-106.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class PupilSettings:
    """How pupil traces are cleaned and measured (defaults and their sources: docs/physio.md)."""

    size_range: tuple[float, float] | None = (1.5, 9.0)
    velocity_mad_k: float = 16.0
    margin_before_s: float = 0.05
    margin_after_s: float = 0.1
    max_gap_s: float = 0.5
    interpolation: str = "linear"
    baseline_s: float = 0.5
    max_interpolated_share: float = 0.5
    min_data_share: float = 0.5
    baseline_z: float = 3.5


@dataclass(frozen=True)
class CleanPupil:
    """A pupil trace after blink removal and interpolation."""

    times: np.ndarray
    size: np.ndarray
    valid: np.ndarray
    interpolated: np.ndarray
    blinks: list[tuple[float, float]]


@dataclass(frozen=True)
class PupilTrial:
    """One trial's pupil measures; a flagged measure is None."""

    baseline: float | None
    mean_change: float | None
    peak_change: float | None
    peak_latency_s: float | None
    valid_share: float
    interpolated_share: float
    flags: tuple[str, ...]


def clean_pupil(
    times: np.ndarray, size: np.ndarray, settings: PupilSettings = PupilSettings()
) -> CleanPupil:
    """Detect blinks and dropouts, widen them by margins and interpolate short gaps."""
    raise NotImplementedError("clean_pupil is being written (branch physio-measures)")


def trial_pupil(
    clean: CleanPupil,
    baseline: tuple[float, float],
    window: tuple[float, float],
    settings: PupilSettings = PupilSettings(),
    *,
    session_baselines: np.ndarray | None = None,
) -> PupilTrial:
    """Subtractive baseline and change measures for one trial."""
    raise NotImplementedError("trial_pupil is being written (branch physio-measures)")
