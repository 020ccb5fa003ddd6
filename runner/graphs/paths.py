"""Shortest routes, their counts, and the choice of the two marked (target) nodes.

The answer a participant gives is derived from the shortest route between the two targets, so
the kit computes it exactly: the route length in links, the number of distinct shortest routes
(breadth-first search with path counting), and the nodes on the route.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass

import networkx as nx
import numpy as np

from runner.errors import UsageError

PAIR_STRATEGIES = ("path_length", "far", "random")

# "Opposite sides of the drawing": the two targets are seen from the canvas centre at least this
# many degrees apart, and each lies at least this share of the farthest node's distance from it.
FAR_MIN_ANGLE_DEG = 135.0
FAR_MIN_RADIUS_SHARE = 0.5


def bfs_counts(g: nx.Graph, source: int) -> tuple[np.ndarray, np.ndarray]:
    """Hop distances and shortest-path counts from ``source`` to every node.

    Parameters
    ----------
    g : networkx.Graph
        Connected graph on nodes ``0 .. n-1``.
    source : int
        Start node.

    Returns
    -------
    distance : numpy.ndarray
        Links on a shortest path to each node (-1 if unreachable).
    count : numpy.ndarray
        Number of distinct shortest paths to each node (Python ints, exact for any size).
    """
    n = g.number_of_nodes()
    dist = np.full(n, -1, dtype=int)
    count = np.zeros(n, dtype=object)
    dist[source] = 0
    count[source] = 1
    queue = deque([source])
    while queue:
        u = queue.popleft()
        for w in g.adj[u]:
            if dist[w] < 0:
                dist[w] = dist[u] + 1
                queue.append(w)
            if dist[w] == dist[u] + 1:
                count[w] += count[u]
    return dist, count


def all_pairs_counts(g: nx.Graph) -> tuple[np.ndarray, np.ndarray]:
    """Hop distances and shortest-path counts between all node pairs at once.

    Breadth-first search from every node in parallel, as matrix products: the paths of length
    ``k + 1`` to a node are the paths of length ``k`` to its neighbours.

    Parameters
    ----------
    g : networkx.Graph
        Connected graph on nodes ``0 .. n-1``.

    Returns
    -------
    distance : numpy.ndarray
        ``(n, n)`` integer hop distances (-1 where unreachable).
    count : numpy.ndarray
        ``(n, n)`` float counts of distinct shortest paths; exact below 2**53, which any graph
        the kit draws stays far below (use :func:`shortest_route` for an exact integer).
    """
    n = g.number_of_nodes()
    adj = nx.to_numpy_array(g, nodelist=range(n), weight=None)
    dist = np.full((n, n), -1, dtype=int)
    np.fill_diagonal(dist, 0)
    count = np.eye(n)
    frontier = np.eye(n)
    step = 0
    while frontier.any():
        step += 1
        paths = frontier @ adj
        new = (paths > 0) & (dist < 0)
        dist[new] = step
        frontier = np.where(new, paths, 0.0)
        count += frontier
    return dist, count


def shortest_route(g: nx.Graph, a: int, b: int) -> tuple[int, int]:
    """Length (in links) and number of distinct shortest routes between two nodes.

    Parameters
    ----------
    g : networkx.Graph
        Graph on nodes ``0 .. n-1``.
    a, b : int
        The two nodes.

    Returns
    -------
    links : int
        Links on a shortest route.
    routes : int
        Number of distinct shortest routes.
    """
    dist, count = bfs_counts(g, a)
    if dist[b] < 0:
        raise UsageError(f"Nodes {a} and {b} are not connected, so there is no route to count.")
    return int(dist[b]), int(count[b])


def expected_count(path_links: int, *, count_targets: bool) -> int:
    """Number of nodes a participant should report for a shortest route.

    Parameters
    ----------
    path_links : int
        Links on the shortest route.
    count_targets : bool
        Whether the two marked nodes themselves are counted.

    Returns
    -------
    int
        ``path_links + 1`` if the marked nodes count, else ``path_links - 1`` (the nodes
        strictly between them).
    """
    return path_links + 1 if count_targets else path_links - 1


def route_links(g: nx.Graph, a: int, b: int, links: np.ndarray) -> np.ndarray:
    """Indices of the links that lie on at least one shortest route from ``a`` to ``b``.

    Parameters
    ----------
    g : networkx.Graph
        Graph on nodes ``0 .. n-1``.
    a, b : int
        The two targets.
    links : numpy.ndarray
        Node index pairs, shape ``(m, 2)``; the result indexes this array.

    Returns
    -------
    numpy.ndarray
        Sorted link indices.
    """
    da, _ = bfs_counts(g, a)
    db, _ = bfs_counts(g, b)
    total = da[b]
    u, v = links[:, 0], links[:, 1]
    on = (da[u] + 1 + db[v] == total) | (da[v] + 1 + db[u] == total)
    return np.nonzero(on)[0]


@dataclass(frozen=True)
class PairRule:
    """How to choose the two targets.

    ``path_links`` bounds the shortest-route length (inclusive, in links); ``max_routes`` caps
    the number of distinct shortest routes. Except for the ``random`` strategy, a route length
    is drawn first (uniformly among the lengths the graph offers), then ``prefer_few_routes``
    keeps the pairs of that length with the fewest shortest routes.
    """

    strategy: str = "path_length"
    path_links: tuple[int, int] | None = None
    max_routes: int | None = None
    prefer_few_routes: bool = True


def choose_pair(
    g: nx.Graph, pos: np.ndarray, rule: PairRule, rng: np.random.Generator
) -> tuple[int, int] | None:
    """Choose the two marked nodes of a stimulus.

    Parameters
    ----------
    g : networkx.Graph
        Connected graph on nodes ``0 .. n-1``.
    pos : numpy.ndarray
        Pixel positions, shape ``(n, 2)``, used by the ``far`` strategy.
    rule : PairRule
        Strategy and limits.
    rng : numpy.random.Generator
        Source of randomness.

    Returns
    -------
    tuple of int or None
        ``(first, second)`` target nodes (their order is random), or None when no pair meets
        the rule in this graph.
    """
    if rule.strategy not in PAIR_STRATEGIES:
        raise UsageError(
            f"Unknown target strategy {rule.strategy!r}; use one of {', '.join(PAIR_STRATEGIES)}."
        )
    n = g.number_of_nodes()
    dist, routes = all_pairs_counts(g)
    ok = np.triu(np.ones((n, n), dtype=bool), k=1)
    if rule.path_links is not None:
        lo, hi = rule.path_links
        ok &= (dist >= lo) & (dist <= hi)
    if rule.max_routes is not None:
        ok &= routes <= rule.max_routes
    if rule.strategy == "far":
        centre = (pos.min(axis=0) + pos.max(axis=0)) / 2
        rel = pos - centre
        radius = np.hypot(rel[:, 0], rel[:, 1])
        unit = rel / np.where(radius > 0, radius, 1.0)[:, None]
        angle = np.degrees(np.arccos(np.clip(unit @ unit.T, -1.0, 1.0)))
        outer = radius >= FAR_MIN_RADIUS_SHARE * radius.max()
        ok &= (angle >= FAR_MIN_ANGLE_DEG) & outer[:, None] & outer[None, :]
    if not ok.any():
        return None
    if rule.strategy != "random":
        # Short routes are far more common than long ones; drawing the length first spreads the
        # answers over the whole allowed range instead of piling them up at its low end.
        lengths = np.unique(dist[ok])
        ok &= dist == lengths[int(rng.integers(len(lengths)))]
        if rule.prefer_few_routes:
            ok &= routes == routes[ok].min()
    i, j = np.nonzero(ok)
    k = int(rng.integers(len(i)))
    pair = (int(i[k]), int(j[k]))
    return pair if rng.random() < 0.5 else (pair[1], pair[0])
