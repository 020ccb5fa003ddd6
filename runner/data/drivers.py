"""What drives difficulty: all small linear models of the difficulty score on stimulus features.

The difficulty score (:mod:`runner.data.difficulty`, one value per stimulus, averaged over
participants) is regressed by ordinary least squares (statsmodels ``OLS``) on every set of one,
two and three stimulus features the stimulus kit writes into the trial table (size, density,
crossings, route features; :data:`KIT_FEATURES`). Each model reports:

* ``aicc``: AIC with the small-sample correction of Hurvich and Tsai (1989), as given by
  Burnham and Anderson (2002, Model selection and multimodel inference, 2nd ed., eq. 2.2):
  ``AICc = AIC + 2K(K + 1) / (n - K - 1)``, where ``K`` counts every estimated parameter: the
  coefficients (intercept included) **and** the residual variance, as R's ``AIC(lm)`` does.
  ``AIC = -2 logL + 2K`` (statsmodels' ``aic`` leaves the variance out of K, so it is 2 less).
* ``bic``: ``-2 logL + K log(n)``, with the same K.
* ``adj_r2``: adjusted R squared.
* ``cv_rmse``: leave-one-out cross-validated root mean squared error, exact for OLS from the
  leverages (``e_i / (1 - h_ii)``, the PRESS residuals).
* ``delta_aicc`` and ``weight_aicc``: difference to the best model and Akaike weight.

Models are ranked by AICc. Many models are tried, so the best one is chosen on the same data it
is judged on: its fit is optimistic and a small difference in AICc (under about 2) does not tell
models apart (Burnham and Anderson 2002, section 2.6). :data:`MANY_MODELS_CAUTION` says so in the
outputs.

A linear mixed model (statsmodels ``MixedLM``) with a random intercept per participant relates
trial-level response time (log ms, answered trials) to the best model's features, where there are
at least :data:`MIN_PARTICIPANTS_FOR_MIXED` participants.
"""

from __future__ import annotations

import itertools
import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

#: A participant variance below this share of the residual variance counts as a boundary fit
#: (common practice for flagging singular fits, no published threshold).
BOUNDARY_VARIANCE_SHARE = 1e-6
#: Stimulus features of the graph kit's manifest (runner.graphs.build.MANIFEST_COLUMNS) that a
#: difficulty model may use: size, density, crossings and route features.
KIT_FEATURES = (
    "nodes",
    "links",
    "links_per_node",
    "crossings",
    "crossings_on_routes",
    "min_crossing_angle_deg",
    "path_links",
    "shortest_routes",
)
#: Trial-table columns that are never features (bookkeeping of the kit and the session).
NOT_FEATURES = frozenset(
    {
        "expected",
        "instance",
        "seed",
        "attempts",
        "answer",
        "correct",
        "unsure",
        "rating",
        "rt_ms",
        "trial",
        "onset_lsl",
        "rating_rt_ms",
        "timed_out",
        "sim_rt_ms",
    }
)
MAX_PREDICTORS = 3
#: Random effects need several groups to estimate their variance; at least five or six levels is
#: the usual advice (Bolker et al. 2009, Trends in Ecology and Evolution 24(3):127-135).
MIN_PARTICIPANTS_FOR_MIXED = 5
MANY_MODELS_CAUTION = (
    "Many models were tried on the same stimuli, so the best model's fit is optimistic: treat "
    "the ranking as a description of this pilot, not as a test, and models within about 2 AICc "
    "of the best as equally supported (Burnham and Anderson 2002, section 2.6)."
)

MODEL_COLUMNS = (
    "rank",
    "predictors",
    "n_predictors",
    "n",
    "k",
    "r2",
    "adj_r2",
    "aic",
    "aicc",
    "bic",
    "delta_aicc",
    "weight_aicc",
    "cv_rmse",
    "coefficients",
)

#: The best model's fit per stimulus: its score, fitted value and leave-one-out prediction.
PREDICTION_COLUMNS = ("score", "fitted", "loo_predicted")


