"""The summary's report.html, written like the results section of a paper.

Split from :mod:`runner.data.summary`, which computes the tables and writes the files. This module
turns those tables into text: who was included, numbered tables with 95% intervals, each figure
with a one-sentence reading generated from its numbers, a methods paragraph with citations, and
the cautions a pilot report owes its reader. :mod:`runner.data.report` lays the page out.

Sections whose inputs are missing (no physiology recorded, too few stimuli for a score) say so in
one sentence instead of showing an empty heading.
"""

from __future__ import annotations

import math
import re
from collections.abc import Collection, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from runner import __version__
from runner.data import report
from runner.data.report import MISSING_CELL, Image, Paragraph, Section, Table
from runner.data.stats import DifficultyResult, mean_ci, wilson_interval

if TYPE_CHECKING:
    from runner.data.summary_models import SummaryModels

OUTCOMES = ("correct", "wrong", "unsure", "unanswered")
# Floor and ceiling: a level where almost nobody (or almost everybody) is correct tells little
# about difficulty. 5% and 95% are common pilot thresholds (common practice, no published source).
FLOOR_SHARE = 0.05
CEILING_SHARE = 0.95
#: Heading over the report when no study name is known, and its kicker otherwise.
DEFAULT_KICKER = "Pilot summary"

# Irregular plurals of the nouns the report counts.
_PLURALS = {"stimulus": "stimuli", "is": "are", "was": "were"}
_MINUS = "\u2212"
# A level between the first and last is called a peak (or low) in a figure's reading when it lies
# beyond both ends by more than this share of the whole range of values.
PEAK_SHARE_OF_RANGE = 0.1


# --------------------------------------------------------------------------------------------
# Words and numbers
# --------------------------------------------------------------------------------------------


def plural(word: str, n: int) -> str:
    """``word`` in the singular for n == 1, else its plural (``trial`` -> ``trials``)."""
    if n == 1:
        return word
    return _PLURALS.get(word, word + "s")


def count(n: int, word: str) -> str:
    """``n`` and the noun in the right number: ``1 trial``, ``2 trials``, ``0 stimuli``."""
    return f"{n} {plural(word, n)}"


def number(value: float, digits: int) -> str:
    """A number at ``digits`` decimals with a true minus sign; the missing marker when NaN."""
    if value is None or not math.isfinite(value):
        return MISSING_CELL
    text = f"{value:.{digits}f}"
    if text.lstrip("-").strip("0.") == "":  # -0.00 shows as 0.00
        text = text.lstrip("-")
    return text.replace("-", _MINUS)


def percent(share: float) -> str:
    """A share as a whole percentage (``0.953`` -> ``95%``)."""
    return MISSING_CELL if not math.isfinite(share) else f"{100 * share:.0f}%"


def interval(low: float, high: float, digits: int, *, scale: float = 1.0) -> str:
    """A 95% interval as ``[low, high]``, at the same precision as its estimate."""
    if not (math.isfinite(low) and math.isfinite(high)):
        return MISSING_CELL
    return f"[{number(low * scale, digits)}, {number(high * scale, digits)}]"


def with_interval(estimate: str, low: float, high: float, digits: int, scale: float = 1.0) -> str:
    """An estimate followed by its interval, or the estimate alone when there is none."""
    if estimate == MISSING_CELL:
        return MISSING_CELL
    shown = interval(low, high, digits, scale=scale)
    return estimate if shown == MISSING_CELL else f"{estimate} {shown}"


def _level_name(factor: str, level: Any) -> str:
    return f"{factor} {level}"


@dataclass(frozen=True)
class _Point:
    label: str
    value: float
    shown: str


def trend_sentence(
    subject: str,
    points: Sequence[tuple[str, float, str]],
    *,
    suffix: str = "",
    ordered: bool = True,
) -> str:
    """One sentence on how a quantity changes over ordered levels, from the numbers shown.

    ``points`` are ``(level label, value, value as shown)``; levels without a value are skipped.
    The sentence compares the first and last level and names a peak or trough in between when
    it differs from both ends as shown: "Accuracy fell from 95% at nodes 20 to 40% at nodes 140."
    Levels that have no order (``ordered=False``) get the highest and the lowest instead.
    """
    pts = [_Point(lbl, v, s) for lbl, v, s in points if v is not None and math.isfinite(v)]
    if not pts:
        return ""
    tail = f" {suffix}" if suffix else ""
    if len(pts) == 1:
        return f"{subject} was {pts[0].shown} at {pts[0].label}{tail}."
    if not ordered:
        # Levels without an order: name the highest and lowest, never "rose" or "fell".
        top = max(pts, key=lambda p: p.value)
        low = min(pts, key=lambda p: p.value)
        if top.shown == low.shown:
            return f"{subject} was {top.shown} at every level{tail}."
        return (
            f"{subject} was highest at {top.label} ({top.shown}) and lowest at {low.label} "
            f"({low.shown}){tail}."
        )
    first, last = pts[0], pts[-1]
    if first.shown == last.shown:
        core = f"{subject} was {first.shown} at both {first.label} and {last.label}"
    else:
        verb = "rose" if last.value > first.value else "fell"
        core = (
            f"{subject} {verb} from {first.shown} at {first.label} to {last.shown} at {last.label}"
        )
    inner = pts[1:-1]
    extras = []
    if inner:
        # A level in between is named when it lies beyond both ends by more than a tenth of the
        # whole range, so that a wobble does not read as a peak.
        values = [p.value for p in pts]
        margin = PEAK_SHARE_OF_RANGE * (max(values) - min(values))
        top = max(inner, key=lambda p: p.value)
        low = min(inner, key=lambda p: p.value)
        if top.value - max(first.value, last.value) > margin and top.shown not in (
            first.shown,
            last.shown,
        ):
            extras.append(f"a peak of {top.shown} at {top.label}")
        if min(first.value, last.value) - low.value > margin and low.shown not in (
            first.shown,
            last.shown,
        ):
            extras.append(f"a low of {low.shown} at {low.label}")
    if extras:
        core += ", with " + " and ".join(extras)
    return core + tail + "."


