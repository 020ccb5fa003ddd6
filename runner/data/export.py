"""Analysis-ready exports derived from session journals: a pooled trials table and BIDS events.

Everything here is derived from a session's ``journal.jsonl`` and the frozen protocol text in its
header (design principle 1); nothing is read from the per-session ``trials.csv``. Pure functions
over :class:`ExportSession` objects build the tables; ``write_*`` functions put them on disk.

Two outputs (documented column by column in docs/analysis.md):

* ``trials.csv``: every completed trial of every session, one row each, in one fixed column
  order (:func:`pooled_columns`). When a trial was completed more than once (an interrupted
  attempt before a resume), the last completion counts, as in the per-session table.
* per session, BIDS events: ``sub-<p>/ses-<s>/<datatype>/sub-<p>_ses-<s>_task-<label>_events.tsv``
  and its ``.json`` sidecar, with ``onset`` and ``duration`` in seconds from a stated origin:
  the session start (default) or the first sample of the EEG stream of an XDF recording.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import math
import os
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from typing import Any

import pandas as pd
from pydantic import ValidationError

from runner.errors import (
    InputFileError,
    JournalError,
    RecordingError,
    StorageError,
    UsageError,
)
from runner.protocol.model import BlocksStep, Protocol
from runner.protocol.yamlsafe import read_yaml_text
from runner.session.journal import (
    GENESIS,
    HASH_CHARS,
    JOURNAL_NAME,
    JournalRead,
    read_journal,
)
from runner.session.records import CONTRACT_COLUMNS, EXTRA_COLUMNS, PILOT_COLUMNS, csv_cell

__all__ = [
    "BIDS_COLUMNS",
    "DATATYPES",
    "EVENT_COLUMNS",
    "ROW_COLUMNS",
    "TRIAL_COLUMNS",
    "EventRows",
    "event_rows",
    "events_tsv",
    "ExportResult",
    "ExportSession",
    "Origin",
    "bids_events",
    "events_paths",
    "events_sidecar",
    "export_sessions",
    "find_session_folders",
    "load_session",
    "read_journal_for_export",
    "SUMMARY_EVENTS",
    "EXPORT_EVENTS",
    "load_sessions",
    "pooled_columns",
    "pooled_rows",
    "pooled_trials",
    "recording_origin",
    "session_origin",
    "sessions_table",
    "task_label",
    "write_bids_events",
    "write_pooled_trials",
]

POOLED_NAME = "trials.csv"
DEFAULT_RATING_POINTS = 9  # the protocol's default scale, used when no session is given
NA = "n/a"
DATATYPES = ("beh", "eeg")
DEFAULT_DATATYPE = "beh"
LABEL_RE = re.compile(r"^[A-Za-z0-9]+$")
NON_ALNUM = re.compile(r"[^A-Za-z0-9]+")
EEG_STREAM_TYPE = "eeg"
# A recording lines up with a session when most of its markers are found and their median
# timing difference (after the clock offset) is within the recording check's limit. Half is a
# tolerance for a recorder that joined late, not a published figure.
MIN_MATCHED_SHARE = 0.5  # compared case-insensitively with the XDF stream type
# Seconds are written with 6 decimals (1 microsecond): the journal clock has sub-microsecond
# resolution, and no recorder samples faster than 1 MHz.
SECONDS_DECIMALS = 6
MS_PER_S = 1000.0
# The pooled table keeps the per-session contract order, then trialdeck's context columns.
CONTEXT_COLUMNS = ["study", "mode"]
BIDS_DATASET_DESCRIPTION = "dataset_description.json"
BIDS_IGNORE = ".bidsignore"
BIDS_VERSION = "1.10.0"
SOFTWARE_NAME = "trialdeck"

# BIDS columns first (onset and duration must lead), then trialdeck's own, then table columns.
BIDS_COLUMNS = ["onset", "duration", "trial_type", "response_time", "stim_file"]
# Columns that belong to the row (the event), then columns shared by every row of one trial.
ROW_COLUMNS = ["event", "trial", "key", "label", "timed_out", "attempt"]
TRIAL_COLUMNS = [
    "block",
    "part",
    "stimulus",
    "expected",
    "answer",
    "unsure",
    "correct",
    "outcome",
    "rating",
    "completed",
]
EVENT_COLUMNS = ROW_COLUMNS + TRIAL_COLUMNS
RESERVED_EVENT_COLUMNS = frozenset(BIDS_COLUMNS + EVENT_COLUMNS)

# trial_type values: which journal event opens the row, which closes it, and what it means.
# Rows without a closing event are instantaneous (duration 0). "next flip" rows last until the
# next screen change.
NEXT_FLIP = "next flip"
ROW_KINDS: dict[str, tuple[str, str | None, str]] = {
    "session": ("session_start", "session_end", "The whole session attempt."),
    "resume": ("session_resume", "session_end", "A session attempt continued after a resume."),
    "page": ("page_onset", "page_end", "An instruction page, until the participant moved on."),
    "rest": ("rest_start", "rest_end", "A timed rest (for example a resting baseline)."),
    "block": ("block_start", "block_end", "A block of trials (practice or one factor level)."),
    "break": ("break_start", "break_end", "A break, until the participant chose to go on."),
    "pause": ("pause_start", "pause_end", "A pause made by the experimenter."),
    "fixation": ("fixation_onset", "stimulus_onset", "The fixation cross before a stimulus."),
    "stimulus": (
        "stimulus_onset",
        "stimulus_offset",
        "The stimulus on screen, until it was removed.",
    ),
    "decision": (
        "decision",
        None,
        "The first key press of the response (end of viewing, or first typed digit).",
    ),
    "answer_prompt": (
        "answer_onset",
        "answer",
        "The answer screen (after mode), until the count was confirmed.",
    ),
    "answer": ("answer", None, "The count was confirmed, 'unsure' was pressed, or time ran out."),
    "rating_prompt": ("rating_onset", "rating", "The rating scale, until a rating was chosen."),
    "rating": ("rating", None, "A rating was chosen (or the rating time ran out)."),
    "feedback": ("feedback_onset", NEXT_FLIP, "Practice feedback."),
    "gap": ("gap_onset", NEXT_FLIP, "The blank screen between trials."),
    "abort": ("abort", None, "The experimenter confirmed an abort."),
}
OPENERS = {opener: kind for kind, (opener, _, _) in ROW_KINDS.items()}
CLOSERS: dict[str, list[str]] = {}
for _kind, (_opener, _closer, _text) in ROW_KINDS.items():
    if _closer is not None and _closer != NEXT_FLIP:
        CLOSERS.setdefault(_closer, []).append(_kind)
SESSION_KINDS = ("session", "resume")
ROW_EVENTS = frozenset(OPENERS) | frozenset(CLOSERS) | {"trial_start", "session_resume"}
TRIAL_KINDS = frozenset(
    {
        "fixation",
        "stimulus",
        "decision",
        "answer_prompt",
        "answer",
        "rating_prompt",
        "rating",
        "feedback",
        "gap",
    }
)
OUTCOME_LEVELS = {
    "correct": "The count equals the expected count.",
    "wrong": "A count other than the expected one.",
    "unsure": "The participant pressed the 'unsure' key.",
    "unanswered": "No count was given before the time limit.",
    "unscored": "A count was given but the trial has no expected count.",
}


# --------------------------------------------------------------------------------------------
# Reading sessions


@dataclass
class ExportSession:
    """One session as read from its journal.

    ``trials`` are the completed trials' records (the ``record`` of each ``trial_end`` line, the
    last completion of each trial number, in trial order). ``status`` is the last
    ``session_end`` status, or ``"incomplete"`` when the journal has none (a crash).
    """

    folder: Path
    read: JournalRead = field(repr=False)
    header: dict[str, Any] = field(repr=False)
    protocol: Protocol = field(repr=False)
    trials: list[dict[str, Any]] = field(repr=False)
    status: str
    duration_s: float
    table_rows: list[dict[str, str]] = field(default_factory=list, repr=False)
    start_lsl: float | None = None

    def release(self) -> None:
        """Drop the journal lines (keeping header, trials and facts) to free memory.

        Exporting hundreds of sessions keeps only one session's lines in memory at a time;
        after this, :func:`event_rows` and :meth:`markers` have nothing left to read.
        """
        self.read = JournalRead(path=self.read.path, header=self.header, records=[self.header])

    @property
    def participant(self) -> str:
        return str(self.header.get("participant", ""))

    @property
    def session(self) -> str:
        return str(self.header.get("session", ""))

    @property
    def study(self) -> str:
        return str(self.header.get("study", self.protocol.study))

    @property
    def mode(self) -> str:
        return str(self.header.get("mode", "live"))

    @property
    def factors(self) -> list[str]:
        return list(self.protocol.trials.factors)

    @property
    def table_columns(self) -> list[str]:
        """The trial table's own columns other than stimulus and expected, in table order."""
        cols = self.header.get("trial_table_columns") or []
        return [str(c) for c in cols if c not in ("stimulus", "expected")]

    @property
    def start_t(self) -> float:
        """``t`` of the first ``session_start`` line (presenter LSL clock, seconds)."""
        if self.start_lsl is not None:
            return self.start_lsl
        raise JournalError(
            f"{self.read.path} has no session_start line, so its events have no origin; "
            "the session did not start."
        )

    def markers(self) -> list[tuple[str, float]]:
        """Every marker the session sent, as ``(payload, LSL timestamp)`` from the journal."""
        return [
            (str(r["marker"]), float(r["t"]))
            for r in self.read.records
            if "marker" in r and "t" in r
        ]


