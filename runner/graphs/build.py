"""Turn a validated spec into stimuli: graphs, drawings, ground truth, features and files.

For each cell of each set (size x density level x instance) a seed is derived from the spec's
seed and the cell's names, so one stimulus can be made again alone. From that seed the kit draws
a graph and a layout, repairs the layout, and rejects it (drawing again) if it stays unreadable
or no target pair meets the set's rule.
"""

from __future__ import annotations

import csv
import hashlib
import math
import os
import stat
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import networkx as nx
import numpy as np

from runner.contract.outputs import (
    OutputFolder,
    OutputRefused,
    ensure_folder,
    prepare_output_folder,
    remove_file,
    replace_file,
)
from runner.errors import Problem, ProtocolError, StorageError
from runner.graphs.families import make_graph
from runner.graphs.geometry import (
    close_node_pairs,
    crossing_angles,
    crossing_pairs,
    node_link_overlaps,
)
from runner.graphs.layout import Readability, links_array, readable_layout, repair
from runner.graphs.paths import choose_pair, expected_count, route_links, shortest_route
from runner.graphs.render import (
    figure,
    ink_coverage,
    mean_luminance,
    palette,
    rasterise,
    to_palette,
    write_png,
    write_svg,
)
from runner.graphs.spec import SetSpec, StimulusSpec

IMAGES_DIR = "images"
GRAPHML_DIR = "graphml"
MANIFEST = "manifest.csv"
# A new graph is drawn after this many rejected layouts of the same graph.
LAYOUTS_PER_GRAPH = 3
COORD_DECIMALS = 2
FEATURE_DECIMALS = 4

MANIFEST_COLUMNS = (
    "stimulus",
    "expected",
    "set",
    "nodes",
    "density",
    "instance",
    "links_per_node_target",
    "family",
    "layout",
    "pair_strategy",
    "count_targets",
    "path_links",
    "shortest_routes",
    "links",
    "links_per_node",
    "crossings",
    "crossings_on_routes",
    "min_crossing_angle_deg",
    "node_link_overlaps",
    "close_node_pairs",
    "link_length_mean_px",
    "link_length_sd_px",
    "ink_coverage",
    "mean_luminance",
    "attempts",
    "graphml",
    "svg",
    "seed",
)


@dataclass(frozen=True)
class Cell:
    """One stimulus to make: its set, factors, name and seed."""

    set: SetSpec
    nodes: int
    level: str
    density: float
    instance: int
    seed: int

    @property
    def name(self) -> str:
        return f"{self.set.name}_n{self.nodes:03d}_{self.level}_i{self.instance}"


@dataclass
class Stimulus:
    """A finished stimulus: graph, drawing, targets, ground truth and features."""

    cell: Cell
    graph: nx.Graph
    pos: np.ndarray
    targets: tuple[int, int]
    path_links: int
    routes: int
    expected: int
    readability: Readability
    attempts: int
    features: dict[str, float | int | str]


def cell_seed(spec_seed: int, set_name: str, nodes: int, level: str, instance: int) -> int:
    """Derive the seed of one stimulus from the spec seed and the stimulus's factors.

    A hash (not Python's per-process ``hash``) keeps it the same on every machine and run.

    Parameters
    ----------
    spec_seed : int
        The spec's ``seed``.
    set_name, level : str
        Set name and density level name.
    nodes, instance : int
        Size and 1-based instance number.

    Returns
    -------
    int
        A seed in ``0 .. 2**32 - 1``.
    """
    text = f"{spec_seed}/{set_name}/{nodes}/{level}/{instance}".encode()
    return int.from_bytes(hashlib.sha256(text).digest()[:4], "big")


def plan(spec: StimulusSpec) -> list[Cell]:
    """List every stimulus the spec asks for, in manifest order.

    Parameters
    ----------
    spec : StimulusSpec
        A validated spec.

    Returns
    -------
    list of Cell
        Sets in spec order, then sizes, density levels and instances.
    """
    cells = []
    for s in spec.sets:
        for n in s.sizes:
            for level, density in s.densities:
                for k in range(1, s.instances + 1):
                    seed = cell_seed(spec.seed, s.name, n, level, k)
                    cells.append(Cell(s, n, level, density, k, seed))
    return cells