# --------------------------------------------------------------------------------------------
# Tables
# --------------------------------------------------------------------------------------------

TABLE_NOTE = (
    "Shares are over scored trials. Brackets: 95% intervals (Wilson score interval for shares; "
    "t interval of the mean over trials for response times and ratings). RT = response time of "
    f"trials answered with a number. {MISSING_CELL} = no data."
)


def _rating_ci(row: pd.Series, rating_points: int) -> tuple[float, float, float]:
    counts = [int(row.get(f"rating_{k}", 0) or 0) for k in range(1, rating_points + 1)]
    values = np.repeat(np.arange(1, rating_points + 1, dtype=float), counts)
    return mean_ci(values)


def display_levels(table: pd.DataFrame, by: str, rating_points: int) -> pd.DataFrame:
    """A compact view of a level or participant table for the report (counts stay in the CSV)."""
    view = pd.DataFrame({by: table[by].astype(str)})
    if "n_sessions" in table.columns and (table["n_sessions"] != 1).any():
        view["sessions"] = table["n_sessions"]
    view["trials"] = table["n_trials"]
    correct = []
    for n_ok, n_scored, share in zip(
        table["n_correct"], table["n_scored"], table["share_correct"], strict=True
    ):
        low, high = wilson_interval(int(n_ok), int(n_scored))
        correct.append(with_interval(number(100 * share, 0), low, high, 0, scale=100))
    view["correct, %\n[95% CI]"] = correct
    for name in OUTCOMES[1:]:
        view[f"{name},\n%"] = table[f"share_{name}"].map(lambda v: number(100 * v, 0))
    view["RT mean, s\n[95% CI]"] = [
        with_interval(number(m / 1000, 2), lo / 1000, hi / 1000, 2)
        for m, lo, hi in zip(
            table["rt_mean_ms"], table["rt_ci_low_ms"], table["rt_ci_high_ms"], strict=True
        )
    ]
    view["RT median,\ns"] = [number(v / 1000, 2) for v in table["rt_median_ms"]]
    ratings = []
    for _, row in table.iterrows():
        mean, low, high = _rating_ci(row, rating_points)
        ratings.append(with_interval(number(mean, 1), low, high, 1))
    view["rating\n[95% CI]"] = ratings
    return view


# --------------------------------------------------------------------------------------------
# Citations
# --------------------------------------------------------------------------------------------

#: Full references, keyed by the short citation the text uses.
REFERENCES = {
    "Harman, 1976": "Harman, H. H. (1976). Modern factor analysis (3rd ed.). University of "
    "Chicago Press.",
    "Student, 1908": "Student. (1908). The probable error of a mean. Biometrika, 6(1), 1-25.",
    "Wilson, 1927": "Wilson, E. B. (1927). Probable inference, the law of succession, and "
    "statistical inference. Journal of the American Statistical Association, 22(158), 209-212.",
    "McDonald, 1999": "McDonald, R. P. (1999). Test theory: A unified treatment. Lawrence Erlbaum.",
    "Hurvich & Tsai, 1989": "Hurvich, C. M., & Tsai, C.-L. (1989). Regression and time series "
    "model selection in small samples. Biometrika, 76(2), 297-307.",
    "Simonsohn, 2018": "Simonsohn, U. (2018). Two lines: A valid alternative to the invalid "
    "testing of U-shaped relationships with quadratic regressions. Advances in Methods and "
    "Practices in Psychological Science, 1(4), 538-555.",
    "Bolker et al., 2009": "Bolker, B. M., Brooks, M. E., Clark, C. J., Geange, S. W., Poulsen, "
    "J. R., Stevens, M. H. H., & White, J.-S. S. (2009). Generalized linear mixed models: A "
    "practical guide for ecology and evolution. Trends in Ecology & Evolution, 24(3), 127-135.",
    "Burnham & Anderson, 2002": "Burnham, K. P., & Anderson, D. R. (2002). Model selection and "
    "multimodel inference: A practical information-theoretic approach (2nd ed.). Springer.",
    "MacKinnon & White, 1985": "MacKinnon, J. G., & White, H. (1985). Some "
    "heteroskedasticity-consistent covariance matrix estimators with improved finite sample "
    "properties. Journal of Econometrics, 29(3), 305-325.",
    "Seabold & Perktold, 2010": "Seabold, S., & Perktold, J. (2010). Statsmodels: Econometric "
    "and statistical modeling with Python. Proceedings of the 9th Python in Science Conference, "
    "92-96.",
    "Mathôt et al., 2018": "Mathôt, S., Fabius, J., Van Heusden, E., & Van der Stigchel, S. "
    "(2018). Safe and sensible preprocessing and baseline correction of pupil-size data. "
    "Behavior Research Methods, 50(1), 94-106.",
    "Task Force, 1996": "Task Force of the European Society of Cardiology and the North American "
    "Society of Pacing and Electrophysiology. (1996). Heart rate variability: Standards of "
    "measurement, physiological interpretation, and clinical use. Circulation, 93(5), "
    "1043-1065.",
}


class _Citations:
    """Collects the works a report cites, so only those are listed under References."""

    def __init__(self) -> None:
        self.keys: list[str] = []

    def __call__(self, *keys: str) -> str:
        for key in keys:
            if key not in REFERENCES:
                raise KeyError(key)
            if key not in self.keys:
                self.keys.append(key)
        return "(" + "; ".join(keys) + ")"

    def narrative(self, key: str) -> str:
        """A citation as part of a sentence: ``Mathôt et al. (2018)``."""
        self(key)
        authors, _, year = key.rpartition(", ")
        return f"{authors} ({year})"

    def references(self) -> list[str]:
        return sorted((REFERENCES[k] for k in self.keys), key=str.lower)


