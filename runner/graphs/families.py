"""Seeded generators for the graph families of the stimulus kit.

Every generator takes a :class:`numpy.random.Generator` so the caller controls the seed, and
returns a connected :class:`networkx.Graph` with nodes ``0 .. n-1``. "Density" here always means
links per node (``links / nodes``), the measure labs vary to make diagrams harder.
"""

from __future__ import annotations

import math

import networkx as nx
import numpy as np

from runner.errors import UsageError

FAMILIES = ("scale_free", "random", "small_world")

# Small-world graphs are rewired at random and can fall apart; this many fresh tries are made
# before the generator gives up (a connected draw is almost always found in the first few).
MAX_CONNECT_TRIES = 200

DEFAULT_REWIRE = 0.1


def links_for_density(n: int, density: float) -> int:
    """Return the link count that gives ``density`` links per node on ``n`` nodes.

    Parameters
    ----------
    n : int
        Number of nodes.
    density : float
        Wanted links per node.

    Returns
    -------
    int
        ``round(n * density)``, the closest whole link count.
    """
    return int(round(n * density))


def check_density(n: int, density: float) -> None:
    """Raise :class:`UsageError` unless a connected simple graph of that density exists.

    Parameters
    ----------
    n : int
        Number of nodes (at least 3).
    density : float
        Wanted links per node.
    """
    if n < 3:
        raise UsageError(f"A stimulus graph needs at least 3 nodes, not {n}.")
    m = links_for_density(n, density)
    most = n * (n - 1) // 2
    if m < n - 1:
        raise UsageError(
            f"Density {density} on {n} nodes gives {m} links, fewer than the {n - 1} a "
            f"connected graph needs; use a density of at least {(n - 1) / n:.3f}."
        )
    if m > most:
        raise UsageError(
            f"Density {density} on {n} nodes gives {m} links, more than the {most} a simple "
            f"graph can hold; use a density of at most {(n - 1) / 2:.3f}."
        )


def barabasi_albert(n: int, m: int, rng: np.random.Generator) -> nx.Graph:
    """Preferential attachment with ``m`` links per new node.

    Starts from a star on ``m + 1`` nodes (as networkx does), so the graph has ``m (n - m)``
    links. Each new node links to ``m`` distinct earlier nodes chosen with probability
    proportional to their degree.

    Parameters
    ----------
    n : int
        Number of nodes, larger than ``m``.
    m : int
        Links added by every new node (at least 1).
    rng : numpy.random.Generator
        Source of randomness.

    Returns
    -------
    networkx.Graph
        A connected graph on nodes ``0 .. n-1``.
    """
    if m < 1 or m >= n:
        raise UsageError(f"Preferential attachment needs 1 <= m < n, got m={m}, n={n}.")
    return _attach(n, [m] * (n - m - 1), m, rng)


def scale_free(n: int, density: float, rng: np.random.Generator) -> nx.Graph:
    """Preferential attachment reaching a fractional density (two-parameter variant).

    Each new node adds either ``m`` or ``m + 1`` links (``m = floor(density)``); exactly as many
    nodes add ``m + 1`` as are needed for ``round(n * density)`` links in total, and which
    nodes do so is drawn at random. With a whole-number density this is the classic model.

    Parameters
    ----------
    n : int
        Number of nodes.
    density : float
        Wanted links per node, at least ``(n - 1) / n``.
    rng : numpy.random.Generator
        Source of randomness.

    Returns
    -------
    networkx.Graph
        A connected graph on nodes ``0 .. n-1`` with ``round(n * density)`` links whenever the
        seed star allows it (the star gives at least ``m`` links on ``m + 1`` nodes).
    """
    check_density(n, density)
    target = links_for_density(n, density)
    m = max(1, int(math.floor(density)))
    m = min(m, n - 2)
    newcomers = n - m - 1
    extra = target - m - m * newcomers  # how many newcomers add one link more
    extra = int(min(max(extra, 0), newcomers))
    counts = np.full(newcomers, m, dtype=int)
    if extra:
        counts[rng.choice(newcomers, size=extra, replace=False)] += 1
    # A newcomer cannot link to more nodes than already exist.
    counts = np.minimum(counts, np.arange(m + 1, n))
    return _attach(n, [int(c) for c in counts], m, rng)


def _attach(n: int, counts: list[int], m: int, rng: np.random.Generator) -> nx.Graph:
    """Grow a preferential-attachment graph from a star on ``m + 1`` nodes."""
    g = nx.Graph()
    g.add_nodes_from(range(n))
    # Seed star: node 0 is the hub, so every seed node has degree >= 1 and can be chosen.
    ends: list[int] = []
    for leaf in range(1, m + 1):
        g.add_edge(0, leaf)
        ends += [0, leaf]
    for offset, k in enumerate(counts):
        new = m + 1 + offset
        chosen: set[int] = set()
        while len(chosen) < k:
            chosen.add(ends[int(rng.integers(len(ends)))])
        for old in sorted(chosen):
            g.add_edge(new, old)
            ends += [new, old]
    return g


