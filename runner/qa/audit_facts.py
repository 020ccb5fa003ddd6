"""What the audit finds, as data: the findings, the per-session result, and small helpers.

Used by :mod:`runner.qa.audit` (the entry point), :mod:`runner.qa.audit_checks` (the checks)
and :mod:`runner.qa.audit_text` (the text output). Nothing here imports pygame or pylsl.
"""

from __future__ import annotations

import math
from collections import defaultdict
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from runner.errors import Problem
from runner.recording.check import RecordingReport

AUDIT_FORMAT = "trialdeck-audit/1"
PERCENTILES = (5.0, 50.0, 95.0)
MAX_LISTED = 8  # trials or lines named in one sentence before "and N more"

Numbered = tuple[int, dict[str, Any]]  # a journal line: (1-based line number, record)


def num(x: Any) -> float | None:
    """``x`` as a finite float, or None (journals are data from disk: never trust a type)."""
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        return None
    v = float(x)
    return v if math.isfinite(v) else None


def as_int(x: Any) -> int | None:
    return x if isinstance(x, int) and not isinstance(x, bool) else None


def listing(items: Sequence[Any], limit: int = MAX_LISTED) -> str:
    shown = ", ".join(str(i) for i in items[:limit])
    return shown if len(items) <= limit else f"{shown} and {len(items) - limit} more"


def ranges(nums: Iterable[int]) -> str:
    """1, 2, 3, 5, 7, 8 -> '1-3, 5, 7-8'."""
    out: list[str] = []
    xs = sorted(set(nums))
    i = 0
    while i < len(xs):
        j = i
        while j + 1 < len(xs) and xs[j + 1] == xs[j] + 1:
            j += 1
        out.append(str(xs[i]) if i == j else f"{xs[i]}-{xs[j]}")
        i = j + 1
    return listing(out)


def plural(n: int, word: str, many: str | None = None) -> str:
    return f"{n} {word}" if n == 1 else f"{n} {many or word + 's'}"


def percentile(sorted_xs: Sequence[float], q: float) -> float:
    """Linear-interpolation percentile of an already sorted list (numpy's default method)."""
    if len(sorted_xs) == 1:
        return sorted_xs[0]
    pos = (len(sorted_xs) - 1) * q / 100.0
    lo = math.floor(pos)
    hi = min(lo + 1, len(sorted_xs) - 1)
    return sorted_xs[lo] + (sorted_xs[hi] - sorted_xs[lo]) * (pos - lo)


def stats(values: Iterable[float]) -> dict[str, float | int] | None:
    xs = sorted(values)
    if not xs:
        return None
    out: dict[str, float | int] = {"n": len(xs), "min": xs[0], "max": xs[-1]}
    for q in PERCENTILES:
        out[f"p{q:g}"] = percentile(xs, q)
    return out


class EventIndex:
    """The journal's event lines in order, and grouped by event name (one pass, for speed)."""

    def __init__(self, events: list[Numbered]):
        self.events = events
        self.by: dict[str, list[Numbered]] = defaultdict(list)
        for item in events:
            self.by[str(item[1].get("event"))].append(item)

    def of(self, *names: str) -> list[Numbered]:
        """Lines of the given events, in journal order."""
        if len(names) == 1:
            return self.by.get(names[0], [])
        return sorted((x for name in names for x in self.by.get(name, [])), key=lambda x: x[0])


class Findings:
    """The problems found so far; ``file`` is the journal as problem lines name it."""

    def __init__(self, file: str):
        self.file = file
        self.items: list[Problem] = []

    def error(self, message: str, line: int = 0, file: str | None = None, code: str = "") -> None:
        self.items.append(Problem("error", file or self.file, line, 0, message, code=code))

    def warning(self, message: str, line: int = 0, file: str | None = None, code: str = "") -> None:
        self.items.append(Problem("warning", file or self.file, line, 0, message, code=code))


@dataclass(frozen=True)
class CompletedTrial:
    """A trial's winning completion: the ``trial_end`` line and its trial record."""

    line: int
    record: dict[str, Any]


@dataclass
class SessionAudit:
    """Everything the audit found about one session folder.

    ``problems`` are :class:`runner.errors.Problem` lines (errors and warnings); ``facts`` holds
    the measurements behind them (JSON-ready) for the details section and ``--json``.
    """

    folder: Path
    journal: Path
    study: str
    participant: str
    session: str
    mode: str
    problems: list[Problem]
    facts: dict[str, Any]
    recording: RecordingReport | None = None

    @property
    def errors(self) -> list[Problem]:
        return [p for p in self.problems if p.severity == "error"]

    @property
    def warnings(self) -> list[Problem]:
        return [p for p in self.problems if p.severity == "warning"]

    @property
    def ok(self) -> bool:
        return not self.errors

    def label(self) -> str:
        return f"{self.study} sub-{self.participant} ses-{self.session}"

    def summary_line(self) -> str:
        """One line: verdict, counts, and the headline figures."""
        verdict = "SOUND" if self.ok else "PROBLEMS"
        f = self.facts
        trials = f.get("trials", {})
        parts = [
            f"{self.label()} ({self.mode}): {verdict}",
            f"{plural(len(self.errors), 'error')}, {plural(len(self.warnings), 'warning')}",
            f"{trials.get('completed', 0)} of {trials.get('scheduled', 0)} trials",
        ]
        timing = f.get("timing", {})
        if "late_flips" in timing:
            parts.append(f"{plural(timing['late_flips'], 'late flip')}")
        if self.recording is not None:
            m = self.recording.match
            total = m.matched + len(m.missing)
            parts.append(f"markers {m.matched}/{total} recorded")
        return "; ".join(parts)

    def as_dict(self) -> dict[str, Any]:
        return {
            "format": AUDIT_FORMAT,
            "folder": str(self.folder),
            "journal": str(self.journal),
            "study": self.study,
            "participant": self.participant,
            "session": self.session,
            "mode": self.mode,
            "ok": self.ok,
            "summary": self.summary_line(),
            "problems": [p.as_dict() for p in self.problems],
            "facts": self.facts,
            "recording": None if self.recording is None else self.recording.as_dict(),
        }
