"""EEG: epochs with MNE (filter, bad channels, reference, rejection) and band power."""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import mne

#: Frequency bands (Hz), lower edge included, upper edge excluded; sources in docs/physio.md.
DEFAULT_BANDS: dict[str, tuple[float, float]] = {"theta": (4.0, 8.0), "alpha": (8.0, 13.0)}

#: Channel groups for the workload measures (10-20 names); sources in docs/physio.md.
DEFAULT_GROUPS: dict[str, list[str]] = {
    "frontal": ["Fz", "F3", "F4", "FCz"],
    "parietal": ["Pz", "P3", "P4", "POz"],
}


@dataclass(frozen=True)
class EEGSettings:
    """How EEG is filtered, referenced and cleaned (defaults and sources: docs/physio.md)."""

    reference: str | list[str] = "average"
    reject_peak_to_peak_uv: float = 150.0
    flat_uv: float = 1.0
    bad_channel_z: float = 5.0
    l_freq: float = 1.0
    h_freq: float = 40.0


@dataclass
class EEGEpochs:
    """Epochs of the kept trials, which requested onsets were kept, and why others were not."""

    epochs: mne.Epochs
    kept: np.ndarray
    drop_reasons: list[tuple[str, ...]]
    bad_channels: list[str]


def make_epochs(
    data: np.ndarray,
    ch_names: list[str],
    srate: float,
    first_time: float,
    onsets: np.ndarray,
    tmin: float,
    tmax: float,
    settings: EEGSettings = EEGSettings(),
    *,
    units: str = "uV",
) -> EEGEpochs:
    """Filtered, referenced, artefact-checked epochs around each onset (recorder seconds)."""
    raise NotImplementedError("make_epochs is being written (branch physio-measures)")


def band_power(
    epoch_data: np.ndarray, srate: float, bands: dict[str, tuple[float, float]]
) -> np.ndarray:
    """Mean Welch PSD in each band: (n_epochs, n_channels, n_bands), V^2/Hz."""
    raise NotImplementedError("band_power is being written (branch physio-measures)")


def group_log_power(
    power: np.ndarray,
    ch_names: list[str],
    groups: dict[str, list[str]],
    bands: dict[str, tuple[float, float]],
) -> dict[str, np.ndarray]:
    """log10 of the mean band power (uV^2/Hz) over each group's channels, per epoch."""
    raise NotImplementedError("group_log_power is being written (branch physio-measures)")