# --------------------------------------------------------------------------------------------
# The report
# --------------------------------------------------------------------------------------------


def _study_names(facts: dict[str, Any], data: pd.DataFrame) -> list[str]:
    names = [str(v) for v in facts.get("studies") or [] if v]
    if not names:
        names = [str(s.get("study")) for s in facts.get("sessions", []) if s.get("study")]
    if not names and "study" in data.columns:
        names = [str(v) for v in data["study"].dropna()]
    return sorted(set(names))


def _dates(facts: dict[str, Any]) -> tuple[str, str] | None:
    days = sorted(
        str(s.get("started_wall"))[:10]
        for s in facts.get("sessions", [])
        if s.get("started_wall") and len(str(s.get("started_wall"))) >= 10
    )
    return (days[0], days[-1]) if days else None


_RULE_NAMES = {
    "practice_accuracy_below": "practice accuracy below",
    "timed_out_share_above": "share of timed-out trials above",
    "unsure_share_above": "share of unsure answers above",
    "physio_valid_share_below": "share of valid physiology below",
}


def _rule_name(rule: str) -> str:
    return _RULE_NAMES.get(rule, rule.replace("_", " "))


def _share_text(value: Any) -> str:
    number_ = pd.to_numeric(pd.Series([value]), errors="coerce").iloc[0]
    return MISSING_CELL if pd.isna(number_) else f"{100 * float(number_):.0f}%"


def _exclusion_sentence(
    facts: dict[str, Any], exclusions: pd.DataFrame | None, *, tabled: bool = False
) -> str:
    excluded = facts.get("excluded") or []
    if exclusions is None and not excluded:
        return (
            "The protocol declares no exclusion rules, so no participant or session was excluded."
        )
    rules = []
    if exclusions is not None and {"rule", "threshold"} <= set(exclusions.columns):
        first = exclusions.drop_duplicates("rule")
        rules = [
            f"{_rule_name(str(r))} {_share_text(t)}"
            for r, t in zip(first["rule"], first["threshold"], strict=True)
        ]
    declared = (
        f"The protocol's pre-declared exclusion rules ({'; '.join(rules)})"
        if rules
        else "The protocol's pre-declared exclusion rules"
    )
    if not excluded:
        return f"{declared} excluded no session."
    n_people = len({str(e["participant"]) for e in excluded})
    return (
        f"{declared} excluded {count(len(excluded), 'session')} of "
        f"{count(n_people, 'participant')}, left out of everything below"
        + (" (Table 1)." if tabled else ".")
    )


def _exclusions_table(facts: dict[str, Any], exclusions: pd.DataFrame | None) -> Table | None:
    excluded = facts.get("excluded") or []
    if not excluded or exclusions is None or "excluded" not in exclusions.columns:
        return None
    met = exclusions[pd.to_numeric(exclusions["excluded"], errors="coerce").fillna(0) != 0]
    if met.empty:
        return None

    return Table(
        "Sessions excluded by the protocol's pre-declared rules.",
        pd.DataFrame(
            {
                "participant": met["participant"].astype(str),
                "session": met["session"].astype(str),
                "rule": [_rule_name(str(r)) for r in met["rule"]],
                "value": [_share_text(v) for v in met["value"]],
                "threshold": [_share_text(v) for v in met["threshold"]],
            }
        ),
        note="One row per rule a session met; exclusions.csv lists every rule's value for "
        "every session.",
    )


def _pooling_sentence(facts: dict[str, Any]) -> str:
    pooling = facts.get("pooling") or {}
    if not pooling:
        return ""
    differ = {k: v for k, v in pooling.items() if len(v) > 1}
    if differ:
        return (
            "Sessions that differ were pooled on request: "
            + "; ".join(f"{k} {' and '.join(map(str, v))}" for k, v in differ.items())
            + ". Read the pooled numbers with that in mind."
        )
    speed = (pooling.get("speed") or [""])[0]
    mode = (pooling.get("mode") or [""])[0]
    protocol = (pooling.get("protocol") or [""])[0]
    text = (
        f"All sessions ran at {speed} speed"
        + (f" in {mode} mode" if mode else "")
        + (f" under one protocol ({protocol})" if protocol else "")
        + "."
    )
    if speed and speed != "1x":
        text += (
            f" At {speed} every wait and simulated response time is divided by "
            f"{speed.removesuffix('x')}, so times here are not those of a real session."
        )
    return text