# Sessions of one study share their frozen protocol text; parsing it once saves most of the
# per-session set-up time. Models are frozen, so sharing them is safe.
PROTOCOL_CACHE_SIZE = 64
_PROTOCOL_CACHE: dict[str, Protocol] = {}

# Journal lines the exports never look inside: screen redraws and keystrokes. Their hash chain
# is still verified and their event name and time kept; only their JSON is not decoded.
UNDECODED_EVENTS = frozenset({"flip", "typing", "rating_select"})
# Lines the BIDS events need decoded; every other line only needs its event, t and trial.
EXPORT_EVENTS = frozenset(
    {
        "trial_start",
        "trial_end",
        "decision",
        "answer",
        "rating",
        "block_start",
        "rest_start",
        "session_start",
        "session_resume",
        "session_end",
        "abort",
    }
)
# Lines the summary needs decoded (the header is always decoded).
SUMMARY_EVENTS = frozenset({"trial_end", "session_start", "session_resume", "session_end"})
# encode_line writes {"seq":N,"prev":"<hash>","event":"<name>","t":<t>,"trial":<n>,...}
# (``t`` and ``trial`` first among the event's own fields, as the engine passes them).
FAST_FIELDS_RE = re.compile(rb',"t":(-?[0-9][0-9.eE+-]*)(?:,"trial":([0-9]+))?[,}]')
EVENT_FIELD = b',"event":"'
UNDECODED_BYTES = frozenset(e.encode("ascii") for e in UNDECODED_EVENTS)
HASH_FIELD = b',"h":"'
HASH_TAIL = len(HASH_FIELD) + HASH_CHARS + len(b'"}')


