"""The demo protocol's pilot yields data with slopes: harder routes are slower, less often right
and rated harder, through the real engine and the summary."""

from __future__ import annotations

import pandas as pd
import pytest
from conftest import DEMO_PROTOCOL, run_pilot
from scipy import stats

from runner.data.summarize import summarize_sessions
from runner.protocol.load import load_protocol

pytestmark = pytest.mark.slow  # runs a pilot session in real time


def test_demo_pilot_shows_difficulty_slopes(tmp_path):
    """On one demo pilot, response time and rating rise and accuracy falls with the protocol's
    pilot difficulty, and the summary's per-level response times rise with network size.
    Source: scipy.stats.linregress on the session's trials.csv (a self-consistency check of the
    simulator's documented demo settings, through the real input path)."""
    result = run_pilot(DEMO_PROTOCOL, tmp_path / "sessions", speed=20.0)
    pilot = load_protocol(DEMO_PROTOCOL).model.pilot
    trials = pd.read_csv(result.trials_csv, dtype={"participant": str, "session": str})
    main = trials[trials["part"] == "main"].copy()
    main["d"] = [
        pilot.difficulty_of(int(row["expected"]), {k: str(v) for k, v in row.items()})
        for _, row in main.iterrows()
    ]
    answered = main[main["outcome"].isin(["correct", "wrong"])]
    rt = stats.linregress(answered["d"], answered["rt_ms"])
    assert rt.slope > 0 and rt.pvalue < 0.01
    correct = stats.linregress(main["d"], (main["outcome"] == "correct").astype(float))
    assert correct.slope < 0 and correct.pvalue < 0.05
    rated = main.dropna(subset=["rating"])
    rating = stats.linregress(rated["d"], rated["rating"])
    assert rating.slope > 0 and rating.pvalue < 0.01
    hardest = main["d"] >= pilot.give_up_difficulty
    assert hardest.any() and main.loc[hardest, "timed_out"].eq(1).all()

    summarize_sessions([tmp_path / "sessions"], tmp_path / "summary")
    levels = pd.read_csv(tmp_path / "summary" / "levels_nodes.csv")
    by_nodes = stats.linregress(levels["nodes"], levels["rt_mean_ms"])
    assert by_nodes.slope > 0