@dataclass(frozen=True)
class MixedModelResult:
    """Outcome of :func:`mixed_model`: coefficients of log response time, or why not fitted."""

    available: bool
    reason: str = ""
    outcome: str = "log_rt_ms"
    predictors: tuple[str, ...] = ()
    n_trials: int = 0
    n_participants: int = 0
    coefficients: pd.DataFrame = field(default_factory=pd.DataFrame)
    participant_variance: float | None = None
    residual_variance: float | None = None
    converged: bool = False
    # Why the fit's intervals deserve caution (did not converge, or the participant variance
    # was estimated at zero); empty when there is nothing to say.
    note: str = ""


@dataclass(frozen=True)
class DriversResult:
    """Outcome of :func:`difficulty_drivers`."""

    available: bool
    reason: str = ""
    features: tuple[str, ...] = ()
    n_stimuli: int = 0
    models: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=MODEL_COLUMNS))
    caution: str = MANY_MODELS_CAUTION
    notes: tuple[str, ...] = ()
    predictions: pd.DataFrame = field(
        default_factory=lambda: pd.DataFrame(columns=PREDICTION_COLUMNS)
    )
    mixed: MixedModelResult = field(
        default_factory=lambda: MixedModelResult(False, "no difficulty model")
    )


def information_criteria(
    llf: float, n: int, n_coefficients: int
) -> tuple[int, float, float, float]:
    """``(K, AIC, AICc, BIC)`` of a Gaussian linear model, counting its residual variance in K.

    Parameters
    ----------
    llf : float
        Maximised log-likelihood.
    n : int
        Number of observations.
    n_coefficients : int
        Regression coefficients, intercept included.

    Returns
    -------
    tuple
        K, AIC, AICc (NaN when ``n - K - 1 <= 0``) and BIC.
    """
    k = n_coefficients + 1
    aic = -2.0 * llf + 2.0 * k
    aicc = aic + 2.0 * k * (k + 1) / (n - k - 1) if n - k - 1 > 0 else math.nan
    bic = -2.0 * llf + k * math.log(n)
    return k, aic, aicc, bic


