"""Tests of building stimuli from a spec and of the ``stimuli`` command."""

from __future__ import annotations

import argparse
import csv
from pathlib import Path

import networkx as nx
import pytest
from PIL import Image

from runner.cli.stimuli import add_arguments, run
from runner.errors import InputFileError, ProtocolError, StorageError
from runner.graphs.build import MANIFEST_COLUMNS

SPEC = """\
seed: 5
canvas: {size_px: [500, 400], margin_px: 30}
readability: {min_node_distance_px: 16, link_clearance_px: 6, attempts: 20}
count_targets: {count}
formats: [png, svg]
sets:
  - name: main
    family: random
    layout: stress
    sizes: [12, 24]
    densities: {sparse: 1.2, dense: 1.5}
    instances: 1
    pairs: {strategy: path_length, path_links: [2, 5], max_routes: 3}
  - name: extra
    family: small_world
    layout: spring
    sizes: [16]
    densities: {sparse: 1.5}
    pairs: {strategy: far}
"""


def _args(spec: Path, out: Path, *extra: str) -> argparse.Namespace:
    parser = argparse.ArgumentParser()
    add_arguments(parser)
    return parser.parse_args([str(spec), "--out", str(out), "--quiet", *extra])


def _spec(tmp_path: Path, *, count: str = "false", text: str = SPEC) -> Path:
    path = tmp_path / "spec.yaml"
    path.write_text(text.replace("{count}", count), encoding="utf-8")
    return path


