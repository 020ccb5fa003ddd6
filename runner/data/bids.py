"""BIDS events of one session: ``_events.tsv``, its JSON sidecar, and the dataset files.

Per session: ``sub-<p>/ses-<s>/<datatype>/sub-<p>_ses-<s>_task-<label>_events.tsv`` and its
``.json`` sidecar, with ``onset`` and ``duration`` in seconds from a stated origin
(:mod:`runner.data.origins`). The rows come from :func:`runner.data.bids_rows.event_rows`.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from runner.contract.columns import level_key
from runner.contract.events import EVENT_VALUES
from runner.contract.hashing import file_sha256
from runner.contract.layout import (
    PARTICIPANT_PREFIX,
    SESSION_PREFIX,
    TRIALS_NAME,
    display_path,
    is_label,
)
from runner.contract.outputs import ensure_folder, replace_file
from runner.data.bids_rows import ROW_KINDS, TRIAL_COLUMNS, EventRows, event_rows, stim_file_name
from runner.data.origins import (
    PHOTODIODE_COLUMN,
    SAMPLE_COLUMN,
    SECONDS_DECIMALS,
    Origin,
    session_origin,
)
from runner.data.sessions import ExportSession
from runner.errors import InputFileError, StorageError, UsageError

__all__ = [
    "DATATYPES",
    "DEFAULT_DATATYPE",
    "bids_events",
    "events_paths",
    "events_sidecar",
    "events_tsv",
    "task_label",
    "write_bids_events",
]

POOLED_NAME = TRIALS_NAME
NA = "n/a"
DATATYPES = ("beh", "eeg")
DEFAULT_DATATYPE = "beh"
NON_ALNUM = re.compile(r"[^A-Za-z0-9]+")
BIDS_DATASET_DESCRIPTION = "dataset_description.json"
BIDS_IGNORE = ".bidsignore"
BIDS_VERSION = "1.10.0"
SOFTWARE_NAME = "trialdeck"
OUTCOME_LEVELS = {
    "correct": "The count equals the expected count.",
    "wrong": "A count other than the expected one.",
    "unsure": "The participant pressed the 'unsure' key.",
    "unanswered": "No count was given before the time limit.",
    "unscored": "A count was given but the trial has no expected count.",
}


def task_label(study: str, task: str | None = None) -> str:
    """The BIDS ``task-`` label: ``task`` if given, else the study id without non-alphanumerics.

    Raises
    ------
    UsageError
        If ``task`` is not letters and digits, or the study id has none.
    """
    if task is not None:
        if not is_label(task):
            raise UsageError(
                f"the task label {task!r} must be letters and digits only (BIDS label rule)."
            )
        return task
    label = NON_ALNUM.sub("", study)
    if not label:
        raise UsageError(
            f"the study id {study!r} has no letters or digits to make a BIDS task label from; "
            "give one with --task."
        )
    return label


def bids_events(session: ExportSession, origin: Origin | None = None) -> pd.DataFrame:
    """The BIDS events table of one session as a DataFrame (what the TSV file holds).

    Parameters
    ----------
    session : ExportSession
        The session.
    origin : Origin, optional
        Time zero; default the session start (:func:`session_origin`).

    Returns
    -------
    pd.DataFrame
        Columns :data:`BIDS_COLUMNS`, :data:`ROW_COLUMNS`, :data:`TRIAL_COLUMNS`, then the
        trial table's own columns; missing values are None; rows sorted by onset.
    """
    origin = origin or session_origin(session)
    ev = event_rows(session)
    width = len(TRIAL_COLUMNS) + len(ev.table_columns)
    empty = (None,) * width
    data = []
    for r in ev.rows:
        duration = None if r.end is None else max(0.0, r.end - r.t)
        data.append(
            (
                origin.onset(r.t),
                duration,
                r.kind,
                EVENT_VALUES[r.kind],
                r.response_time,
                r.stim_file,
                r.event,
                r.trial,
                r.key,
                r.label,
                r.timed_out,
                r.attempt,
            )
            + (ev.tails[r.tail] if r.tail is not None else empty)
            + tuple(origin.extra_cells(r.t))
        )
    return pd.DataFrame(data, columns=ev.columns + origin.extra_columns(), dtype=object)


def _tsv_cell(value: Any) -> str:
    if value is None or value is pd.NA or (isinstance(value, float) and math.isnan(value)):
        return NA
    if isinstance(value, bool):
        return str(int(value))
    text = str(value)
    # TSV has no quoting: tabs and line breaks inside a value would break the row.
    if "\t" in text or "\n" in text or "\r" in text:
        text = text.replace("\t", " ").replace("\r", " ").replace("\n", " ")
    return text or NA


def _seconds(value: float | None) -> str:
    return NA if value is None else f"{value:.{SECONDS_DECIMALS}f}"


def events_tsv(ev: EventRows, origin: Origin) -> str:
    """The text of an ``_events.tsv`` file: header line, one line per row, ``n/a`` for missing."""
    width = len(TRIAL_COLUMNS) + len(ev.table_columns)
    empty = "\t".join([NA] * width)
    tail_text = {k: "\t".join(_tsv_cell(v) for v in vals) for k, vals in ev.tails.items()}
    onset = origin.onset
    extra = bool(origin.extra_columns())
    lines = ["\t".join(ev.columns + origin.extra_columns())]
    append = lines.append
    for r in ev.rows:
        t, end, stim, key, label, timed = r.t, r.end, r.stim_file, r.key, r.label, r.timed_out
        append(
            f"{onset(t):.{SECONDS_DECIMALS}f}\t"
            + (NA if end is None else f"{max(0.0, end - t):.{SECONDS_DECIMALS}f}")
            + f"\t{r.kind}\t{EVENT_VALUES[r.kind]}\t{_seconds(r.response_time)}\t"
            + f"{NA if stim is None else _tsv_cell(stim)}\t{r.event}\t"
            + f"{NA if r.trial is None else r.trial}\t{NA if key is None else _tsv_cell(key)}\t"
            + f"{NA if label is None else _tsv_cell(label)}\t"
            + f"{NA if timed is None else int(bool(timed))}\t{r.attempt}\t"
            + (empty if r.tail is None else tail_text[r.tail])
            + ("".join(f"\t{_extra_cell(v)}" for v in origin.extra_cells(t)) if extra else "")
        )
    return "\n".join(lines) + "\n"


def _extra_cell(value: float | int | None) -> str:
    if value is None:
        return NA
    return str(value) if isinstance(value, int) else f"{value:.{SECONDS_DECIMALS}f}"


def _levels(values: Iterable[Any]) -> list[str]:
    return sorted({str(v) for v in values if v is not None and not pd.isna(v)}, key=level_key)


def events_sidecar(session: ExportSession, origin: Origin, ev: EventRows) -> dict[str, Any]:
    """The JSON sidecar: Description, Levels and Units of each column, and how it was made."""
    model = session.protocol
    screen = model.screen
    kinds_present = ev.kinds()
    sidecar: dict[str, Any] = {
        "onset": {"Description": origin.description, "Units": "s"},
        "duration": {
            "Description": "Seconds from onset to the end of the screen, pause or response "
            "period (see trial_type); 0 for an instant (a key press); n/a when the end was "
            "never journaled (an aborted or crashed session).",
            "Units": "s",
        },
        "trial_type": {
            "Description": "What the row is: a screen, a response or a pause. Experimental "
            "conditions are in the factor columns.",
            "Levels": {k: ROW_KINDS[k][2] for k in ROW_KINDS if k in kinds_present},
        },
        "value": {
            "Description": "A fixed integer code for the trial_type, the same in every session "
            "and study (see docs/markers.md), for tools that need integer event codes.",
            "Levels": {str(EVENT_VALUES[k]): k for k in ROW_KINDS if k in kinds_present},
        },
        "response_time": {
            "Description": "On stimulus rows: seconds from stimulus onset to the first key press "
            "of the response (n/a: no key before the time limit, a missed response). On "
            "rating_prompt rows: seconds from the rating scale onset to the chosen rating. On "
            "answer_prompt rows: seconds from the answer screen onset to the confirmed count. "
            "n/a on other rows.",
            "Units": "s",
        },
        "stim_file": {
            "Description": "The stimulus image on stimulus rows, as its path in the trial table "
            "(leading ./ and ../ removed); copy the images under /stimuli/ with these paths.",
        },
        "event": {
            "Description": "The journal event (and marker event) that opened the row; marked "
            "rows have the same time as the LSL marker of that name.",
        },
        "trial": {
            "Description": "Position of the trial in the session, from 1 (as in trials.csv)."
        },
        "block": {"Description": "Block label: 'practice' or the level of the block factor."},
        "part": {
            "Description": "Part of the session.",
            "Levels": {"practice": "Practice trials.", "main": "Main trials."},
        },
        "stimulus": {"Description": "The stimulus path as written in the trial table."},
        "expected": {"Description": "The expected count (n/a: unscored trial)."},
        "answer": {"Description": "The count the participant confirmed (n/a: none)."},
        "unsure": {
            "Description": "Whether the participant answered 'unsure'.",
            "Levels": {"0": "No.", "1": "Yes."},
        },
        "correct": {
            "Description": "Whether the count was correct (n/a: unsure, unanswered or unscored).",
            "Levels": {"0": "Wrong count.", "1": "Correct count."},
        },
        "outcome": {"Description": "The trial's result.", "Levels": dict(OUTCOME_LEVELS)},
        "rating": {
            "Description": f"Difficulty rating on the {model.rating.points}-point scale "
            f"(1 = {model.rating.low!r}, {model.rating.points} = {model.rating.high!r}); "
            "n/a: no rating.",
        },
        "key": {"Description": "The key pressed, on decision rows."},
        "label": {
            "Description": "On rest rows the rest's label (for example 'baseline'); on session, "
            "resume and abort rows the status the attempt ended with.",
        },
        "timed_out": {
            "Description": "On answer and rating rows: whether time ran out.",
            "Levels": {"0": "No.", "1": "Yes."},
        },
        "completed": {
            "Description": "On trial rows: whether the trial was completed (1) or cut short by "
            "an abort or crash (0). Rows of an attempt that a later, completed run of the same "
            "trial replaced are left out.",
            "Levels": {"0": "Not completed.", "1": "Completed."},
        },
        "attempt": {
            "Description": "Session attempt: 1 from the session start, +1 at each resume.",
        },
    }
    factors = set(session.factors)
    for i, c in enumerate(ev.table_columns):
        what = "a factor of the protocol" if c in factors else "a column of the trial table"
        entry: dict[str, Any] = {"Description": f"Trial-table column {c!r} ({what}) on trial rows."}
        levels = _levels(tail[len(TRIAL_COLUMNS) + i] for tail in ev.tails.values())
        if c in factors and levels:
            entry["Levels"] = {lv: f"{c} = {lv}" for lv in levels}
        sidecar[c] = entry
    presentation: dict[str, Any] = {
        "SoftwareName": SOFTWARE_NAME,
        "SoftwareVersion": str(session.header.get("version", "")),
        "ScreenRefreshRate": float(screen.refresh_hz),
        "ScreenResolution": [int(screen.resolution[0]), int(screen.resolution[1])],
        "ScreenOrigin": ["top", "left"],
    }
    system = (session.header.get("platform") or {}).get("system")
    if system:
        presentation["OperatingSystem"] = str(system)
    if screen.distance_cm is not None:
        presentation["ScreenDistance"] = round(screen.distance_cm / 100.0, 4)
    if screen.width_cm is not None:
        # The protocol gives the visible width; the height follows from square pixels.
        width_m = screen.width_cm / 100.0
        height_m = width_m * screen.resolution[1] / screen.resolution[0]
        presentation["ScreenSize"] = [round(width_m, 4), round(height_m, 4)]
    if SAMPLE_COLUMN in origin.extra_columns():
        sidecar[SAMPLE_COLUMN] = {
            "Description": "Index (from 0) of the sample of the EEG stream named in the onset "
            "description nearest to the onset, on that stream's synchronised, dejittered "
            "timestamps (one line per segment between data breaks), so the index counts the "
            "recorded samples; n/a when the onset lies outside the recorded samples.",
        }
    if PHOTODIODE_COLUMN in origin.extra_columns():
        sidecar[PHOTODIODE_COLUMN] = {
            "Description": origin.photodiode_description,
            "Units": "s",
        }
    sidecar["StimulusPresentation"] = presentation
    return sidecar


def events_paths(
    out: str | Path, participant: str, session: str, task: str, datatype: str = DEFAULT_DATATYPE
) -> tuple[Path, Path]:
    """``(events.tsv, events.json)`` paths of one session under the BIDS folder ``out``."""
    if datatype not in DATATYPES:
        raise UsageError(
            f"the datatype {datatype!r} is not supported; use one of {', '.join(DATATYPES)}."
        )
    for name, value in (("participant", participant), ("session", session), ("task", task)):
        if not is_label(value):
            raise UsageError(f"the {name} label {value!r} must be letters and digits only.")
    sub, ses = f"{PARTICIPANT_PREFIX}{participant}", f"{SESSION_PREFIX}{session}"
    folder = Path(out) / sub / ses / datatype
    stem = f"{sub}_{ses}_task-{task}_events"
    return folder / f"{stem}.tsv", folder / f"{stem}.json"


def write_bids_events(
    session: ExportSession,
    out: str | Path,
    *,
    task: str | None = None,
    datatype: str = DEFAULT_DATATYPE,
    origin: Origin | None = None,
) -> tuple[Path, Path]:
    """Write one session's ``_events.tsv`` and ``_events.json`` under the BIDS folder ``out``.

    Returns
    -------
    tuple of Path
        The TSV and JSON paths.

    Raises
    ------
    StorageError
        If the files cannot be written.
    UsageError
        If a label or the datatype is not acceptable.
    """
    label = task_label(session.study, task)
    tsv, side = events_paths(out, session.participant, session.session, label, datatype)
    origin = origin or session_origin(session)
    ev = event_rows(session)
    text = events_tsv(ev, origin)
    sidecar = events_sidecar(session, origin, ev)
    try:
        ensure_folder(Path(out), tsv.parent.relative_to(Path(out)).parts)
        with replace_file(tsv) as fh:
            fh.write(text)
        with replace_file(side) as fh:
            fh.write(json.dumps(sidecar, indent=2, ensure_ascii=False) + "\n")
    except OSError as exc:
        raise StorageError(
            f"cannot write the events files in {tsv.parent}: {exc.strerror}."
        ) from None
    return tsv, side


def dataset_files(
    out: Path,
    sessions: Sequence[ExportSession],
    *,
    replace_description: bool = False,
    bids_version: str = BIDS_VERSION,
) -> list[Path]:
    """A minimal dataset_description.json (only when absent, or to ``replace_description`` one
    written during this export) and a .bidsignore for trials.csv."""
    written: list[Path] = []
    desc = out / BIDS_DATASET_DESCRIPTION
    if replace_description or not desc.exists():
        studies = sorted({s.study for s in sessions})
        version = str(sessions[0].header.get("version", "")) if sessions else ""
        _write_text(
            desc,
            json.dumps(
                {
                    "Name": ", ".join(studies) or "trialdeck export",
                    "BIDSVersion": bids_version,
                    "DatasetType": "raw",
                    "GeneratedBy": [{"Name": SOFTWARE_NAME, "Version": version}],
                },
                indent=2,
            )
            + "\n",
        )
        written.append(desc)
    ignore = out / BIDS_IGNORE
    lines = ignore.read_text(encoding="utf-8").splitlines() if ignore.is_file() else []
    if POOLED_NAME not in lines:
        _write_text(ignore, "\n".join([*lines, POOLED_NAME]) + "\n")
        written.append(ignore)
    return written


def copy_stimuli(
    sessions: Sequence[ExportSession], out: Path, *, stimuli_dir: Path | None = None
) -> list[Path]:
    """Copy every session's stimuli into the dataset's ``stimuli/`` folder, at their stim_file
    paths, so the events files' ``stim_file`` values name files that exist.

    Each file is checked against the SHA-256 the session journaled at its start, so a stimulus
    changed since is never passed off as the one shown. ``stimuli_dir`` replaces the trial
    table's folder when the stimuli have moved (as for ``trialdeck replay``).

    Raises
    ------
    InputFileError
        A stimulus is missing, or differs from the one the session showed.
    """
    dest_root = Path(out) / "stimuli"
    copied: dict[str, Path] = {}
    for session in sessions:
        table_dir = Path(str(session.header.get("trial_table_file", ""))).parent
        base = stimuli_dir if stimuli_dir is not None else table_dir
        hashes = session.header.get("stimulus_hashes") or {}
        for stimulus, digest in hashes.items():
            name = stim_file_name(str(stimulus))
            if name in copied:
                continue
            source = base / stimulus
            if not source.is_file():
                raise InputFileError(
                    f"the stimulus {stimulus!r} of {display_path(session.folder)} is not at "
                    f"{source}; give the folder the stimuli are in now with --stimuli-dir."
                )
            if file_sha256(source) != digest:
                raise InputFileError(
                    f"the stimulus {source} differs from the one {display_path(session.folder)} "
                    "showed (its SHA-256 changed since); find the original file before copying."
                )
            target = dest_root / name
            target.parent.mkdir(parents=True, exist_ok=True)
            with replace_file(target, binary=True) as fh:
                fh.write(source.read_bytes())
            copied[name] = target
    return list(copied.values())


def _write_text(path: Path, text: str) -> None:
    with replace_file(path) as fh:
        fh.write(text)
