"""Tests of shortest-route counting and target-pair selection."""

from __future__ import annotations

import math

import networkx as nx
import numpy as np
import pytest

from runner.graphs.families import make_graph
from runner.graphs.paths import (
    PairRule,
    choose_pair,
    expected_count,
    route_links,
    shortest_route,
)


@pytest.mark.parametrize(("r", "c"), [(2, 2), (3, 3), (3, 5), (4, 6), (6, 6)])
def test_grid_corner_route_count(r: int, c: int) -> None:
    """Opposite corners of an r x c grid have C(r + c - 2, r - 1) shortest routes.

    Source: lattice path counting; networkx.all_shortest_paths agrees.
    """
    grid = nx.convert_node_labels_to_integers(nx.grid_2d_graph(r, c), ordering="sorted")
    a, b = 0, r * c - 1
    links, routes = shortest_route(grid, a, b)
    assert links == r + c - 2
    assert routes == math.comb(r + c - 2, r - 1)
    assert routes == len(list(nx.all_shortest_paths(grid, a, b)))


@pytest.mark.parametrize("seed", range(4))
def test_route_counts_match_networkx(seed: int) -> None:
    """Route length and count agree with networkx on random graphs, for many node pairs.

    Source: networkx.shortest_path_length and networkx.all_shortest_paths.
    """
    g = make_graph("random", 40, 1.6, np.random.default_rng(seed))
    rng = np.random.default_rng(100 + seed)
    for _ in range(20):
        a, b = (int(x) for x in rng.choice(40, size=2, replace=False))
        links, routes = shortest_route(g, a, b)
        assert links == nx.shortest_path_length(g, a, b)
        assert routes == len(list(nx.all_shortest_paths(g, a, b)))


def test_route_links_are_the_links_of_all_shortest_routes() -> None:
    """The links flagged as on a route are exactly those used by some shortest route.

    Source: networkx.all_shortest_paths.
    """
    g = make_graph("random", 50, 1.5, np.random.default_rng(9))
    links = np.array(sorted((min(u, v), max(u, v)) for u, v in g.edges()))
    a, b = 0, 37
    used = set()
    for path in nx.all_shortest_paths(g, a, b):
        used |= {tuple(sorted(e)) for e in zip(path, path[1:], strict=False)}
    flagged = {tuple(links[i]) for i in route_links(g, a, b, links)}
    assert flagged == used


@pytest.mark.parametrize(("links", "count_targets", "expected"), [(4, False, 3), (4, True, 5)])
def test_expected_count(links: int, count_targets: bool, expected: int) -> None:
    """The answer counts the nodes between the targets, or the route's nodes including them.

    Source: from memory (a route of L links has L + 1 nodes).
    """
    assert expected_count(links, count_targets=count_targets) == expected


@pytest.mark.parametrize("seed", range(5))
def test_path_length_pairs_obey_the_rule(seed: int) -> None:
    """Chosen pairs lie within the route-length range and the cap on distinct routes.

    Source: networkx.shortest_path_length and networkx.all_shortest_paths.
    """
    g = make_graph("scale_free", 60, 1.4, np.random.default_rng(seed))
    pos = np.random.default_rng(seed).uniform(0, 1000, size=(60, 2))
    rule = PairRule(strategy="path_length", path_links=(3, 5), max_routes=2)
    pair = choose_pair(g, pos, rule, np.random.default_rng(seed))
    assert pair is not None
    a, b = pair
    assert 3 <= nx.shortest_path_length(g, a, b) <= 5
    assert len(list(nx.all_shortest_paths(g, a, b))) <= 2


def test_no_pair_when_the_range_is_impossible() -> None:
    """A route-length range longer than the graph's diameter yields no pair.

    Source: networkx.diameter.
    """
    g = make_graph("random", 20, 2.0, np.random.default_rng(0))
    far = nx.diameter(g) + 1
    rule = PairRule(strategy="path_length", path_links=(far, far + 3))
    assert choose_pair(g, np.zeros((20, 2)), rule, np.random.default_rng(0)) is None


def test_far_pairs_sit_on_opposite_sides() -> None:
    """The far strategy picks two outer nodes seen from the centre at least 135 degrees apart.

    Source: common practice (no published source).
    """
    g = make_graph("random", 80, 1.3, np.random.default_rng(2))
    pos = np.random.default_rng(2).uniform(0, 1000, size=(80, 2))
    a, b = choose_pair(g, pos, PairRule(strategy="far"), np.random.default_rng(5))
    centre = (pos.min(axis=0) + pos.max(axis=0)) / 2
    u, v = pos[a] - centre, pos[b] - centre
    angle = np.degrees(np.arccos(u @ v / (np.linalg.norm(u) * np.linalg.norm(v))))
    assert angle >= 135
    radius = np.linalg.norm(pos - centre, axis=1)
    assert min(radius[a], radius[b]) >= 0.5 * radius.max()
