"""What `trialdeck check` says when a protocol cannot support the physiology it configures.

Three warnings (never errors: the session can run, a measure will be flagged):

* ``physio-baseline-too-long``: the pupil baseline reaches back before the shortest fixation;
* ``physio-period-too-short``: a rest (or a break's minimum) is shorter than an HRV measure's
  minimum window (:data:`runner.physio.cardiac.MIN_WINDOW_S`);
* ``physio-few-epochs``: a condition has fewer main trials than
  ``physio.eeg.min_epochs_per_condition``.

Only a protocol with a ``physio:`` section is checked: without one, no measure is configured.
"""

from __future__ import annotations

from collections import Counter
from typing import TYPE_CHECKING

from runner.physio.config import PhysioConfig

if TYPE_CHECKING:
    from runner.protocol.model import Protocol
    from runner.protocol.schedule import Schedule

__all__ = ["Finding", "physio_findings"]

Loc = tuple[str | int, ...]
Finding = tuple[Loc, str, str]  # (where in the protocol, message, problem code)
#: HRV measures in the order a message names them, with their names in messages.
HRV_MEASURES = (("rmssd", "RMSSD"), ("sdnn", "SDNN"), ("hf", "HF power"), ("lf", "LF power"))


def _finding(loc: Loc, message: str, *, code: str) -> Finding:
    return (loc, message, code)


def _baseline(model: Protocol, config: PhysioConfig) -> list[Finding]:
    base = config.pupil.baseline
    if not config.pupil.enabled or base.duration_s is None:
        return []
    shortest = model.timing.fixation_ms[0] / 1000.0
    if base.start == "stimulus_onset":
        reach = -base.offset_s  # how far before stimulus onset the window starts
        if reach <= shortest:
            return []
        message = (
            f"the pupil baseline starts {reach * 1000:g} ms before stimulus onset, but the "
            f"shortest fixation lasts {shortest * 1000:g} ms: baselines of short fixations "
            "include the screen before; lengthen timing.fixation_ms or shorten "
            "physio.pupil.baseline"
        )
    elif base.start == "fixation_onset":
        if base.offset_s >= 0 and base.offset_s + base.duration_s <= shortest:
            return []
        message = (
            f"the pupil baseline (fixation onset {base.offset_s:+g} s, for {base.duration_s:g} s)"
            f" does not fit in the shortest fixation ({shortest * 1000:g} ms)"
        )
    else:
        return []
    return [_finding(("timing", "fixation_ms"), message, code="physio-baseline-too-long")]


def _short(seconds: float) -> list[str]:
    from runner.physio.cardiac import MIN_WINDOW_S

    return [
        f"{name} ({MIN_WINDOW_S[key]:g} s)"
        for key, name in HRV_MEASURES
        if key in MIN_WINDOW_S and seconds < MIN_WINDOW_S[key]
    ]


def _periods(model: Protocol, config: PhysioConfig) -> list[Finding]:
    if not config.cardiac.enabled:
        return []
    found: list[Finding] = []
    if "rest" in config.cardiac.periods:
        for i, step in enumerate(model.sequence):
            rest = getattr(step, "rest", None)
            if rest is None:
                continue
            missing = _short(rest.seconds)
            if missing:
                found.append(
                    _finding(
                        ("sequence", i, "rest", "seconds"),
                        f"the rest {rest.label!r} lasts {rest.seconds:g} s, shorter than "
                        f"{', '.join(missing)} needs; those HRV measures will be empty (flagged)",
                        code="physio-period-too-short",
                    )
                )
    if "break" in config.cardiac.periods and model.breaks is not None:
        missing = _short(model.breaks.min_s)
        if missing:
            found.append(
                _finding(
                    ("breaks", "min_s"),
                    f"a break may last only {model.breaks.min_s:g} s, shorter than "
                    f"{', '.join(missing)} needs; short breaks get those HRV measures flagged",
                    code="physio-period-too-short",
                )
            )
    return found


def _epochs(model: Protocol, config: PhysioConfig, schedule: Schedule) -> list[Finding]:
    if not config.eeg.enabled:
        return []
    factors = list(model.trials.factors)
    counts: Counter[tuple[str, ...]] = Counter(
        tuple(t.values.get(f, "") for f in factors) for t in schedule.trials if t.part == "main"
    )
    need = config.eeg.min_epochs_per_condition
    few = sorted((n, key) for key, n in counts.items() if n < need)
    if not few:
        return []
    n, key = few[0]
    named = ", ".join(f"{f}={v}" for f, v in zip(factors, key, strict=True)) or "all trials"
    return [
        _finding(
            ("physio", "eeg", "min_epochs_per_condition"),
            f"{len(few)} of {len(counts)} condition(s) have fewer than {need} main trials per "
            f"session (fewest: {named} with {n}); before any epoch is rejected, their EEG "
            "averages rest on too few trials",
            code="physio-few-epochs",
        )
    ]


def physio_findings(model: Protocol, schedule: Schedule) -> list[Finding]:
    """The warnings for ``model``'s physio section (none when it has none)."""
    config = model.physio
    if config is None:
        return []
    return _baseline(model, config) + _periods(model, config) + _epochs(model, config, schedule)
