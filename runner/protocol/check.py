"""`trialdeck check`: everything that can be known about a protocol before a participant arrives."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from runner.errors import Problem, ProtocolError
from runner.protocol.load import LoadedProtocol, load_protocol
from runner.protocol.schedule import build_schedule


@dataclass
class CheckReport:
    problems: list[Problem] = field(default_factory=list)
    facts: list[str] = field(default_factory=list)
    loaded: LoadedProtocol | None = None

    @property
    def has_errors(self) -> bool:
        return any(p.severity == "error" for p in self.problems)

    def summary_lines(self) -> list[str]:
        errors = sum(p.severity == "error" for p in self.problems)
        warnings = sum(p.severity == "warning" for p in self.problems)
        verdict = f"{errors} error(s), {warnings} warning(s)"
        return [*self.facts, verdict]


def check_protocol(path: Path, *, participants: int | None = None) -> CheckReport:
    """Check a protocol; problems are returned, not raised (the CLI decides the exit code)."""
    report = CheckReport()
    try:
        loaded = load_protocol(path)
    except ProtocolError as exc:
        report.problems.extend(exc.problems)
        return report
    report.loaded = loaded
    report.problems.extend(loaded.warnings)
    try:
        schedule = build_schedule(loaded, "1", "1")
    except ProtocolError as exc:
        report.problems.extend(exc.problems)
        return report
    trials = schedule.trials
    practice = sum(t.part == "practice" for t in trials)
    report.facts.append(
        f"{len(trials)} trials per session ({practice} practice, {len(trials) - practice} main)"
    )
    return report
