"""Checks of the committed demo stimuli against their GraphML files."""

from __future__ import annotations

import csv
from pathlib import Path

import networkx as nx
import pytest
from PIL import Image

DEMO = Path(__file__).resolve().parents[2] / "stimuli_demo"
MANIFEST = DEMO / "manifest.csv"
DEMO_SIZE = (1000, 1000)


def _rows() -> list[dict[str, str]]:
    with open(MANIFEST, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def test_demo_has_the_planned_stimuli() -> None:
    """The demo holds 3 practice and 30 main stimuli (5 sizes x 3 densities x 2 instances).

    Source: common practice (no published source).
    """
    rows = _rows()
    assert sum(r["set"] == "practice" for r in rows) == 3
    main = [r for r in rows if r["set"] == "main"]
    assert len(main) == 30
    assert len({(r["nodes"], r["density"], r["instance"]) for r in main}) == 30
    assert list(rows[0])[:6] == ["stimulus", "expected", "set", "nodes", "density", "instance"]
    assert list(rows[0])[-1] == "seed"


@pytest.mark.parametrize("row", _rows(), ids=lambda r: r["stimulus"])
def test_expected_matches_graphml(row: dict[str, str]) -> None:
    """The expected count is the number of stops strictly between the two marked depots.

    Source: networkx shortest_path_length on the row's GraphML.
    """
    g = nx.read_graphml(DEMO / row["graphml"])
    marked = sorted((d["target"], v) for v, d in g.nodes(data=True) if d["target"])
    assert [role for role, _ in marked] == [1, 2]
    a, b = (v for _, v in marked)
    assert int(row["expected"]) == nx.shortest_path_length(g, a, b) - 1
    assert int(row["nodes"]) == g.number_of_nodes()


@pytest.mark.parametrize("row", _rows(), ids=lambda r: r["stimulus"])
def test_image_exists_with_stated_size(row: dict[str, str]) -> None:
    """Every demo image exists at 1000 x 1000 pixels.

    Source: common practice (no published source).
    """
    path = DEMO / row["stimulus"]
    assert path.is_file()
    with Image.open(path) as im:
        assert im.size == DEMO_SIZE