def read_journal_for_export(path: Path, *, decode: frozenset[str] | None = None) -> JournalRead:
    """Read and verify a journal like :func:`runner.session.journal.read_journal`, faster.

    Every line's hash, sequence number and link to the previous line are checked as there.
    Only the header and lines whose event is in ``decode`` (default: all but
    :data:`UNDECODED_EVENTS`) are decoded from JSON; the others become ``{"seq", "event", "t",
    "trial"}`` records (``trial`` only where it directly follows ``t``, as in every engine event
    but not in ``flip`` lines). Lines are expected in the layout the journal writer uses; at the first
    line that is not, or when the file is torn or damaged, this falls back to ``read_journal``
    itself, so every problem is reported exactly as it reports it.

    Parameters
    ----------
    path : Path
        The ``journal.jsonl`` file.
    decode : frozenset of str, optional
        Events to decode fully.

    Returns
    -------
    JournalRead
    """
    try:
        data = path.read_bytes()
    except OSError:
        return read_journal(path)
    if not data.endswith(b"\n"):
        return read_journal(path)
    records: list[dict[str, Any]] = []
    prev = GENESIS.encode("ascii")
    sha256 = hashlib.sha256
    skip = UNDECODED_BYTES if decode is None else None
    want = None if decode is None else frozenset(e.encode("utf-8") for e in decode)
    for n, line in enumerate(data[:-1].split(b"\n")):
        # The hash covers the previous line's hash and this line's text (seq and prev fields
        # included), so a hash match proves the line is intact and in its place; on any
        # mismatch read_journal says exactly what is wrong.
        h = line[-HASH_CHARS - 2 : -2]
        if line[-HASH_TAIL : -HASH_CHARS - 2] != HASH_FIELD or (
            sha256(prev + line[:-HASH_TAIL] + b"}").hexdigest()[:HASH_CHARS].encode("ascii") != h
        ):
            return read_journal(path)
        prev = h
        start = line.find(EVENT_FIELD) + len(EVENT_FIELD)
        stop = line.find(b'"', start)
        event = line[start:stop]
        if n == 0 or (event not in skip if skip is not None else event in want):  # type: ignore[operator]
            try:
                obj = json.loads(line)
            except ValueError:
                return read_journal(path)
            if not isinstance(obj, dict) or obj.get("seq") != n:
                return read_journal(path)
            records.append(obj)
            continue
        rec: dict[str, Any] = {"seq": n, "event": event.decode("utf-8", errors="replace")}
        found = FAST_FIELDS_RE.match(line, stop + 1)
        if found:
            rec["t"] = float(found.group(1))
            if found.group(2) is not None:
                rec["trial"] = int(found.group(2))
        records.append(rec)
    out = JournalRead(path=path, header=None, records=records, good_bytes=len(data))
    if records and records[0].get("event") == "header":
        out.header = records[0]
    elif records:
        out.chain_errors.insert(0, "line 1 is not a journal header")
    return out


def find_session_folders(paths: Iterable[str | Path]) -> list[Path]:
    """Session folders named by ``paths``: a folder holding a journal, or any folder above some.

    Parameters
    ----------
    paths : iterable of str or Path
        Session folders, or folders to search (for example ``sessions/courier-hops``).

    Returns
    -------
    list of Path
        Folders holding a ``journal.jsonl``, in the order given (found ones sorted by path),
        without duplicates.

    Raises
    ------
    InputFileError
        If a path does not exist or holds no session journal.
    """
    found: list[Path] = []
    seen: set[Path] = set()
    for raw in paths:
        path = Path(raw)
        if not path.is_dir():
            raise InputFileError(
                f"{path} is not a folder; give session folders (holding {JOURNAL_NAME}) or a "
                "folder above them."
            )
        if (path / JOURNAL_NAME).is_file():
            folders = [path]
        else:
            folders = sorted(p.parent for p in path.rglob(JOURNAL_NAME))
        if not folders:
            raise InputFileError(
                f"there is no session journal ({JOURNAL_NAME}) in or under {path}; check the "
                "folder name."
            )
        for folder in folders:
            key = folder.resolve()
            if key not in seen:
                seen.add(key)
                found.append(folder)
    return found


def _protocol_from_header(header: dict[str, Any], path: Path) -> Protocol:
    text = header.get("protocol_text")
    if isinstance(text, str) and text in _PROTOCOL_CACHE:
        return _PROTOCOL_CACHE[text]
    if not isinstance(text, str):
        raise JournalError(
            f"the header of {path} holds no protocol text, so the session cannot be exported; "
            "was it written by trialdeck?"
        )
    doc = read_yaml_text(text, filename=f"{path} (frozen protocol)")
    try:
        model = Protocol.model_validate(doc.data)
    except ValidationError as exc:
        raise JournalError(
            f"the frozen protocol in {path} no longer passes validation "
            f"({exc.errors()[0].get('msg', 'invalid')}); export it with the trialdeck version "
            f"that ran it ({header.get('version', 'unknown')})."
        ) from None
    if len(_PROTOCOL_CACHE) >= PROTOCOL_CACHE_SIZE:
        _PROTOCOL_CACHE.clear()
    _PROTOCOL_CACHE[text] = model
    return model


def _winning_records(read: JournalRead) -> list[dict[str, Any]]:
    by_trial: dict[int, dict[str, Any]] = {}
    for rec in read.events("trial_end"):
        row = rec.get("record")
        if isinstance(row, dict) and isinstance(row.get("trial"), int):
            by_trial[row["trial"]] = row
    return [by_trial[k] for k in sorted(by_trial)]


