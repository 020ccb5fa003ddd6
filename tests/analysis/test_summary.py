"""Tests of runner.data.summary: level and participant tables, pilot facts, write_summary."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps
from synthetic import make_pool

from runner.data.summary import (
    infer_factors,
    level_summary,
    participant_summary,
    pilot_facts,
    rating_columns,
    write_summary,
)
from runner.errors import InputFileError, StorageError

FACTORS = ["nodes", "density"]
DENSITY_ORDER = {"density": ["sparse", "medium", "dense"]}


def _hand_table() -> pd.DataFrame:
    """Ten trials at two node counts, written out by hand (synthetic)."""
    return pd.DataFrame(
        {
            "participant": ["A", "A", "A", "A", "A", "B", "B", "B", "B", "B"],
            "session": ["1", "1", "1", "1", "1", "1", "1", "1", "2", "2"],
            "stimulus": [f"s{i}.png" for i in range(10)],
            "part": ["main"] * 10,
            "nodes": [20, 20, 20, 20, 50, 50, 50, 50, 50, 20],
            "outcome": [
                "correct",
                "correct",
                "wrong",
                "unsure",
                "unanswered",
                "correct",
                "wrong",
                "wrong",
                "unscored",
                "correct",
            ],
            "rt_ms": [1000.0, 3000.0, 2000.0, 800.0, np.nan, 4000.0, 6000.0, 8000.0, 500.0, 4000.0],
            "rating": pd.array([1, 2, 2, pd.NA, 9, 5, 5, 6, 3, 1], dtype="Int64"),
        }
    )


def test_level_summary_counts_by_hand() -> None:
    """Counts, shares, RT statistics and rating counts per level match a hand count.

    Source: common practice (no published source); values counted by hand from the table.
    """
    table = level_summary(_hand_table(), "nodes").set_index("nodes")
    a = table.loc[20]
    assert (a.n_trials, a.n_scored, a.n_correct, a.n_wrong, a.n_unsure, a.n_unanswered) == (
        5,
        5,
        3,
        1,
        1,
        0,
    )
    assert a.share_correct == pytest.approx(0.6) and a.share_unsure == pytest.approx(0.2)
    # RT of answered trials only (correct + wrong): 1000, 3000, 2000, 4000 ms.
    assert a.rt_n == 4 and a.rt_mean_ms == pytest.approx(2500.0)
    assert a.rt_median_ms == pytest.approx(2500.0)
    assert [int(a[c]) for c in rating_columns(9)] == [2, 2, 0, 0, 0, 0, 0, 0, 0]
    assert a.rating_none == 1 and a.rating_mean == pytest.approx(1.5)
    b = table.loc[50]
    assert (b.n_trials, b.n_scored, b.n_unscored, b.n_unanswered) == (5, 4, 1, 1)
    assert b.share_wrong == pytest.approx(0.5) and b.share_unanswered == pytest.approx(0.25)
    assert b.rt_n == 3 and b.rt_mean_ms == pytest.approx(6000.0)
    assert b.rating_9 == 1 and b.rating_5 == 2


def test_level_summary_rt_interval_matches_scipy() -> None:
    """The RT interval of a level is scipy's t interval over its correct and wrong trials.

    Source: scipy.stats.t.interval(0.95, n - 1, loc=mean, scale=scipy.stats.sem(x)).
    """
    trials = _hand_table()
    row = level_summary(trials, "nodes").set_index("nodes").loc[50]
    x = np.array([4000.0, 6000.0, 8000.0])
    low, high = sps.t.interval(0.95, x.size - 1, loc=x.mean(), scale=sps.sem(x))
    assert row.rt_ci_low_ms == pytest.approx(low) and row.rt_ci_high_ms == pytest.approx(high)


def test_level_order_numeric_explicit_and_alphabetical() -> None:
    """Numbers sort numerically, a given order wins, other text sorts alphabetically."""
    trials, _ = make_pool(2, 30)
    assert list(level_summary(trials, "nodes")["nodes"]) == [20, 50, 80, 110, 140]
    assert list(level_summary(trials, "density")["density"]) == ["dense", "medium", "sparse"]
    ordered = level_summary(trials, "density", levels=["sparse", "medium", "dense"])
    assert list(ordered["density"]) == ["sparse", "medium", "dense"]


def test_participant_summary_counts_sessions_and_trials() -> None:
    """One row per participant with its number of sessions and trials."""
    table = participant_summary(_hand_table()).set_index("participant")
    assert table.loc["A", "n_sessions"] == 1 and table.loc["B", "n_sessions"] == 2
    assert table.loc["A", "n_trials"] == 5 and table.loc["B", "n_correct"] == 2


@pytest.mark.parametrize(
    ("change", "fragment"),
    [
        (lambda t: t.drop(columns=["rt_ms"]), "'rt_ms'"),
        (lambda t: t.drop(columns=["nodes"]), "'nodes'"),
        (lambda t: t.assign(outcome=t["outcome"].replace("wrong", "maybe")), "'maybe'"),
        (lambda t: t.assign(outcome=t["outcome"].where(t.index != 0, None)), "empty value"),
        (lambda t: t.assign(rating=t["rating"].replace(9, 12)), "9-point"),
    ],
)
def test_level_summary_refuses_bad_tables(change, fragment: str) -> None:
    """Missing columns, unknown outcomes and off-scale ratings raise InputFileError that says so."""
    with pytest.raises(InputFileError, match=fragment):
        level_summary(change(_hand_table()), "nodes")


def _sessions(durations: list[float]) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "participant": [f"P{i}" for i in range(len(durations))],
            "session": ["1"] * len(durations),
            "started_wall": ["2031-05-01T09:00:00+00:00"] * len(durations),
            "duration_s": durations,
            "n_trials": [20] * len(durations),
            "aborted": [False] * (len(durations) - 1) + [True],
            "pilot": [True] * len(durations),
        }
    )


def test_pilot_facts_floor_ceiling_and_lengths() -> None:
    """Levels under 5% correct are floor, over 95% ceiling; 5% and 95% exactly are neither.

    Source: common practice (no published source) for the 5% / 95% thresholds.
    """
    outcomes = (
        ["correct"] * 20  # 100%: ceiling
        + ["wrong"] * 20  # 0%: floor
        + ["correct"] * 19
        + ["wrong"]  # 95%: not over
        + ["correct"]
        + ["wrong"] * 19  # 5%: not under
    )
    trials = pd.DataFrame(
        {
            "participant": ["P0"] * 80,
            "session": ["1"] * 80,
            "stimulus": [f"s{i}" for i in range(80)],
            "part": ["main"] * 80,
            "outcome": outcomes,
            "rt_ms": [1500.0] * 80,
            "rating": pd.array([4] * 80, dtype="Int64"),
            "nodes": [20] * 20 + [140] * 20 + [50] * 20 + [110] * 20,
        }
    )
    facts = pilot_facts(trials, _sessions([600.0, 900.0, 1500.0]), factors=["nodes"])
    assert [(f["level"], f["share_correct"]) for f in facts["ceiling"]] == [(20, 1.0)]
    assert [(f["level"], f["share_correct"]) for f in facts["floor"]] == [(140, 0.0)]
    assert facts["duration_s"] == {"min": 600.0, "median": 900.0, "max": 1500.0}
    assert facts["n_aborted"] == 1 and facts["n_sessions"] == 3
    json.dumps(facts, allow_nan=False)


def test_pilot_facts_reports_simulated_rt_error() -> None:
    """With sim_rt_ms the facts give the median and largest measured-minus-intended difference."""
    trials, sessions = make_pool(2, 30)
    main = trials[trials["part"] == "main"]
    facts = pilot_facts(main, sessions)
    answered = main[main["outcome"].isin(["correct", "wrong"])]
    diff = answered["rt_ms"] - answered["sim_rt_ms"]
    assert facts["sim_rt_error_ms"]["n"] == len(answered)
    assert facts["sim_rt_error_ms"]["median"] == pytest.approx(diff.median())
    assert facts["sim_rt_error_ms"]["max_abs"] == pytest.approx(diff.abs().max())


def test_infer_factors_finds_trial_table_columns() -> None:
    """The factors are the columns after the contract ones, without the pilot column."""
    trials, _ = make_pool(1, 5)
    assert infer_factors(trials) == ["nodes", "density"]


def test_write_summary_writes_every_file_main_part_only(pilot_summary) -> None:
    """write_summary writes tables, plots, facts and report; practice trials are left out."""
    tmp_path, paths = pilot_summary
    names = [p.name for p in paths]
    assert names[-1] == "report.html"
    for stem in ("nodes", "density"):
        for kind in ("outcomes", "rt", "ratings", "difficulty"):
            assert f"{kind}_{stem}.png" in names
        assert f"levels_{stem}.csv" in names
    assert {"participants.csv", "difficulty.csv", "difficulty_loadings.csv", "facts.json"} <= set(
        names
    )
    assert all(p.is_file() and p.stat().st_size > 0 for p in paths)
    levels = pd.read_csv(tmp_path / "levels_nodes.csv")
    assert levels["n_trials"].sum() == 90
    density = pd.read_csv(tmp_path / "levels_density.csv")
    assert list(density["density"]) == ["sparse", "medium", "dense"]
    facts = json.loads((tmp_path / "facts.json").read_text(encoding="utf-8"))
    assert facts["n_practice_excluded"] == 9
    html = (tmp_path / "report.html").read_text(encoding="utf-8")
    assert "The analysis includes 90 main-part trials" in html
    assert "9 practice trials are left out because practice is for learning the task" in html


def test_write_summary_can_include_practice(tmp_path: Path) -> None:
    """include_practice=True summarises practice trials too."""
    trials, sessions = make_pool(3, 30)
    write_summary(trials, sessions, tmp_path, factors=["nodes"], include_practice=True)
    assert pd.read_csv(tmp_path / "levels_nodes.csv")["n_trials"].sum() == 99


def test_write_summary_is_deterministic(tmp_path: Path) -> None:
    """The same input writes byte-identical files, plots included."""
    trials, sessions = make_pool(3, 30)
    first = write_summary(trials, sessions, tmp_path / "a", factors=FACTORS)
    second = write_summary(trials, sessions, tmp_path / "b", factors=FACTORS)
    for a, b in zip(first, second, strict=True):
        assert a.name == b.name
        assert a.read_bytes() == b.read_bytes(), a.name


def test_write_summary_without_difficulty_data(tmp_path: Path) -> None:
    """With too few stimuli the report says why and no difficulty plot is written."""
    trials = _hand_table()
    trials["nodes"] = 20
    trials["stimulus"] = "only.png"
    paths = write_summary(trials, _sessions([300.0, 400.0]), tmp_path, factors=["nodes"])
    names = [p.name for p in paths]
    assert "difficulty_nodes.png" not in names and "difficulty_loadings.csv" not in names
    assert "Not enough data for a difficulty score" in (tmp_path / "report.html").read_text(
        encoding="utf-8"
    )


def test_write_summary_refuses_practice_only(tmp_path: Path) -> None:
    """A table with only practice trials raises InputFileError naming the main part."""
    trials = _hand_table().assign(part="practice")
    with pytest.raises(InputFileError, match="no main-part trials"):
        write_summary(trials, _sessions([300.0]), tmp_path, factors=["nodes"])


def test_write_summary_unwritable_folder(tmp_path: Path) -> None:
    """A folder that cannot be created raises StorageError with the folder's name."""
    blocker = tmp_path / "plain-file"
    blocker.write_text("x", encoding="utf-8")
    with pytest.raises(StorageError, match="plain-file"):
        write_summary(_hand_table(), _sessions([300.0]), blocker / "sub", factors=["nodes"])


def test_write_summary_difficulty_csv_has_one_row_per_stimulus(pilot_summary) -> None:
    """difficulty.csv holds one row per stimulus; every stimulus with all measures has a score."""
    out, _ = pilot_summary
    table = pd.read_csv(out / "difficulty.csv")
    trials, _ = make_pool(3, 30)
    main = trials[trials["part"] == "main"]
    assert len(table) == main["stimulus"].nunique()
    assert {"nodes", "density", "score", "error_share", "rt_ms", "rating"} <= set(table.columns)
    complete = table[["error_share", "rt_ms", "rating"]].notna().all(axis=1)
    assert complete.sum() >= 3
    assert table["score"].notna().tolist() == complete.tolist()
