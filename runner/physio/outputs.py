"""The output folder of ``trialdeck physio``: the two tables, their JSON sidecars, the QA figures.

* ``physio_trials.csv``: one row per completed trial, the session's trials.csv columns (keys,
  then trial facts, then the trial table's own columns such as layout features) followed by the
  measures, units in the column names;
* ``physio_blocks.csv``: one row per block, rest and break with its heart rate and HRV;
* ``physio_trials.json`` and ``physio_blocks.json``: every column with ``Description``,
  ``Units`` and ``Kind`` (``key``, ``trial``, ``measure``, ``quality`` or ``flag``; the
  pilot report relates only ``measure`` columns to difficulty);
* ``qa/``: the per-session PNGs.

The folder follows the output rules of :mod:`runner.contract.outputs` (an existing folder that is
not empty and not an earlier ``trialdeck physio`` output is refused without ``force``).
"""

from __future__ import annotations

import csv
import json
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from runner.contract.outputs import OutputFolder, prepare_output_folder, replace_file
from runner.errors import StorageError
from runner.physio.pipeline import SessionResult

__all__ = [
    "BLOCKS_NAME",
    "COMMAND",
    "FIGURES_FOLDER",
    "TRIALS_NAME",
    "describe_trial_columns",
    "prepare",
    "write_tables",
]

COMMAND = "trialdeck physio"
TRIALS_NAME = "physio_trials.csv"
BLOCKS_NAME = "physio_blocks.csv"
FIGURES_FOLDER = "qa"
DECIMALS = 6

KEY_COLUMNS = ("participant", "session", "trial")
#: trials.csv columns and what they are (Kind "trial"; units where they have one).
TRIAL_FACTS: dict[str, tuple[str, str]] = {
    "block": ("Block label of the trial (a level of the blocking factor, or 'practice').", ""),
    "part": ("Part of the session: practice or main.", ""),
    "stimulus": ("Stimulus file, relative to the trial table.", ""),
    "expected": ("The correct answer.", ""),
    "answer": ("The participant's answer (empty when none was given).", ""),
    "unsure": ("1 when the participant marked the answer as unsure.", ""),
    "correct": ("1 when the answer equals the expected answer.", ""),
    "rating": ("Difficulty rating given after the trial.", ""),
    "rt_ms": ("Time from stimulus onset to the decision key.", "ms"),
    "onset_lsl": ("Stimulus onset on the presenter's LSL clock.", "s"),
    "outcome": ("Outcome of the trial (correct, wrong, unsure, timeout).", ""),
    "block_index": ("1-based position of the block in the session.", ""),
    "typing_ms": ("Time spent typing the answer.", "ms"),
    "rating_rt_ms": ("Time from the rating screen to the rating.", "ms"),
    "timed_out": ("1 when the viewing time limit ended the stimulus.", ""),
    "fixation_ms": ("Duration of the fixation screen as shown.", "ms"),
    "interrupted": ("1 when a pause interrupted the trial.", ""),
    "sim_rt_ms": ("Response time the simulated participant planned (pilots only).", "ms"),
}


@dataclass(frozen=True)
class Column:
    description: str
    units: str
    kind: str

    def as_dict(self) -> dict[str, str]:
        return {"Description": self.description, "Units": self.units, "Kind": self.kind}


def _measure_columns(unit: str, eeg_columns: Sequence[str]) -> dict[str, Column]:
    u = unit
    unit_word = "millimetres" if u == "mm" else "arbitrary units of the eye tracker"
    cols = {
        f"pupil_baseline_{u}": Column(
            f"Pupil size in the baseline window (median; {unit_word}); empty when flagged.",
            u,
            "measure",
        ),
        f"pupil_mean_change_{u}": Column(
            "Mean pupil size in the stimulus window minus the baseline (subtractive baseline).",
            u,
            "measure",
        ),
        f"pupil_peak_change_{u}": Column(
            "Largest pupil size in the stimulus window minus the baseline.", u, "measure"
        ),
        "pupil_peak_latency_ms": Column(
            "Time from the window start to the peak change.", "ms", "measure"
        ),
        "pupil_window_ms": Column("Length of the pupil stimulus window.", "ms", "trial"),
        "pupil_valid_share": Column(
            "Share of samples in the window that were valid as recorded (0..1).", "", "quality"
        ),
        "pupil_interpolated_share": Column(
            "Share of samples in the window filled in across blinks (0..1).", "", "quality"
        ),
        "pupil_flags": Column(
            "Why pupil measures are empty or doubtful (';'-separated; empty when fine).", "", "flag"
        ),
        "hr_bpm": Column(
            "Heart rate in the trial's cardiac window, from the beats inside it.", "bpm", "measure"
        ),
        "hr_window_ms": Column("Length of the cardiac window.", "ms", "trial"),
        "hr_beats": Column("Beats inside the cardiac window.", "", "trial"),
        "hr_flags": Column(
            "Why the heart rate is empty or doubtful (';'-separated; empty when fine).", "", "flag"
        ),
        **{
            name: Column(
                f"log10 of the mean {name.split('_')[1]}-band power (Welch) over the "
                f"{name.split('_')[2]} channel group in the EEG epoch, after filtering, "
                "referencing and rejection.",
                "log10(uV^2/Hz)",
                "measure",
            )
            for name in eeg_columns
        },
        "eeg_kept": Column("1 when the trial's EEG epoch passed rejection.", "", "flag"),
        "valid": Column(
            "1 when every per-trial measure computed for the session (pupil, heart rate, EEG) "
            "gave its value without a flag, else 0; the protocol's "
            "exclusions.physio_valid_share_below rule counts these.",
            "",
            "flag",
        ),
        "eeg_flags": Column(
            "Why the EEG epoch was dropped (';'-separated; empty when kept).", "", "flag"
        ),
        "eeg_bad_channels": Column(
            "EEG channels marked bad in this session (left out of every group).", "", "trial"
        ),
        "photodiode_lag_ms": Column(
            "Time from the stimulus_onset marker to the photodiode's rise.", "ms", "trial"
        ),
    }
    return cols


