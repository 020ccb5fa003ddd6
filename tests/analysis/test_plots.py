"""Tests of runner.data.plots: every plot renders to a real, non-blank PNG."""

from __future__ import annotations

import struct
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pandas as pd
import pytest
from synthetic import make_pool

from runner.data import plots
from runner.data.stats import difficulty_scores
from runner.data.summary import level_summary

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
MIN_PNG_BYTES = 10_000


def _png_size(path: Path) -> tuple[int, int]:
    """Width and height from the IHDR chunk (PNG specification, section 11.2.2)."""
    data = path.read_bytes()
    assert data.startswith(PNG_SIGNATURE)
    assert data[12:16] == b"IHDR"
    return struct.unpack(">II", data[16:24])


@pytest.fixture(scope="module")
def tables() -> dict[str, object]:
    trials, _ = make_pool(3, 30)
    main = trials[trials["part"] == "main"]
    return {
        "nodes": level_summary(main, "nodes"),
        "density": level_summary(main, "density", levels=["sparse", "medium", "dense"]),
        "difficulty": difficulty_scores(main, factors=["nodes", "density"]).scores,
    }


def _figures(tables: dict[str, object], factor: str) -> dict[str, object]:
    table = tables[factor]
    return {
        "outcomes": plots.outcome_bars(table, factor, n_participants=3),
        "rt": plots.rt_means(table, factor, n_participants=3),
        "ratings": plots.rating_distribution(table, factor, rating_points=9),
        "difficulty": plots.difficulty_by_level(
            tables["difficulty"], factor, levels=list(table[factor])
        ),
    }


@pytest.mark.parametrize("factor", ["nodes", "density"])
def test_every_plot_renders_a_non_trivial_png(tmp_path: Path, tables, factor: str) -> None:
    """Each plot writes a valid PNG of at least 10 kB whose pixels are not all one colour.

    Source: PNG specification (W3C, signature and IHDR chunk layout).
    """
    for name, fig in _figures(tables, factor).items():
        path = plots.save_png(fig, tmp_path / f"{name}.png")
        assert path.stat().st_size > MIN_PNG_BYTES, name
        width, height = _png_size(path)
        assert width >= 600 and height >= 250, name
        pixels = mpimg.imread(path)
        assert pixels[..., :3].std() > 0.05, name


def test_plots_are_deterministic(tmp_path: Path, tables) -> None:
    """Drawing the same table twice gives identical PNG bytes (jitter is seeded)."""
    for run in ("a", "b"):
        (tmp_path / run).mkdir()
        for name, fig in _figures(tables, "nodes").items():
            plots.save_png(fig, tmp_path / run / f"{name}.png")
    for name in ("outcomes", "rt", "ratings", "difficulty"):
        assert (tmp_path / "a" / f"{name}.png").read_bytes() == (
            tmp_path / "b" / f"{name}.png"
        ).read_bytes()


def test_plots_cope_with_thin_levels(tmp_path: Path) -> None:
    """A level with one answered trial (no interval) and a level with no ratings still draw."""
    trials = pd.DataFrame(
        {
            "participant": ["A", "A", "B"],
            "session": ["1", "1", "1"],
            "stimulus": ["s1", "s2", "s3"],
            "part": ["main"] * 3,
            "outcome": ["correct", "unanswered", "wrong"],
            "rt_ms": [1200.0, np.nan, 2500.0],
            "rating": pd.array([3, pd.NA, pd.NA], dtype="Int64"),
            "density": ["sparse", "dense", "medium"],
        }
    )
    table = level_summary(trials, "density")
    for name, fig in {
        "outcomes": plots.outcome_bars(table, "density", n_participants=2),
        "rt": plots.rt_means(table, "density", n_participants=2),
        "ratings": plots.rating_distribution(table, "density", rating_points=9),
    }.items():
        path = plots.save_png(fig, tmp_path / f"{name}.png")
        assert path.stat().st_size > MIN_PNG_BYTES / 2, name


def test_outcome_colours_differ_in_lightness() -> None:
    """The four outcome colours are at least 0.05 apart in WCAG relative luminance.

    Source: WCAG 2.2 definition of relative luminance (white 1.0, black 0.0, #777777 0.184475).
    """
    assert plots._relative_luminance("#FFFFFF") == pytest.approx(1.0)
    assert plots._relative_luminance("#777777") == pytest.approx(0.184475, abs=1e-6)
    values = sorted(plots._relative_luminance(c) for c in plots.OUTCOME_COLOURS.values())
    assert min(np.diff(values)) > 0.05
