"""One session timeline across attempts, also when the clock restarted between them.

Every journal line's ``t`` is the ``local_clock`` of the process that wrote it: a steady clock
that starts at some arbitrary point, typically the boot of the computer. A session resumed
after a reboot therefore has attempts whose times cannot be compared: the second attempt's
clock may read less than the first one's last line. Each attempt journals its **clock epoch**,
the local_clock and the wall clock read together (attempt 1 in the header:
``lsl_clock_at_start`` with ``wall_clock_unix_at_start``, or the older ``wall_clock_start``
text; each resume in a ``clock_epoch`` line, the first line the resuming process writes).

:func:`session_timeline` maps every line onto **one session timeline**: the local_clock of
attempt 1, so a session without a restart keeps its times exactly. A later attempt keeps the
previous one's mapping when it ran on the same clock. It counts as *restarted* when its epoch's
local_clock is below the previous attempt's last ``t``, or when the local_clock and the wall
clock disagree about the time between the two epochs by more than :data:`CLOCK_AGREEMENT_S`.
A restarted attempt is placed by the wall clock (the bridge): its epoch lies the wall-clock gap
after the previous epoch, and never before the previous attempt's last line, so the timeline
only goes forward. Without an epoch (journals written before epochs were journaled) an attempt
whose times go back is placed right after the previous attempt's last line.

Export (events.tsv onsets) and audit (its timeline facts) both use this module.
"""

from __future__ import annotations

import bisect
import datetime as _dt
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

__all__ = [
    "CLOCK_AGREEMENT_S",
    "EPOCH_EVENT",
    "Segment",
    "Timeline",
    "session_timeline",
]

#: The journal line a resuming process writes first: its clock epoch.
EPOCH_EVENT = "clock_epoch"
#: Local clock and wall clock may disagree this much over a gap before the local clock is taken
#: to have restarted (a steady clock and NTP-disciplined wall time drift far less than this over
#: hours; a reboot, a suspend or a different computer differ by much more).
CLOCK_AGREEMENT_S = 1.0
# Lines written when a process begins an attempt, before the engine's first line.
_PROCESS_STARTS = frozenset({EPOCH_EVENT, "session_interrupted", "session_resume"})
_PREAMBLE = _PROCESS_STARTS | {"display_check", "recorder_connected", "stimuli_changed_accepted"}

# How an attempt was placed on the session timeline.
SAME_CLOCK = "same clock"
WALL_CLOCK = "wall clock"
JOURNAL_ORDER = "journal order"
FIRST = "first attempt"


def _num(x: Any) -> float | None:
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        return None
    v = float(x)
    return v if math.isfinite(v) else None


def _wall(rec: dict[str, Any], unix_key: str, text_key: str) -> float | None:
    """Wall-clock seconds since 1970 from a line: its number, else its ISO 8601 text."""
    unix = _num(rec.get(unix_key))
    if unix is not None:
        return unix
    text = rec.get(text_key)
    if isinstance(text, str):
        try:
            return _dt.datetime.fromisoformat(text).timestamp()
        except ValueError:
            return None
    return None


@dataclass
class Segment:
    """The lines one process wrote: from ``first`` (a line index) to the next segment.

    ``offset`` is added to a line's ``t`` to put it on the session timeline.
    """

    first: int
    local_start: float | None  # the epoch's local_clock (None: no epoch journaled)
    wall_start: float | None  # the epoch's wall clock, seconds since 1970
    offset: float = 0.0
    bridge: str = FIRST
    restarted: bool = False
    first_t: float | None = None
    last_t: float | None = None

    def as_dict(self) -> dict[str, Any]:
        return {
            "first_line": self.first + 1,
            "local_clock_start": self.local_start,
            "wall_clock_start": self.wall_start,
            "offset_s": self.offset,
            "placed_by": self.bridge,
            "clock_restarted": self.restarted,
        }


@dataclass
class Timeline:
    """Per-line offsets onto the session timeline (see the module docstring)."""

    segments: list[Segment]

    def __post_init__(self) -> None:
        self._starts = [s.first for s in self.segments]

    @property
    def restarted(self) -> list[int]:
        """1-based numbers of the segments (attempt processes) whose clock restarted."""
        return [i + 1 for i, s in enumerate(self.segments) if s.restarted]

    def offset(self, index: int) -> float:
        """The offset of line ``index`` (0-based position in the records)."""
        if not self.segments:
            return 0.0
        k = bisect.bisect_right(self._starts, index) - 1
        return self.segments[max(k, 0)].offset

    def at(self, index: int, t: float) -> float:
        """Line ``index``'s time ``t`` on the session timeline."""
        return t + self.offset(index)

    def as_dicts(self) -> list[dict[str, Any]]:
        return [s.as_dict() for s in self.segments]


def _segments(records: Sequence[dict[str, Any]]) -> list[Segment]:
    """Split the lines into the runs of one process each, with their epochs and time spans."""
    segments: list[Segment] = []
    cur: Segment | None = None
    engine_lines = 0  # lines of the current segment beyond its start-up preamble
    for i, rec in enumerate(records):
        event = rec.get("event")
        if i == 0 and event == "header":
            cur = Segment(
                0,
                _num(rec.get("lsl_clock_at_start")),
                _wall(rec, "wall_clock_unix_at_start", "wall_clock_start"),
            )
            segments.append(cur)
            continue
        if cur is None or (event in _PROCESS_STARTS and engine_lines):
            cur = Segment(i, None, None)
            segments.append(cur)
            engine_lines = 0
        if event == EPOCH_EVENT and cur.local_start is None:
            cur.local_start = _num(rec.get("t"))
            cur.wall_start = _wall(rec, "wall_clock_unix", "wall_clock")
        elif event not in _PREAMBLE:
            engine_lines += 1
        t = _num(rec.get("t"))
        if t is not None:
            if cur.first_t is None:
                cur.first_t = t
            cur.last_t = t if cur.last_t is None else max(cur.last_t, t)
    return segments


def session_timeline(records: Sequence[dict[str, Any]]) -> Timeline:
    """The session timeline of a journal's lines (header first), see the module docstring."""
    segments = _segments(records)
    prev: Segment | None = None
    for seg in segments:
        if prev is None:
            prev = seg
            continue
        seg.offset, seg.bridge, seg.restarted = _place(prev, seg)
        prev = seg
    return Timeline(segments)


def _place(prev: Segment, seg: Segment) -> tuple[float, str, bool]:
    """Offset, how it was found, and whether the clock restarted, of ``seg`` after ``prev``."""
    prev_last = prev.last_t
    start = seg.local_start if seg.local_start is not None else seg.first_t
    if start is None or prev_last is None:
        return prev.offset, SAME_CLOCK, False
    went_back = start < prev_last
    have_walls = (
        seg.local_start is not None
        and seg.wall_start is not None
        and prev.local_start is not None
        and prev.wall_start is not None
    )
    if have_walls:
        assert seg.local_start is not None and prev.local_start is not None
        assert seg.wall_start is not None and prev.wall_start is not None
        wall_gap = seg.wall_start - prev.wall_start
        local_gap = seg.local_start - prev.local_start
        if not went_back and abs(wall_gap - local_gap) <= CLOCK_AGREEMENT_S:
            return prev.offset, SAME_CLOCK, False
        # The wall clock bridges the restart, but the timeline never goes back.
        mapped_start = max(prev.local_start + prev.offset + wall_gap, prev_last + prev.offset)
        return mapped_start - seg.local_start, WALL_CLOCK, True
    if not went_back:
        return prev.offset, SAME_CLOCK, False
    return prev_last + prev.offset - start, JOURNAL_ORDER, True
