"""BIDS event rows of one session: which journal events open and close each row.

One walk over the journal pairs opening and closing events into :class:`EventRow` objects
(:func:`event_rows`); :mod:`runner.data.bids` formats them as ``_events.tsv`` and its sidecar.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import PurePosixPath
from typing import Any

from runner.contract.columns import (
    BIDS_COLUMNS,
    EVENT_ROW_COLUMNS,
    EVENT_TRIAL_COLUMNS,
)
from runner.contract.events import VALUES_FIELD
from runner.data.sessions import ExportSession
from runner.journal.timeline import session_timeline

__all__ = [
    "BIDS_COLUMNS",
    "EVENT_COLUMNS",
    "ROW_COLUMNS",
    "ROW_KINDS",
    "TRIAL_COLUMNS",
    "EventRow",
    "EventRows",
    "event_rows",
]

ROW_COLUMNS = list(EVENT_ROW_COLUMNS)
TRIAL_COLUMNS = list(EVENT_TRIAL_COLUMNS)
EVENT_COLUMNS = ROW_COLUMNS + TRIAL_COLUMNS
RESERVED_EVENT_COLUMNS = frozenset(BIDS_COLUMNS) | frozenset(EVENT_COLUMNS)
MS_PER_S = 1000.0

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


def stim_file_name(stimulus: str) -> str:
    # BIDS stim_file is relative to the dataset's /stimuli folder; leading ./ and ../ of the
    # trial table's own path have no meaning there, so they are dropped.
    parts = [p for p in PurePosixPath(stimulus.replace("\\", "/")).parts if p not in (".", "..")]
    return "/".join(parts) if parts else stimulus


@dataclass(slots=True)
class EventRow:
    """One row of the events file, on the presenter clock, before formatting.

    ``end`` None: the end was never journaled. ``run`` counts the runs of the row's trial (a
    trial run again after a resume has run 2). ``tail`` keys :attr:`EventRows.tails`: the values
    shared by every row of one trial run (None: a row outside trials).
    """

    t: float
    end: float | None
    kind: str
    event: str
    trial: int | None
    key: Any
    label: Any
    timed_out: Any
    attempt: int
    run: int | None = None
    block: Any = None
    part: Any = None
    response_time: float | None = None
    stim_file: str | None = None
    tail: Any = None


@dataclass
class EventRows:
    """One session's event rows before formatting (see :func:`event_rows`).

    ``rows`` are sorted by onset; ``tails[tail]`` holds the values of :data:`TRIAL_COLUMNS` and
    then ``table_columns``, shared by every row of one trial.
    """

    rows: list[EventRow]
    tails: dict[Any, tuple[Any, ...]]
    table_columns: list[str]

    @property
    def columns(self) -> list[str]:
        return list(BIDS_COLUMNS) + ROW_COLUMNS + TRIAL_COLUMNS + self.table_columns

    def kinds(self) -> set[str]:
        return {r.kind for r in self.rows}


def event_rows(session: ExportSession) -> EventRows:
    """Walk the journal once and pair opening and closing events into rows (:data:`ROW_KINDS`).

    Rows of a trial run that a later completion of the same trial replaced are left out; runs
    never completed are kept with ``completed`` 0. A resume starts a new attempt; what the
    previous attempt left open keeps an unknown end. Times are on the session timeline
    (:func:`runner.journal.timeline.session_timeline`): onsets go forward across attempts, also
    when the clock restarted between them.
    """
    records = session.read.records
    # Times go onto one session timeline, also across a restarted clock (a resume after a reboot).
    timeline = session_timeline(records)
    shifted = any(seg.offset for seg in timeline.segments)
    # For each trial number, which of its runs (1, 2, ... in journal order) completed last.
    winners: dict[int, int] = {}
    rows: list[EventRow] = []
    open_rows: dict[str, EventRow] = {}
    open_trial: dict[tuple[int, str], EventRow] = {}
    next_flip: list[EventRow] = []
    runs: dict[int, int] = {}
    starts: dict[tuple[int, int], dict[str, Any]] = {}
    attempt = 0
    for i, rec in enumerate(records):
        event = rec.get("event")
        t = rec.get("t")
        if shifted and t is not None:
            t = timeline.at(i, t)
        if event == "flip":
            if next_flip and t is not None:
                still = [r for r in next_flip if not t > r.t]
                for r in next_flip:
                    if t > r.t:
                        r.end = t
                next_flip = still
            continue
        if event == "trial_end":
            trial = rec.get("trial")
            if isinstance(trial, int):
                winners[trial] = runs.get(trial, 1)
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
                row.end = t
                if kind in SESSION_KINDS:
                    row.label = rec.get("status")
        opened = OPENERS.get(event)
        if opened is None:
            continue
        kind = opened
        in_trial = kind in TRIAL_KINDS and isinstance(trial, int)
        row = EventRow(
            t=t,
            end=None,
            kind=kind,
            event=str(event),
            trial=trial if in_trial else None,
            key=rec.get("key") if kind == "decision" else None,
            label=rec.get("label") if kind == "rest" else rec.get("status"),
            timed_out=rec.get("timed_out", False) if kind in ("answer", "rating") else None,
            attempt=attempt,
            run=runs.get(trial, 1) if in_trial and isinstance(trial, int) else None,
            block=rec.get("block") if kind == "block" else None,
            part=rec.get("part") if kind == "block" else None,
        )
        rows.append(row)
        closer = ROW_KINDS[kind][1]
        if closer is None:
            row.end = t
        elif closer == NEXT_FLIP:
            next_flip.append(row)
        elif in_trial and isinstance(trial, int):
            open_trial[(trial, kind)] = row
        else:
            if kind in SESSION_KINDS:
                for other in SESSION_KINDS:
                    open_rows.pop(other, None)
            open_rows[kind] = row

    # A table column that clashes with an events column (refused by check) is left out rather
    # than written twice.
    table_cols = [c for c in session.table_columns if c not in RESERVED_EVENT_COLUMNS]
    by_trial = {int(r["trial"]): r for r in session.trials}
    table_rows = session.table_rows
    tails: dict[Any, tuple[Any, ...]] = {}
    out: list[EventRow] = []
    for row in rows:
        trial = row.trial
        kind = row.kind
        if trial is not None:
            winner = winners.get(trial)
            if winner is not None and row.run != winner:
                continue  # superseded by a later completion of the same trial
            done = by_trial.get(trial) if winner is not None else None
            tail: Any = (trial, row.run)
            if tail not in tails:
                tails[tail] = _trial_tail(done, starts.get(tail, {}), table_rows, table_cols)
            row.tail = tail
            if kind == "stimulus":
                stimulus = tails[tail][2]
                row.stim_file = stim_file_name(str(stimulus)) if stimulus else None
                if done is not None and done.get("rt_ms") is not None:
                    row.response_time = float(done["rt_ms"]) / MS_PER_S
            elif kind == "rating_prompt":
                if done is not None and done.get("rating_rt_ms") is not None:
                    row.response_time = float(done["rating_rt_ms"]) / MS_PER_S
            elif kind == "answer_prompt" and row.end is not None:
                row.response_time = row.end - row.t
        elif kind == "block":
            tail = ("block", row.block, row.part)
            if tail not in tails:
                tails[tail] = (row.block, row.part) + (None,) * (
                    len(TRIAL_COLUMNS) - 2 + len(table_cols)
                )
            row.tail = tail
        if kind not in SESSION_KINDS and kind != "abort" and kind != "rest":
            row.label = None
        out.append(row)
    out.sort(key=lambda r: r.t)  # stable: journal order breaks ties
    return EventRows(rows=out, tails=tails, table_columns=table_cols)


def _trial_tail(
    rec: dict[str, Any] | None,
    start: dict[str, Any],
    table_rows: list[dict[str, str]],
    table_cols: list[str],
) -> tuple[Any, ...]:
    """Values of TRIAL_COLUMNS and the table columns for one trial run."""
    if rec is not None:
        values = rec.get(VALUES_FIELD) or {}
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
