"""Tests of runner.data.drivers: information criteria, all-subsets models and the mixed model."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from statsmodels.datasets import stackloss
from synthetic import make_pool

from runner.data.drivers import (
    MANY_MODELS_CAUTION,
    MIN_PARTICIPANTS_FOR_MIXED,
    all_subsets,
    difficulty_drivers,
    fit_ols,
    information_criteria,
    loo_rmse,
    mixed_model,
    stimulus_features,
)

# R 4.2.2 on its `stackloss` data set (the same 21 rows statsmodels carries as
# statsmodels.datasets.stackloss): for each subset s of the three predictors,
# m <- lm(reformulate(s, "stack.loss"), stackloss); AIC(m), BIC(m), summary(m)$adj.r.squared,
# sqrt(mean((resid(m) / (1 - hatvalues(m)))^2)).
R_STACKLOSS = {
    ("AIRFLOW",): (122.737102300346, 125.870669613517, 0.837664070117, 4.358232874737),
    ("WATERTEMP",): (131.447344588146, 134.580911901317, 0.754218907535, 5.425204353584),
    ("ACIDCONC",): (158.336084047942, 161.469651361112, 0.115645998653, 9.756941411616),
    ("AIRFLOW", "WATERTEMP"): (113.714381514980, 117.892471265874, 0.898623269278, 3.738750245204),
    ("AIRFLOW", "ACIDCONC"): (124.069963506865, 128.248053257759, 0.834003527728, 4.344516975889),
    ("WATERTEMP", "ACIDCONC"): (
        133.092623152323,
        137.270712903217,
        0.744909854089,
        5.562537333123,
    ),
    ("AIRFLOW", "WATERTEMP", "ACIDCONC"): (
        114.575591004800,
        119.798203193417,
        0.898325769954,
        3.728071962631,
    ),
}


def _stackloss() -> tuple[pd.Series, pd.DataFrame]:
    data = stackloss.load_pandas().data
    return data["STACKLOSS"], data[["AIRFLOW", "WATERTEMP", "ACIDCONC"]]


def test_information_criteria_match_r_aic_and_bic_on_cars_example() -> None:
    """K counts the residual variance: AIC and BIC of dist ~ speed equal R's on `cars`.

    Source: R 4.2.2: m <- lm(dist ~ speed, cars); AIC(m) = 419.1568630274,
    BIC(m) = 424.8929320436, logLik(m) = -206.5784315137 (df = 3).
    """
    k, aic, _, bic = information_criteria(-206.5784315137, 50, 2)
    assert k == 3
    assert aic == pytest.approx(419.1568630274, abs=1e-9)
    assert bic == pytest.approx(424.8929320436, abs=1e-9)


def test_aicc_is_burnham_anderson_correction_of_r_aic() -> None:
    """AICc = AIC + 2K(K + 1) / (n - K - 1) with R's AIC of the full stackloss model.

    Source: Burnham and Anderson 2002, Model selection and multimodel inference, 2nd ed.,
    eq. 2.2 (AICc); R 4.2.2 AIC(lm(stack.loss ~ ., stackloss)) = 114.575591004800 with K = 5.
    """
    y, X = _stackloss()
    row = fit_ols(y.to_numpy(), X)
    assert row["k"] == 5 and row["n"] == 21
    assert row["aic"] == pytest.approx(114.575591004800, abs=1e-8)
    assert row["aicc"] == pytest.approx(114.575591004800 + 2 * 5 * 6 / (21 - 5 - 1), abs=1e-8)


def test_all_subsets_match_r_and_rank_by_aicc() -> None:
    """Every subset's AIC, BIC, adjusted R² and LOO RMSE equal R's; the table is sorted by AICc.

    Source: R 4.2.2 lm() on `stackloss` (values in R_STACKLOSS; LOO RMSE from hatvalues()).
    """
    y, X = _stackloss()
    table, notes = all_subsets(y, X)
    assert notes == [] and len(table) == 7
    for row in table.to_dict(orient="records"):
        aic, bic, adj, cv = R_STACKLOSS[tuple(row["predictors"].split(" + "))]
        assert row["aic"] == pytest.approx(aic, abs=1e-8)
        assert row["bic"] == pytest.approx(bic, abs=1e-8)
        assert row["adj_r2"] == pytest.approx(adj, abs=1e-10)
        assert row["cv_rmse"] == pytest.approx(cv, abs=1e-10)
    assert list(table["aicc"]) == sorted(table["aicc"])
    assert table.loc[0, "predictors"] == "AIRFLOW + WATERTEMP"
    assert table["weight_aicc"].sum() == pytest.approx(1.0)
    assert table.loc[0, "delta_aicc"] == 0.0 and list(table["rank"]) == list(range(1, 8))


def test_fit_coefficients_match_statsmodels_formula_fit() -> None:
    """Coefficients and log-likelihood equal statsmodels' formula OLS on the same data.

    Source: statsmodels.formula.api.ols("STACKLOSS ~ AIRFLOW + WATERTEMP", data).fit().
    """
    y, X = _stackloss()
    data = pd.concat([y, X], axis=1)
    ref = smf.ols("STACKLOSS ~ AIRFLOW + WATERTEMP", data).fit()
    row = fit_ols(y.to_numpy(), X[["AIRFLOW", "WATERTEMP"]])
    params = row["_params"]
    assert params["const"] == pytest.approx(ref.params["Intercept"], rel=1e-10)
    assert params["AIRFLOW"] == pytest.approx(ref.params["AIRFLOW"], rel=1e-10)
    assert params["WATERTEMP"] == pytest.approx(ref.params["WATERTEMP"], rel=1e-10)
    # statsmodels leaves the residual variance out of its AIC's parameter count.
    assert row["aic"] == pytest.approx(ref.aic + 2.0, rel=1e-12)


def test_loo_rmse_equals_refitting_without_each_point() -> None:
    """The leverage shortcut equals n refits that each leave one observation out.

    Source: numpy least squares refitted n times (the definition of leave-one-out).
    """
    rng = np.random.default_rng(3)
    X = np.column_stack([np.ones(15), rng.normal(size=(15, 2))])
    y = X @ [1.0, 2.0, -1.0] + rng.normal(size=15)
    beta, *_ = np.linalg.lstsq(X, y, rcond=None)
    errors = []
    for i in range(15):
        keep = np.arange(15) != i
        b, *_ = np.linalg.lstsq(X[keep], y[keep], rcond=None)
        errors.append(y[i] - X[i] @ b)
    assert loo_rmse(X, y - X @ beta) == pytest.approx(math.sqrt(np.mean(np.square(errors))))


def test_collinear_and_oversized_models_are_skipped() -> None:
    """A feature that copies another, or too few stimuli for K, is skipped with a note."""
    y, X = _stackloss()
    X = X.assign(DOUBLE_AIR=2 * X["AIRFLOW"])
    table, notes = all_subsets(y, X)
    assert all("DOUBLE_AIR" not in p or "AIRFLOW +" not in p for p in table["predictors"])
    assert notes and "skipped" in notes[0]
    small, small_notes = all_subsets(y.head(5), X.head(5)[["AIRFLOW", "WATERTEMP"]])
    assert set(small["n_predictors"]) == {1} and small_notes


def _with_features(n_participants: int) -> pd.DataFrame:
    """Synthetic pool plus kit features per stimulus (crossings grow with nodes and density)."""
    trials, _ = make_pool(n_participants, 60, seed=11)
    trials = trials[trials["part"] == "main"].copy()
    level = trials["density"].map({"sparse": 1.2, "medium": 1.6, "dense": 2.0})
    trials["links_per_node"] = level
    trials["crossings"] = (trials["nodes"] * level / 10).round()
    trials["path_links"] = trials["expected"] - 2
    trials["path_links"] = trials.groupby("stimulus")["path_links"].transform("first")
    return trials


def test_stimulus_features_keep_numeric_per_stimulus_columns() -> None:
    """Text levels and columns that vary within a stimulus are not features."""
    trials = _with_features(3)
    trials["jitter"] = np.arange(len(trials), dtype=float)
    _, kept = stimulus_features(trials)
    assert kept == ("nodes", "links_per_node", "crossings", "path_links")
    _, chosen = stimulus_features(trials, ["density", "jitter", "crossings"])
    assert chosen == ("crossings",)


def test_difficulty_drivers_rank_models_and_fit_mixed_model() -> None:
    """With enough participants the best model's features enter a participant-intercept model.

    Source: statsmodels.formula.api.mixedlm("log_rt ~ ...", groups=participant).fit(reml=True)
    on the same trials.
    """
    from runner.data.difficulty import robust_difficulty

    trials = _with_features(MIN_PARTICIPANTS_FOR_MIXED + 1)
    scores = robust_difficulty(trials).scores
    result = difficulty_drivers(trials, scores)
    assert result.available and result.caution == MANY_MODELS_CAUTION
    assert len(result.models) == 4 + 6 + 4
    mixed = result.mixed
    assert mixed.available and mixed.n_participants == MIN_PARTICIPANTS_FOR_MIXED + 1
    features, _ = stimulus_features(trials)
    keep = trials["outcome"].isin(["correct", "wrong"])
    data = trials[keep].copy()
    data["log_rt"] = np.log(data["rt_ms"].astype(float))
    for name in mixed.predictors:
        v = data[name].astype(float)
        data[name] = (v - v.mean()) / v.std(ddof=1)
    formula = "log_rt ~ " + " + ".join(mixed.predictors)
    ref = smf.mixedlm(formula, data, groups=data["participant"]).fit(reml=True)
    np.testing.assert_allclose(
        mixed.coefficients["estimate"].to_numpy(), ref.fe_params.to_numpy(), rtol=1e-4, atol=1e-6
    )
    assert mixed.participant_variance == pytest.approx(float(ref.cov_re.iloc[0, 0]), rel=1e-3)


def test_mixed_model_refused_with_few_participants() -> None:
    """Fewer participants than the minimum: no mixed model, and the reason names the count."""
    trials = _with_features(3)
    features, _ = stimulus_features(trials)
    result = mixed_model(trials, features, ["nodes"])
    assert not result.available and "3 participant" in result.reason


def test_no_features_means_no_models() -> None:
    """A table without numeric stimulus features gives an unavailable result with a reason."""
    trials, _ = make_pool(3, 30)
    trials = trials.drop(columns=["nodes"])
    scores = pd.DataFrame({"score": [0.1]}, index=pd.Index(["x"], name="stimulus"))
    result = difficulty_drivers(trials, scores)
    assert not result.available and "feature" in result.reason


def test_feature_missing_for_some_stimuli_is_left_out() -> None:
    """A crossing angle missing where nothing crosses is left out, not used to drop stimuli."""
    from runner.data.difficulty import robust_difficulty

    trials = _with_features(3)
    first = sorted(trials["stimulus"].unique())[:4]
    angle = trials["crossings"] * 3.0 + 10.0
    trials["min_crossing_angle_deg"] = angle.where(~trials["stimulus"].isin(first))
    result = difficulty_drivers(trials, robust_difficulty(trials).scores)
    assert "min_crossing_angle_deg" not in result.features
    assert result.n_stimuli == trials["stimulus"].nunique()
    assert any("min_crossing_angle_deg (missing for 4 stimuli)" in n for n in result.notes)


def test_best_model_predictions_are_leave_one_out_refits() -> None:
    """Each stimulus's leave-one-out prediction equals a refit without it, evaluated at it.

    Source: numpy least squares refitted once per left-out stimulus (stackloss data).
    """
    from runner.data.drivers import best_model_predictions

    y, X = _stackloss()
    X = X[["AIRFLOW", "WATERTEMP"]]
    pred = best_model_predictions(y, X)
    design = np.column_stack([np.ones(len(X)), X.to_numpy(dtype=float)])
    yv = y.to_numpy(dtype=float)
    for i in range(len(yv)):
        keep = np.arange(len(yv)) != i
        b, *_ = np.linalg.lstsq(design[keep], yv[keep], rcond=None)
        assert pred["loo_predicted"].iloc[i] == pytest.approx(design[i] @ b, rel=1e-9)
    full, *_ = np.linalg.lstsq(design, yv, rcond=None)
    np.testing.assert_allclose(pred["fitted"].to_numpy(), design @ full, rtol=1e-9)


def _mixed_data(offsets: list[float]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Answered trials of participants whose log RTs differ only by ``offsets`` (one each)."""
    rng = np.random.default_rng(3)
    stimuli = [f"s{i}" for i in range(12)]
    features = pd.DataFrame({"nodes": np.arange(12, dtype=float) * 10 + 20}, index=stimuli)
    noise = rng.normal(0.0, 0.2, size=len(stimuli) * 3)
    noise -= noise.mean()  # the same zero-mean noise for everyone: no participant differences
    rows = []
    for p, offset in enumerate(offsets):
        for k, stim in enumerate(stimuli * 3):
            log_rt = 7.0 + 0.01 * features.loc[stim, "nodes"] + offset + noise[k]
            rows.append(
                {
                    "participant": f"{p:03d}",
                    "stimulus": stim,
                    "outcome": "correct",
                    "rt_ms": float(np.exp(log_rt)),
                }
            )
    return pd.DataFrame(rows), features


def test_mixed_model_notes_a_boundary_fit() -> None:
    """A participant variance estimated at zero is named as a boundary fit; real differences are not.

    Source: common practice — a random-effect variance estimated at zero makes a singular
    (boundary) fit whose standard errors are unreliable (discussed by Bolker et al. 2009,
    Trends Ecol. Evol. 24:127-135; the threshold used is ours, no published value).
    """
    same, features = _mixed_data([0.0] * 6)
    flat = mixed_model(same, features, ["nodes"])
    assert flat.available
    assert flat.participant_variance is not None
    assert flat.participant_variance <= 1e-6 * (flat.residual_variance or 1.0)
    assert "boundary" in flat.note
    differ, features = _mixed_data([-0.4, -0.2, 0.0, 0.1, 0.3, 0.5])
    real = mixed_model(differ, features, ["nodes"])
    assert real.available and real.converged
    assert real.participant_variance is not None and real.participant_variance > 0.01
    assert real.note == ""