def _attempts(read: JournalRead) -> tuple[str, float]:
    """Last session status, and the summed length of the attempts (start or resume to end)."""
    status = "incomplete"
    total = 0.0
    start: float | None = None
    last_t: float | None = None
    for rec in read.records:
        t = rec.get("t")
        if not isinstance(t, (int, float)):
            continue
        event = rec.get("event")
        if event in ("session_start", "session_resume"):
            if start is not None and last_t is not None:
                total += last_t - start
            start = float(t)
            status = "incomplete"
        elif event == "session_end":
            status = str(rec.get("status", "completed"))
            if start is not None:
                total += float(t) - start
                start = None
        last_t = float(t)
    if start is not None and last_t is not None:
        total += last_t - start
    return status, total


def load_session(folder: str | Path, *, decode: frozenset[str] | None = None) -> ExportSession:
    """Read one session folder's journal and its frozen protocol.

    A torn last line (a crash mid-write) is tolerated: the intact lines are used. A broken
    integrity chain is not: an edited journal is refused.

    Parameters
    ----------
    folder : str or Path
        The session folder (``.../sub-P01/ses-1``).
    decode : frozenset of str, optional
        Journal events to decode (see :func:`read_journal_for_export`); default all that the
        BIDS events need.

    Returns
    -------
    ExportSession

    Raises
    ------
    JournalError
        If the journal is missing, unreadable, fails its integrity check, or has no protocol.
    """
    folder = Path(folder)
    path = folder / JOURNAL_NAME
    read = read_journal_for_export(path, decode=decode)
    if read.chain_errors:
        raise JournalError(
            f"{path} fails its integrity check ({read.chain_errors[0]}); it is not exported. "
            "Run `trialdeck audit` on the session to see what changed."
        )
    if read.header is None:
        raise JournalError(f"{path} has no readable header line, so it cannot be exported.")
    header = read.header
    for key in ("participant", "session"):
        value = str(header.get(key, ""))
        if not LABEL_RE.match(value):
            raise JournalError(
                f"the {key} label {value!r} in {path} is not letters and digits only, so it "
                "cannot name BIDS files."
            )
    protocol = _protocol_from_header(header, path)
    table_text = header.get("trial_table_text")
    table_rows = list(csv.DictReader(io.StringIO(table_text))) if table_text else []
    status, duration = _attempts(read)
    start = next((float(r["t"]) for r in read.events("session_start") if "t" in r), None)
    return ExportSession(
        folder=folder,
        read=read,
        header=header,
        protocol=protocol,
        trials=_winning_records(read),
        status=status,
        duration_s=duration,
        table_rows=table_rows,
        start_lsl=start,
    )


def _check_unique(session: ExportSession, seen: dict[tuple[str, str, str], Path]) -> None:
    key = (session.study, session.participant, session.session)
    if key in seen:
        raise InputFileError(
            f"{seen[key]} and {session.folder} both hold study {session.study!r}, participant "
            f"{session.participant!r}, session {session.session!r}; give only one of them."
        )
    seen[key] = session.folder


def load_sessions(
    paths: Iterable[str | Path],
    *,
    decode: frozenset[str] | None = None,
    keep_records: bool = True,
) -> list[ExportSession]:
    """Find and read every session under ``paths`` (see :func:`find_session_folders`).

    Parameters
    ----------
    paths : iterable of str or Path
        Session folders, or folders above them.
    decode : frozenset of str, optional
        Passed to :func:`load_session`.
    keep_records : bool, optional
        Keep every session's journal lines (default); False releases them after reading
        (:meth:`ExportSession.release`), which is all the summary needs.

    Raises
    ------
    InputFileError
        If no session is found, or two folders hold the same study, participant and session
        (they would be counted twice and their event files would collide).
    JournalError
        If a journal cannot be exported (see :func:`load_session`).
    """
    sessions = []
    seen: dict[tuple[str, str, str], Path] = {}
    for folder in find_session_folders(paths):
        session = load_session(folder, decode=decode)
        _check_unique(session, seen)
        if not keep_records:
            session.release()
        sessions.append(session)
    return sessions


# --------------------------------------------------------------------------------------------
# Pooled trials table


def pooled_columns(sessions: Sequence[ExportSession]) -> list[str]:
    """The pooled table's columns: one documented order for any set of sessions.

    The per-session contract columns, trialdeck's extra columns, the trial tables' own columns
    (in first-seen order across sessions), ``sim_rt_ms`` when any session is a pilot, then
    ``study`` and ``mode``.
    """
    cols = list(CONTRACT_COLUMNS) + list(EXTRA_COLUMNS)
    taken = set(cols) | set(PILOT_COLUMNS) | set(CONTEXT_COLUMNS)
    for s in sessions:
        for c in s.table_columns:
            if c not in taken:
                taken.add(c)
                cols.append(c)
    if any(s.mode == "pilot" for s in sessions):
        cols += list(PILOT_COLUMNS)
    return cols + list(CONTEXT_COLUMNS)


def _record_value(s: ExportSession, row: dict[str, Any], column: str) -> Any:
    if column == "study":
        return s.study
    if column == "mode":
        return s.mode
    if column in row:
        return row[column]
    values = row.get("values") or {}
    return values.get(column)


def pooled_rows(sessions: Sequence[ExportSession]) -> tuple[list[str], list[list[Any]]]:
    """Columns and raw values (None for missing) of the pooled table, sessions in given order."""
    cols = pooled_columns(sessions)
    rows = [[_record_value(s, rec, c) for c in cols] for s in sessions for rec in s.trials]
    return cols, rows


def write_pooled_trials(sessions: Sequence[ExportSession], path: str | Path) -> Path:
    """Write the pooled ``trials.csv`` (empty cell = none, as in the per-session table).

    Raises
    ------
    StorageError
        If the file cannot be written.
    """
    path = Path(path)
    cols, rows = pooled_rows(sessions)
    tmp = path.with_name(path.name + ".tmp")
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            writer = csv.writer(fh, lineterminator="\n")
            writer.writerow(cols)
            writer.writerows(
                [csv_cell(v, c) for v, c in zip(row, cols, strict=True)] for row in rows
            )
        os.replace(tmp, path)
    except OSError as exc:
        raise StorageError(f"cannot write {path}: {exc.strerror or exc}.") from None
    return path