def layout_features(
    g: nx.Graph,
    pos: np.ndarray,
    targets: tuple[int, int],
    *,
    clearance: float,
    min_distance: float,
    extra: np.ndarray | None = None,
) -> dict[str, float | int]:
    """Measure the drawing features that tend to explain how hard a stimulus is.

    Parameters
    ----------
    g : networkx.Graph
        The graph.
    pos : numpy.ndarray
        Pixel positions, shape ``(n, 2)``.
    targets : tuple of int
        The two marked nodes.
    clearance, min_distance : float
        Readability limits used to count node-link overlaps and close node pairs.
    extra : numpy.ndarray, optional
        Extra room per node (see :func:`target_extra`).

    Returns
    -------
    dict
        ``links``, ``links_per_node``, ``crossings``, ``crossings_on_routes`` (crossings that
        involve a link of some shortest route between the targets), ``min_crossing_angle_deg``
        (NaN without crossings), ``node_link_overlaps``, ``close_node_pairs``,
        ``link_length_mean_px`` and ``link_length_sd_px`` (population standard deviation).
    """
    links = links_array(g)
    pairs = crossing_pairs(pos, links)
    on_route = np.zeros(len(links), dtype=bool)
    on_route[route_links(g, targets[0], targets[1], links)] = True
    angles = crossing_angles(pos, links, pairs)
    lengths = np.linalg.norm(pos[links[:, 1]] - pos[links[:, 0]], axis=1)
    return {
        "links": int(len(links)),
        "links_per_node": len(links) / g.number_of_nodes(),
        "crossings": int(len(pairs)),
        "crossings_on_routes": int(np.sum(on_route[pairs[:, 0]] | on_route[pairs[:, 1]])),
        "min_crossing_angle_deg": float(angles.min()) if len(angles) else math.nan,
        "node_link_overlaps": int(len(node_link_overlaps(pos, links, clearance, extra))),
        "close_node_pairs": int(len(close_node_pairs(pos, min_distance, extra))),
        "link_length_mean_px": float(lengths.mean()),
        "link_length_sd_px": float(lengths.std()),
    }


def target_extra(spec: StimulusSpec, n: int, targets: tuple[int, int]) -> np.ndarray:
    """Extra room, in pixels, each node needs beyond an ordinary node's (non-zero at targets).

    A target marker reaches ``target_size_px / sqrt(2)`` plus half its outline from its
    centre (the half-diagonal of the square, and of a diamond of the same area); an ordinary
    node reaches half of ``node_size_px``.

    Parameters
    ----------
    spec : StimulusSpec
        For the style's sizes.
    n : int
        Number of nodes.
    targets : tuple of int
        The two marked nodes.

    Returns
    -------
    numpy.ndarray
        Shape ``(n,)``.
    """
    style = spec.style
    reach = style.target_size_px / math.sqrt(2) + style.target_edge_px / 2
    extra = np.zeros(n)
    extra[list(targets)] = max(0.0, reach - style.node_size_px / 2)
    return extra


def _graph_for(cell: Cell, draw: int) -> nx.Graph:
    """The ``draw``-th graph of a cell (the same on every call, so it need not be kept)."""
    rng = np.random.default_rng([cell.seed, draw])
    return make_graph(cell.set.family, cell.nodes, cell.density, rng, rewire=cell.set.rewire)


