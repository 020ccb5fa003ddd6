"""Tests of the layouts and the readability repair."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from runner.graphs.families import make_graph
from runner.graphs.geometry import close_node_pairs, node_link_overlaps
from runner.graphs.layout import links_array, readable_layout, repair, stress_layout


def _stress(g: nx.Graph, x: np.ndarray) -> float:
    d = dict(nx.all_pairs_shortest_path_length(g))
    total = 0.0
    for i in g:
        for j in g:
            if i < j:
                dist = np.linalg.norm(x[i] - x[j])
                total += (dist - d[i][j]) ** 2 / d[i][j] ** 2
    return total


def test_stress_layout_lowers_stress() -> None:
    """Stress majorization ends with far lower stress than random positions.

    Source: stress definition with weights d^-2 (common practice in graph drawing).
    """
    g = make_graph("random", 40, 1.4, np.random.default_rng(0))
    x = stress_layout(g, seed=1)
    start = np.random.default_rng(1).uniform(0, np.sqrt(40), size=(40, 2))
    assert _stress(g, x) < 0.2 * _stress(g, start)


def test_stress_layout_of_a_path_is_straight() -> None:
    """A path graph is drawn on a near-straight line with unit spacing.

    Source: from memory (a path's graph distances are realisable exactly on a line).
    """
    g = nx.path_graph(8)
    x = stress_layout(g, seed=3)
    assert np.linalg.norm(x[0] - x[7]) == pytest.approx(7.0, rel=0.02)


@pytest.mark.parametrize("method", ["spring", "stress"])
def test_readable_layout_is_inside_canvas_and_clean(method: str) -> None:
    """A repaired layout keeps nodes inside the margins, apart, and off foreign links.

    Source: common practice (no published source).
    """
    g = make_graph("random", 60, 1.3, np.random.default_rng(4))
    pos, left = readable_layout(
        g, method, 2, width=800, height=600, margin=40, min_distance=20, clearance=8
    )
    assert left.ok
    assert pos[:, 0].min() >= 40 and pos[:, 0].max() <= 760
    assert pos[:, 1].min() >= 40 and pos[:, 1].max() <= 560
    assert len(close_node_pairs(pos, 20)) == 0
    assert len(node_link_overlaps(pos, links_array(g), 8)) == 0


def test_repair_moves_a_node_off_a_link() -> None:
    """A node sitting on a foreign link, and a node pair too close, are both repaired.

    Source: common practice (no published source).
    """
    pos = np.array([[100.0, 300.0], [500.0, 300.0], [300.0, 301.0], [300.0, 500.0], [303.0, 500.0]])
    links = np.array([[0, 1], [2, 3]])
    fixed, left = repair(pos, links, min_distance=20, clearance=10, box=(0, 0, 1000, 1000))
    assert left.ok
    assert len(node_link_overlaps(fixed, links, 10)) == 0
    assert len(close_node_pairs(fixed, 20)) == 0