def _numeric_if_possible(series: pd.Series) -> pd.Series:
    present = series.dropna()
    if present.empty:
        return series
    converted = pd.to_numeric(present.astype(str), errors="coerce")
    if converted.isna().any():
        return series
    out = pd.to_numeric(series.astype("string"), errors="coerce")
    if (out.dropna() % 1 == 0).all():
        return out.astype("Int64")
    return out.astype(float)


def pooled_trials(sessions: Sequence[ExportSession]) -> pd.DataFrame:
    """The pooled table as a typed DataFrame (for the summary and users' scripts).

    Counts and ratings are nullable integers, times floats; a trial-table column becomes
    numeric when every value in it is a number (so ``nodes`` sorts 20, 50, 110).
    """
    cols, rows = pooled_rows(sessions)
    table = pd.DataFrame(rows, columns=cols, dtype=object)
    for c in ("expected", "answer", "unsure", "correct", "rating", "trial", "block_index"):
        table[c] = pd.to_numeric(table[c], errors="coerce").astype("Int64")
    for c in ("timed_out", "interrupted"):
        table[c] = pd.to_numeric(table[c], errors="coerce").astype("Int64")
    for c in cols:
        if c.endswith("_ms") or c == "onset_lsl":
            table[c] = pd.to_numeric(table[c], errors="coerce").astype(float)
    for c in ("participant", "session", "block", "stimulus", "part", "outcome", "study", "mode"):
        table[c] = table[c].astype("string")
    known = set(CONTRACT_COLUMNS) | set(EXTRA_COLUMNS) | set(PILOT_COLUMNS) | set(CONTEXT_COLUMNS)
    for c in cols:
        if c not in known:
            table[c] = _numeric_if_possible(table[c])
    return table


def sessions_table(sessions: Sequence[ExportSession]) -> pd.DataFrame:
    """One row per session: participant, session, started_wall, duration_s, n_trials, aborted,
    pilot, status, study.

    ``duration_s`` adds up the attempts (session start or resume to session end); ``aborted``
    is true unless the session's last status is ``completed``.
    """
    return pd.DataFrame(
        [
            {
                "participant": s.participant,
                "session": s.session,
                "started_wall": str(s.header.get("wall_clock_start", "")),
                "duration_s": round(s.duration_s, 3),
                "n_trials": len(s.trials),
                "aborted": s.status != "completed",
                "pilot": s.mode == "pilot",
                "status": s.status,
                "study": s.study,
            }
            for s in sessions
        ],
        columns=[
            "participant",
            "session",
            "started_wall",
            "duration_s",
            "n_trials",
            "aborted",
            "pilot",
            "status",
            "study",
        ],
    )


# --------------------------------------------------------------------------------------------
# BIDS events


def task_label(study: str, task: str | None = None) -> str:
    """The BIDS ``task-`` label: ``task`` if given, else the study id without non-alphanumerics.

    Raises
    ------
    UsageError
        If ``task`` is not letters and digits, or the study id has none.
    """
    if task is not None:
        if not LABEL_RE.match(task):
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


@dataclass(frozen=True)
class Origin:
    """Time zero of the events file, on the presenter's LSL clock.

    ``kind`` is ``"session_start"`` or ``"recording"``; ``description`` is the sentence put into
    the sidecar's ``onset`` description; ``details`` are the numbers behind it.
    """

    kind: str
    t0: float
    description: str
    details: dict[str, Any] = field(default_factory=dict)


def session_origin(session: ExportSession) -> Origin:
    """Origin at the session start: the ``session_start`` line of the journal."""
    t0 = session.start_t
    return Origin(
        kind="session_start",
        t0=t0,
        description=(
            "Onset in seconds from the session start: the session_start marker, sent when the "
            "session began, at presenter LSL clock time "
            f"{t0:.{SECONDS_DECIMALS}f} s. No recording was used to set the origin."
        ),
        details={"session_start_lsl": t0},
    )


