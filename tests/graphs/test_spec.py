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
    (_edit("seed: 11", "sead: 11"), 1, 1, "unknown-field"),
    (_edit("seed: 11", "seed: eleven"), 1, 7, "bad-type"),
    (_edit('background: "#8c8c8c"', "background: grey"), 2, 58, "bad-pattern"),
    (_edit("count_targets: false\n", ""), 1, 1, "missing-field"),
    (_edit("family: random", "family: randm"), 9, 13, "bad-choice"),
    (_edit("layout: stress", "layout: circle"), 10, 13, "bad-choice"),
    (_edit("sizes: [12, 20]", "sizes: [2, 20]"), 11, 13, "out-of-range"),
    (_edit("sparse: 1.2", "sparse: 0.6"), 12, 25, "out-of-range"),
    (_edit("sparse: 1.2", "sparse: 9.0"), 12, 25, "out-of-range"),
    (_edit("name: main", "name: main set"), 8, 11, "bad-pattern"),
    (_edit("path_links: [2, 4]", "path_links: [4, 2]"), 14, 48, "bad-value"),
    (_edit(", path_links: [2, 4]", ""), 14, 12, "missing-field"),
    (_edit("formats: [png, svg]", "formats: [svg]"), 6, 10, "bad-value"),
    (
        _edit("target_shapes: [square, diamond]", "target_shapes: [square, square]"),
        3,
        41,
        "bad-value",
    ),
    (_edit("attempts: 10", "attempts: 0"), 4, 73, "out-of-range"),
    (_edit("instances: 2", "instances: true"), 13, 16, "bad-type"),
    ("seed: [1\n", 2, 1, "yaml-syntax"),
]


@pytest.mark.parametrize(("text", "line", "column", "code"), BAD)
def test_mistakes_are_reported_at_their_place(text: str, line: int, column: int, code: str) -> None:
    """Each mistake is one problem line with the file, line and column of the bad value.

    Source: common practice (no published source).
    """
    with pytest.raises(ProtocolError) as info:
        parse_spec(text, file="s.yaml")
    hit = [p for p in info.value.problems if (p.line, p.column, p.code) == (line, column, code)]
    assert hit, info.value.lines()
    assert hit[0].format().startswith(f"s.yaml:{line}:{column}: error: ")


@pytest.mark.parametrize(
    ("old", "new", "suggestion"),
    [
        ("seed: 11", "sead: 11", "Did you mean 'seed'?"),
        ("family: random", "family: randm", "Did you mean 'random'?"),
    ],
)
def test_misspelt_names_suggest_the_closest(old: str, new: str, suggestion: str) -> None:
    """A misspelt key or choice names the one it most likely meant.

    Source: common practice (no published source).
    """
    with pytest.raises(ProtocolError) as info:
        parse_spec(_edit(old, new), file="s.yaml")
    assert any(suggestion in line for line in info.value.lines()), info.value.lines()


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
