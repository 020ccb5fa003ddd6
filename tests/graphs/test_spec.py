"""Tests of reading and validating the stimulus spec."""

from __future__ import annotations

import pytest

from runner.errors import InputFileError, ProtocolError
from runner.graphs.spec import load_spec, parse_spec

GOOD = """\
seed: 11
canvas: {size_px: [400, 300], margin_px: 30, background: "#8c8c8c"}
style: {node_size_px: 8, target_shapes: [square, diamond]}
readability: {min_node_distance_px: 18, link_clearance_px: 7, attempts: 10}
count_targets: false
formats: [png, svg]
sets:
  - name: main
    family: random
    layout: stress
    sizes: [12, 20]
    densities: {sparse: 1.2, dense: 1.5}
    instances: 2
    pairs: {strategy: path_length, path_links: [2, 4], max_routes: 2}
"""


def test_good_spec_parses() -> None:
    """A complete spec parses into its values.

    Source: common practice (no published source).
    """
    spec = parse_spec(GOOD, file="s.yaml")
    assert spec.seed == 11
    assert (spec.canvas.width, spec.canvas.height, spec.canvas.margin) == (400, 300, 30)
    assert spec.style.node_size_px == 8
    assert spec.formats == ("png", "svg")
    (s,) = spec.sets
    assert s.sizes == (12, 20)
    assert s.densities == (("sparse", 1.2), ("dense", 1.5))
    assert s.pairs.path_links == (2, 4)
    assert (s.line, s.column) == (8, 5)


def _edit(old: str, new: str) -> str:
    assert old in GOOD
    return GOOD.replace(old, new)


BAD = [
    (_edit("seed: 11", "sead: 11"), 1, 1, "did you mean 'seed'"),
    (_edit("seed: 11", "seed: eleven"), 1, 7, "seed must be a whole number"),
    (_edit('background: "#8c8c8c"', "background: grey"), 2, 58, "#rrggbb"),
    (_edit("count_targets: false\n", ""), 1, 1, "count_targets"),
    (_edit("family: random", "family: randm"), 9, 13, "did you mean 'random'"),
    (_edit("layout: stress", "layout: circle"), 10, 13, "use one of spring, stress"),
    (_edit("sizes: [12, 20]", "sizes: [2, 20]"), 11, 13, "sizes[0] must lie from 3"),
    (_edit("sparse: 1.2", "sparse: 0.6"), 12, 25, "fewer than the 11"),
    (_edit("sparse: 1.2", "sparse: 9.0"), 12, 25, "more than the 66"),
    (_edit("name: main", "name: main set"), 8, 11, "letters, digits and hyphens"),
    (_edit("path_links: [2, 4]", "path_links: [4, 2]"), 14, 48, "shorter length first"),
    (_edit(", path_links: [2, 4]", ""), 14, 12, "needs sets[0].pairs.path_links"),
    (_edit("formats: [png, svg]", "formats: [svg]"), 6, 10, "must include png"),
    (
        _edit("target_shapes: [square, diamond]", "target_shapes: [square, square]"),
        3,
        41,
        "different shapes",
    ),
    (_edit("attempts: 10", "attempts: 0"), 4, 73, "attempts must lie from 1"),
    (_edit("instances: 2", "instances: true"), 13, 16, "instances must be a whole number"),
    ("seed: [1\n", 2, 1, "cannot be read as YAML"),
]


@pytest.mark.parametrize(("text", "line", "column", "fragment"), BAD)
def test_mistakes_are_reported_at_their_place(
    text: str, line: int, column: int, fragment: str
) -> None:
    """Each mistake is one problem line with the file, line and column of the bad value.

    Source: common practice (no published source).
    """
    with pytest.raises(ProtocolError) as info:
        parse_spec(text, file="s.yaml")
    lines = info.value.lines()
    hit = [ln for ln in lines if fragment.lower() in ln.lower()]
    assert hit, lines
    assert hit[0].startswith(f"s.yaml:{line}:{column}: error: ")


def test_all_mistakes_reported_at_once() -> None:
    """Several mistakes in one spec are all reported together.

    Source: common practice (no published source).
    """
    text = _edit("seed: 11", "seed: -1").replace("family: random", "family: tree")
    with pytest.raises(ProtocolError) as info:
        parse_spec(text, file="s.yaml")
    assert len(info.value.problems) == 2


def test_missing_spec_file(tmp_path) -> None:
    """A missing spec file is an input-file error naming the path.

    Source: common practice (no published source).
    """
    with pytest.raises(InputFileError, match="does not exist"):
        load_spec(tmp_path / "nope.yaml")
