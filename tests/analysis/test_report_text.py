"""Tests of the report's words and numbers: counts, intervals and the figures' readings."""

from __future__ import annotations

import re
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.proportion import proportion_confint
from synthetic import make_pool

from runner.data.stats import wilson_interval
from runner.data.summary import write_summary
from runner.data.summary_report import (
    count,
    display_levels,
    load_reading,
    number,
    p_value,
    significant,
    trend_sentence,
)


class _Cells(HTMLParser):
    """The text of every table cell and of the first heading, in document order."""

    def __init__(self) -> None:
        super().__init__()
        self.tables: list[list[list[str]]] = []
        self.h1 = ""
        self.kicker = ""
        self._cell: list[str] | None = None
        self._in: str = ""

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag == "table":
            self.tables.append([])
        elif tag == "tr":
            self.tables[-1].append([])
        elif tag in ("td", "th"):
            self._cell = []
        elif tag == "h1" or (tag == "p" and ("class", "kicker") in attrs):
            self._in = tag
            self._cell = []

    def handle_data(self, data: str) -> None:
        if self._cell is not None:
            self._cell.append(data)

    def handle_endtag(self, tag: str) -> None:
        if tag in ("td", "th") and self._cell is not None:
            self.tables[-1][-1].append("".join(self._cell))
            self._cell = None
        elif tag in ("h1", "p") and self._in == tag and self._cell is not None:
            if tag == "h1":
                self.h1 = "".join(self._cell)
            else:
                self.kicker = "".join(self._cell)
            self._in = ""
            self._cell = None


def _cells(html: str) -> _Cells:
    parser = _Cells()
    parser.feed(html)
    return parser


def test_count_uses_the_singular_for_one() -> None:
    """Counts read "1 trial", "2 trials", "1 stimulus", "0 stimuli" (English number agreement).

    Source: English grammar (singular noun after "one"; "stimuli" is the plural of "stimulus").
    """
    assert count(1, "trial") == "1 trial"
    assert count(2, "trial") == "2 trials"
    assert count(1, "stimulus") == "1 stimulus"
    assert count(0, "stimulus") == "0 stimuli"
    assert count(1, "main-part trial") == "1 main-part trial"


def test_number_uses_a_true_minus_and_no_negative_zero() -> None:
    """Negative numbers show U+2212 MINUS SIGN; a value that rounds to zero shows no sign.

    Source: Unicode 15.0, U+2212 MINUS SIGN; round-half-even formatting of Python's format spec.
    """
    assert number(-0.731, 2) == "\u22120.73"
    assert number(-0.001, 2) == "0.00"
    assert number(1.005, 1) == "1.0"
    assert number(float("nan"), 2) == "–"


@pytest.mark.parametrize(
    ("successes", "n", "low", "high"),
    [
        (81, 263, 0.2553, 0.3662),
        (15, 148, 0.0624, 0.1605),
        (0, 20, 0.0, 0.1611),
        (1, 29, 0.0061, 0.1718),
    ],
)
def test_wilson_interval_matches_published_values(successes, n, low, high) -> None:
    """The Wilson score interval matches the published worked examples to 4 decimals.

    Source: Newcombe, R. G. (1998). Two-sided confidence intervals for the single proportion:
    comparison of seven methods. Statistics in Medicine, 17, 857-872, Table I (method 3).
    """
    got = wilson_interval(successes, n)
    assert got == pytest.approx((low, high), abs=5e-5)


def test_wilson_interval_matches_statsmodels() -> None:
    """The Wilson interval agrees with statsmodels' proportion_confint(method="wilson").

    Source: statsmodels.stats.proportion.proportion_confint.
    """
    for successes, n in [(0, 1), (1, 1), (3, 7), (40, 41), (500, 1000)]:
        expected = proportion_confint(successes, n, alpha=0.05, method="wilson")
        assert wilson_interval(successes, n) == pytest.approx(expected, abs=1e-12)


