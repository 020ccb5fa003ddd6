"""Node placement: force-directed and stress layouts, fitting, and readability repair.

A layout is an ``(n, 2)`` array of pixel positions (y downwards) for nodes ``0 .. n-1``.
Readability repair nudges nodes until no two are too close and no link passes through a node
it does not touch; :func:`readable_layout` reports what could not be repaired so the caller can
reject the drawing and try another seed.
"""

from __future__ import annotations

from dataclasses import dataclass

import networkx as nx
import numpy as np

from runner.errors import UsageError
from runner.graphs.geometry import (
    close_node_pairs,
    fit_to_canvas,
    node_link_candidates,
    node_link_overlaps,
    overlaps_among,
    paired_point_segment,
    segments,
)
from runner.graphs.paths import all_pairs_counts

LAYOUTS = ("spring", "stress")

SPRING_ITERATIONS = 200
STRESS_MAX_ITERATIONS = 400
# SMACOF stops once the stress falls by less than this fraction in one iteration.
STRESS_TOLERANCE = 1e-4
REPAIR_ROUNDS = 150
REPAIR_PATIENCE = 20
# Extra box growth, in pixels, for the reusable list of node-link pairs checked in repair.
VERLET_SKIN_PX = 12.0
# Each repair push overshoots by this many pixels so a fixed problem does not come straight back.
REPAIR_SLACK_PX = 0.5
# Share of a node-link push taken by the node; the link's two ends take the rest.
NODE_SHARE = 0.6


def links_array(g: nx.Graph) -> np.ndarray:
    """Return the links of ``g`` as a sorted ``(m, 2)`` integer array with ``u < v``.

    Parameters
    ----------
    g : networkx.Graph
        Graph on nodes ``0 .. n-1``.

    Returns
    -------
    numpy.ndarray
        Shape ``(m, 2)``.
    """
    pairs = sorted((min(u, v), max(u, v)) for u, v in g.edges())
    return np.array(pairs, dtype=int).reshape(-1, 2)


def spring_layout(g: nx.Graph, seed: int, *, iterations: int = SPRING_ITERATIONS) -> np.ndarray:
    """Force-directed (Fruchterman-Reingold) layout, seeded.

    Parameters
    ----------
    g : networkx.Graph
        Graph on nodes ``0 .. n-1``.
    seed : int
        Seed of the random start positions.
    iterations : int, optional
        Number of force-simulation steps.

    Returns
    -------
    numpy.ndarray
        Shape ``(n, 2)``, in layout units.
    """
    placed = nx.spring_layout(g, seed=seed, iterations=iterations)
    return np.array([placed[v] for v in range(g.number_of_nodes())], dtype=float)


def stress_layout(
    g: nx.Graph, seed: int, *, max_iterations: int = STRESS_MAX_ITERATIONS
) -> np.ndarray:
    """Stress-majorization (SMACOF) layout: drawn distances follow graph distances.

    Minimises ``sum w_ij (|x_i - x_j| - d_ij)^2`` with ``d_ij`` the hop distance and
    ``w_ij = d_ij^-2``, by repeated Guttman transforms from seeded random start positions.

    Parameters
    ----------
    g : networkx.Graph
        Connected graph on nodes ``0 .. n-1``.
    seed : int
        Seed of the random start positions.
    max_iterations : int, optional
        Upper bound on Guttman transforms.

    Returns
    -------
    numpy.ndarray
        Shape ``(n, 2)``, in hop units.
    """
    n = g.number_of_nodes()
    d = all_pairs_counts(g)[0].astype(float)
    off = ~np.eye(n, dtype=bool)
    w = np.zeros((n, n))
    w[off] = 1.0 / d[off] ** 2
    v = -w.copy()
    v[np.diag_indices(n)] = w.sum(axis=1)
    # V is a Laplacian whose null space is the constant vector, so its pseudo-inverse is
    # inv(V + J/n) - J/n (J all ones): one inversion instead of a slower SVD.
    j = np.full((n, n), 1.0 / n)
    v_pinv = np.linalg.inv(v + j) - j
    x = np.random.default_rng(seed).uniform(0.0, np.sqrt(n), size=(n, 2))
    last = np.inf
    wd = w * d
    for _ in range(max_iterations):
        dx = x[:, 0:1] - x[None, :, 0]
        dy = x[:, 1:2] - x[None, :, 1]
        dist = np.sqrt(dx * dx + dy * dy)
        stress = float(np.sum(w * (dist - d) ** 2))
        if last - stress < STRESS_TOLERANCE * last:
            break
        last = stress
        # Coincident nodes contribute nothing to the Guttman transform (0/0 taken as 0).
        ratio = np.divide(wd, dist, out=np.zeros_like(dist), where=dist > 0)
        b = -ratio
        b[np.diag_indices(n)] = ratio.sum(axis=1)
        x = v_pinv @ (b @ x)
    return x


