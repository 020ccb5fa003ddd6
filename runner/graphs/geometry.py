"""Plane geometry of straight-line drawings: crossings, angles, node-link clearance, fitting.

Positions are an ``(n, 2)`` float array in pixels (x to the right, y downwards, as on screen);
links are an ``(m, 2)`` integer array of node indices. Everything is vectorised with numpy so a
drawing with a thousand links is measured in well under a second.
"""

from __future__ import annotations

import numpy as np

# Links are compared in row blocks of this many so memory stays bounded for large drawings
# (a block holds BLOCK x m floats per temporary array).
BLOCK = 256


def segments(pos: np.ndarray, links: np.ndarray) -> np.ndarray:
    """Return the link segments as an ``(m, 2, 2)`` array of end points.

    Parameters
    ----------
    pos : numpy.ndarray
        Node positions, shape ``(n, 2)``.
    links : numpy.ndarray
        Node index pairs, shape ``(m, 2)``.

    Returns
    -------
    numpy.ndarray
        ``out[i, 0]`` and ``out[i, 1]`` are the two ends of link ``i``.
    """
    return np.asarray(pos, dtype=float)[np.asarray(links, dtype=int)]


def _orient(ax, ay, bx, by, cx, cy):
    """Twice the signed area of triangle a-b-c (positive when counter-clockwise)."""
    return (bx - ax) * (cy - ay) - (by - ay) * (cx - ax)


def crossing_pairs(pos: np.ndarray, links: np.ndarray) -> np.ndarray:
    """Find every pair of links whose segments cross.

    Only proper crossings count: two links that share an end node never cross, and segments
    that merely touch or overlap along a line are not counted (as in shapely's ``crosses``).

    Parameters
    ----------
    pos : numpy.ndarray
        Node positions, shape ``(n, 2)``.
    links : numpy.ndarray
        Node index pairs, shape ``(m, 2)``.

    Returns
    -------
    numpy.ndarray
        Shape ``(k, 2)``, link index pairs ``(i, j)`` with ``i < j``, sorted.
    """
    links = np.asarray(links, dtype=int).reshape(-1, 2)
    seg = segments(pos, links)
    m = len(links)
    found: list[np.ndarray] = []
    px, py = seg[:, 0, 0], seg[:, 0, 1]
    qx, qy = seg[:, 1, 0], seg[:, 1, 1]
    for start in range(0, m, BLOCK):
        rows = np.arange(start, min(start + BLOCK, m))
        a = rows[:, None]
        # Each link is tested against the links after it only, so every pair is seen once.
        cols = np.arange(m)[None, :]
        later = cols > a
        d1 = _orient(px[a], py[a], qx[a], qy[a], px[cols], py[cols])
        d2 = _orient(px[a], py[a], qx[a], qy[a], qx[cols], qy[cols])
        d3 = _orient(px[cols], py[cols], qx[cols], qy[cols], px[a], py[a])
        d4 = _orient(px[cols], py[cols], qx[cols], qy[cols], qx[a], qy[a])
        shared = (
            (links[rows, 0][:, None] == links[None, :, 0])
            | (links[rows, 0][:, None] == links[None, :, 1])
            | (links[rows, 1][:, None] == links[None, :, 0])
            | (links[rows, 1][:, None] == links[None, :, 1])
        )
        hit = later & ~shared & (d1 * d2 < 0) & (d3 * d4 < 0)
        i, j = np.nonzero(hit)
        if len(i):
            found.append(np.column_stack([rows[i], j]))
    if not found:
        return np.zeros((0, 2), dtype=int)
    return np.concatenate(found).astype(int)


def count_crossings(pos: np.ndarray, links: np.ndarray) -> int:
    """Count the link crossings of a straight-line drawing.

    Parameters
    ----------
    pos : numpy.ndarray
        Node positions, shape ``(n, 2)``.
    links : numpy.ndarray
        Node index pairs, shape ``(m, 2)``.

    Returns
    -------
    int
        Number of link pairs that cross (see :func:`crossing_pairs`).
    """
    return int(len(crossing_pairs(pos, links)))


