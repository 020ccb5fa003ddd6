"""Synthetic per-trial physiology for a synthetic pool (invented courier data).

Written as ``trialdeck physio`` writes it: ``physio_trials.csv`` (keys as text, empty cells for
missing values) and the ``physio_trials.json`` sidecar whose ``Kind`` marks the measures. The
pupil response rises with the trial's hardness and gives way on the hardest trials (an inverted
U); heart rate rises steadily; a flag column and a validity share are not measures.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd

DENSITY_STEP = {"sparse": 0.0, "medium": 0.8, "dense": 1.6}


def hardness(trials: pd.DataFrame) -> np.ndarray:
    """The synthetic pool's hardness of each trial's stimulus (without the participant's skill)."""
    nodes = pd.to_numeric(trials["nodes"]).to_numpy(dtype=float)
    return (nodes - 20) / 120 * 2.2 + trials["density"].map(DENSITY_STEP).to_numpy(dtype=float)


def make_physio(trials: pd.DataFrame, *, seed: int = 5) -> pd.DataFrame:
    """One physiology row per trial, keyed by participant, session and trial."""
    rng = np.random.default_rng(seed)
    h = hardness(trials)
    n = len(trials)
    pupil = 0.05 + 0.12 * h - 0.032 * h**2 + rng.normal(0, 0.03, n)
    pupil[rng.uniform(size=n) < 0.05] = np.nan  # blinks and dropouts
    return pd.DataFrame(
        {
            "participant": trials["participant"].astype(str).to_numpy(),
            "session": trials["session"].astype(str).to_numpy(),
            "trial": trials["trial"].astype(str).to_numpy(),
            "stimulus": trials["stimulus"].astype(str).to_numpy(),
            "pupil_mean_change_mm": pupil.round(6),
            "pupil_valid_share": rng.uniform(0.8, 1.0, n).round(4),
            "pupil_flags": np.where(np.isnan(pupil), "no_data", ""),
            "hr_bpm": (72 + 1.5 * h + rng.normal(0, 2.0, n)).round(3),
        }
    )


SIDECAR = {
    "participant": {"Description": "Participant label.", "Units": "", "Kind": "key"},
    "session": {"Description": "Session label.", "Units": "", "Kind": "key"},
    "trial": {"Description": "Trial number in the session.", "Units": "", "Kind": "key"},
    "stimulus": {"Description": "Stimulus file.", "Units": "", "Kind": "trial"},
    "pupil_mean_change_mm": {
        "Description": "Mean pupil size change from baseline in the trial window.",
        "Units": "mm",
        "Kind": "measure",
    },
    "pupil_valid_share": {"Description": "Share of valid samples.", "Units": "", "Kind": "flag"},
    "pupil_flags": {"Description": "Why a pupil measure is missing.", "Units": "", "Kind": "flag"},
    "hr_bpm": {"Description": "Heart rate in the trial window.", "Units": "bpm", "Kind": "measure"},
}


def write_physio(trials: pd.DataFrame, folder: Path, *, seed: int = 5) -> Path:
    """Write physio_trials.csv and physio_trials.json into ``folder``; return the CSV path."""
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "physio_trials.csv"
    make_physio(trials, seed=seed).to_csv(path, index=False, na_rep="", lineterminator="\n")
    path.with_suffix(".json").write_text(json.dumps(SIDECAR, indent=2) + "\n", encoding="utf-8")
    return path