def _participants_section(
    data: pd.DataFrame,
    facts: dict[str, Any],
    *,
    include_practice: bool,
    n_practice: int,
    exclusions: pd.DataFrame | None = None,
) -> Section:
    n_sess, n_people = facts["n_sessions"], facts["n_participants"]
    n_trials = len(data)
    kind = "trial" if include_practice else "main-part trial"
    lead = (
        f"The analysis includes {count(n_trials, kind)} from {count(n_sess, 'session')} of "
        f"{count(n_people, 'participant')}."
    )
    n_pilot = facts["n_pilot"]
    if n_pilot:
        if n_sess == 1:
            which = "The session was"
        elif n_pilot == n_sess:
            which = f"All {n_sess} sessions were"
        else:
            which = f"{n_pilot} of the {n_sess} sessions {plural('was', n_pilot)}"
        lead += (
            f" {which} run by the simulated participant (pilot mode), so "
            f"{'its' if n_pilot == 1 else 'their'} numbers test the "
            "procedure, not people."
        )
    blocks: list[report.Block] = [Paragraph(lead, "lead")]
    who = []
    if include_practice:
        who.append(f"All {count(n_trials, 'trial')} are summarised, practice included.")
    elif n_practice:
        who.append(
            f"{count(n_practice, 'practice trial')} {plural('is', n_practice)} left out "
            "because practice is for learning the task, not for measuring it."
        )
    else:
        who.append("There was no practice part.")
    aborted = facts["n_aborted"]
    who.append(
        "Every session ran to its end."
        if not aborted
        else f"{count(aborted, 'session')} ended early; the trials completed before the end "
        "are included."
    )
    excluded_table = _exclusions_table(facts, exclusions)
    # The exclusions table is the report's first table when there is one.
    who.append(_exclusion_sentence(facts, exclusions, tabled=excluded_table is not None))
    timed = facts["n_timed_out"]
    if timed:
        who.append(f"{count(timed, 'trial')} ({percent(timed / n_trials)}) reached the time limit.")
    blocks.append(Paragraph(" ".join(who)))
    if excluded_table is not None:
        blocks.append(excluded_table)
    pooled = _pooling_sentence(facts)
    if pooled:
        blocks.append(Paragraph(pooled))
    dur, tps = facts["duration_s"], facts["trials_per_session"]
    one = n_sess == 1
    length = "The session lasted " if one else "Sessions lasted "
    if not math.isfinite(dur["median"]):
        length += "an unrecorded time"
    elif dur["min"] == dur["max"] or one:
        length += f"{number(dur['median'] / 60, 1)} min" + ("" if one else " each")
    else:
        length += (
            f"{number(dur['min'] / 60, 1)} to {number(dur['max'] / 60, 1)} min (median "
            f"{number(dur['median'] / 60, 1)} min)"
        )
    if not math.isfinite(tps["median"]):
        length += "."
    elif tps["min"] == tps["max"] or one:
        length += f" and held {count(int(tps['median']), 'completed trial')}" + (
            "." if one else " each."
        )
    else:
        length += (
            f" and held {tps['min']:.0f} to {tps['max']:.0f} completed trials (median "
            f"{tps['median']:.0f})."
        )
    sim = facts.get("sim_rt_error_ms")
    if sim and sim.get("n"):
        length += (
            f" The simulated participant's measured response times differed from the intended "
            f"ones by a median of {number(sim['median'], 2)} ms (largest "
            f"{number(sim['max_abs'], 2)} ms) over {count(sim['n'], 'answered trial')}."
        )
    blocks.append(Paragraph(length))
    return Section("Participants and data", blocks=blocks, anchor="participants")


def _factor_section(
    factor: str,
    table: pd.DataFrame,
    figs: Sequence[Path],
    *,
    rating_points: int,
    facts: dict[str, Any],
    ordered: bool = True,
) -> Section:
    levels = list(table[factor])
    names = [_level_name(factor, lvl) for lvl in levels]
    acc = trend_sentence(
        "Accuracy",
        [(n, s, percent(s)) for n, s in zip(names, table["share_correct"], strict=True)],
        ordered=ordered,
    )
    rt = trend_sentence(
        "Mean response time",
        [
            (n, m / 1000, number(m / 1000, 2) + " s")
            for n, m in zip(names, table["rt_mean_ms"], strict=True)
        ],
        ordered=ordered,
    )
    rating = trend_sentence(
        "The mean rating",
        [(n, m, number(m, 1)) for n, m in zip(names, table["rating_mean"], strict=True)],
        suffix=f"on the 1 to {rating_points} scale",
        ordered=ordered,
    )
    readings = [acc, rt, rating]
    captions = [
        f"Answers per {factor} level, as shares of scored trials.",
        f"Response time per {factor} level: mean with 95% t interval (bars) and median (open "
        "circle).",
        f"Ratings per {factor} level: number of trials at each point of the scale, shaded by "
        "share.",
    ]
    alts = [
        f"Stacked bars of correct, wrong, unsure and unanswered shares for each {factor} level.",
        f"Mean response time with 95% interval and median for each {factor} level.",
        f"Grid of rating counts, one row per {factor} level, one column per scale point.",
    ]
    intro = [s for s in (acc, rt) if s]
    limits = [
        f"{_level_name(i['factor'], i['level'])} is at {kind} ({percent(i['share_correct'])} "
        f"correct of {count(i['n_scored'], 'scored trial')})"
        for kind in ("floor", "ceiling")
        for i in facts[kind]
        if i["factor"] == factor
    ]
    if limits:
        intro.append(_upper_first("; ".join(limits)) + ".")
    blocks: list[report.Block] = [Paragraph(" ".join(intro))] if intro else []
    blocks.append(
        Table(
            f"Answers, response times and ratings by {factor}.",
            display_levels(table, factor, rating_points),
            note=TABLE_NOTE,
        )
    )
    for path, caption, alt, reading in zip(figs[:3], captions, alts, readings, strict=False):
        blocks.append(Image(path.read_bytes(), alt=alt, caption=caption, reading=reading))
    return Section(f"By {factor}", blocks=blocks)


def _difficulty_figure(
    factor: str,
    levels: Sequence[Any],
    path: Path,
    difficulty: DifficultyResult,
    ordered: bool = True,
) -> Image:
    scored = difficulty.scores.dropna(subset=["score"])
    means = scored.groupby(factor, sort=False)["score"].mean()
    points = []
    for lvl in levels:
        mean = float(means.get(lvl, math.nan))
        points.append((_level_name(factor, lvl), mean, number(mean, 2)))
    return Image(
        path.read_bytes(),
        alt=f"Difficulty score of each stimulus, grouped by {factor} level.",
        caption=f"Difficulty score of each stimulus by {factor} level; the horizontal line "
        "marks the level mean.",
        reading=trend_sentence("The mean difficulty score", points, ordered=ordered),
    )