def loo_rmse(X: np.ndarray, residuals: np.ndarray) -> float:
    """Leave-one-out RMSE of an OLS fit from its residuals and leverages (PRESS residuals)."""
    q, _ = np.linalg.qr(X)
    h = np.sum(q**2, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        press = residuals / (1.0 - h)
    if not np.all(np.isfinite(press)):
        return math.nan
    return float(np.sqrt(np.mean(press**2)))


def stimulus_features(
    trials: pd.DataFrame, candidates: Sequence[str] | None = None
) -> tuple[pd.DataFrame, tuple[str, ...]]:
    """Numeric features that are constant within each stimulus and vary across stimuli.

    Parameters
    ----------
    trials : pd.DataFrame
        Pooled trials table.
    candidates : sequence of str, optional
        Columns to consider; default the :data:`KIT_FEATURES` present, or, when none is, every
        numeric column that is not a contract or bookkeeping column.

    Returns
    -------
    tuple
        The feature table (index ``stimulus``) and the features kept, in the order given.
    """
    if candidates is None:
        kit = [c for c in KIT_FEATURES if c in trials.columns]
        if kit:
            candidates = kit
        else:
            from runner.data.summary import infer_factors

            candidates = [c for c in infer_factors(trials) if c not in NOT_FEATURES]
    stim = trials["stimulus"].astype(str)
    kept: list[str] = []
    columns: dict[str, pd.Series] = {}
    for name in candidates:
        if name not in trials.columns:
            continue
        raw = trials[name]
        values = pd.to_numeric(raw, errors="coerce").astype(float)
        if (values.isna() & raw.notna()).any():
            continue  # text levels, not a number
        grouped = values.groupby(stim, sort=True)
        if (grouped.nunique(dropna=True) > 1).any():
            continue  # not a property of the stimulus
        first = grouped.first()
        if first.notna().sum() < 3 or first.dropna().nunique() < 2:
            continue
        columns[name] = first
        kept.append(name)
    table = pd.DataFrame(columns, index=pd.Index(sorted(set(stim)), name="stimulus"))
    return table, tuple(kept)


def fit_ols(y: np.ndarray, X: pd.DataFrame) -> dict[str, object]:
    """One OLS fit (statsmodels) with its information criteria and cross-validated error."""
    from statsmodels.regression.linear_model import OLS

    design = np.column_stack([np.ones(len(X)), X.to_numpy(dtype=float)])
    fit = OLS(y, design).fit()
    n = int(fit.nobs)
    k, aic, aicc, bic = information_criteria(float(fit.llf), n, design.shape[1])
    names = ["const", *X.columns]
    return {
        "predictors": " + ".join(X.columns),
        "n_predictors": X.shape[1],
        "n": n,
        "k": k,
        "r2": float(fit.rsquared),
        "adj_r2": float(fit.rsquared_adj),
        "aic": aic,
        "aicc": aicc,
        "bic": bic,
        "cv_rmse": loo_rmse(design, np.asarray(fit.resid, dtype=float)),
        "coefficients": "; ".join(
            f"{name} {value:.4g}" for name, value in zip(names, fit.params, strict=True)
        ),
        "_params": dict(zip(names, map(float, fit.params), strict=True)),
    }


def all_subsets(
    y: pd.Series, features: pd.DataFrame, *, max_predictors: int = MAX_PREDICTORS
) -> tuple[pd.DataFrame, list[str]]:
    """Fit every model with 1..``max_predictors`` features; rank them by AICc.

    Rows with a missing value in ``y`` or any feature are left out, so every model uses the same
    stimuli (information criteria compare only fits to the same data). A set of features that is
    collinear (design matrix not of full rank) or leaves fewer than two residual degrees of
    freedom beyond K is skipped.

    Returns
    -------
    tuple
        The ranked model table (:data:`MODEL_COLUMNS`) and notes on skipped models.
    """
    data = pd.concat([y.rename("__y"), features], axis=1).dropna()
    yv = data["__y"].to_numpy(dtype=float)
    n = yv.size
    rows = []
    skipped = 0
    for size in range(1, max_predictors + 1):
        for combo in itertools.combinations(features.columns, size):
            X = data[list(combo)]
            # K = size + 2 (intercept, variance); AICc needs n - K - 1 >= 1.
            if n - (size + 2) - 1 < 1:
                skipped += 1
                continue
            design = np.column_stack([np.ones(n), X.to_numpy(dtype=float)])
            if np.linalg.matrix_rank(design) < design.shape[1]:
                skipped += 1
                continue
            rows.append(fit_ols(yv, X))
    notes = []
    if skipped:
        notes.append(
            f"{skipped} feature set(s) were skipped: collinear features, or too few stimuli for "
            "the number of parameters."
        )
    if not rows:
        return pd.DataFrame(columns=MODEL_COLUMNS), notes
    table = pd.DataFrame(rows).drop(columns="_params")
    table = table.sort_values(["aicc", "bic", "predictors"], kind="mergesort").reset_index(
        drop=True
    )
    best = table["aicc"].min()
    table["delta_aicc"] = table["aicc"] - best
    rel = np.exp(-0.5 * table["delta_aicc"].to_numpy(dtype=float))
    table["weight_aicc"] = rel / rel.sum()
    table["rank"] = np.arange(1, len(table) + 1)
    return table[list(MODEL_COLUMNS)], notes


def mixed_model(
    trials: pd.DataFrame, features: pd.DataFrame, predictors: Sequence[str]
) -> MixedModelResult:
    """Log response time on stimulus features with a random intercept per participant.

    Trials answered with a number (correct or wrong) with a positive ``rt_ms`` are used; the
    features are z-standardised (sample SD) so the coefficients are per SD of the feature.
    statsmodels ``MixedLM`` (REML). Not fitted with fewer than
    :data:`MIN_PARTICIPANTS_FOR_MIXED` participants; ``reason`` then says why.
    """
    predictors = list(predictors)
    n_people = int(trials["participant"].astype(str).nunique())
    if not predictors:
        return MixedModelResult(False, "No difficulty model was fitted, so no features to use.")
    if n_people < MIN_PARTICIPANTS_FOR_MIXED:
        return MixedModelResult(
            False,
            f"Not fitted: {n_people} participant(s); a participant random effect needs at least "
            f"{MIN_PARTICIPANTS_FOR_MIXED} (Bolker et al. 2009).",
            predictors=tuple(predictors),
            n_participants=n_people,
        )
    from statsmodels.regression.mixed_linear_model import MixedLM

    outcome = trials["outcome"].astype(str)
    rt = pd.to_numeric(trials["rt_ms"], errors="coerce").astype(float)
    keep = outcome.isin(("correct", "wrong")) & (rt > 0)
    stim = trials.loc[keep, "stimulus"].astype(str)
    X = features.reindex(stim.to_numpy())[predictors].to_numpy(dtype=float)
    y = np.log(rt[keep].to_numpy(dtype=float))
    groups = trials.loc[keep, "participant"].astype(str).to_numpy()
    ok = np.all(np.isfinite(X), axis=1) & np.isfinite(y)
    X, y, groups = X[ok], y[ok], groups[ok]
    if y.size < len(predictors) + 3:
        return MixedModelResult(False, "Not fitted: too few answered trials with the features.")
    sd = X.std(axis=0, ddof=1)
    if np.any(~(sd > 0)):
        return MixedModelResult(False, "Not fitted: a feature does not vary across trials.")
    Z = (X - X.mean(axis=0)) / sd
    design = np.column_stack([np.ones(len(Z)), Z])
    with warnings.catch_warnings():
        # Boundary fits and convergence notes are reported through ``converged``.
        warnings.simplefilter("ignore")
        fit = MixedLM(y, design, groups=groups).fit(reml=True)
    names = ["const", *predictors]
    ci = np.asarray(fit.conf_int())[: len(names)]
    coefficients = pd.DataFrame(
        {
            "term": names,
            "estimate": np.asarray(fit.fe_params, dtype=float),
            "se": np.asarray(fit.bse_fe, dtype=float),
            "ci_low": ci[:, 0],
            "ci_high": ci[:, 1],
            "p": np.asarray(fit.pvalues, dtype=float)[: len(names)],
        }
    )
    participant_variance = float(np.asarray(fit.cov_re)[0, 0])
    notes = []
    if not fit.converged:
        notes.append("the fit did not converge, so its estimates and intervals are approximate")
    if participant_variance <= BOUNDARY_VARIANCE_SHARE * float(fit.scale):
        notes.append(
            "the participant variance was estimated at (or next to) zero, a boundary fit: "
            "participants did not differ beyond trial-to-trial noise, and the intercept's "
            "standard error from such a fit is not reliable"
        )
    return MixedModelResult(
        True,
        outcome="log_rt_ms",
        predictors=tuple(predictors),
        n_trials=int(y.size),
        n_participants=int(pd.Series(groups).nunique()),
        coefficients=coefficients,
        participant_variance=participant_variance,
        residual_variance=float(fit.scale),
        converged=bool(fit.converged),
        note="; ".join(notes),
    )


def difficulty_drivers(
    trials: pd.DataFrame,
    scores: pd.DataFrame,
    *,
    features: Sequence[str] | None = None,
    max_predictors: int = MAX_PREDICTORS,
) -> DriversResult:
    """Rank linear models of the per-stimulus difficulty score on stimulus features.

    Parameters
    ----------
    trials : pd.DataFrame
        Pooled trials table (the trials the score was computed from).
    scores : pd.DataFrame
        Per-stimulus table with a ``score`` column (index ``stimulus``).
    features : sequence of str, optional
        Feature columns; default see :func:`stimulus_features`.
    max_predictors : int, optional
        Largest model size, default 3.

    Returns
    -------
    DriversResult
        ``available`` is False (with ``reason``) when there is no score, no feature, or too few
        stimuli.
    """
    table, kept = stimulus_features(trials, features)
    if "score" not in scores.columns or scores["score"].notna().sum() == 0:
        return DriversResult(False, "No difficulty score, so nothing to model.", features=kept)
    if not kept:
        return DriversResult(
            False,
            "No numeric stimulus feature (constant within each stimulus, varying across them) "
            "is in the trial table, so there is nothing to model the score on.",
        )
    score = scores["score"].astype(float)
    score.index = score.index.astype(str)
    scored = score.dropna().index
    notes: list[str] = []
    gaps = table.reindex(scored).isna().sum()
    partial = [name for name in kept if gaps[name] > 0]
    if partial:
        # A feature missing for some stimuli (a crossing angle where nothing crosses) would drop
        # those stimuli from every model; it is left out instead.
        notes.append(
            ", ".join(f"{name} (missing for {int(gaps[name])} stimuli)" for name in partial)
            + " left out: every model must use the same stimuli."
        )
        kept = tuple(name for name in kept if name not in partial)
        table = table[list(kept)]
    if not kept:
        return DriversResult(
            False,
            "No stimulus feature has a value for every scored stimulus, so there is nothing to "
            "model the score on.",
            notes=tuple(notes),
        )
    models, subset_notes = all_subsets(score, table, max_predictors=max_predictors)
    notes.extend(subset_notes)
    n = int(pd.concat([score, table], axis=1).dropna().shape[0])
    if models.empty:
        return DriversResult(
            False,
            f"Too few stimuli ({n}) with a score and every feature to fit a model.",
            features=kept,
            n_stimuli=n,
            notes=tuple(notes),
        )
    best = str(models.loc[0, "predictors"]).split(" + ")
    return DriversResult(
        True,
        features=kept,
        n_stimuli=n,
        models=models,
        notes=tuple(notes),
        predictions=best_model_predictions(score, table[best]),
        mixed=mixed_model(trials, table, best),
    )


def best_model_predictions(score: pd.Series, features: pd.DataFrame) -> pd.DataFrame:
    """Fitted values and leave-one-out predictions of one OLS model, per stimulus.

    The leave-one-out prediction of stimulus i is ``y_i - e_i / (1 - h_ii)``: what the model
    fitted without that stimulus predicts for it.
    """
    from statsmodels.regression.linear_model import OLS

    data = pd.concat([score.rename("score"), features], axis=1).dropna()
    design = np.column_stack([np.ones(len(data)), data[features.columns].to_numpy(dtype=float)])
    y = data["score"].to_numpy(dtype=float)
    fit = OLS(y, design).fit()
    resid = np.asarray(fit.resid, dtype=float)
    q, _ = np.linalg.qr(design)
    h = np.sum(q**2, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        loo = y - resid / (1.0 - h)
    return pd.DataFrame(
        {"score": y, "fitted": y - resid, "loo_predicted": loo},
        index=data.index,
    )


def drivers_facts(result: DriversResult, *, top: int = 5) -> dict[str, object]:
    """JSON-ready facts: features, the best models and the mixed model."""
    mixed = result.mixed
    return {
        "available": result.available,
        "reason": result.reason or None,
        "features": list(result.features),
        "n_stimuli": result.n_stimuli,
        "n_models": len(result.models),
        "caution": result.caution,
        "notes": list(result.notes),
        "best_models": result.models.head(top).to_dict(orient="records"),
        "mixed": {
            "available": mixed.available,
            "reason": mixed.reason or None,
            "outcome": mixed.outcome,
            "predictors": list(mixed.predictors),
            "n_trials": mixed.n_trials,
            "n_participants": mixed.n_participants,
            "participant_variance": mixed.participant_variance,
            "residual_variance": mixed.residual_variance,
            "converged": mixed.converged,
            "note": mixed.note,
            "coefficients": mixed.coefficients.to_dict(orient="records"),
        },
    }