def recording_origin(session: ExportSession, recording: str | Path) -> Origin:
    """Origin at the first sample of the recording's first EEG-type stream.

    The recording's marker stream is matched with the journal's markers
    (:func:`runner.qa.recording.check_recording`); their median time difference maps presenter
    times onto the recorder's clock. Time zero on the presenter clock is then the EEG stream's
    first timestamp (after pyxdf's clock synchronisation) minus that offset.

    Raises
    ------
    RecordingError
        If the recording has no EEG stream with samples, or no journaled marker was found in it.
    """
    from runner.qa.recording import check_recording, read_recording

    rec = read_recording(recording)
    eeg = [
        s
        for s in sorted(rec.streams, key=lambda x: x.stream_id)
        if s.type.strip().lower() == EEG_STREAM_TYPE and s.first_timestamp is not None
    ]
    if not eeg:
        kinds = ", ".join(sorted({repr(s.type) for s in rec.streams})) or "none"
        raise RecordingError(
            f"{recording} has no EEG stream with samples (stream types found: {kinds}); "
            "export without --recording to use the session start as the origin."
        )
    stream = eeg[0]
    markers = session.markers()
    info = session.header.get("markers") or {}
    report = check_recording(rec, markers, source_id=info.get("source_id"), name=info.get("name"))
    match = report.match
    if match.offset_s is None or match.matched == 0:
        raise RecordingError(
            f"none of the {len(markers)} markers of {session.folder} were found in {recording}, "
            "so its clock cannot be lined up with the session; check that this recording "
            "belongs to this session (run `trialdeck audit` with it)."
        )
    residual = match.residual_median_abs_ms
    if match.matched < len(markers) * MIN_MATCHED_SHARE or (
        residual is not None and residual > report.residual_limit_ms
    ):
        raise RecordingError(
            f"the markers of {session.folder} do not line up with {recording} ({match.matched} of "
            f"{len(markers)} found, median timing difference {residual or 0:.3f} ms after the "
            "clock offset); it is probably another session's recording. Check the file, or run "
            "`trialdeck audit` with it."
        )
    first = float(stream.first_timestamp)  # type: ignore[arg-type]
    t0 = first - match.offset_s
    return Origin(
        kind="recording",
        t0=t0,
        description=(
            f"Onset in seconds from the first sample of EEG stream {stream.name!r} "
            f"(source_id {stream.source_id!r}) in recording {Path(recording).name}, at "
            f"recorder time {first:.{SECONDS_DECIMALS}f} s after clock synchronisation. "
            f"Presenter times were mapped onto the recorder clock with the marker clock offset "
            f"{match.offset_s:.{SECONDS_DECIMALS}f} s (recorder minus presenter), the median over "
            f"{match.matched} of {len(markers)} markers matched by payload"
            + (f", median residual {residual:.3f} ms" if residual is not None else "")
            + ". Negative onsets are events before the first EEG sample."
        ),
        details={
            "recording": str(recording),
            "eeg_stream": stream.name,
            "eeg_source_id": stream.source_id,
            "eeg_first_timestamp": first,
            "marker_offset_s": match.offset_s,
            "markers_matched": match.matched,
            "markers_journaled": len(markers),
            "residual_median_abs_ms": residual,
            "origin_presenter_lsl": t0,
        },
    )


def _stim_file(stimulus: str) -> str:
    # BIDS stim_file is relative to the dataset's /stimuli folder; leading ./ and ../ of the
    # trial table's own path have no meaning there, so they are dropped.
    parts = [p for p in PurePosixPath(stimulus.replace("\\", "/")).parts if p not in (".", "..")]
    return "/".join(parts) if parts else stimulus


@dataclass
class EventRows:
    """One session's event rows before formatting (see :func:`event_rows`).

    ``rows`` are tuples ``(t, end, trial_type, event, trial, key, label, timed_out, attempt,
    response_time, stim_file, tail)`` on the presenter clock (``end`` None: never journaled);
    ``tails[tail]`` holds the values of :data:`TRIAL_COLUMNS` and then ``table_columns``, shared
    by every row of one trial (None: a row outside trials).
    """

    rows: list[tuple[Any, ...]]
    tails: dict[Any, tuple[Any, ...]]
    table_columns: list[str]

    @property
    def columns(self) -> list[str]:
        return BIDS_COLUMNS + ROW_COLUMNS + TRIAL_COLUMNS + self.table_columns

    def kinds(self) -> set[str]:
        return {r[2] for r in self.rows}


def _winners(records: Sequence[dict[str, Any]]) -> dict[int, int]:
    """For each trial number, which of its runs (1, 2, ... in journal order) completed last."""
    runs: dict[int, int] = {}
    winners: dict[int, int] = {}
    for rec in records:
        event = rec.get("event")
        if event == "trial_start":
            trial = rec.get("trial")
            if isinstance(trial, int):
                runs[trial] = runs.get(trial, 0) + 1
        elif event == "trial_end":
            trial = rec.get("trial")
            if isinstance(trial, int):
                winners[trial] = runs.get(trial, 1)
    return winners


