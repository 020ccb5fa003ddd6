"""Plots of the pilot summary, drawn with matplotlib's Agg canvas (no display, no pyplot state).

Each function takes a table from :mod:`runner.data.summary` or :mod:`runner.data.stats` and
returns a :class:`matplotlib.figure.Figure`; :func:`save_png` writes it and releases it. Output is
deterministic: the same table gives the same PNG bytes (fixed jitter seed, no timestamps).

Palette: four outcome colours chosen to differ in hue along the blue-orange axis, which
red-green colour vision deficiencies keep, and in lightness, so they stay apart in greyscale too
(WCAG relative luminance about 0.14, 0.22, 0.46 and 0.69).
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import matplotlib as mpl
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import LinearSegmentedColormap, to_rgb
from matplotlib.figure import Figure

from runner.contract.outputs import replace_file

# Outcome colours: deep blue, burnt orange, light grey, pale sand (see the module docstring).
OUTCOME_COLOURS = {
    "correct": "#2E6B9E",
    "wrong": "#C8651B",
    "unanswered": "#B4B4B4",
    "unsure": "#EED78F",
}
OUTCOME_ORDER = ("correct", "wrong", "unsure", "unanswered")
INK = "#2B2B2B"
MUTED_INK = "#6B6B6B"
GRID = "#E4E1DA"
ACCENT = OUTCOME_COLOURS["correct"]
# Rating heat map: from a warm off-white to the accent blue; lightness falls monotonically.
RATING_CMAP = LinearSegmentedColormap.from_list("trialdeck_rating", ["#F7F4EC", "#8FB3CF", ACCENT])

FIG_SIZE_IN = (7.2, 4.3)
DPI = 110
# Shares below this are too thin to carry a printed percentage inside a bar.
MIN_LABEL_SHARE = 0.07
# Horizontal spread of the per-stimulus points around each level (in level-position units).
JITTER_WIDTH = 0.28
JITTER_SEED = 20240601
# Text on a cell darker than this relative luminance is printed white.
DARK_CELL_LUMINANCE = 0.3
RATING_SHADE_STEP = 0.1

# Keys are matplotlib rc names (typed by matplotlib as literal names).
STYLE: dict[Any, Any] = {
    "font.size": 9.5,
    "axes.titlesize": 11,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.labelsize": 10,
    "axes.edgecolor": MUTED_INK,
    "axes.labelcolor": INK,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "xtick.color": INK,
    "ytick.color": INK,
    "text.color": INK,
    "legend.frameon": False,
}


@contextmanager
def _style() -> Iterator[None]:
    with mpl.rc_context(STYLE):
        yield


def _new_figure(size: tuple[float, float] = FIG_SIZE_IN) -> tuple[Figure, Any]:
    fig = Figure(figsize=size, dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    ax.set_axisbelow(True)
    return fig, ax


def _relative_luminance(colour: Any) -> float:
    """WCAG 2.2 relative luminance of an sRGB colour."""
    lin = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in to_rgb(colour)]
    return 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]


def _level_labels(values: pd.Series) -> list[str]:
    return [str(v) for v in values]


def _n_text(n: int, what: str) -> str:
    return f"{n} {what}" if n != 1 else f"1 {what.rstrip('s')}"


def outcome_bars(level_table: pd.DataFrame, factor: str, *, n_participants: int) -> Figure:
    """Stacked bars of the correct, wrong, unsure and unanswered shares per level.

    Parameters
    ----------
    level_table : pd.DataFrame
        Output of :func:`runner.data.summary.level_summary`.
    factor : str
        The factor column of ``level_table``.
    n_participants : int
        Shown in the title.

    Returns
    -------
    Figure
    """
    with _style():
        fig, ax = _new_figure()
        x = np.arange(len(level_table))
        bottom = np.zeros(len(level_table))
        n_scored = level_table["n_scored"].to_numpy()
        for name in OUTCOME_ORDER:
            share = np.nan_to_num(level_table[f"share_{name}"].to_numpy(dtype=float))
            ax.bar(
                x,
                share * 100,
                bottom=bottom * 100,
                width=0.68,
                color=OUTCOME_COLOURS[name],
                edgecolor="white",
                linewidth=0.8,
                label=name,
            )
            text_colour = (
                "white" if _relative_luminance(OUTCOME_COLOURS[name]) < DARK_CELL_LUMINANCE else INK
            )
            for xi, b, s in zip(x, bottom, share, strict=True):
                if s >= MIN_LABEL_SHARE:
                    ax.text(
                        xi,
                        (b + s / 2) * 100,
                        f"{100 * s:.0f}%",
                        ha="center",
                        va="center",
                        fontsize=8.5,
                        color=text_colour,
                    )
            bottom = bottom + share
        for xi, n in zip(x, n_scored, strict=True):
            ax.text(xi, 101.5, f"n={n}", ha="center", va="bottom", fontsize=8, color=MUTED_INK)
        ax.set_xticks(x, _level_labels(level_table[factor]))
        ax.set_ylim(0, 108)
        ax.set_yticks(np.arange(0, 101, 20))
        ax.set_xlabel(factor)
        ax.set_ylabel("Share of scored trials (%)")
        ax.set_title(
            f"Answers by {factor} ({_n_text(int(n_scored.sum()), 'scored trials')}, "
            f"{_n_text(n_participants, 'participants')})"
        )
        ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), reverse=True)
        ax.yaxis.grid(True, color=GRID, linewidth=0.8)
    return fig


def rt_means(level_table: pd.DataFrame, factor: str, *, n_participants: int) -> Figure:
    """Mean response time with its 95% t interval per level, and the median as an open circle.

    Parameters
    ----------
    level_table : pd.DataFrame
        Output of :func:`runner.data.summary.level_summary`.
    factor : str
        The factor column of ``level_table``.
    n_participants : int
        Shown in the title.

    Returns
    -------
    Figure
    """
    with _style():
        fig, ax = _new_figure()
        x = np.arange(len(level_table))
        mean = level_table["rt_mean_ms"].to_numpy(dtype=float) / 1000
        low = level_table["rt_ci_low_ms"].to_numpy(dtype=float) / 1000
        high = level_table["rt_ci_high_ms"].to_numpy(dtype=float) / 1000
        median = level_table["rt_median_ms"].to_numpy(dtype=float) / 1000
        has_ci = np.isfinite(low) & np.isfinite(high)
        yerr = np.vstack([np.where(has_ci, mean - low, 0.0), np.where(has_ci, high - mean, 0.0)])
        if pd.api.types.is_numeric_dtype(level_table[factor].dtype):
            # Ordered numeric levels: a faint line helps the eye follow the trend.
            ax.plot(x, mean, color=ACCENT, alpha=0.35, linewidth=1.2)
        ax.errorbar(
            x,
            mean,
            yerr=yerr,
            fmt="o",
            color=ACCENT,
            ecolor=ACCENT,
            elinewidth=1.6,
            capsize=5,
            markersize=7,
            label="mean, 95% CI",
        )
        ax.plot(
            x,
            median,
            linestyle="none",
            marker="o",
            markersize=7,
            markerfacecolor="white",
            markeredgecolor=OUTCOME_COLOURS["wrong"],
            markeredgewidth=1.5,
            label="median",
        )
        n_rt = level_table["rt_n"].to_numpy()
        top = np.nanmax(np.concatenate([high[has_ci], mean, median])) if len(x) else 1.0
        top = top if math.isfinite(top) else 1.0
        for xi, n in zip(x, n_rt, strict=True):
            ax.text(xi, top * 1.06, f"n={n}", ha="center", va="bottom", fontsize=8, color=MUTED_INK)
        ax.set_ylim(0, top * 1.15)
        ax.set_xlim(-0.5, len(x) - 0.5)
        ax.set_xticks(x, _level_labels(level_table[factor]))
        ax.set_xlabel(factor)
        ax.set_ylabel("Response time (s)")
        ax.set_title(
            f"Response time by {factor} ({_n_text(int(n_rt.sum()), 'answered trials')}, "
            f"{_n_text(n_participants, 'participants')})"
        )
        ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0))
        ax.yaxis.grid(True, color=GRID, linewidth=0.8)
    return fig


def rating_distribution(level_table: pd.DataFrame, factor: str, *, rating_points: int) -> Figure:
    """Heat map of rating counts: one row per level, one column per scale point.

    Cells are shaded by the share of that level's rated trials and print the count.

    Parameters
    ----------
    level_table : pd.DataFrame
        Output of :func:`runner.data.summary.level_summary`.
    factor : str
        The factor column of ``level_table``.
    rating_points : int
        Number of scale points.

    Returns
    -------
    Figure
    """
    columns = [f"rating_{k}" for k in range(1, rating_points + 1)]
    counts = level_table[columns].to_numpy(dtype=float)
    totals = counts.sum(axis=1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        shares = np.where(totals > 0, counts / totals, 0.0)
    height = max(2.6, 1.3 + 0.45 * len(level_table))
    with _style():
        fig, ax = _new_figure((FIG_SIZE_IN[0], height))
        # Scale the shading to the largest share (rounded up to a tenth) so typical spreads of
        # ratings over many points still show contrast.
        top = max(
            RATING_SHADE_STEP,
            math.ceil(shares.max(initial=0.0) / RATING_SHADE_STEP) * RATING_SHADE_STEP,
        )
        image = ax.imshow(shares, cmap=RATING_CMAP, vmin=0.0, vmax=top, aspect="auto")
        for i in range(counts.shape[0]):
            for j in range(counts.shape[1]):
                rgba = RATING_CMAP(shares[i, j] / top)
                dark = _relative_luminance(rgba[:3]) < DARK_CELL_LUMINANCE
                ax.text(
                    j,
                    i,
                    f"{int(counts[i, j])}",
                    ha="center",
                    va="center",
                    fontsize=8.5,
                    color="white" if dark else INK,
                )
        ax.set_xticks(np.arange(rating_points), [str(k) for k in range(1, rating_points + 1)])
        ax.set_yticks(np.arange(len(level_table)), _level_labels(level_table[factor]))
        ax.tick_params(length=0)
        for spine in ax.spines.values():
            spine.set_visible(False)
        ax.set_xlabel(f"Difficulty rating (1 = lowest, {rating_points} = highest)")
        ax.set_ylabel(factor)
        ax.set_title(f"Ratings by {factor} ({_n_text(int(totals.sum()), 'rated trials')})")
        bar = fig.colorbar(image, ax=ax, fraction=0.04, pad=0.02)
        bar.set_label("Share of the level's ratings")
        bar.outline.set_visible(False)
    return fig


def difficulty_by_level(
    scores: pd.DataFrame, factor: str, *, levels: Sequence[Any] | None = None
) -> Figure:
    """Per-stimulus difficulty scores at each level of a factor, with the level mean.

    Parameters
    ----------
    scores : pd.DataFrame
        ``DifficultyResult.scores`` (one row per stimulus with ``score`` and the factor column).
    factor : str
        Factor column to put on the horizontal axis.
    levels : sequence, optional
        Level order; default sorted.

    Returns
    -------
    Figure
    """
    data = scores.dropna(subset=["score"])
    if levels is None:
        levels = sorted(pd.unique(data[factor].dropna()), key=lambda v: (str(type(v)), v))
    rng = np.random.default_rng(JITTER_SEED)
    with _style():
        fig, ax = _new_figure()
        ax.axhline(0.0, color=GRID, linewidth=1.2, zorder=0)
        for xi, level in enumerate(levels):
            values = data.loc[data[factor] == level, "score"].to_numpy(dtype=float)
            jitter = rng.uniform(-JITTER_WIDTH / 2, JITTER_WIDTH / 2, size=values.size)
            ax.scatter(
                xi + jitter,
                values,
                s=26,
                color=ACCENT,
                alpha=0.7,
                edgecolors="white",
                linewidths=0.5,
                label="stimulus" if xi == 0 else None,
            )
            if values.size:
                ax.hlines(
                    values.mean(),
                    xi - JITTER_WIDTH,
                    xi + JITTER_WIDTH,
                    color=OUTCOME_COLOURS["wrong"],
                    linewidth=2.2,
                    label="level mean" if xi == 0 else None,
                )
        ax.set_xticks(np.arange(len(levels)), [str(v) for v in levels])
        ax.set_xlim(-0.6, len(levels) - 0.4)
        ax.set_xlabel(factor)
        ax.set_ylabel("Difficulty score (z units; higher = harder)")
        ax.set_title(f"Difficulty score by {factor} ({_n_text(len(data), 'stimuli')})")
        ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0))
        ax.yaxis.grid(True, color=GRID, linewidth=0.8)
    return fig


def save_png(fig: Figure, path: Path) -> Path:
    """Write a figure as PNG (without a software-version stamp) and release it.

    Parameters
    ----------
    fig : Figure
        A figure from this module.
    path : Path
        Target file; its folder must exist.

    Returns
    -------
    Path
        ``path``.
    """
    path = Path(path)
    # Written beside the target and renamed over it: a link at ``path`` is never written through.
    with replace_file(path, binary=True) as fh:
        fig.savefig(fh, format="png", dpi=DPI, metadata={"Software": None})
    fig.clear()
    return path