def _floor_ceiling_section(facts: dict[str, Any]) -> Section:
    def limits(kind: str) -> str:
        items = facts[kind]
        if not items:
            return "none"
        return "; ".join(
            f"{_level_name(i['factor'], i['level'])} ({percent(i['share_correct'])} of "
            f"{count(i['n_scored'], 'scored trial')})"
            for i in items
        )

    floor = f"floor (under {100 * FLOOR_SHARE:.0f}% correct)"
    ceiling = f"ceiling (over {100 * CEILING_SHARE:.0f}% correct)"
    if not facts["floor"] and not facts["ceiling"]:
        text = f"No level was at {floor} or at {ceiling}."
    else:
        text = (
            f"Levels at {floor}: {limits('floor')}. Levels at {ceiling}: {limits('ceiling')}. "
            "A level at floor or ceiling tells little about difficulty; consider changing its "
            "stimuli before the main study."
        )
    return Section("Floor and ceiling", blocks=[Paragraph(text)])


_VARIABLE_NAMES = {
    "error_share": "error share",
    "rt_ms": "mean response time",
    "rating": "mean rating",
}


def _difficulty_section(
    difficulty: DifficultyResult,
    cite: _Citations,
    figures: Sequence[tuple[str, Sequence[Any], Path]] = (),
    ordered: Collection[str] | None = None,
) -> Section:
    if not difficulty.available:
        return Section("Difficulty score", blocks=[Paragraph(difficulty.reason)])
    load = difficulty.loadings
    scored = difficulty.scores.dropna(subset=["score"])
    strongest = load.abs().idxmax()
    text = (
        f"One difficulty score was computed for each of {count(len(scored), 'stimulus')}. "
        f"The {_VARIABLE_NAMES.get(str(strongest), str(strongest))} loaded most strongly on it "
        f"({number(float(load[strongest]), 2)})."
    )
    if (load < 0).any():
        text += " Some loadings are negative, so these measures disagree; read the score with care."
    blocks: list[report.Block] = [Paragraph(text)]
    blocks.extend(_score_method_blocks(difficulty, cite))
    blocks.extend(Paragraph(note) for note in difficulty.notes)
    blocks.append(
        Table(
            "Loadings of the per-stimulus measures on the difficulty factor.",
            pd.DataFrame(
                {
                    "measure": [_VARIABLE_NAMES.get(str(k), str(k)) for k in load.index],
                    "loading": [number(float(v), 2) for v in load],
                    "communality": [
                        number(float(difficulty.communalities.get(k, math.nan)), 2)
                        for k in load.index
                    ],
                }
            ),
            note="Principal axis factoring of the z-standardised measures, one factor "
            + cite("Harman, 1976")
            + ".",
        )
    )
    for factor, levels, path in figures:
        blocks.append(
            _difficulty_figure(
                factor, levels, path, difficulty, ordered=ordered is None or factor in ordered
            )
        )
    hardest = scored.sort_values("score", ascending=False).head(5)
    blocks.append(
        Table(
            f"The {count(len(hardest), 'hardest stimulus') if len(hardest) == 1 else str(len(hardest)) + ' hardest'} "
            f"of {count(len(scored), 'stimulus')}.",
            pd.DataFrame(
                {
                    "stimulus": hardest.index.astype(str),
                    "score": [number(float(v), 2) for v in hardest["score"]],
                    "error share": hardest["error_share"].map(percent),
                    "RT mean, s": [number(float(v) / 1000, 2) for v in hardest["rt_ms"]],
                    "rating mean": [number(float(v), 1) for v in hardest["rating"]],
                    "trials": hardest["n_trials"],
                }
            ),
            note="Higher scores mean harder stimuli (z units).",
        )
    )
    return Section("Difficulty score", blocks=blocks, anchor="difficulty")


_MEASURE_NAMES = {"rt_ms": "response time", "accuracy": "accuracy"}
#: Physiological measures whose names hold these words cite the matching method paper.
PUPIL_WORDS = ("pupil",)
HRV_WORDS = ("hrv", "rmssd", "sdnn", "pnn50", "lf_hf")


def p_value(p: float) -> str:
    """A p value as journals print it: ``p < .001`` or ``p = .032``."""
    if p is None or not math.isfinite(p):
        return f"p = {MISSING_CELL}"
    if p < 0.001:
        return "p < .001"
    return "p = " + f"{p:.3f}".lstrip("0")


def _bare_p(p: float) -> str:
    return p_value(p).removeprefix("p ").removeprefix("= ")


def significant(value: float, digits: int = 3) -> str:
    """A number with ``digits`` significant digits but whole units never rounded away
    (``4722.3`` -> ``4722``, ``0.06813`` -> ``0.0681``); an exponent only beyond a million or
    below 0.0001."""
    if value is None or not math.isfinite(value):
        return MISSING_CELL
    if value == 0:
        return "0"
    exponent = math.floor(math.log10(abs(value)))
    if -4 <= exponent < 6:
        return number(value, max(0, digits - 1 - exponent))
    return f"{value:.{digits - 1}e}".replace("-", _MINUS)


# Words in physiological measure names that read better spelled out or in capitals.
_MEASURE_WORDS = {"hr": "heart rate", "rmssd": "RMSSD", "sdnn": "SDNN", "hrv": "HRV", "eda": "EDA"}


def _upper_first(text: str) -> str:
    return text[:1].upper() + text[1:]


def _measure_name(name: str, unit: str = "") -> str:
    """A measure's name for text: ``hr_bpm`` (unit bpm) -> ``heart rate``."""
    if name in _MEASURE_NAMES:
        return _MEASURE_NAMES[name]
    words = name.split("_")
    if unit and len(words) > 1 and words[-1].lower() == unit.lower():
        words = words[:-1]
    return " ".join(_MEASURE_WORDS.get(w.lower(), w) for w in words)


def _physio_measures(models: SummaryModels) -> list[str]:
    return [m for m in models.load.results if m not in _MEASURE_NAMES]