def event_rows(session: ExportSession) -> EventRows:
    """Walk the journal once and pair opening and closing events into rows (:data:`ROW_KINDS`).

    Rows of a trial run that a later completion of the same trial replaced are left out; runs
    never completed are kept with ``completed`` 0. A resume starts a new attempt; what the
    previous attempt left open keeps an unknown end.
    """
    records = session.read.records
    winners = _winners(records)
    # Row lists: [t, end, kind, event, trial, key, label, timed_out, attempt, run, block, part]
    rows: list[list[Any]] = []
    open_rows: dict[str, list[Any]] = {}
    open_trial: dict[tuple[int, str], list[Any]] = {}
    next_flip: list[list[Any]] = []
    runs: dict[int, int] = {}
    starts: dict[tuple[int, int], dict[str, Any]] = {}
    attempt = 0
    for rec in records:
        event = rec.get("event")
        t = rec.get("t")
        if event == "flip":
            if next_flip and t is not None:
                still = [r for r in next_flip if not t > r[0]]
                for r in next_flip:
                    if t > r[0]:
                        r[1] = t
                next_flip = still
            continue
        if t is None or event not in ROW_EVENTS:
            continue
        trial = rec.get("trial")
        if event == "trial_start":
            if isinstance(trial, int):
                runs[trial] = runs.get(trial, 0) + 1
                starts[(trial, runs[trial])] = rec
            continue
        if event == "session_start" or event == "session_resume":
            attempt += 1
            open_rows.clear()
            open_trial.clear()
            next_flip = []
        for kind in CLOSERS.get(event, ()):
            if kind in TRIAL_KINDS:
                row = open_trial.pop((trial, kind), None) if isinstance(trial, int) else None
            else:
                row = open_rows.pop(kind, None)
            if row is not None:
                row[1] = t
                if kind in SESSION_KINDS:
                    row[6] = rec.get("status")
        kind = OPENERS.get(event)
        if kind is None:
            continue
        in_trial = kind in TRIAL_KINDS and isinstance(trial, int)
        row = [
            t,
            None,
            kind,
            event,
            trial if in_trial else None,
            rec.get("key") if kind == "decision" else None,
            rec.get("label") if kind == "rest" else rec.get("status"),
            rec.get("timed_out", False) if kind in ("answer", "rating") else None,
            attempt,
            runs.get(trial, 1) if in_trial else None,
            rec.get("block") if kind == "block" else None,
            rec.get("part") if kind == "block" else None,
        ]
        rows.append(row)
        closer = ROW_KINDS[kind][1]
        if closer is None:
            row[1] = t
        elif closer == NEXT_FLIP:
            next_flip.append(row)
        elif in_trial:
            open_trial[(trial, kind)] = row
        else:
            if kind in SESSION_KINDS:
                for other in SESSION_KINDS:
                    open_rows.pop(other, None)
            open_rows[kind] = row

    table_cols = [c for c in session.table_columns if c not in RESERVED_EVENT_COLUMNS]
    by_trial = {int(r["trial"]): r for r in session.trials}
    table_rows = session.table_rows
    tails: dict[Any, tuple[Any, ...]] = {}
    out: list[tuple[Any, ...]] = []
    for t, end, kind, event, trial, key, label, timed, att, run, block, part in rows:
        rt = None
        stim = None
        tail: Any = None
        if trial is not None:
            winner = winners.get(trial)
            if winner is not None and run != winner:
                continue  # superseded by a later completion of the same trial
            rec = by_trial.get(trial) if winner is not None else None
            tail = (trial, run)
            if tail not in tails:
                tails[tail] = _trial_tail(rec, starts.get(tail, {}), table_rows, table_cols)
            if kind == "stimulus":
                stimulus = tails[tail][2]
                stim = _stim_file(str(stimulus)) if stimulus else None
                if rec is not None and rec.get("rt_ms") is not None:
                    rt = float(rec["rt_ms"]) / MS_PER_S
            elif kind == "rating_prompt":
                if rec is not None and rec.get("rating_rt_ms") is not None:
                    rt = float(rec["rating_rt_ms"]) / MS_PER_S
            elif kind == "answer_prompt" and end is not None:
                rt = end - t
        elif kind == "block":
            tail = ("block", block, part)
            if tail not in tails:
                tails[tail] = (block, part) + (None,) * (len(TRIAL_COLUMNS) - 2 + len(table_cols))
        if kind not in SESSION_KINDS and kind != "abort" and kind != "rest":
            label = None
        out.append((t, end, kind, event, trial, key, label, timed, att, rt, stim, tail))
    out.sort(key=lambda r: r[0])  # stable: journal order breaks ties
    return EventRows(rows=out, tails=tails, table_columns=table_cols)


def _trial_tail(
    rec: dict[str, Any] | None,
    start: dict[str, Any],
    table_rows: list[dict[str, str]],
    table_cols: list[str],
) -> tuple[Any, ...]:
    """Values of TRIAL_COLUMNS and the table columns for one trial run."""
    if rec is not None:
        values = rec.get("values") or {}
        head = (
            rec.get("block"),
            rec.get("part"),
            rec.get("stimulus"),
            rec.get("expected"),
            rec.get("answer"),
            rec.get("unsure"),
            rec.get("correct"),
            rec.get("outcome"),
            rec.get("rating"),
            1,
        )
    else:
        # Never completed (abort or crash inside the trial): only what trial_start knew.
        row = start.get("row")
        values = table_rows[row - 1] if isinstance(row, int) and 1 <= row <= len(table_rows) else {}
        head = (
            start.get("block"),
            start.get("part"),
            start.get("stimulus"),
            start.get("expected"),
            None,
            None,
            None,
            None,
            None,
            0,
        )
    return head + tuple(values.get(c) for c in table_cols)


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
    for t, end, kind, event, trial, key, label, timed, att, rt, stim, tail in ev.rows:
        duration = None if end is None else max(0.0, end - t)
        data.append(
            (t - origin.t0, duration, kind, rt, stim, event, trial, key, label, timed, att)
            + (ev.tails[tail] if tail is not None else empty)
        )
    return pd.DataFrame(data, columns=ev.columns, dtype=object)


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
    t0 = origin.t0
    lines = ["\t".join(ev.columns)]
    append = lines.append
    for t, end, kind, event, trial, key, label, timed, att, rt, stim, tail in ev.rows:
        append(
            f"{t - t0:.{SECONDS_DECIMALS}f}\t"
            + ("n/a" if end is None else f"{max(0.0, end - t):.{SECONDS_DECIMALS}f}")
            + f"\t{kind}\t{_seconds(rt)}\t{NA if stim is None else _tsv_cell(stim)}\t{event}\t"
            + f"{NA if trial is None else trial}\t{NA if key is None else _tsv_cell(key)}\t"
            + f"{NA if label is None else _tsv_cell(label)}\t"
            + f"{NA if timed is None else int(bool(timed))}\t{att}\t"
            + (empty if tail is None else tail_text[tail])
        )
    return "\n".join(lines) + "\n"


def _levels(values: Iterable[Any]) -> list[str]:
    seen = sorted({str(v) for v in values if v is not None and not pd.isna(v)}, key=_level_key)
    return seen


