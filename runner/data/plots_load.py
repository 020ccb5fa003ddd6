"""Plots of the pilot report's models: a measure against the difficulty score, with two lines,
and the best difficulty model's predictions.

Drawn like :mod:`runner.data.plots` (Agg canvas, the same style and palette, deterministic).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from runner.data import plots
from runner.data.twolines import TwoLinesResult


def load_curve(
    bins: pd.DataFrame, result: TwoLinesResult, *, measure: str, units: str = ""
) -> Figure:
    """Binned means with 95% intervals, the flexible fit, and the two lines at the break.

    Parameters
    ----------
    bins : pd.DataFrame
        The measure's rows of the bin table (:data:`runner.data.load_curve.BIN_COLUMNS`).
    result : TwoLinesResult
        The measure's two-lines test.
    measure, units : str
        Axis label.

    Returns
    -------
    Figure
    """
    with plots._style():
        fig, ax = plots._new_figure()
        x = bins["score_mean"].to_numpy(dtype=float)
        mean = bins["mean"].to_numpy(dtype=float)
        low = bins["ci_low"].to_numpy(dtype=float)
        high = bins["ci_high"].to_numpy(dtype=float)
        ok = np.isfinite(x) & np.isfinite(mean)
        yerr = np.vstack([mean - low, high - mean])[:, ok]
        ax.errorbar(
            x[ok],
            mean[ok],
            yerr=np.nan_to_num(yerr),
            fmt="o",
            color=plots.ACCENT,
            ecolor=plots.ACCENT,
            capsize=3,
            label="bin mean, 95% interval",
        )
        if result.smooth is not None:
            ax.plot(
                result.smooth.x,
                result.smooth.fit,
                color=plots.MUTED_INK,
                linestyle="--",
                linewidth=1.2,
                label="smoothing spline",
            )
        if result.available and result.line1 is not None and result.line2 is not None:
            xs = result.smooth.x if result.smooth is not None else x[ok]
            xc = result.break_point
            left = np.array([min(xs.min(), xc), xc])
            right = np.array([xc, max(xs.max(), xc)])
            colour = plots.OUTCOME_COLOURS["wrong"]
            ax.plot(
                left,
                result.line1.at_break + result.line1.slope * (left - xc),
                color=colour,
                linewidth=2.2,
                label=f"line 1: b = {result.line1.slope:.3g}, p = {result.line1.p:.2g}",
            )
            ax.plot(
                right,
                result.line2.at_break + result.line2.slope * (right - xc),
                color=colour,
                linewidth=2.2,
                linestyle=":",
                label=f"line 2: b = {result.line2.slope:.3g}, p = {result.line2.p:.2g}",
            )
            ax.axvline(xc, color=plots.GRID, linewidth=1.4, zorder=0)
        ax.set_xlabel("Difficulty score of the stimulus (higher = harder)")
        ax.set_ylabel(f"{measure} ({units})" if units else measure)
        verdict = "U-shape shown" if result.significant else "no U-shape shown"
        ax.set_title(f"{measure} by difficulty ({result.n} trials)\nTwo-lines test: {verdict}")
        ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0))
        ax.yaxis.grid(True, color=plots.GRID, linewidth=0.8)
    return fig


def best_model_fit(predictions: pd.DataFrame, *, predictors: str, cv_rmse: float) -> Figure:
    """Each stimulus's score against the best model's leave-one-out prediction.

    Parameters
    ----------
    predictions : pd.DataFrame
        ``DriversResult.predictions`` (``score``, ``fitted``, ``loo_predicted`` per stimulus).
    predictors : str
        The model's features, for the title.
    cv_rmse : float
        Its leave-one-out RMSE, for the title.

    Returns
    -------
    Figure
    """
    with plots._style():
        fig, ax = plots._new_figure()
        obs = predictions["score"].to_numpy(dtype=float)
        loo = predictions["loo_predicted"].to_numpy(dtype=float)
        ok = np.isfinite(obs) & np.isfinite(loo)
        lo = float(min(obs[ok].min(), loo[ok].min())) if ok.any() else -1.0
        hi = float(max(obs[ok].max(), loo[ok].max())) if ok.any() else 1.0
        ax.plot([lo, hi], [lo, hi], color=plots.GRID, linewidth=1.4, zorder=0, label="y = x")
        ax.scatter(
            loo[ok],
            obs[ok],
            s=28,
            color=plots.ACCENT,
            alpha=0.8,
            edgecolors="white",
            linewidths=0.5,
            label="stimulus",
        )
        ax.set_xlabel("Predicted score, model fitted without the stimulus (leave-one-out)")
        ax.set_ylabel("Difficulty score (higher = harder)")
        ax.set_title(
            f"Best model: {predictors} ({int(ok.sum())} stimuli)\n"
            f"Leave-one-out RMSE {cv_rmse:.3g} (score units)"
        )
        ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0))
        ax.yaxis.grid(True, color=plots.GRID, linewidth=0.8)
    return fig