def _score_method_blocks(d: Any, cite: _Citations) -> list[report.Block]:
    """Method, scaling and reliability of a robust difficulty score, when the summary has one."""
    method = getattr(d, "method", "")
    if not method:
        return []
    if method == "principal_axis":
        text = (
            "The score is the regression-method factor score of the principal-axis solution "
            + cite("Harman, 1976")
            + "."
        )
    else:
        text = (
            "The principal-axis solution was improper (a communality of 1 or more, a Heywood "
            "case), so the score is the unit-weighted mean of the z-standardised measures "
            "instead."
        )
    text += " Every standard deviation is the sample one (divisor n \u2212 1)."
    omega = getattr(d, "omega_total", None)
    if omega is not None and math.isfinite(omega):
        text += (
            f" The reliability of the three measures as one score, McDonald's omega total, was "
            f"{number(omega, 2)} " + cite("McDonald, 1999") + "."
        )
    return [Paragraph(text)]


def _best_model_figure(models: SummaryModels, path: Path) -> Image:
    dr = models.drivers
    best = dr.models.iloc[0]
    pred = dr.predictions
    reading = ""
    if {"score", "loo_predicted"} <= set(pred.columns):
        pairs = pred[["score", "loo_predicted"]].astype(float).dropna()
        if len(pairs) >= 3 and pairs.std().gt(0).all():
            r = float(np.corrcoef(pairs["score"], pairs["loo_predicted"])[0, 1])
            reading = (
                f"The scores of the {count(len(pairs), 'stimulus')} correlated r = "
                f"{number(r, 2)} with their prediction by the model fitted without them "
                "(leave-one-out RMSE "
                f"{number(float(best['cv_rmse']), 2)} score units)."
            )
    return Image(
        path.read_bytes(),
        alt="Difficulty score of each stimulus against the best model's leave-one-out "
        "prediction, with the line of perfect prediction.",
        caption=f"Difficulty score against the leave-one-out prediction of the best model "
        f"({best['predictors']}); points on the grey line are predicted exactly.",
        reading=reading,
    )


def _drivers_section(
    models: SummaryModels, cite: _Citations, figures: Mapping[str, Path] | None = None
) -> Section:
    dr = models.drivers
    title = "What drives difficulty"
    if not dr.available:
        return Section(title, blocks=[Paragraph(dr.reason or "No model of the score was fitted.")])
    table = dr.models
    best = table.iloc[0]
    n_models = len(table)
    on = (
        f"the stimulus feature {dr.features[0]}"
        if len(dr.features) == 1
        else f"one to three of the stimulus features ({', '.join(dr.features)})"
    )
    fit = (
        f"adjusted R\u00b2 = {number(float(best['adj_r2']), 2)}, leave-one-out RMSE "
        f"{number(float(best['cv_rmse']), 2)} score units"
    )
    if n_models == 1:
        lead = (
            f"One linear model of the difficulty score on {on} was fitted over "
            f"{count(dr.n_stimuli, 'stimulus')} ({fit})."
        )
    else:
        lead = (
            f"Of {n_models} linear models of the difficulty score on {on} over "
            f"{count(dr.n_stimuli, 'stimulus')}, the best by AICc used {best['predictors']} "
            f"({fit})."
        )
    close = table[(table["delta_aicc"] <= 2.0) & (table["rank"] != best["rank"])]
    if len(close):
        lead += (
            f" {count(len(close), 'other model')} came within 2 AICc of it: "
            + "; ".join(str(v) for v in close["predictors"].head(3))
            + ("; ..." if len(close) > 3 else "")
            + "."
        )
    blocks: list[report.Block] = [Paragraph(lead)]
    top = table.head(10)
    blocks.append(
        Table(
            f"The {'best model' if len(top) == 1 else f'{len(top)} best models'} of the "
            "difficulty score, ranked by AICc.",
            pd.DataFrame(
                {
                    "rank": top["rank"].astype(int),
                    "features": top["predictors"].astype(str),
                    "adj. R\u00b2": [number(float(v), 2) for v in top["adj_r2"]],
                    "AICc": [number(float(v), 1) for v in top["aicc"]],
                    "\u0394AICc": [number(float(v), 1) for v in top["delta_aicc"]],
                    "weight": [number(float(v), 2) for v in top["weight_aicc"]],
                    "LOO RMSE": [number(float(v), 2) for v in top["cv_rmse"]],
                }
            ),
            note="Ordinary least squares; AICc = small-sample Akaike information criterion; "
            "weight = Akaike weight; LOO RMSE = leave-one-out cross-validated root mean square "
            "error, in score units.",
        )
    )
    from runner.data.summary_models import BEST_MODEL

    if figures and BEST_MODEL in figures:
        blocks.append(_best_model_figure(models, figures[BEST_MODEL]))
    blocks.append(Paragraph(dr.caution, "note"))
    if "Burnham" in dr.caution:
        cite("Burnham & Anderson, 2002")
    blocks.extend(Paragraph(n) for n in dr.notes)
    mixed = dr.mixed
    if mixed.available:
        coef = mixed.coefficients
        terms = coef[coef["term"].astype(str) != "const"]
        blocks.append(
            Paragraph(
                f"A mixed model of log response time over {count(mixed.n_trials, 'answered trial')}"
                f", with a random intercept for each of {count(mixed.n_participants, 'participant')}"
                ", gave "
                + "; ".join(
                    f"{t} {significant(float(e))} [{significant(float(lo))}, "
                    f"{significant(float(hi))}] per SD of the feature ({p_value(float(p))})"
                    for t, e, lo, hi, p in zip(
                        terms["term"],
                        terms["estimate"],
                        terms["ci_low"],
                        terms["ci_high"],
                        terms["p"],
                        strict=True,
                    )
                )
                + "."
                + (f" Caution: {mixed.note}." if mixed.note else "")
            )
        )
    else:
        reason = re.sub(
            r"(\d+) participant\(s\)",
            lambda m: count(int(m.group(1)), "participant"),
            str(mixed.reason).removeprefix("Not fitted: "),
        )
        if "Bolker" in reason:
            cite("Bolker et al., 2009")
        blocks.append(
            Paragraph(f"No mixed model with a participant random effect was fitted: {reason}")
        )
    return Section(title, blocks=blocks, anchor="drivers")


