"""Tests of runner.data.load_curve: reading physiology, bins with intervals, the summary files."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps
from synthetic import make_pool
from synthetic_physio import SIDECAR, write_physio

from runner.data.difficulty import robust_difficulty
from runner.data.load_curve import ACCURACY, RT, load_relations, read_physio
from runner.data.summary import write_summary
from runner.errors import InputFileError


def _main(n: int = 6, t: int = 90) -> pd.DataFrame:
    trials, _ = make_pool(n, t)
    return trials[trials["part"] == "main"]


def test_read_physio_keeps_labels_as_text_and_finds_measures(tmp_path: Path) -> None:
    """Measures are the columns of Kind "measure"; a label such as 007 stays 007."""
    trials = _main(2, 30).assign(participant="007")
    physio = read_physio(write_physio(trials, tmp_path))
    assert physio.measures == ("pupil_mean_change_mm", "hr_bpm")
    assert physio.units == {"pupil_mean_change_mm": "mm", "hr_bpm": "bpm"}
    assert set(physio.frame["participant"]) == {"007"}
    assert physio.frame["pupil_mean_change_mm"].dtype == float
    assert physio.frame["pupil_mean_change_mm"].isna().any()  # empty cells are missing


def test_read_physio_refuses_missing_sidecar_and_keys(tmp_path: Path) -> None:
    """No sidecar, or a table without the key columns, is an input-file error."""
    path = write_physio(_main(2, 30), tmp_path)
    path.with_suffix(".json").unlink()
    with pytest.raises(InputFileError):
        read_physio(path)
    path.with_suffix(".json").write_text(json.dumps(SIDECAR), encoding="utf-8")
    pd.read_csv(path).drop(columns=["trial"]).to_csv(path, index=False)
    with pytest.raises(InputFileError):
        read_physio(path)


def test_bins_hold_t_and_wilson_intervals(tmp_path: Path) -> None:
    """Continuous measures get the t interval of the bin mean, accuracy the Wilson interval.

    Source: scipy.stats.t.interval(0.95, n - 1, loc=mean, scale=sem) and
    statsmodels.stats.proportion.proportion_confint(count, n, method="wilson").
    """
    from statsmodels.stats.proportion import proportion_confint

    trials = _main()
    scores = robust_difficulty(trials).scores
    physio = read_physio(write_physio(trials, tmp_path))
    result = load_relations(trials, scores, physio=physio)
    bins = result.bins
    assert set(bins["measure"]) == {RT, ACCURACY, "pupil_mean_change_mm", "hr_bpm"}
    # Rebuild bin 1 of response time and of accuracy by hand.
    stim_scores = scores["score"].dropna().sort_values(kind="mergesort")
    first = set(stim_scores.index[: math.ceil(len(stim_scores) / 5)])
    in_bin = trials["stimulus"].astype(str).isin(first)
    answered = trials["outcome"].isin(["correct", "wrong"])
    rt = trials.loc[in_bin & answered, "rt_ms"].astype(float).to_numpy()
    row = bins[(bins["measure"] == RT) & (bins["bin"] == 1)].iloc[0]
    low, high = sps.t.interval(0.95, rt.size - 1, loc=rt.mean(), scale=sps.sem(rt))
    assert row["n"] == rt.size and row["mean"] == pytest.approx(rt.mean())
    assert (row["ci_low"], row["ci_high"]) == pytest.approx((low, high))
    scored = trials["outcome"] != "unscored"
    hits = (trials.loc[in_bin & scored, "outcome"] == "correct").to_numpy(dtype=float)
    ref = proportion_confint(int(hits.sum()), hits.size, alpha=0.05, method="wilson")
    acc = bins[(bins["measure"] == ACCURACY) & (bins["bin"] == 1)].iloc[0]
    assert (acc["ci_low"], acc["ci_high"]) == pytest.approx(ref, rel=1e-12)


def test_physio_joins_on_keys_and_finds_the_inverted_u(tmp_path: Path) -> None:
    """The synthetic pupil response (an inverted U in hardness) passes the two-lines test.

    Source: synthetic data built with an inverted U (tests/analysis/synthetic_physio.py);
    Simonsohn 2018's decision rule.
    """
    trials = _main(8, 90)
    scores = robust_difficulty(trials).scores
    physio = read_physio(write_physio(trials, tmp_path))
    result = load_relations(trials, scores, physio=physio)
    tests = result.tests.set_index("measure")
    assert bool(tests.loc["pupil_mean_change_mm", "significant"])
    assert (
        tests.loc["pupil_mean_change_mm", "slope1"]
        > 0
        > tests.loc["pupil_mean_change_mm", "slope2"]
    )
    assert not bool(tests.loc["hr_bpm", "significant"])
    assert result.notes == (f"Physiology matched {len(trials)} of {len(trials)} trials.",)


def test_duplicate_physio_rows_are_refused(tmp_path: Path) -> None:
    """Two physiology rows for one trial cannot be joined: an input-file error."""
    trials = _main(2, 30)
    path = write_physio(trials, tmp_path)
    table = pd.read_csv(path, dtype=str)
    pd.concat([table, table.head(1)]).to_csv(path, index=False)
    with pytest.raises(InputFileError):
        load_relations(trials, robust_difficulty(trials).scores, physio=read_physio(path))


def test_write_summary_writes_model_files(tmp_path: Path) -> None:
    """The summary writes the model tables, load plots and facts, readable by pandas."""
    trials, sessions = make_pool(6, 90)
    main = trials[trials["part"] == "main"]
    physio = read_physio(write_physio(main, tmp_path / "physio"))
    out = tmp_path / "summary"
    paths = write_summary(trials, sessions, out, factors=["nodes", "density"], physio=physio)
    names = {p.name for p in paths}
    for name in (
        "difficulty_models.csv",
        "difficulty_best_model.csv",
        "difficulty_best_model.png",
        "difficulty_mixed.csv",
        "load_bins.csv",
        "load_twolines.csv",
        "load_rt_ms.png",
        "load_accuracy.png",
        "load_pupil_mean_change_mm.png",
        "load_hr_bpm.png",
    ):
        assert name in names
    facts = json.loads((out / "facts.json").read_text(encoding="utf-8"))
    assert facts["difficulty"]["method"] in ("principal_axis", "unit_weighted")
    assert facts["drivers"]["features"] == ["nodes"]
    assert [m["measure"] for m in facts["load"]["measures"]] == [
        RT,
        ACCURACY,
        "pupil_mean_change_mm",
        "hr_bpm",
    ]
    best = pd.read_csv(out / "difficulty_best_model.csv")
    assert list(best.columns) == ["stimulus", "score", "fitted", "loo_predicted"]
    tests = pd.read_csv(out / "load_twolines.csv")
    assert np.issubdtype(tests["break_point"].dtype, np.floating)
    html = (out / "report.html").read_text(encoding="utf-8")
    assert "Where load gives way" in html and "What drives difficulty" in html


@pytest.mark.parametrize(("k", "n"), [(0, 10), (3, 10), (10, 10), (57, 80)])
def test_wilson_interval_matches_statsmodels(k: int, n: int) -> None:
    """The Wilson interval equals statsmodels' at the edges and inside.

    Source: statsmodels.stats.proportion.proportion_confint(k, n, alpha=0.05, method="wilson").
    """
    from statsmodels.stats.proportion import proportion_confint

    from runner.data.load_curve import wilson_interval

    assert wilson_interval(k, n) == pytest.approx(proportion_confint(k, n, method="wilson"))
    assert all(math.isnan(v) for v in wilson_interval(0, 0))


def test_trial_keys_written_as_floats_still_join(tmp_path: Path) -> None:
    """A trial number written 3.0 in the physiology table joins trial 3 of the trials table."""
    trials = _main(2, 30)
    path = write_physio(trials, tmp_path)
    table = pd.read_csv(path, dtype=str, keep_default_na=False)
    table["trial"] = table["trial"] + ".0"
    table.to_csv(path, index=False)
    result = load_relations(trials, robust_difficulty(trials).scores, physio=read_physio(path))
    assert result.notes == (f"Physiology matched {len(trials)} of {len(trials)} trials.",)