BLOCK_COLUMNS: dict[str, Column] = {
    "participant": Column("Participant label.", "", "key"),
    "session": Column("Session label.", "", "key"),
    "period": Column("Kind of period: block, rest or break.", "", "key"),
    "block": Column("Block label, rest label, or 'break'.", "", "key"),
    "start_s": Column(
        "Period start, seconds from the first sample of the EEG stream.", "s", "trial"
    ),
    "end_s": Column("Period end, seconds from the first sample of the EEG stream.", "s", "trial"),
    "window_s": Column("Length of the period used for HRV.", "s", "trial"),
    "beats": Column("Beats inside the period.", "", "trial"),
    "hr_bpm": Column("Mean heart rate over the period.", "bpm", "measure"),
    "hrv_rmssd_ms": Column(
        "Root mean square of successive beat-to-beat differences; empty when the period is too "
        "short for it.",
        "ms",
        "measure",
    ),
    "hrv_sdnn_ms": Column(
        "Standard deviation of beat-to-beat intervals; empty when the period is too short.",
        "ms",
        "measure",
    ),
    "hrv_hf_ms2": Column(
        "High-frequency (0.15-0.4 Hz) HRV power; empty when the period is too short.",
        "ms^2",
        "measure",
    ),
    "hrv_lf_ms2": Column(
        "Low-frequency (0.04-0.15 Hz) HRV power; empty when the period is too short.",
        "ms^2",
        "measure",
    ),
    "hrv_flags": Column(
        "Why HRV measures are empty or doubtful (';'-separated; empty when fine).", "", "flag"
    ),
}


def prepare(out: str | Path, *, force: bool = False) -> OutputFolder:
    """Claim the output folder (see :func:`runner.contract.outputs.prepare_output_folder`)."""
    return prepare_output_folder(out, COMMAND, force=force, what="physio")


def describe_trial_columns(results: Sequence[SessionResult]) -> dict[str, Column]:
    """Every column of physio_trials.csv, in order, with its description."""
    cols: dict[str, Column] = {
        "participant": Column("Participant label.", "", "key"),
        "session": Column("Session label.", "", "key"),
        "trial": Column(
            "1-based position of the trial in the session, as in trials.csv.", "", "key"
        ),
    }
    seen: set[str] = set(cols)
    for r in results:
        for row in r.trials:
            for name in row:
                if name in seen or name == "values":
                    continue
                seen.add(name)
                if name in TRIAL_FACTS:
                    text, units = TRIAL_FACTS[name]
                    cols[name] = Column(text, units, "trial")
    for r in results:
        for c in r.table_columns:
            if c not in cols:
                cols[c] = Column(
                    f"Trial-table column {c!r} (from the protocol's trial table).", "", "trial"
                )
    measures: dict[str, Column] = {}
    for r in results:
        measures.update(_measure_columns(r.pupil_unit, r.eeg_columns))
    present = {name for r in results for row in r.trials for name in row}
    for name, col in measures.items():
        if name in present and name not in cols:
            cols[name] = col
    for name in sorted(present - set(cols) - {"values"}):
        cols[name] = Column(f"{name} as recorded by the session.", "", "trial")
    return cols


def _cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return str(int(value))
    if isinstance(value, float):
        if not math.isfinite(value):
            return ""
        return repr(round(value, DECIMALS))
    return str(value)


def _write_csv(path: Path, columns: Sequence[str], rows: Iterable[dict[str, Any]]) -> None:
    try:
        with replace_file(path) as fh:
            w = csv.writer(fh, lineterminator="\n")
            w.writerow(columns)
            for row in rows:
                w.writerow([_cell(row.get(c)) for c in columns])
    except OSError as exc:
        raise StorageError(f"cannot write {path}: {exc.strerror}.") from None


def _write_json(path: Path, columns: dict[str, Column]) -> None:
    text = json.dumps({k: c.as_dict() for k, c in columns.items()}, indent=2, ensure_ascii=False)
    try:
        with replace_file(path) as fh:
            fh.write(text + "\n")
    except OSError as exc:
        raise StorageError(f"cannot write {path}: {exc.strerror}.") from None


def write_tables(folder: OutputFolder, results: Sequence[SessionResult]) -> list[Path]:
    """Write the two tables and their sidecars into ``folder``; return the files written."""
    root = folder.root
    trial_cols = describe_trial_columns(results)
    trials = root / TRIALS_NAME
    blocks = root / BLOCKS_NAME
    _write_csv(trials, list(trial_cols), (row for r in results for row in r.trials))
    _write_json(trials.with_suffix(".json"), trial_cols)
    _write_csv(blocks, list(BLOCK_COLUMNS), (row for r in results for row in r.periods))
    _write_json(blocks.with_suffix(".json"), BLOCK_COLUMNS)
    return [trials, trials.with_suffix(".json"), blocks, blocks.with_suffix(".json")]
