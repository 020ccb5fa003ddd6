"""The simulated participant's trial plans: seeded, and shaped by the trial's difficulty.

These are self-consistency checks of the simulator's documented parameters (recovered by
regression from many simulated trials), not claims about people; the response-time shape is
the ex-Gaussian of the response-time literature, checked with scipy's own distribution.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from runner.protocol.model import PilotSettings
from runner.protocol.schedule import ScheduledTrial
from runner.session.simulate import plan_trial, trial_difficulty

SETTINGS = PilotSettings(
    difficulty={"nodes": 0.05, "crossings": 0.2},
    rt_base_s=1.0,
    rt_per_difficulty_s=0.5,
    rt_sd_s=0.2,
    rt_tau_s=0.3,
    rt_tau_per_difficulty_s=0.1,
    correct_at_zero=0.99,
    correct_per_difficulty=0.08,
    correct_min=0.1,
    unsure_at_zero=0.0,
    unsure_per_difficulty=0.03,
    unsure_max=0.5,
    rating_per_difficulty=0.1,
    rating_sd=0.05,
)


def _trial(i: int, nodes: int, crossings: int, expected: int | None = 5) -> ScheduledTrial:
    return ScheduledTrial(
        trial=i,
        part="main",
        block="b",
        block_index=1,
        row=i,
        stimulus=f"s{i}.png",
        expected=expected,
        fixation_ms=500.0,
        feedback=False,
        values={"nodes": str(nodes), "crossings": str(crossings), "density": "dense"},
    )


def _many(n: int, settings: PilotSettings = SETTINGS, seed: int = 7):
    rng = np.random.default_rng(1)
    trials = [_trial(i, int(rng.integers(10, 120)), int(rng.integers(0, 15))) for i in range(n)]
    plans = [plan_trial(seed, t, points=9, max_answer=99, settings=settings) for t in trials]
    return trials, plans


def test_plans_are_seeded():
    """The same seed and trial give the same plan; another seed gives other plans."""
    trials, first = _many(200)
    _, again = _many(200)
    _, other = _many(200, seed=8)
    assert first == again
    assert [p.rt_s for p in first] != [p.rt_s for p in other]


def test_difficulty_is_the_weighted_sum_of_the_columns():
    """Difficulty is sum(weight x value); a missing or empty value counts 0."""
    assert trial_difficulty(_trial(1, 40, 5), SETTINGS) == pytest.approx(0.05 * 40 + 0.2 * 5)
    empty = _trial(1, 40, 5)
    empty.values["crossings"] = ""
    assert trial_difficulty(empty, SETTINGS) == pytest.approx(2.0)
    assert trial_difficulty(_trial(1, 40, 5, expected=7), PilotSettings()) == 7.0


def test_response_time_slope_is_recovered():
    """The least-squares slope of response time on difficulty recovers the documented slope of
    the mean, rt_per_difficulty_s + rt_tau_per_difficulty_s (the tail's mean grows too).
    Source: scipy.stats.linregress on 6000 simulated trials (self-consistency check).
    """
    _, plans = _many(6000)
    d = np.array([p.difficulty for p in plans])
    rt = np.array([p.rt_s for p in plans])
    fit = stats.linregress(d, rt)
    want = SETTINGS.rt_per_difficulty_s + SETTINGS.rt_tau_per_difficulty_s
    assert abs(fit.slope - want) < 3 * fit.stderr + 0.01
    assert abs(fit.intercept - (SETTINGS.rt_base_s + SETTINGS.rt_tau_s)) < 0.1


def test_response_times_are_ex_gaussian():
    """At one difficulty, a fitted exponentially modified normal recovers the documented normal
    sd and tail mean, and the sample passes a KS test against it.
    Source: scipy.stats.exponnorm, the ex-Gaussian distribution (Ratcliff 1979, Psychological
    Bulletin 86(3); Luce 1986, Response Times), fitted by maximum likelihood.
    """
    trials = [_trial(i, 40, 5) for i in range(4000)]
    settings = SETTINGS.model_copy(update={"rt_min_s": 0.0})
    rt = np.array(
        [plan_trial(3, t, points=9, max_answer=99, settings=settings).rt_s for t in trials]
    )
    k, loc, scale = stats.exponnorm.fit(rt)
    d = 3.0
    assert scale == pytest.approx(SETTINGS.rt_sd_s, rel=0.15)
    assert k * scale == pytest.approx(
        SETTINGS.rt_tau_s + SETTINGS.rt_tau_per_difficulty_s * d, rel=0.15
    )
    assert loc == pytest.approx(SETTINGS.rt_base_s + SETTINGS.rt_per_difficulty_s * d, abs=0.05)
    assert stats.kstest(rt, "exponnorm", args=(k, loc, scale)).pvalue > 0.01


def test_accuracy_and_unsure_slopes_are_recovered():
    """Linear probability fits of correct (among answered) and unsure on difficulty recover the
    documented slopes where no clipping applies.
    Source: statsmodels OLS on 8000 simulated trials (self-consistency check).
    """
    import statsmodels.api as sm

    _, plans = _many(8000)
    d = np.array([p.difficulty for p in plans])
    unsure = np.array([p.unsure for p in plans], dtype=float)
    fit = sm.OLS(unsure, sm.add_constant(d)).fit()
    low, high = fit.conf_int()[1]
    assert low - 0.005 <= SETTINGS.unsure_per_difficulty <= high + 0.005
    answered = ~np.array([p.unsure for p in plans])
    correct = np.array([p.answer == 5 for p in plans], dtype=float)[answered]
    fit = sm.OLS(correct, sm.add_constant(d[answered])).fit()
    low, high = fit.conf_int()[1]
    assert low - 0.005 <= -SETTINGS.correct_per_difficulty <= high + 0.005


def test_ratings_climb_with_difficulty():
    """The mean rating rises by (points - 1) x rating_per_difficulty per unit of difficulty.
    Source: scipy.stats.linregress on 4000 simulated answered trials (self-consistency check).
    """
    _, plans = _many(4000)
    kept = [p for p in plans if not p.unsure and p.difficulty < 7]
    fit = stats.linregress([p.difficulty for p in kept], [p.rating for p in kept])
    assert fit.slope == pytest.approx(8 * SETTINGS.rating_per_difficulty, rel=0.1)


@pytest.mark.parametrize(
    "how, can_time_out", [("unsure", True), ("timeout", True), ("timeout", False)]
)
def test_hardest_trials_are_given_up(how, can_time_out):
    """From give_up_difficulty on every trial is given up: unsure, or a timeout (unsure when no
    time limit applies); easier trials are not."""
    settings = SETTINGS.model_copy(update={"give_up_difficulty": 6.0, "give_up": how})
    trials, _ = _many(500)
    for t in trials:
        plan = plan_trial(
            2, t, points=9, max_answer=99, settings=settings, can_time_out=can_time_out
        )
        if plan.difficulty >= 6.0:
            assert plan.answer is None
            assert plan.timeout == (how == "timeout" and can_time_out)
            assert plan.unsure == (not plan.timeout)
        else:
            assert not plan.timeout