def test_trend_sentence_reads_first_last_and_a_real_peak() -> None:
    """The reading names the first and last level, and a level beyond both ends by more than a
    tenth of the range; a wobble is not called a peak.

    Source: the numbers are given in the test; the sentences are the report's documented wording
    (docs/analysis-summary.md, "The report").
    """
    falling = [(f"level {k}", v / 100, f"{v}%") for k, v in enumerate([95, 96, 70, 55, 41, 40], 1)]
    assert trend_sentence("Accuracy", falling) == (
        "Accuracy fell from 95% at level 1 to 40% at level 6."
    )
    hump = [("load 1", 2.0, "2.0"), ("load 2", 5.0, "5.0"), ("load 3", 2.5, "2.5")]
    assert trend_sentence("The mean rating", hump) == (
        "The mean rating rose from 2.0 at load 1 to 2.5 at load 3, with a peak of 5.0 at load 2."
    )
    flat = [("a", 0.5, "50%"), ("b", float("nan"), "–"), ("c", 0.501, "50%")]
    assert trend_sentence("Accuracy", flat) == "Accuracy was 50% at both a and c."
    assert trend_sentence("Accuracy", [("a", 1.0, "100%")]) == "Accuracy was 100% at a."
    assert trend_sentence("Accuracy", []) == ""


def test_level_table_intervals_match_outside_references(pilot_summary) -> None:
    """The report's per-level intervals are the Wilson interval of the share correct and the
    t intervals of the mean response time and mean rating, at the shown precision.

    Source: statsmodels proportion_confint (Wilson) and scipy.stats.t.interval on the same trials.
    """
    out, _ = pilot_summary
    trials, _ = make_pool(3, 30)
    main = trials[trials["part"] == "main"]
    levels = pd.read_csv(out / "levels_nodes.csv")
    tables = _cells((out / "report.html").read_text(encoding="utf-8")).tables
    by_nodes = tables[0]
    assert by_nodes[0][0] == "nodes"
    for row in by_nodes[1:]:
        level = int(row[0])
        rec = levels[levels["nodes"] == level].iloc[0]
        low, high = proportion_confint(rec["n_correct"], rec["n_scored"], method="wilson")
        assert row[2] == (f"{100 * rec['share_correct']:.0f} [{100 * low:.0f}, {100 * high:.0f}]")
        at = main[main["nodes"] == level]
        rt = at.loc[at["outcome"].isin(["correct", "wrong"]), "rt_ms"].dropna() / 1000
        lo, hi = stats.t.interval(0.95, len(rt) - 1, loc=rt.mean(), scale=stats.sem(rt))
        assert row[6] == f"{rt.mean():.2f} [{lo:.2f}, {hi:.2f}]"
        ratings = at["rating"].dropna().astype(float)
        lo, hi = stats.t.interval(
            0.95, len(ratings) - 1, loc=ratings.mean(), scale=stats.sem(ratings)
        )
        assert row[8] == f"{ratings.mean():.1f} [{lo:.1f}, {hi:.1f}]"


def test_display_levels_shows_missing_values_with_the_marker() -> None:
    """A level with no answered trial shows the missing marker, not "nan", in its RT cells.

    Source: docs/analysis-summary.md (the report's missing-value marker).
    """
    table = pd.DataFrame(
        {
            "nodes": [20],
            "n_trials": [2],
            "n_scored": [2],
            "n_correct": [0],
            "share_correct": [0.0],
            "share_wrong": [0.0],
            "share_unsure": [0.0],
            "share_unanswered": [1.0],
            "rt_mean_ms": [np.nan],
            "rt_ci_low_ms": [np.nan],
            "rt_ci_high_ms": [np.nan],
            "rt_median_ms": [np.nan],
            **{f"rating_{k}": [0] for k in range(1, 10)},
        }
    )
    view = display_levels(table, "nodes", 9)
    row = view.iloc[0].tolist()
    assert row[2] == "0 [0, 66]"
    assert row[6:] == ["–", "–", "–"]


def test_report_of_one_person_uses_the_singular(tmp_path: Path) -> None:
    """A summary of one participant's one session never writes "1 participants" or "1 trials",
    and its heading is the study's name with the report title above it.

    Source: English grammar (singular noun after "one").
    """
    trials, sessions = make_pool(1, 24)
    sessions["study"] = "courier-hops"
    sessions["aborted"] = True
    write_summary(trials, sessions, tmp_path, factors=["nodes", "density"])
    html = (tmp_path / "report.html").read_text(encoding="utf-8")
    text = re.sub(r"<[^>]+>", " ", html)
    assert re.search(r"\b1 (participants|sessions|trials|stimuli|main-part trials)\b", text) is None
    assert "1 participant" in text and "1 session" in text
    assert "The session was run by the simulated participant" in text
    assert "1 session ended early" in text
    assert re.search(r"The session lasted [0-9.]+ min and held 27 completed trials\.", text)
    parsed = _cells(html)
    assert parsed.h1 == "courier-hops"
    assert parsed.kicker == "Pilot summary"