def make_stimulus(cell: Cell, spec: StimulusSpec) -> Stimulus:
    """Draw one stimulus (graph, readable layout, targets), rejecting failed attempts.

    Parameters
    ----------
    cell : Cell
        What to make.
    spec : StimulusSpec
        The spec it belongs to.

    Returns
    -------
    Stimulus
        Without image features; :func:`write_stimulus` adds those.

    Raises
    ------
    ProtocolError
        Pointing at the set in the spec, when no attempt gave a readable drawing with a valid
        target pair (and ``if_unreadable`` is ``fail``), or no attempt found a target pair.
    """
    rule = spec.readability
    canvas = spec.canvas
    best: tuple[int, Stimulus] | None = None
    no_pair = 0
    for attempt in range(rule.attempts):
        graph = _graph_for(cell, attempt // LAYOUTS_PER_GRAPH)
        layout_seed = int(np.random.default_rng([cell.seed, attempt, 1]).integers(2**31))
        pos, readability = readable_layout(
            graph,
            cell.set.layout,
            layout_seed,
            width=canvas.width,
            height=canvas.height,
            margin=canvas.margin,
            min_distance=rule.min_node_distance,
            clearance=rule.link_clearance,
        )
        targets = choose_pair(
            graph, pos, cell.set.pairs, np.random.default_rng([cell.seed, attempt, 2])
        )
        if targets is None:
            no_pair += 1
            continue
        # The target markers are bigger than nodes: repair once more with room for them, so
        # no node hides under a marker and no link clips one.
        extra = target_extra(spec, graph.number_of_nodes(), targets)
        pos, readability = repair(
            pos,
            links_array(graph),
            min_distance=rule.min_node_distance,
            clearance=rule.link_clearance,
            box=(
                canvas.margin,
                canvas.margin,
                canvas.width - canvas.margin,
                canvas.height - canvas.margin,
            ),
            extra=extra,
        )
        links, routes = shortest_route(graph, *targets)
        stim = Stimulus(
            cell=cell,
            graph=graph,
            pos=pos,
            targets=targets,
            path_links=links,
            routes=routes,
            expected=expected_count(links, count_targets=spec.count_targets),
            readability=readability,
            attempts=attempt + 1,
            features={},
        )
        if readability.ok:
            return stim
        badness = readability.close_pairs + readability.overlaps
        if best is None or badness < best[0]:
            best = (badness, stim)
    s = cell.set
    if best is not None and rule.if_unreadable == "keep_best":
        return best[1]
    if no_pair == rule.attempts:
        code = "no-target-pair"
        message = (
            f"No target pair in {cell.name} meets the set's pairs rule in {rule.attempts} "
            "attempts; widen pairs.path_links, raise pairs.max_routes or change the strategy."
        )
    else:
        code = "unreadable-drawing"
        message = (
            f"No readable drawing of {cell.name} was found in {rule.attempts} attempts "
            f"(nodes closer than {rule.min_node_distance:g} px or links passing within "
            f"{rule.link_clearance:g} px of a node remained); lower the density or the size, "
            "relax the readability limits, raise readability.attempts, or set "
            "readability.if_unreadable: keep_best."
        )
    raise ProtocolError([Problem("error", spec.file, s.line, s.column, message, s.name, code=code)])


def write_stimulus(stim: Stimulus, spec: StimulusSpec, out: Path) -> dict[str, object]:
    """Render one stimulus, write its image(s) and GraphML, and return its manifest row.

    Parameters
    ----------
    stim : Stimulus
        From :func:`make_stimulus`.
    spec : StimulusSpec
        Its spec.
    out : pathlib.Path
        Output folder (holding ``images/`` and ``graphml/``).

    Returns
    -------
    dict
        The manifest row, keyed by :data:`MANIFEST_COLUMNS`.
    """
    cell = stim.cell
    links = links_array(stim.graph)
    size = (spec.canvas.width, spec.canvas.height)
    fig = figure(stim.pos, links, stim.targets, spec.style, size)
    image = to_palette(rasterise(fig), palette(spec.style))
    pixels = np.array(image.convert("RGB"))
    png = Path(IMAGES_DIR) / f"{cell.name}.png"
    write_png(image, out / png)
    svg = ""
    if "svg" in spec.formats:
        svg_path = Path(IMAGES_DIR) / f"{cell.name}.svg"
        write_svg(fig, out / svg_path)
        svg = svg_path.as_posix()
    graphml = Path(GRAPHML_DIR) / f"{cell.name}.graphml"
    write_graphml(stim, spec, out / graphml)
    features = layout_features(
        stim.graph,
        stim.pos,
        stim.targets,
        clearance=spec.readability.link_clearance,
        min_distance=spec.readability.min_node_distance,
        extra=target_extra(spec, stim.graph.number_of_nodes(), stim.targets),
    )
    features["ink_coverage"] = ink_coverage(pixels, spec.canvas.background)
    features["mean_luminance"] = mean_luminance(pixels)
    stim.features = dict(features)
    row: dict[str, object] = {
        "stimulus": png.as_posix(),
        "expected": stim.expected,
        "set": cell.set.name,
        "nodes": cell.nodes,
        "density": cell.level,
        "instance": cell.instance,
        "links_per_node_target": cell.density,
        "family": cell.set.family,
        "layout": cell.set.layout,
        "pair_strategy": cell.set.pairs.strategy,
        "count_targets": "true" if spec.count_targets else "false",
        "path_links": stim.path_links,
        "shortest_routes": stim.routes,
        **features,
        "attempts": stim.attempts,
        "graphml": graphml.as_posix(),
        "svg": svg,
        "seed": cell.seed,
    }
    return {k: _cell_text(row[k]) for k in MANIFEST_COLUMNS}


def _cell_text(value: object) -> object:
    """Fixed decimals for floats so the manifest bytes do not depend on float printing."""
    if isinstance(value, float):
        return "" if math.isnan(value) else f"{value:.{FEATURE_DECIMALS}f}"
    return value


def write_graphml(stim: Stimulus, spec: StimulusSpec, path: Path) -> None:
    """Write the stimulus graph with pixel positions and the two targets as node attributes.

    Node attributes: ``x`` and ``y`` (pixels, y downwards, as in the image), ``target``
    (0 for ordinary nodes, 1 and 2 for the two marked nodes) and ``marker`` (the target's
    shape, empty for ordinary nodes). Graph attributes give the ground truth.

    Parameters
    ----------
    stim : Stimulus
        The stimulus.
    spec : StimulusSpec
        Its spec (for the target shapes and the counting rule).
    path : pathlib.Path
        Destination file.
    """
    g = nx.Graph()
    g.graph.update(
        {
            "stimulus": stim.cell.name,
            "expected": stim.expected,
            "count_targets": spec.count_targets,
            "path_links": stim.path_links,
            "shortest_routes": stim.routes,
            "seed": stim.cell.seed,
            "width_px": spec.canvas.width,
            "height_px": spec.canvas.height,
        }
    )
    for v in range(stim.graph.number_of_nodes()):
        role = stim.targets.index(v) + 1 if v in stim.targets else 0
        g.add_node(
            v,
            x=round(float(stim.pos[v, 0]), COORD_DECIMALS),
            y=round(float(stim.pos[v, 1]), COORD_DECIMALS),
            target=role,
            marker=spec.style.target_shapes[role - 1] if role else "",
        )
    g.add_edges_from(links_array(stim.graph).tolist())
    try:
        with replace_file(path, binary=True) as fh:
            nx.write_graphml(g, fh)
    except OSError as exc:
        raise StorageError(f"Cannot write {path}: {exc.strerror or exc}.") from exc


def write_manifest(rows: list[dict[str, object]], path: Path) -> None:
    """Write manifest.csv (one row per stimulus, columns :data:`MANIFEST_COLUMNS`).

    Parameters
    ----------
    rows : list of dict
        Rows from :func:`write_stimulus`.
    path : pathlib.Path
        Destination file.
    """
    try:
        with replace_file(path) as fh:
            writer = csv.DictWriter(fh, fieldnames=MANIFEST_COLUMNS, lineterminator="\n")
            writer.writeheader()
            writer.writerows(rows)
    except OSError as exc:
        raise StorageError(f"Cannot write the manifest {path}: {exc.strerror or exc}.") from exc


def build(
    spec: StimulusSpec,
    out: Path,
    *,
    progress: Callable[[int, int, str], None] | None = None,
) -> list[dict[str, object]]:
    """Make every stimulus of a spec into ``out``.

    Writes ``out/images/NAME.png`` (and ``.svg``), ``out/graphml/NAME.graphml`` and
    ``out/manifest.csv``, whose ``stimulus`` paths are relative to the manifest. The caller
    decides whether ``out`` may be written (see :func:`prepare_output`).

    Parameters
    ----------
    spec : StimulusSpec
        A validated spec.
    out : pathlib.Path
        Output folder; created if missing.
    progress : callable, optional
        Called as ``progress(done, total, name)`` after each stimulus.

    Returns
    -------
    list of dict
        The manifest rows.
    """
    out = Path(out)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise StorageError(
            f"Cannot create the output folder {out}: {exc.strerror or exc}."
        ) from exc
    ensure_folder(out, (IMAGES_DIR,))  # a link there is refused: nothing is written through it
    ensure_folder(out, (GRAPHML_DIR,))
    cells = plan(spec)
    rows = []
    for i, cell in enumerate(cells, start=1):
        rows.append(write_stimulus(make_stimulus(cell, spec), spec, out))
        if progress is not None:
            progress(i, len(cells), cell.name)
    write_manifest(rows, out / MANIFEST)
    return rows


#: The command a stimuli folder's marker names.
STIMULI_COMMAND = "trialdeck stimuli"
# Files the kit writes; in a folder without the kit's marker (made before markers existed),
# --force removes only these, so a spec kept in the folder survives.
OWN_PATTERNS = ((IMAGES_DIR, ".png"), (IMAGES_DIR, ".svg"), (GRAPHML_DIR, ".graphml"))


def _remove_kit_files(out: Path) -> None:
    """Remove the kit's files from ``out`` without following a link (a linked folder is refused)."""
    remove_file(out, (MANIFEST,))
    for folder, suffix in OWN_PATTERNS:
        path = out / folder
        try:
            st = os.lstat(path)
        except FileNotFoundError:
            continue
        if stat.S_ISLNK(st.st_mode) or not stat.S_ISDIR(st.st_mode):
            raise OutputRefused(
                "link",
                f"{path} is a symbolic link or a file, not a folder; trialdeck neither deletes "
                "nor writes through links. Remove it, or choose a new output folder.",
            )
        for entry in os.scandir(path):
            if entry.name.endswith(suffix) and not entry.is_dir(follow_symlinks=False):
                os.unlink(entry.path)  # a link is removed itself, never its target


def prepare_output(out: Path, spec_path: Path, *, force: bool) -> OutputFolder:
    """Check that stimuli may be written into ``out`` and clear the kit's earlier output there.

    The rules are those of every writer (:func:`runner.contract.outputs.prepare_output_folder`):
    a folder the kit made (its marker) is re-written after removing the files it listed; another
    non-empty folder is refused unless ``force``, and then only the kit's own kinds of file
    (manifest, images, GraphML) are removed. The spec file itself may live in the output folder
    (as the demo's does); it is never counted as existing output and never removed.

    Parameters
    ----------
    out : pathlib.Path
        Output folder.
    spec_path : pathlib.Path
        The spec being built.
    force : bool
        Whether a folder the kit did not mark may be written.

    Returns
    -------
    OutputFolder
        Call its ``finish`` with the files written.

    Raises
    ------
    OutputRefused
        Not empty (without ``force``), a session folder, or a link where the kit writes.
    StorageError
        The earlier output cannot be removed.
    """
    target = prepare_output_folder(
        out, STIMULI_COMMAND, force=force, keep=[spec_path], what="stimuli"
    )
    if not target.owned:
        try:
            _remove_kit_files(out)
        except OSError as exc:
            raise StorageError(f"Cannot remove the earlier output in {out}: {exc}.") from exc
    for folder in (IMAGES_DIR, GRAPHML_DIR):
        if os.path.islink(out / folder):
            raise OutputRefused(
                "link",
                f"{out / folder} is a symbolic link; trialdeck neither deletes nor writes through "
                "links. Remove it, or choose a new output folder.",
            )
    return target


def output_files(out: Path, rows: list[dict[str, object]]) -> list[Path]:
    """Every file :func:`build` wrote for ``rows`` (images, GraphML, manifest)."""
    files = [out / MANIFEST]
    for row in rows:
        for key in ("stimulus", "svg", "graphml"):
            if row.get(key):
                files.append(out / str(row[key]))
    return files