def _slope_words(line: Any, name: str, unit: str) -> str:
    verb = "rose" if line.slope > 0 else "fell"
    per = f" {unit}" if unit and unit != "share correct" else ""
    return f"{name} {verb} (b = {significant(line.slope)}{per} per score unit, {p_value(line.p)})"


def load_reading(name: str, unit: str, res: Any) -> str:
    """One sentence on a two-lines test: the break, both slopes and what they show."""
    if not res.available or res.line1 is None or res.line2 is None:
        return res.reason or f"The two-lines test could not be run for {name}."
    shape = "an inverted U" if res.shape == "inverted_u" else "a U"
    verdict = (
        f"so the relation is {shape}"
        if res.significant
        else f"so {shape} is not shown (that needs both slopes significant with opposite signs)"
    )
    below = _slope_words(res.line1, _upper_first(name), unit)
    above = _slope_words(res.line2, "it", unit)
    return (
        f"{below} below the break at a difficulty score of {number(res.break_point, 2)} and "
        f"{above} above it, {verdict}."
    )


def _load_section(models: SummaryModels, figures: Mapping[str, Path], cite: _Citations) -> Section:
    title = "Where load gives way"
    ld = models.load
    if not ld.available:
        return Section(title, blocks=[Paragraph(ld.reason)])
    physio = _physio_measures(models)
    lead = (
        "Each measure was related to the difficulty score of the trial's stimulus: its mean in "
        "bins of the score with 95% intervals, and the two-lines test for an inverted U "
        + cite("Simonsohn, 2018")
        + "."
    )
    if not physio:
        lead += (
            " No physiological measures were given, so only response time and accuracy are shown."
        )
    blocks: list[report.Block] = [Paragraph(lead)]
    blocks.extend(Paragraph(n) for n in ld.notes)
    rows = []
    for name, res in ld.results.items():
        unit = ld.units.get(name, "")
        shown = _measure_name(name, unit)
        rows.append(
            {
                "measure": shown + (f", {unit}" if unit else ""),
                "n": res.n,
                "break": number(res.break_point, 2),
                "slope below (p)": (
                    f"{significant(res.line1.slope)} ({_bare_p(res.line1.p)})"
                    if res.line1 is not None
                    else MISSING_CELL
                ),
                "slope above (p)": (
                    f"{significant(res.line2.slope)} ({_bare_p(res.line2.p)})"
                    if res.line2 is not None
                    else MISSING_CELL
                ),
                "shape shown": (
                    ("inverted U" if res.shape == "inverted_u" else "U")
                    if res.available and res.significant
                    else "none"
                    if res.available
                    else MISSING_CELL
                ),
            }
        )
    blocks.append(
        Table(
            "Two-lines tests of each measure against the difficulty score.",
            pd.DataFrame(rows),
            note="Break = difficulty score where the two lines meet; slopes per score unit "
            "with heteroskedasticity-robust (HC3) p values. A U or inverted U is shown only when "
            "both slopes are significant with opposite signs.",
        )
    )
    for name, res in ld.results.items():
        if name not in figures:
            continue
        shown = _measure_name(name, ld.units.get(name, ""))
        blocks.append(
            Image(
                figures[name].read_bytes(),
                alt=f"Mean {shown} in bins of the difficulty score with 95% intervals, a "
                "smooth fit and the two lines of the test.",
                caption=f"{_upper_first(shown)} against the difficulty score: bin means with 95% "
                "intervals, a flexible fit, and the two lines meeting at the break.",
                reading=load_reading(shown, ld.units.get(name, ""), res),
            )
        )
    return Section(title, blocks=blocks, anchor="load")


def _methods_section(
    difficulty: DifficultyResult,
    *,
    include_practice: bool,
    cite: _Citations,
    models: SummaryModels | None = None,
) -> Section:
    parts = [
        "Outcome shares are counted over scored trials (correct, wrong, unsure, unanswered); "
        "trials without an expected answer are counted apart."
        + ("" if include_practice else " Practice trials are not analysed."),
        "The 95% interval of a share is the Wilson score interval " + cite("Wilson, 1927") + ".",
        "Response times are those of trials answered with a number (correct or wrong). The 95% "
        "interval of a mean response time or rating is the Student t interval "
        + cite("Student, 1908")
        + " over trials pooled across participants; it ignores that trials of one person are "
        "related and is therefore narrower than a by-participant interval.",
    ]
    if difficulty.available:
        parts.append(
            "The difficulty score is the first factor of a principal axis factoring "
            + cite("Harman, 1976")
            + " of three per-stimulus measures (error share, mean response time and mean "
            "rating, each averaged over participants and z-standardised); scores are "
            "regression-method factor scores, signed so that a higher score means a harder "
            "stimulus when all loadings are positive."
        )
    paragraphs = [Paragraph(" ".join(parts))]
    if models is not None:
        more = []
        omega = getattr(models.difficulty, "omega_total", None)
        if omega is not None and math.isfinite(omega):
            more.append(
                "The reliability of the score is McDonald's omega total "
                + cite("McDonald, 1999")
                + " of the one-factor solution."
            )
        if models.drivers.available:
            more.append(
                "Every ordinary least-squares model of the per-stimulus score on one, two or "
                "three stimulus features was fitted with statsmodels "
                + cite("Seabold & Perktold, 2010")
                + " and ranked by the small-sample Akaike information criterion, AICc "
                + cite("Hurvich & Tsai, 1989", "Burnham & Anderson, 2002")
                + ", with adjusted R\u00b2 and leave-one-out cross-validated error beside it."
            )
            if models.drivers.mixed.available:
                more.append(
                    "The best model's features entered a linear mixed model of log response "
                    "time with a random intercept per participant."
                )
        if models.load.available:
            more.append(
                "Where load gives way was tested with the two-lines test "
                + cite("Simonsohn, 2018")
                + ": a flexible fit locates the highest (or lowest) region, the Robin Hood "
                "algorithm sets the break point, and two lines are fitted on either side with "
                "heteroskedasticity-robust HC3 standard errors "
                + cite("MacKinnon & White, 1985")
                + "; a U or inverted U needs both slopes significant with opposite signs."
            )
            physio = _physio_measures(models)
            if any(w in m.lower() for m in physio for w in PUPIL_WORDS):
                more.append(
                    "Pupil size was cleaned of blinks and dropouts and corrected for its "
                    "pre-trial baseline by subtraction, following "
                    + cite.narrative("Mathôt et al., 2018")
                    + "."
                )
            if any(w in m.lower() for m in physio for w in HRV_WORDS):
                more.append(
                    "Heart-rate variability measures follow the definitions of the "
                    + cite.narrative("Task Force, 1996")
                    + "."
                )
            if physio:
                more.append(
                    "The physiological measures ("
                    + ", ".join(physio)
                    + ") are per-trial values from the recordings, joined to the trials by "
                    "participant, session and trial."
                )
        if more:
            paragraphs.append(Paragraph(" ".join(more)))
    return Section("Methods", blocks=paragraphs, anchor="methods")