def test_trend_sentence_without_an_order_names_highest_and_lowest() -> None:
    """Levels without an order read as highest and lowest, never "rose" or "fell".

    Source: the numbers are given in the test; the wording is documented in
    docs/analysis-summary.md ("The report").
    """
    points = [
        ("density dense", 0.45, "45%"),
        ("density medium", 0.35, "35%"),
        ("density sparse", 0.6, "60%"),
    ]
    assert trend_sentence("Accuracy", points, ordered=False) == (
        "Accuracy was highest at density sparse (60%) and lowest at density medium (35%)."
    )
    same = [("a", 0.5, "50%"), ("b", 0.5004, "50%")]
    assert trend_sentence("Accuracy", same, ordered=False) == "Accuracy was 50% at every level."


def test_p_values_and_significant_digits_print_as_journals_do() -> None:
    """p values print as "p < .001" or "p = .032" (no leading zero); slopes at 3 significant
    digits (whole units kept), switching to an exponent only for very large or small values.

    Source: APA Publication Manual, 7th ed., section 6.36 (statistics: no leading zero for
    values that cannot exceed 1; exact p to two or three decimals, p < .001 below that).
    """
    assert p_value(0.00002) == "p < .001"
    assert p_value(0.0321) == "p = .032"
    assert p_value(0.5) == "p = .500"
    assert significant(4722.29) == "4722"
    assert significant(-0.18263) == "\u22120.183"
    assert significant(0.0681) == "0.0681"
    assert significant(3399662.9) == "3.40e+06"


def test_load_reading_states_break_slopes_and_verdict() -> None:
    """The reading of a two-lines figure gives the break, both slopes with p, and whether the
    U-shape is shown (both slopes significant with opposite signs).

    Source: Simonsohn (2018), Advances in Methods and Practices in Psychological Science 1(4),
    538-555: the criterion for a U-shape in the two-lines test.
    """
    from runner.data.twolines import Line, TwoLinesResult

    up = Line(slope=2.5, se=0.5, z=5.0, p=0.00001, at_break=3.0, n=40)
    down = Line(slope=-1.2, se=0.4, z=-3.0, p=0.0027, at_break=3.0, n=30)
    res = TwoLinesResult(
        True, n=70, shape="inverted_u", break_point=0.4, line1=up, line2=down, significant=True
    )
    assert load_reading("pupil size", "mm", res) == (
        "Pupil size rose (b = 2.50 mm per score unit, p < .001) below the break at a difficulty "
        "score of 0.40 and it fell (b = \u22121.20 mm per score unit, p = .003) above it, so the "
        "relation is an inverted U."
    )
    flat = TwoLinesResult(
        True, n=70, shape="inverted_u", break_point=0.4, line1=up, line2=up, significant=False
    )
    assert load_reading("pupil size", "mm", flat).endswith(
        "so an inverted U is not shown (that needs both slopes significant with opposite signs)."
    )
    missing = TwoLinesResult(False, reason="Too few trials for the two-lines test.")
    assert load_reading("pupil size", "mm", missing) == "Too few trials for the two-lines test."