def crossing_angles(pos: np.ndarray, links: np.ndarray, pairs: np.ndarray) -> np.ndarray:
    """Return the acute angle, in degrees (0 to 90), at each crossing.

    Parameters
    ----------
    pos : numpy.ndarray
        Node positions, shape ``(n, 2)``.
    links : numpy.ndarray
        Node index pairs, shape ``(m, 2)``.
    pairs : numpy.ndarray
        Crossing link pairs from :func:`crossing_pairs`.

    Returns
    -------
    numpy.ndarray
        One angle per crossing pair.
    """
    pairs = np.asarray(pairs, dtype=int).reshape(-1, 2)
    seg = segments(pos, links)
    vec = seg[:, 1] - seg[:, 0]
    u, v = vec[pairs[:, 0]], vec[pairs[:, 1]]
    cos = np.abs(np.sum(u * v, axis=1)) / (np.linalg.norm(u, axis=1) * np.linalg.norm(v, axis=1))
    return np.degrees(np.arccos(np.clip(cos, 0.0, 1.0)))


def paired_point_segment(points: np.ndarray, seg: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Vector from the nearest point of ``seg[k]`` to ``points[k]``, and its foot parameter.

    Parameters
    ----------
    points : numpy.ndarray
        Shape ``(k, 2)``.
    seg : numpy.ndarray
        Shape ``(k, 2, 2)``, one segment per point.

    Returns
    -------
    away : numpy.ndarray
        Shape ``(k, 2)``; its length is the point-segment distance.
    t : numpy.ndarray
        Shape ``(k,)``, 0 at the first end of the segment and 1 at the second.
    """
    d = seg[:, 1] - seg[:, 0]
    length2 = np.sum(d * d, axis=1)
    t = np.sum((points - seg[:, 0]) * d, axis=1) / np.where(length2 > 0, length2, 1.0)
    t = np.clip(t, 0.0, 1.0)
    return points - (seg[:, 0] + t[:, None] * d), t


def node_link_candidates(
    pos: np.ndarray, links: np.ndarray, reach: float
) -> tuple[np.ndarray, np.ndarray]:
    """Node-link pairs whose node lies in the link's bounding box grown by ``reach`` pixels.

    Only these pairs can be closer than ``reach``; in a spread-out drawing they are a small
    share of all pairs. A node is never paired with its own links.

    Parameters
    ----------
    pos : numpy.ndarray
        Node positions, shape ``(n, 2)``.
    links : numpy.ndarray
        Node index pairs, shape ``(m, 2)``.
    reach : float
        Box growth in pixels.

    Returns
    -------
    nodes, link_indices : numpy.ndarray
        Two equal-length integer arrays.
    """
    seg = segments(pos, links)
    lo = seg.min(axis=1) - reach
    hi = seg.max(axis=1) + reach
    near = (
        (pos[:, 0:1] > lo[None, :, 0])
        & (pos[:, 0:1] < hi[None, :, 0])
        & (pos[:, 1:2] > lo[None, :, 1])
        & (pos[:, 1:2] < hi[None, :, 1])
    )
    v, e = np.nonzero(near)
    own = (links[e, 0] == v) | (links[e, 1] == v)
    return v[~own], e[~own]


def overlaps_among(
    pos: np.ndarray,
    links: np.ndarray,
    v: np.ndarray,
    e: np.ndarray,
    clearance: float,
    extra: np.ndarray,
) -> np.ndarray:
    """Of the candidate pairs ``(v[k], e[k])``, those closer than the node's clearance.

    Parameters
    ----------
    pos, links : numpy.ndarray
        Positions ``(n, 2)`` and links ``(m, 2)``.
    v, e : numpy.ndarray
        Candidate nodes and link indices (from :func:`node_link_candidates`).
    clearance : float
        Base clearance in pixels.
    extra : numpy.ndarray
        Shape ``(n,)``, extra clearance per node.

    Returns
    -------
    numpy.ndarray
        Shape ``(k, 2)``: ``(node, link index)`` pairs that are too close.
    """
    away, _ = paired_point_segment(pos[v], segments(pos, links)[e])
    too_close = np.hypot(away[:, 0], away[:, 1]) < clearance + extra[v]
    return np.column_stack([v[too_close], e[too_close]]).astype(int)


def node_link_overlaps(
    pos: np.ndarray, links: np.ndarray, clearance: float, extra: np.ndarray | None = None
) -> np.ndarray:
    """Find nodes that lie within ``clearance`` pixels of a link they are not an end of.

    Such a link seems to pass through the node, which makes counting the nodes on a route
    ambiguous for the reader.

    Parameters
    ----------
    pos : numpy.ndarray
        Node positions, shape ``(n, 2)``.
    links : numpy.ndarray
        Node index pairs, shape ``(m, 2)``.
    clearance : float
        Smallest allowed distance, in pixels, between a node centre and a foreign link.
    extra : numpy.ndarray, optional
        Shape ``(n,)``: pixels added to the clearance of each node (for larger glyphs such as
        the target markers).

    Returns
    -------
    numpy.ndarray
        Shape ``(k, 2)``: ``(node, link index)`` pairs that are too close, sorted.
    """
    pos = np.asarray(pos, dtype=float)
    links = np.asarray(links, dtype=int).reshape(-1, 2)
    if len(links) == 0:
        return np.zeros((0, 2), dtype=int)
    extra = np.zeros(len(pos)) if extra is None else np.asarray(extra, dtype=float)
    v, e = node_link_candidates(pos, links, clearance + float(extra.max(initial=0.0)))
    return overlaps_among(pos, links, v, e, clearance, extra)


def close_node_pairs(
    pos: np.ndarray, min_distance: float, extra: np.ndarray | None = None
) -> np.ndarray:
    """Find node pairs closer than ``min_distance`` pixels.

    Parameters
    ----------
    pos : numpy.ndarray
        Node positions, shape ``(n, 2)``.
    min_distance : float
        Smallest allowed centre-to-centre distance in pixels.
    extra : numpy.ndarray, optional
        Shape ``(n,)``: pixels added to the distance a node needs (both nodes' extras add up).

    Returns
    -------
    numpy.ndarray
        Shape ``(k, 2)``, node pairs ``(i, j)`` with ``i < j``.
    """
    pos = np.asarray(pos, dtype=float)
    need = np.full(len(pos), 0.0) if extra is None else np.asarray(extra, dtype=float)
    limit = min_distance + need[:, None] + need[None, :]
    dx = pos[:, 0:1] - pos[None, :, 0]
    dy = pos[:, 1:2] - pos[None, :, 1]
    i, j = np.nonzero(np.triu(dx * dx + dy * dy < limit * limit, k=1))
    return np.column_stack([i, j]).astype(int)


def fit_to_canvas(pos: np.ndarray, width: float, height: float, margin: float) -> np.ndarray:
    """Scale and centre a layout into a canvas, keeping its aspect ratio.

    Parameters
    ----------
    pos : numpy.ndarray
        Positions in any units, shape ``(n, 2)``.
    width, height : float
        Canvas size in pixels.
    margin : float
        Empty border, in pixels, on every side.

    Returns
    -------
    numpy.ndarray
        Positions in pixels, inside ``[margin, width - margin] x [margin, height - margin]``.
    """
    pos = np.asarray(pos, dtype=float)
    low, high = pos.min(axis=0), pos.max(axis=0)
    span = np.where(high - low > 0, high - low, 1.0)
    room = np.array([width - 2 * margin, height - 2 * margin], dtype=float)
    scale = float(np.min(room / span))
    centre_in = (low + high) / 2
    centre_out = np.array([width / 2, height / 2])
    return (pos - centre_in) * scale + centre_out