def _level_key(text: str) -> tuple[int, float, str]:
    try:
        return (0, float(text), text)
    except ValueError:
        return (1, 0.0, text)


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
        if not LABEL_RE.match(value):
            raise UsageError(f"the {name} label {value!r} must be letters and digits only.")
    folder = Path(out) / f"sub-{participant}" / f"ses-{session}" / datatype
    stem = f"sub-{participant}_ses-{session}_task-{task}_events"
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
        tsv.parent.mkdir(parents=True, exist_ok=True)
        tsv.write_text(text, encoding="utf-8")
        side.write_text(json.dumps(sidecar, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")
    except OSError as exc:
        raise StorageError(
            f"cannot write the events files in {tsv.parent}: {exc.strerror}."
        ) from None
    return tsv, side


def _dataset_files(out: Path, sessions: Sequence[ExportSession]) -> list[Path]:
    """A minimal dataset_description.json (only when absent) and a .bidsignore for trials.csv."""
    written: list[Path] = []
    desc = out / BIDS_DATASET_DESCRIPTION
    if not desc.exists():
        studies = sorted({s.study for s in sessions})
        version = str(sessions[0].header.get("version", "")) if sessions else ""
        desc.write_text(
            json.dumps(
                {
                    "Name": ", ".join(studies) or "trialdeck export",
                    "BIDSVersion": BIDS_VERSION,
                    "DatasetType": "raw",
                    "GeneratedBy": [{"Name": SOFTWARE_NAME, "Version": version}],
                },
                indent=2,
            )
            + "\n",
            encoding="utf-8",
        )
        written.append(desc)
    ignore = out / BIDS_IGNORE
    lines = ignore.read_text(encoding="utf-8").splitlines() if ignore.exists() else []
    if POOLED_NAME not in lines:
        ignore.write_text("\n".join([*lines, POOLED_NAME]) + "\n", encoding="utf-8")
        written.append(ignore)
    return written


@dataclass
class ExportResult:
    """What :func:`export_sessions` wrote."""

    pooled: Path
    events: list[tuple[Path, Path]]
    origins: list[Origin]
    sessions: list[ExportSession]
    n_trials: int
    other_files: list[Path] = field(default_factory=list)


def export_sessions(
    paths: Iterable[str | Path],
    out: str | Path,
    *,
    task: str | None = None,
    datatype: str = DEFAULT_DATATYPE,
    recordings: Sequence[str | Path] | None = None,
) -> ExportResult:
    """Export sessions: the pooled ``trials.csv`` and BIDS events of each session under ``out``.

    Parameters
    ----------
    paths : iterable of str or Path
        Session folders, or folders above them.
    out : str or Path
        The export folder (a BIDS dataset root; an existing ``dataset_description.json`` is
        kept, and ``trials.csv`` is added to ``.bidsignore``).
    task : str, optional
        BIDS task label; default the study id with non-alphanumerics removed.
    datatype : {"beh", "eeg"}
        The datatype folder of the events files.
    recordings : sequence of path, optional
        One XDF recording per session, in session order: onsets then count from the first
        sample of its EEG stream. Default: from the session start.

    Returns
    -------
    ExportResult

    Raises
    ------
    UsageError
        Bad labels or datatype, or a recording count that differs from the session count.
    InputFileError, JournalError, RecordingError, StorageError
        See :func:`load_sessions`, :func:`recording_origin` and the writers.
    """
    if datatype not in DATATYPES:
        raise UsageError(
            f"the datatype {datatype!r} is not supported; use one of {', '.join(DATATYPES)}."
        )
    out = Path(out)
    folders = find_session_folders(paths)
    if recordings and len(recordings) != len(folders):
        raise UsageError(
            f"{len(recordings)} recording(s) were given for {len(folders)} session(s); give "
            "one --recording per session, in the same order as the session folders."
        )
    if out.exists() and not out.is_dir():
        raise StorageError(f"{out} is a file; give a folder for the export.")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise StorageError(f"cannot create the export folder {out}: {exc.strerror}.") from None
    sessions: list[ExportSession] = []
    origins: list[Origin] = []
    events: list[tuple[Path, Path]] = []
    seen: dict[tuple[str, str, str], Path] = {}
    # One session at a time: read, write its events, then let its journal lines go, so memory
    # stays at one session's worth however many are exported.
    for i, folder in enumerate(folders):
        # With a recording every marker payload is needed to match the recorder's clock.
        session = load_session(folder, decode=None if recordings else EXPORT_EVENTS)
        _check_unique(session, seen)
        origin = recording_origin(session, recordings[i]) if recordings else session_origin(session)
        label = task_label(session.study, task)
        events.append(write_bids_events(session, out, task=label, datatype=datatype, origin=origin))
        session.release()
        sessions.append(session)
        origins.append(origin)
    pooled = write_pooled_trials(sessions, out / POOLED_NAME)
    try:
        others = _dataset_files(out, sessions)
    except OSError as exc:
        raise StorageError(f"cannot write the dataset files in {out}: {exc.strerror}.") from None
    return ExportResult(
        pooled=pooled,
        events=events,
        origins=origins,
        sessions=sessions,
        n_trials=sum(len(s.trials) for s in sessions),
        other_files=others,
    )


def level_orders(sessions: Sequence[ExportSession]) -> dict[str, list[Any]]:
    """Block level orders the protocols list (``blocks.levels``), per block factor."""
    orders: dict[str, list[Any]] = {}
    for s in sessions:
        for step in s.protocol.sequence:
            if isinstance(step, BlocksStep) and step.blocks.levels:
                orders.setdefault(step.blocks.by, list(step.blocks.levels))
    return orders


def rating_points(sessions: Sequence[ExportSession]) -> int:
    """The protocols' number of rating points (they must agree).

    Raises
    ------
    InputFileError
        If the sessions' protocols use different scales.
    """
    points = sorted({s.protocol.rating.points for s in sessions})
    if len(points) > 1:
        raise InputFileError(
            "the sessions use rating scales of different lengths ("
            + ", ".join(str(p) for p in points)
            + " points); summarise them separately."
        )
    return points[0] if points else DEFAULT_RATING_POINTS


def factor_union(sessions: Sequence[ExportSession]) -> list[str]:
    """The protocols' factors in first-seen order."""
    out: list[str] = []
    for s in sessions:
        for f in s.factors:
            if f not in out:
                out.append(f)
    return out
