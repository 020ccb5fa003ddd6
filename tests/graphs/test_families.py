"""Tests of the seeded graph families."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from runner.errors import UsageError
from runner.graphs.families import (
    FAMILIES,
    barabasi_albert,
    check_density,
    make_graph,
    random_tree,
    small_world,
)

# Every family hits round(n * density) links, so links per node is within half a link per
# graph of the target: |links / n - density| <= 0.5 / n.
DENSITY_TOLERANCE_LINKS = 0.5
# Float slack for the exact-half case (50 nodes x 1.45 = 72.5 links).
FLOAT_SLACK = 1e-12


@pytest.mark.parametrize(("n", "m"), [(10, 1), (30, 2), (100, 3), (200, 5)])
def test_preferential_attachment_link_count(n: int, m: int) -> None:
    """Preferential attachment with m links per new node has m (n - m) links, as networkx's.

    Source: networkx.barabasi_albert_graph(n, m), which has m (n - m) links.
    """
    g = barabasi_albert(n, m, np.random.default_rng(n + m))
    reference = nx.barabasi_albert_graph(n, m, seed=n + m)
    assert g.number_of_edges() == m * (n - m) == reference.number_of_edges()
    assert nx.is_connected(g)


@pytest.mark.parametrize("family", FAMILIES)
@pytest.mark.parametrize(("n", "density"), [(20, 1.2), (50, 1.45), (140, 1.6), (200, 5.0)])
def test_density_reached_within_tolerance(family: str, n: int, density: float) -> None:
    """Every family reaches the wanted links per node within half a link, and is connected.

    Source: common practice (no published source); tolerance stated in DENSITY_TOLERANCE_LINKS.
    """
    g = make_graph(family, n, density, np.random.default_rng(7))
    assert abs(g.number_of_edges() / n - density) <= DENSITY_TOLERANCE_LINKS / n + FLOAT_SLACK
    assert nx.is_connected(g)
    assert sorted(g.nodes()) == list(range(n))


@pytest.mark.parametrize("family", FAMILIES)
def test_same_seed_same_graph(family: str) -> None:
    """The same seed gives the same graph; another seed gives another one.

    Source: common practice (no published source).
    """
    a = make_graph(family, 60, 1.5, np.random.default_rng(3))
    b = make_graph(family, 60, 1.5, np.random.default_rng(3))
    c = make_graph(family, 60, 1.5, np.random.default_rng(4))
    assert sorted(a.edges()) == sorted(b.edges())
    assert sorted(a.edges()) != sorted(c.edges())


@pytest.mark.parametrize(("n", "k"), [(20, 2), (30, 4), (50, 6)])
def test_small_world_without_rewiring_is_the_ring_lattice(n: int, k: int) -> None:
    """With no rewiring the small-world graph is networkx's Watts-Strogatz ring lattice.

    Source: networkx.watts_strogatz_graph(n, k, 0) as the reference lattice.
    """
    g = small_world(n, k / 2, np.random.default_rng(0), rewire=0.0)
    ref = nx.watts_strogatz_graph(n, k, 0.0)
    assert {frozenset(e) for e in g.edges()} == {frozenset(e) for e in ref.edges()}


def test_random_tree_is_a_spanning_tree() -> None:
    """The Pruefer-decoded random tree spans all nodes with n - 1 links.

    Source: networkx.is_tree as the reference check.
    """
    links = random_tree(40, np.random.default_rng(1))
    g = nx.Graph(links)
    assert g.number_of_nodes() == 40
    assert nx.is_tree(g)


@pytest.mark.parametrize(
    ("n", "density", "fragment"),
    [
        (20, 0.5, "fewer than the 19"),
        (10, 5.0, "more than the 45"),
        (2, 1.0, "at least 3 nodes"),
    ],
)
def test_impossible_densities_are_refused(n: int, density: float, fragment: str) -> None:
    """Densities no connected simple graph can have are refused with the limit to use.

    Source: common practice (a connected graph needs n - 1 links; a simple one holds at most
    n (n - 1) / 2).
    """
    with pytest.raises(UsageError, match=fragment):
        check_density(n, density)