def _rows(out: Path) -> list[dict[str, str]]:
    with open(out / "manifest.csv", newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


@pytest.fixture(scope="module")
def built(tmp_path_factory) -> Path:
    tmp = tmp_path_factory.mktemp("kit")
    out = tmp / "out"
    assert run(_args(_spec(tmp), out)) == 0
    return out


def test_manifest_rows_and_files(built: Path) -> None:
    """Every planned stimulus has a manifest row, an image of the canvas size and GraphML.

    Source: common practice (no published source).
    """
    rows = _rows(built)
    assert [r["stimulus"] for r in rows] == [
        "images/main_n012_sparse_i1.png",
        "images/main_n012_dense_i1.png",
        "images/main_n024_sparse_i1.png",
        "images/main_n024_dense_i1.png",
        "images/extra_n016_sparse_i1.png",
    ]
    assert tuple(rows[0]) == MANIFEST_COLUMNS
    for r in rows:
        with Image.open(built / r["stimulus"]) as im:
            assert im.size == (500, 400)
        assert (built / r["svg"]).is_file()
        assert (built / r["graphml"]).is_file()
        assert int(r["node_link_overlaps"]) == 0
        assert int(r["close_node_pairs"]) == 0


def test_graphml_ground_truth_matches_networkx(built: Path) -> None:
    """GraphML targets and positions give back the manifest's answer and route count.

    Source: networkx.shortest_path_length and networkx.all_shortest_paths.
    """
    for r in _rows(built):
        g = nx.read_graphml(built / r["graphml"])
        roles = {d["target"]: v for v, d in g.nodes(data=True) if d["target"]}
        a, b = roles[1], roles[2]
        length = nx.shortest_path_length(g, a, b)
        assert int(r["path_links"]) == length
        assert int(r["expected"]) == length - 1
        assert int(r["shortest_routes"]) == len(list(nx.all_shortest_paths(g, a, b)))
        assert int(r["links"]) == g.number_of_edges()
        assert int(r["nodes"]) == g.number_of_nodes()
        xs = [d["x"] for _, d in g.nodes(data=True)]
        assert 30 <= min(xs) and max(xs) <= 470
        assert g.nodes[a]["marker"] == "square" and g.nodes[b]["marker"] == "diamond"


def test_path_rule_respected(built: Path) -> None:
    """Stimuli of the path_length set keep the route length and route count in range.

    Source: common practice (no published source).
    """
    main = [r for r in _rows(built) if r["set"] == "main"]
    assert all(2 <= int(r["path_links"]) <= 5 for r in main)
    assert all(int(r["shortest_routes"]) <= 3 for r in main)


def test_same_seed_same_bytes(built: Path, tmp_path: Path) -> None:
    """Building the same spec again gives byte-identical images, GraphML and manifest.

    Source: common practice (no published source).
    """
    again = tmp_path / "again"
    assert run(_args(_spec(tmp_path), again)) == 0
    first = sorted(p.relative_to(built) for p in built.rglob("*") if p.is_file())
    second = sorted(p.relative_to(again) for p in again.rglob("*") if p.is_file())
    assert first == second
    for rel in first:
        assert (built / rel).read_bytes() == (again / rel).read_bytes(), rel


def test_count_targets_adds_two(built: Path, tmp_path: Path) -> None:
    """With count_targets true every answer is two more (the marked nodes are counted).

    Source: from memory (a route of L links has L + 1 nodes, L - 1 of them between the ends).
    """
    out = tmp_path / "counted"
    assert run(_args(_spec(tmp_path, count="true"), out)) == 0
    before = [int(r["expected"]) for r in _rows(built)]
    after = [int(r["expected"]) for r in _rows(out)]
    assert after == [e + 2 for e in before]


def test_non_empty_output_refused_without_force(tmp_path: Path) -> None:
    """An output folder holding files is refused, and --force replaces only kit output.

    Source: common practice (no published source).
    """
    spec = _spec(tmp_path)
    out = tmp_path / "out"
    (out / "images").mkdir(parents=True)
    stale = out / "images" / "old.png"
    stale.write_bytes(b"x")
    notes = out / "notes.txt"
    notes.write_text("keep me", encoding="utf-8")
    with pytest.raises(StorageError, match="--force"):
        run(_args(spec, out))
    assert stale.exists()
    assert run(_args(spec, out, "--force")) == 0
    assert not stale.exists()
    assert notes.read_text(encoding="utf-8") == "keep me"


def test_spec_inside_output_folder_is_allowed(tmp_path: Path) -> None:
    """A spec kept in its own output folder does not count as earlier output.

    Source: common practice (no published source).
    """
    spec = _spec(tmp_path)
    assert run(_args(spec, tmp_path)) == 0
    assert spec.is_file()
    assert (tmp_path / "manifest.csv").is_file()


def test_missing_spec_is_an_input_error(tmp_path: Path) -> None:
    """A spec path that does not exist raises InputFileError.

    Source: common practice (no published source).
    """
    with pytest.raises(InputFileError):
        run(_args(tmp_path / "missing.yaml", tmp_path / "out"))


def test_impossible_pair_rule_points_at_the_set(tmp_path: Path) -> None:
    """A route length no graph of the set can have is reported at the set's line.

    Source: common practice (no published source).
    """
    text = SPEC.replace("path_links: [2, 5]", "path_links: [40, 50]").replace(
        "attempts: 20", "attempts: 2"
    )
    with pytest.raises(ProtocolError) as info:
        run(_args(_spec(tmp_path, text=text), tmp_path / "out"))
    first = info.value.problems[0]
    assert first.code == "no-target-pair"
    assert first.format().startswith(f"{tmp_path / 'spec.yaml'}:7:5: error: ")


def test_targets_have_room_for_their_markers(built: Path) -> None:
    """No node lies under a target marker: others keep the node gap beyond the marker's reach.

    Source: common practice (no published source).
    """
    # Defaults: marker 28 px (reach 28 / sqrt 2 + 1 px outline), nodes 9 px; the spec's node
    # gap is 16 px, so a target's neighbours keep 16 px plus the marker's extra reach.
    reach = 28 / 2**0.5 + 1.0
    need = 16 + (reach - 9 / 2)
    rounding = 0.02  # GraphML coordinates have 2 decimals
    for r in _rows(built):
        g = nx.read_graphml(built / r["graphml"])
        xy = {v: (d["x"], d["y"]) for v, d in g.nodes(data=True)}
        for t in (v for v, d in g.nodes(data=True) if d["target"]):
            for v, (x, y) in xy.items():
                if v != t:
                    gap = ((x - xy[t][0]) ** 2 + (y - xy[t][1]) ** 2) ** 0.5
                    assert gap >= need - rounding, (r["stimulus"], v)
