"""The summary's report.html text: tables shown in seconds and percent, and the report body.

Split from :mod:`runner.data.summary`, which computes the tables and writes the files.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from runner.data import report
from runner.data.stats import DifficultyResult

OUTCOMES = ("correct", "wrong", "unsure", "unanswered")
# Floor and ceiling: a level where almost nobody (or almost everybody) is correct tells little
# about difficulty. 5% and 95% are common pilot thresholds (common practice, no published source).
FLOOR_SHARE = 0.05
CEILING_SHARE = 0.95


def _seconds(ms: float) -> str:
    return "–" if not math.isfinite(ms) else f"{ms / 1000:.2f}"


def _percent(share: float) -> str:
    return "–" if not math.isfinite(share) else f"{100 * share:.0f}%"


def _display_levels(table: pd.DataFrame, by: str) -> pd.DataFrame:
    """A compact view of a level or participant table for the report (counts stay in the CSV)."""
    view = pd.DataFrame({by: table[by].astype(str)})
    if "n_sessions" in table.columns:
        view["sessions"] = table["n_sessions"]
    view["trials"] = table["n_trials"]
    for name in OUTCOMES:
        view[name] = table[f"share_{name}"].map(_percent)
    view["RT n"] = table["rt_n"]
    view["RT mean (s)"] = table["rt_mean_ms"].map(_seconds)
    view["95% CI (s)"] = [
        "–"
        if not (math.isfinite(lo) and math.isfinite(hi))
        else f"{lo / 1000:.2f} – {hi / 1000:.2f}"
        for lo, hi in zip(table["rt_ci_low_ms"], table["rt_ci_high_ms"], strict=True)
    ]
    view["RT median (s)"] = table["rt_median_ms"].map(_seconds)
    view["rating mean"] = table["rating_mean"].map(
        lambda v: "–" if not math.isfinite(v) else f"{v:.1f}"
    )
    return view


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
    extra_sections: Sequence[report.Section] = (),
) -> str:
    scope = (
        f"All {len(data)} trials, practice included."
        if include_practice
        else f"Main-part trials only ({len(data)} trials); {n_practice} practice trials are left "
        "out because practice is for learning the task, not for measuring it."
    )
    dur = facts["duration_s"]
    tps = facts["trials_per_session"]
    overview = [
        scope,
        f"{facts['n_sessions']} sessions from {facts['n_participants']} participants "
        f"({facts['n_aborted']} aborted, {facts['n_pilot']} simulated pilots).",
        "Session length: "
        + (
            f"{dur['min'] / 60:.1f} to {dur['max'] / 60:.1f} min (median {dur['median'] / 60:.1f})"
            if math.isfinite(dur["median"])
            else "not recorded"
        )
        + "; trials per session: "
        + (
            f"{tps['min']:.0f} to {tps['max']:.0f} (median {tps['median']:.0f})."
            if math.isfinite(tps["median"])
            else "not recorded."
        ),
        f"{facts['n_timed_out']} trials timed out.",
    ]
    if "sim_rt_error_ms" in facts and facts["sim_rt_error_ms"]["n"]:
        sim = facts["sim_rt_error_ms"]
        overview.append(
            f"Simulated participant: measured minus intended response time over {sim['n']} "
            f"answered trials, median {sim['median']:.2f} ms, largest {sim['max_abs']:.2f} ms."
        )
    overview.append(
        "Long sessions tire participants: check the lengths above against the breaks you planned "
        "and the duration your ethics board approved. Participants may stop at any time."
    )

    def limits(kind: str) -> str:
        items = facts[kind]
        if not items:
            return "none"
        return "; ".join(
            f"{i['factor']} = {i['level']} ({100 * i['share_correct']:.0f}% of {i['n_scored']})"
            for i in items
        )

    checks = [
        f"Floor (under {100 * FLOOR_SHARE:.0f}% correct): {limits('floor')}.",
        f"Ceiling (over {100 * CEILING_SHARE:.0f}% correct): {limits('ceiling')}.",
        "A level at floor or ceiling tells little about difficulty; consider changing its "
        "stimuli before the main study.",
    ]
    method = [
        "Shares are counted over scored trials (correct, wrong, unsure, unanswered); trials "
        "without an expected answer are counted apart.",
        "Response times use trials answered with a number (correct or wrong). The 95% interval "
        "is the t-based interval of the mean over those trials, pooled across participants, so "
        "it ignores that trials of one person are related and is narrower than a "
        "by-participant interval.",
    ]
    sections = [
        report.Section("Overview", paragraphs=overview),
        report.Section("Floor and ceiling", paragraphs=checks),
    ]
    for factor, table in level_tables.items():
        figs = figures[factor]
        captions = [
            f"Answers per {factor} level, as shares of scored trials.",
            f"Response time per {factor} level: mean with 95% t interval (bars), median (open "
            "circle).",
            f"Ratings per {factor} level: count of trials at each point, shaded by share.",
            f"Difficulty score of each stimulus, by {factor} level; the line marks the level mean.",
        ]
        sections.append(
            report.Section(
                f"By {factor}",
                tables=[(f"Per {factor} level", _display_levels(table, factor))],
                figures=[
                    report.Image(path.read_bytes(), alt=caption, caption=caption)
                    for path, caption in zip(figs, captions, strict=False)
                ],
            )
        )
    sections.append(
        report.Section(
            "By participant",
            tables=[("Per participant", _display_levels(people, "participant"))],
        )
    )
    if difficulty.available:
        load = difficulty.loadings
        diff_par = [
            "Difficulty score: the first principal-axis factor of error share, mean response "
            "time and mean rating, each computed per stimulus over participants and "
            "z-standardised; regression-method factor scores. Loadings are signed so their sum is "
            "positive: with all loadings positive, a higher score means a harder stimulus.",
            "Loadings: "
            + ", ".join(f"{name} {value:.2f}" for name, value in load.items())
            + ". Communalities: "
            + ", ".join(f"{name} {value:.2f}" for name, value in difficulty.communalities.items())
            + ".",
            *difficulty.notes,
        ]
        if (load < 0).any():
            diff_par.append(
                "Some loadings are negative, so these measures disagree; read the score with care."
            )
        scored = difficulty.scores.dropna(subset=["score"])
        hardest = scored.sort_values("score", ascending=False).head(5)
        hard_view = pd.DataFrame(
            {
                "stimulus": hardest.index.astype(str),
                "score": hardest["score"].map(lambda v: f"{v:.2f}"),
                "error share": hardest["error_share"].map(_percent),
                "RT mean (s)": hardest["rt_ms"].map(_seconds),
                "rating mean": hardest["rating"].map(lambda v: f"{v:.1f}"),
                "trials": hardest["n_trials"],
            }
        )
        sections.append(
            report.Section(
                "Difficulty score",
                paragraphs=diff_par,
                tables=[(f"Five hardest of {len(scored)} stimuli", hard_view)],
            )
        )
    else:
        sections.append(report.Section("Difficulty score", paragraphs=[difficulty.reason]))
    sections.extend(extra_sections)
    sections.append(report.Section("Method", paragraphs=method))
    return report.render_report(title, sections)
