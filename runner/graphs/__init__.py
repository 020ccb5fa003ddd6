"""The stimulus kit: seeded node-link diagrams with known answers and layout features."""

from __future__ import annotations

from runner.graphs.build import MANIFEST_COLUMNS, build, layout_features, make_stimulus, plan
from runner.graphs.families import FAMILIES, barabasi_albert, make_graph
from runner.graphs.geometry import count_crossings, crossing_pairs, node_link_overlaps
from runner.graphs.layout import LAYOUTS, readable_layout
from runner.graphs.paths import PAIR_STRATEGIES, PairRule, choose_pair, shortest_route
from runner.graphs.render import Style, mean_luminance, relative_luminance
from runner.graphs.spec import StimulusSpec, load_spec, parse_spec

__all__ = [
    "FAMILIES",
    "LAYOUTS",
    "MANIFEST_COLUMNS",
    "PAIR_STRATEGIES",
    "PairRule",
    "StimulusSpec",
    "Style",
    "barabasi_albert",
    "build",
    "choose_pair",
    "count_crossings",
    "crossing_pairs",
    "layout_features",
    "load_spec",
    "make_graph",
    "make_stimulus",
    "mean_luminance",
    "node_link_overlaps",
    "parse_spec",
    "plan",
    "readable_layout",
    "relative_luminance",
    "shortest_route",
]