def random_tree(n: int, rng: np.random.Generator) -> list[tuple[int, int]]:
    """Uniform random labelled tree on ``n`` nodes, decoded from a random Pruefer sequence.

    Parameters
    ----------
    n : int
        Number of nodes (at least 2).
    rng : numpy.random.Generator
        Source of randomness.

    Returns
    -------
    list of tuple of int
        The ``n - 1`` links of the tree.
    """
    if n == 2:
        return [(0, 1)]
    seq = [int(x) for x in rng.integers(0, n, size=n - 2)]
    return [tuple(sorted(e)) for e in nx.from_prufer_sequence(seq).edges()]


def random_links(n: int, density: float, rng: np.random.Generator) -> nx.Graph:
    """Random connected graph with a fixed link count.

    A uniform random spanning tree is drawn first (so the graph is connected), then the
    remaining links are drawn uniformly from the node pairs not yet linked. This is not the
    uniform distribution over all connected graphs with that many links, but it reaches any of
    them and never needs rejection, even at densities near 1.

    Parameters
    ----------
    n : int
        Number of nodes.
    density : float
        Wanted links per node.
    rng : numpy.random.Generator
        Source of randomness.

    Returns
    -------
    networkx.Graph
        A connected graph with exactly ``round(n * density)`` links.
    """
    check_density(n, density)
    target = links_for_density(n, density)
    g = nx.Graph()
    g.add_nodes_from(range(n))
    g.add_edges_from(random_tree(n, rng))
    iu, ju = np.triu_indices(n, k=1)
    free = [(int(a), int(b)) for a, b in zip(iu, ju, strict=True) if not g.has_edge(a, b)]
    need = target - g.number_of_edges()
    if need > 0:
        picks = rng.choice(len(free), size=need, replace=False)
        g.add_edges_from(free[int(i)] for i in np.sort(picks))
    return g


def small_world(
    n: int, density: float, rng: np.random.Generator, *, rewire: float = DEFAULT_REWIRE
) -> nx.Graph:
    """Small-world graph: a ring lattice with a fraction of its links rewired.

    Every node links to its ``floor(density)`` nearest followers on a ring; a random set of
    nodes also links to the next follower, to reach ``round(n * density)`` links. Then each
    link is, with probability ``rewire``, moved to a random free partner of its first node
    (Watts-Strogatz rewiring, which keeps the link count). Disconnected draws are redrawn.

    Parameters
    ----------
    n : int
        Number of nodes.
    density : float
        Wanted links per node, at least 1 (a ring).
    rng : numpy.random.Generator
        Source of randomness.
    rewire : float, optional
        Probability that a lattice link is rewired, 0 to 1.

    Returns
    -------
    networkx.Graph
        A connected graph with exactly ``round(n * density)`` links.
    """
    check_density(n, density)
    if density < 1:
        raise UsageError(f"A small-world graph needs a density of at least 1, not {density}.")
    if not 0.0 <= rewire <= 1.0:
        raise UsageError(f"The rewiring probability must lie in 0..1, not {rewire}.")
    target = links_for_density(n, density)
    k = int(math.floor(target / n))
    extra = target - k * n
    for _ in range(MAX_CONNECT_TRIES):
        g = nx.Graph()
        g.add_nodes_from(range(n))
        for step in range(1, k + 1):
            g.add_edges_from((i, (i + step) % n) for i in range(n))
        if extra:
            for i in np.sort(rng.choice(n, size=extra, replace=False)):
                g.add_edge(int(i), int((i + k + 1) % n))
        for u, v in sorted(g.edges()):
            if rng.random() < rewire:
                options = [w for w in range(n) if w != u and not g.has_edge(u, w)]
                if options:
                    w = options[int(rng.integers(len(options)))]
                    g.remove_edge(u, v)
                    g.add_edge(u, w)
        if g.number_of_edges() == target and nx.is_connected(g):
            return g
    raise UsageError(
        f"No connected small-world graph with {n} nodes and density {density} was found in "
        f"{MAX_CONNECT_TRIES} tries; lower the rewiring probability or raise the density."
    )


def make_graph(
    family: str, n: int, density: float, rng: np.random.Generator, *, rewire: float = DEFAULT_REWIRE
) -> nx.Graph:
    """Draw one connected graph of the named family.

    Parameters
    ----------
    family : {"scale_free", "random", "small_world"}
        Which generator to use.
    n : int
        Number of nodes.
    density : float
        Wanted links per node.
    rng : numpy.random.Generator
        Source of randomness.
    rewire : float, optional
        Rewiring probability, used by ``small_world`` only.

    Returns
    -------
    networkx.Graph
        A connected graph on nodes ``0 .. n-1``.
    """
    if family == "scale_free":
        return scale_free(n, density, rng)
    if family == "random":
        return random_links(n, density, rng)
    if family == "small_world":
        return small_world(n, density, rng, rewire=rewire)
    raise UsageError(f"Unknown graph family {family!r}; use one of {', '.join(FAMILIES)}.")