def test_report_lists_exclusions_and_pooling(tmp_path: Path) -> None:
    """With exclusion rules and a pooling summary, the report names the rules with their
    thresholds, counts the excluded sessions in the right number, tables them, and names the
    shared speed.

    Source: docs/analysis-summary.md ("The report"); the excluded session is given in the test.
    """
    trials, sessions = make_pool(2, 24)
    exclusions = pd.DataFrame(
        {
            "participant": ["P001", "P002", "P009"],
            "session": ["S1", "S1", "S1"],
            "rule": ["timed_out_share_above"] * 3,
            "value": [0.0, 0.04, 0.62],
            "threshold": [0.5, 0.5, 0.5],
            "excluded": [0, 0, 1],
            "note": ["", "", ""],
        }
    )
    context = {
        "studies": ["courier-hops"],
        "pooling": {"speed": ["10x"], "mode": ["pilot"], "protocol": ["courier-hops abc"]},
        "excluded": [{"participant": "P009", "session": "S1", "rules": ["timed_out_share_above"]}],
    }
    write_summary(
        trials,
        sessions,
        tmp_path,
        factors=["nodes"],
        exclusions=exclusions,
        context=context,
        title="Pilot summary: courier-hops",
    )
    html = (tmp_path / "report.html").read_text(encoding="utf-8")
    text = re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", html))
    assert (
        "pre-declared exclusion rules (share of timed-out trials above 50%) excluded 1 session "
        "of 1 participant" in text
    )
    assert (
        "All sessions ran at 10x speed in pilot mode under one protocol (courier-hops abc)." in text
    )
    assert "divided by 10" in text
    parsed = _cells(html)
    assert parsed.h1 == "courier-hops" and parsed.kicker == "Pilot summary"
    excluded = parsed.tables[0]
    assert excluded[0] == ["participant", "session", "rule", "value", "threshold"]
    assert excluded[1:] == [["P009", "S1", "share of timed-out trials above", "62%", "50%"]]


def test_report_with_physiology_cites_the_methods_used_and_reads_each_measure(tmp_path) -> None:
    """With pupil and heart-rate measures, the methods cite Mathôt et al. (2018) for the pupil,
    the Task Force (1996) only once a heart-rate variability measure is given, each measure gets
    a figure reading under a plain name, and the caution about diagnoses is there.

    Source: Mathôt et al. (2018), Behavior Research Methods 50, 94-106 (pupil preprocessing);
    Task Force (1996), Circulation 93, 1043-1065 (HRV measures, not mean heart rate).
    """
    import json

    from synthetic_physio import write_physio

    from runner.data.load_curve import read_physio

    trials, sessions = make_pool(5, 40)
    main = trials[trials["part"] == "main"]
    path = write_physio(main, tmp_path / "physio")

    def report_text(out: Path) -> str:
        write_summary(trials, sessions, out, factors=["nodes"], physio=read_physio(path))
        html = (out / "report.html").read_text(encoding="utf-8")
        return re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", html))

    text = report_text(tmp_path / "pupil-hr")
    assert "following Mathôt et al. (2018)" in text
    assert "Mathôt, S., Fabius, J." in text
    assert "Task Force" not in text  # mean heart rate is not a variability measure
    assert re.search(r"Pupil mean change (rose|fell) \(b = ", text)
    assert re.search(r"Heart rate (rose|fell) \(b = ", text)
    assert "they are not diagnoses" in text

    frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    frame["rmssd_ms"] = [f"{40 + k % 7}" for k in range(len(frame))]
    frame.to_csv(path, index=False)
    sidecar = path.with_suffix(".json")
    meta = json.loads(sidecar.read_text(encoding="utf-8"))
    meta["rmssd_ms"] = {
        "Description": "RMSSD in the trial window.",
        "Units": "ms",
        "Kind": "measure",
    }
    sidecar.write_text(json.dumps(meta), encoding="utf-8")
    text = report_text(tmp_path / "with-hrv")
    assert "follow the definitions of the Task Force (1996)" in text
    assert re.search(r"RMSSD (rose|fell) \(b = ", text)


def test_best_model_reading_gives_the_leave_one_out_correlation(pilot_summary) -> None:
    """The best model figure's reading gives Pearson's r of score and leave-one-out prediction.

    Source: scipy.stats.pearsonr on difficulty_best_model.csv of the same summary.
    """
    out, _ = pilot_summary
    table = pd.read_csv(out / "difficulty_best_model.csv").dropna(subset=["score", "loo_predicted"])
    r = stats.pearsonr(table["score"], table["loo_predicted"]).statistic
    html = (out / "report.html").read_text(encoding="utf-8")
    found = re.search(r"The scores of the (\d+) stimuli correlated r = (\S+) with", html)
    assert found is not None
    assert int(found.group(1)) == len(table)
    assert float(found.group(2).replace("\u2212", "-")) == pytest.approx(r, abs=0.0051)