def _cautions_section(facts: dict[str, Any]) -> Section:
    notes = [
        "This is a pilot summary: intervals describe these trials, not a population, and the "
        "numbers guide the design of the main study rather than answer its questions.",
        "Physiological measures, wherever this tool reports them, are research measures of "
        "responses to the task; they are not diagnoses and say nothing about anyone's health.",
        "Long sessions tire participants: check the session lengths above against the breaks "
        "you planned and the duration your ethics board approved. Participants may stop at any "
        "time.",
    ]
    if facts["n_pilot"]:
        notes.insert(
            1,
            "Sessions run by the simulated participant produce answers from a model, so their "
            "accuracy and response times say how the procedure runs, not how hard the task is "
            "for people.",
        )
    return Section(
        "Interpretation and cautions",
        blocks=[Paragraph(n, "note") for n in notes],
        anchor="cautions",
    )


def build_report(
    data: pd.DataFrame,
    *,
    title: str,
    facts: dict[str, Any],
    level_tables: dict[str, pd.DataFrame],
    people: pd.DataFrame,
    difficulty: DifficultyResult,
    figures: dict[str, list[Path]],
    include_practice: bool,
    n_practice: int,
    rating_points: int,
    models: SummaryModels | None = None,
    model_figures: Mapping[str, Path] | None = None,
    extra_sections: Sequence[Section] = (),
    exclusions: pd.DataFrame | None = None,
    level_order: Mapping[str, Sequence[Any]] | None = None,
) -> str:
    """The report.html text of a summary (see :mod:`runner.data.summary` for the inputs).

    The heading is the study name the sessions' protocols give, with ``title`` above it; when
    no study is named, ``title`` is the heading.
    """
    cite = _Citations()
    studies = _study_names(facts, data)
    heading = " / ".join(studies) if studies else title
    # The summary's default title may already name the study ("Pilot summary: courier-hops").
    kicker = title.removesuffix(": " + ", ".join(studies)) if studies else ""
    by = [
        count(facts["n_participants"], "participant"),
        count(facts["n_sessions"], "session"),
        count(len(data), "trial" if include_practice else "main-part trial"),
    ]
    dates = _dates(facts)
    if dates:
        by.append(
            f"recorded {dates[0]}" if dates[0] == dates[1] else f"recorded {dates[0]} to {dates[1]}"
        )
    if facts["n_pilot"]:
        by.append(
            "simulated participant"
            if facts["n_pilot"] == facts["n_sessions"]
            else f"{count(facts['n_pilot'], 'simulated session')}"
        )

    # Numbers and levels given an order have one; other levels are only sorted for display.
    ordered = {
        factor
        for factor, table in level_tables.items()
        if pd.api.types.is_numeric_dtype(table[factor]) or factor in (level_order or {})
    }
    results = [
        _factor_section(
            factor,
            table,
            figures.get(factor, []),
            rating_points=rating_points,
            facts=facts,
            ordered=factor in ordered,
        )
        for factor, table in level_tables.items()
    ]
    results.append(_floor_ceiling_section(facts))
    difficulty_figures = [
        (factor, list(table[factor]), figures[factor][3])
        for factor, table in level_tables.items()
        if len(figures.get(factor, [])) > 3 and factor in difficulty.scores.columns
    ]
    results.append(_difficulty_section(difficulty, cite, difficulty_figures, ordered))
    if models is not None:
        results.append(_drivers_section(models, cite, model_figures))
        results.append(_load_section(models, model_figures or {}, cite))
    results.extend(extra_sections)
    sections = [
        _participants_section(
            data,
            facts,
            include_practice=include_practice,
            n_practice=n_practice,
            exclusions=exclusions,
        ),
        Section("Results", subsections=results, anchor="results"),
        _methods_section(difficulty, include_practice=include_practice, cite=cite, models=models),
        _cautions_section(facts),
        Section(
            "Appendix: participants",
            blocks=[
                Table(
                    "Answers, response times and ratings by participant.",
                    display_levels(people, "participant", rating_points),
                    note=TABLE_NOTE,
                )
            ],
            anchor="appendix-participants",
        ),
    ]
    return report.render_report(
        heading,
        sections,
        kicker=kicker,
        byline=" · ".join(by),
        references=cite.references(),
        numbered=True,
        footer=f"Written by trialdeck {__version__} from the session journals. The tables are "
        "also in the CSV files next to this report.",
    )
