"""Tests of the drawing geometry: crossings, crossing angles, node-link clearance, fitting."""

from __future__ import annotations

import math

import numpy as np
import pytest
from shapely.geometry import LineString

from runner.graphs.geometry import (
    close_node_pairs,
    count_crossings,
    crossing_angles,
    crossing_pairs,
    fit_to_canvas,
    node_link_overlaps,
)

CONVEX_KN_CROSSINGS = {4: 1, 5: 5, 6: 15, 7: 35, 8: 70, 9: 126, 10: 210}


def _convex_kn(n: int) -> tuple[np.ndarray, np.ndarray]:
    angle = 2 * np.pi * np.arange(n) / n
    pos = np.column_stack([np.cos(angle), np.sin(angle)]) * 400 + 500
    links = np.array([(i, j) for i in range(n) for j in range(i + 1, n)])
    return pos, links


@pytest.mark.parametrize("n", sorted(CONVEX_KN_CROSSINGS))
def test_convex_complete_graph_crossings(n: int) -> None:
    """K_n with nodes in convex position has C(n, 4) crossings.

    Source: Lovasz, Vesztergombi, Wagner, Welzl 2003, "Convex quadrilaterals and k-sets"
    (n = 4..10 give 1, 5, 15, 35, 70, 126, 210).
    """
    pos, links = _convex_kn(n)
    assert count_crossings(pos, links) == CONVEX_KN_CROSSINGS[n] == math.comb(n, 4)


@pytest.mark.parametrize("seed", range(6))
def test_crossings_match_shapely(seed: int) -> None:
    """Crossing pairs on random layouts are exactly the pairs shapely says cross.

    Source: shapely LineString.crosses as the reference implementation.
    """
    rng = np.random.default_rng(seed)
    n, m = 30, 60
    pos = rng.uniform(0, 1000, size=(n, 2))
    links = set()
    while len(links) < m:
        a, b = sorted(rng.choice(n, size=2, replace=False).tolist())
        links.add((a, b))
    links_arr = np.array(sorted(links))
    lines = [LineString([pos[a], pos[b]]) for a, b in links_arr]
    expected = {
        (i, j)
        for i in range(m)
        for j in range(i + 1, m)
        if not set(links_arr[i]) & set(links_arr[j]) and lines[i].crosses(lines[j])
    }
    found = {tuple(p) for p in crossing_pairs(pos, links_arr).tolist()}
    assert found == expected
    assert len(found) > 0


def test_links_sharing_a_node_do_not_cross() -> None:
    """Two links meeting at their common end node are not a crossing.

    Source: common practice (no published source).
    """
    pos = np.array([[0.0, 0.0], [10.0, 0.0], [0.0, 10.0]])
    assert count_crossings(pos, np.array([[0, 1], [0, 2]])) == 0


@pytest.mark.parametrize(
    ("b_end", "angle"),
    [((0.0, 10.0), 90.0), ((10.0, 10.0), 45.0), ((-10.0, 10.0), 45.0)],
)
def test_crossing_angle(b_end: tuple[float, float], angle: float) -> None:
    """The crossing angle is the acute angle between the two links.

    Source: from memory (angle between direction vectors, arccos of |u.v| / |u||v|).
    """
    pos = np.array([[-10.0, 0.0], [10.0, 0.0], [-b_end[0], -b_end[1]], list(b_end)])
    links = np.array([[0, 1], [2, 3]])
    pairs = crossing_pairs(pos, links)
    assert pairs.tolist() == [[0, 1]]
    assert crossing_angles(pos, links, pairs)[0] == pytest.approx(angle)


def test_node_on_a_foreign_link_is_found() -> None:
    """A node lying near a link it does not touch is reported; the link's own ends are not.

    Source: common practice (no published source).
    """
    pos = np.array([[0.0, 0.0], [100.0, 0.0], [50.0, 3.0], [50.0, 40.0]])
    links = np.array([[0, 1], [2, 3]])
    assert node_link_overlaps(pos, links, clearance=5.0).tolist() == [[2, 0]]
    assert node_link_overlaps(pos, links, clearance=2.0).tolist() == []


def test_close_node_pairs() -> None:
    """Node pairs nearer than the minimum distance are listed once each.

    Source: common practice (no published source).
    """
    pos = np.array([[0.0, 0.0], [3.0, 4.0], [100.0, 100.0]])
    assert close_node_pairs(pos, 6.0).tolist() == [[0, 1]]
    assert close_node_pairs(pos, 5.0).tolist() == []


def test_fit_to_canvas_keeps_margins_and_aspect() -> None:
    """Fitting fills the canvas inside the margin and keeps the layout's aspect ratio.

    Source: common practice (no published source).
    """
    pos = np.array([[0.0, 0.0], [2.0, 1.0], [1.0, 0.5]])
    out = fit_to_canvas(pos, 1000, 800, 50)
    assert out[:, 0].min() == pytest.approx(50)
    assert out[:, 0].max() == pytest.approx(950)
    height = out[:, 1].max() - out[:, 1].min()
    assert height == pytest.approx(450)
    assert (out[:, 1].min() + out[:, 1].max()) / 2 == pytest.approx(400)
