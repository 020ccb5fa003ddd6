"""Trial events and periods of a session on the recorder's clock, and the windows cut from them.

The journal's times are mapped onto the recording with the clock model of
:func:`runner.data.origins.recording_origin`: the recorder time of journal time ``t`` is
``origin.onset(t) + origin.zero`` (a recorded marker keeps its recorded time; the model fills in
the rest). A pilot run faster than real time (journal header ``speed``) has every window length
and offset divided by that speed, so its shortened session is cut the way a live one would be.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from runner.contract.events import RECORD_FIELD
from runner.data.origins import Origin, recording_origin
from runner.data.sessions import ExportSession
from runner.journal.timeline import session_timeline
from runner.physio.config import PERIOD_EVENTS, TRIAL_EVENTS, Window
from runner.recording.xdf import Recording

__all__ = [
    "Period",
    "SessionTimes",
    "TrialTimes",
    "session_times",
    "time_scale",
    "window_bounds",
]


@dataclass
class TrialTimes:
    """One completed trial: its record (the trials.csv row) and its events' recorder times."""

    trial: int
    record: dict[str, Any]
    events: dict[str, float] = field(default_factory=dict)


@dataclass(frozen=True)
class Period:
    """A block, rest or break, from its start marker to its end marker (recorder seconds)."""

    kind: str
    label: str
    start: float
    end: float


@dataclass
class SessionTimes:
    """A session's trials and periods on the recorder clock, and the origin that placed them."""

    trials: list[TrialTimes]
    periods: list[Period]
    origin: Origin
    scale: float = 1.0


def time_scale(session: ExportSession) -> float:
    """1 for a live session; 1/speed for a pilot run ``speed`` times faster than real time."""
    if not session.pilot:
        return 1.0
    try:
        speed = float(session.header.get("speed") or 1.0)
    except (TypeError, ValueError):
        speed = 1.0
    return 1.0 / speed if speed > 0 else 1.0


def session_times(
    session: ExportSession,
    recording: str | Path,
    *,
    allow_truncated: bool = False,
    rec: Recording | None = None,
    zero_stream: int | None = None,
    sample: bool = False,
) -> SessionTimes:
    """The completed trials' events and the periods of ``session``, on ``recording``'s clock.

    The clock model and time zero are :func:`runner.data.origins.recording_origin`'s, the same
    as export's: fitted to ``rec`` (the recording already read, e.g. its marker streams and the
    chosen signal streams) or to the file read now, with time zero at the first (dejittered)
    sample of stream ``zero_stream`` (default: the first EEG stream). With ``sample`` the
    origin keeps that stream's dejittered timestamps (``origin.sample_times``).

    Raises
    ------
    RecordingError
        See :func:`runner.data.origins.recording_origin`.
    """
    origin = recording_origin(
        session,
        recording,
        allow_truncated=allow_truncated,
        sample=sample,
        loaded=rec,
        zero_stream_id=zero_stream,
    )
    records = session.read.records
    timeline = session_timeline(records)

    def rec_time(i: int, r: dict[str, Any]) -> float:
        return origin.onset(timeline.at(i, float(r["t"]))) + origin.zero

    completed = {int(r["trial"]): r for r in session.trials if "trial" in r}
    events: dict[int, dict[str, float]] = {}
    periods: list[Period] = []
    open_periods: dict[str, tuple[str, float]] = {}
    starts = {v[0]: k for k, v in PERIOD_EVENTS.items()}
    ends = {v[1]: k for k, v in PERIOD_EVENTS.items()}
    for i, r in enumerate(records):
        name = r.get("event")
        if "t" not in r or not isinstance(name, str):
            continue
        if name == "trial_start" and "trial" in r:
            events[int(r["trial"])] = {}  # a trial run again (after a resume) starts afresh
        elif name in TRIAL_EVENTS and "trial" in r:
            got = events.setdefault(int(r["trial"]), {})
            got.setdefault(name, rec_time(i, r))
        elif name in starts:
            label = str(r.get("block") or r.get("label") or starts[name])
            open_periods[starts[name]] = (label, rec_time(i, r))
        elif name in ends and ends[name] in open_periods:
            label, start = open_periods.pop(ends[name])
            periods.append(Period(ends[name], label, start, rec_time(i, r)))
        elif name in ("session_end", "abort", "session_resume"):
            open_periods.clear()  # a period cut by an abort or crash has no end: not measured
    trials = [
        TrialTimes(trial=n, record=_record(completed[n]), events=events.get(n, {}))
        for n in sorted(completed)
    ]
    return SessionTimes(trials=trials, periods=periods, origin=origin, scale=time_scale(session))


def _record(record: dict[str, Any]) -> dict[str, Any]:
    inner = record.get(RECORD_FIELD)
    return dict(inner) if isinstance(inner, dict) else dict(record)


def window_bounds(
    window: Window, events: dict[str, float], scale: float = 1.0
) -> tuple[float, float] | None:
    """(start, end) recorder seconds of ``window`` in a trial with ``events``, or None when an
    event it needs is missing (a timed-out answer, a trial without a rating) or it is empty."""
    if window.start not in events:
        return None
    start = events[window.start] + window.offset_s * scale
    if window.duration_s is not None:
        end = start + window.duration_s * scale
    else:
        if window.end is None or window.end not in events:
            return None
        end = events[window.end] + window.end_offset_s * scale
    if window.max_s is not None:
        end = min(end, start + window.max_s * scale)
    if end <= start:
        return None
    return start, end