def raw_layout(g: nx.Graph, method: str, seed: int) -> np.ndarray:
    """Run the named layout method.

    Parameters
    ----------
    g : networkx.Graph
        Graph on nodes ``0 .. n-1``.
    method : {"spring", "stress"}
        Layout method.
    seed : int
        Seed of the start positions.

    Returns
    -------
    numpy.ndarray
        Shape ``(n, 2)``, in layout units (fit it with :func:`fit_to_canvas`).
    """
    if method == "spring":
        return spring_layout(g, seed)
    if method == "stress":
        return stress_layout(g, seed)
    raise UsageError(f"Unknown layout {method!r}; use one of {', '.join(LAYOUTS)}.")


@dataclass(frozen=True)
class Readability:
    """What a repaired layout still gets wrong (all zero means readable)."""

    close_pairs: int
    overlaps: int

    @property
    def ok(self) -> bool:
        return self.close_pairs == 0 and self.overlaps == 0


def repair(
    pos: np.ndarray,
    links: np.ndarray,
    *,
    min_distance: float,
    clearance: float,
    box: tuple[float, float, float, float],
    rounds: int = REPAIR_ROUNDS,
    extra: np.ndarray | None = None,
) -> tuple[np.ndarray, Readability]:
    """Nudge nodes apart until the drawing is readable, or the rounds run out.

    Each round pushes apart every pair of nodes closer than ``min_distance`` and pushes every
    node that lies within ``clearance`` of a foreign link away from that link, then keeps the
    nodes inside ``box``.

    Parameters
    ----------
    pos : numpy.ndarray
        Pixel positions, shape ``(n, 2)``.
    links : numpy.ndarray
        Node index pairs, shape ``(m, 2)``.
    min_distance : float
        Smallest allowed distance between node centres, in pixels.
    clearance : float
        Smallest allowed distance between a node centre and a link it is not an end of.
    box : tuple of float
        ``(x_min, y_min, x_max, y_max)`` the nodes must stay in.
    rounds : int, optional
        Most repair rounds.
    extra : numpy.ndarray, optional
        Shape ``(n,)``: pixels of extra room each node needs (larger glyphs such as targets);
        added to ``clearance`` and, for each pair, to ``min_distance``.

    Returns
    -------
    positions : numpy.ndarray
        The repaired positions.
    readability : Readability
        Problems left after the last round.
    """
    pos = np.array(pos, dtype=float)
    extra = np.zeros(len(pos)) if extra is None else np.asarray(extra, dtype=float)
    lo = np.array(box[:2], dtype=float)
    hi = np.array(box[2:], dtype=float)
    links = np.asarray(links, dtype=int).reshape(-1, 2)
    reach = clearance + float(extra.max(initial=0.0))
    # Candidate node-link pairs are found with a wider box (reach + skin) and reused until some
    # node has moved half the skin: no pair can come within reach unnoticed before then.
    anchor = pos.copy()
    cand_v, cand_e = node_link_candidates(pos, links, reach + VERLET_SKIN_PX)
    best, stale = np.inf, 0
    for _ in range(rounds):
        if np.max(np.abs(pos - anchor), initial=0.0) > VERLET_SKIN_PX / 2:
            anchor = pos.copy()
            cand_v, cand_e = node_link_candidates(pos, links, reach + VERLET_SKIN_PX)
        pairs = close_node_pairs(pos, min_distance, extra)
        hits = overlaps_among(pos, links, cand_v, cand_e, clearance, extra)
        left = len(pairs) + len(hits)
        if left == 0:
            break
        # Give up early when the count of problems stops falling: a drawing too crowded to
        # repair would otherwise use every round for nothing.
        if left < best:
            best, stale = left, 0
        else:
            stale += 1
            if stale >= REPAIR_PATIENCE:
                break
        move = np.zeros_like(pos)
        if len(pairs):
            i, j = pairs[:, 0], pairs[:, 1]
            diff = pos[i] - pos[j]
            gap = np.linalg.norm(diff, axis=1)
            # Coincident nodes get a fixed direction so the push is still defined.
            diff[gap == 0] = [1.0, 0.0]
            gap[gap == 0] = 1.0
            need = min_distance + extra[i] + extra[j]
            push = ((need - gap) / 2 + REPAIR_SLACK_PX)[:, None] * diff / gap[:, None]
            np.add.at(move, i, push)
            np.add.at(move, j, -push)
        if len(hits):
            v, e = hits[:, 0], hits[:, 1]
            seg = segments(pos, links)[e]
            away, t = paired_point_segment(pos[v], seg)
            dist = np.hypot(away[:, 0], away[:, 1])
            # A node exactly on the line is pushed along the line's normal.
            normal = seg[:, 1] - seg[:, 0]
            normal = np.column_stack([-normal[:, 1], normal[:, 0]])
            flat = dist == 0
            away[flat] = normal[flat]
            length = np.hypot(away[:, 0], away[:, 1])
            length[length == 0] = 1.0
            need = clearance + extra[v]
            push = ((need - dist) + REPAIR_SLACK_PX)[:, None] * away / length[:, None]
            # The node takes most of the push and the link's ends the rest, shared by how near
            # each end is; moving both sides converges where a crowd of links meets.
            np.add.at(move, v, NODE_SHARE * push)
            np.add.at(move, links[e, 0], -(1 - NODE_SHARE) * (1 - t)[:, None] * push)
            np.add.at(move, links[e, 1], -(1 - NODE_SHARE) * t[:, None] * push)
        pos = np.clip(pos + move, lo, hi)
    return pos, Readability(
        close_pairs=len(close_node_pairs(pos, min_distance, extra)),
        overlaps=len(node_link_overlaps(pos, links, clearance, extra)),
    )


def readable_layout(
    g: nx.Graph,
    method: str,
    seed: int,
    *,
    width: float,
    height: float,
    margin: float,
    min_distance: float,
    clearance: float,
) -> tuple[np.ndarray, Readability]:
    """Lay out ``g``, fit it to the canvas and repair it for readability.

    Parameters
    ----------
    g : networkx.Graph
        Graph on nodes ``0 .. n-1``.
    method : {"spring", "stress"}
        Layout method.
    seed : int
        Seed of the start positions.
    width, height : float
        Canvas size in pixels.
    margin : float
        Empty border in pixels; node centres stay inside it.
    min_distance : float
        Smallest allowed distance between node centres, in pixels.
    clearance : float
        Smallest allowed distance between a node centre and a foreign link, in pixels.

    Returns
    -------
    positions : numpy.ndarray
        Pixel positions, shape ``(n, 2)``.
    readability : Readability
        Problems left; reject the drawing unless ``readability.ok``.
    """
    pos = fit_to_canvas(raw_layout(g, method, seed), width, height, margin)
    box = (margin, margin, width - margin, height - margin)
    return repair(pos, links_array(g), min_distance=min_distance, clearance=clearance, box=box)
