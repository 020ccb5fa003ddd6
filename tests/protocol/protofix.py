"""Helpers that write small protocols, trial tables and stimulus images into a test folder."""

from __future__ import annotations

from pathlib import Path

import yaml
from PIL import Image

BASE_PROTOCOL: dict[str, object] = {
    "study": "courier-check",
    "screen": {"resolution": [640, 480], "refresh_hz": 60, "background": "#808080"},
    "stimulus_size": {"width_px": 300},
    "markers": {"stream": "courier-check-markers"},
    "trials": {"table": "table.csv", "factors": ["density"]},
    "answer": {"prompt": "How many stops?", "max": 60},
    "rating": {"points": 9},
    "timing": {"fixation_ms": [100, 200], "gap_ms": 100, "feedback_ms": 200},
    "sequence": [
        {"page": {"text": "# Welcome\nCount the stops between the two depots."}},
        {"practice": {"where": {"set": "practice"}, "feedback": True}},
        {"blocks": {"where": {"set": "main"}, "by": "density"}},
        {"page": {"text": "Thank you."}},
    ],
}

BASE_ROWS = [
    ("img/a.png", "3", "practice", "sparse"),
    ("img/b.png", "4", "main", "sparse"),
    ("img/c.png", "5", "main", "sparse"),
    ("img/d.png", "6", "main", "dense"),
    ("img/e.png", "7", "main", "dense"),
]


def write_image(path: Path, size: tuple[int, int] = (200, 100), colour=(120, 120, 120)) -> Path:
    """Write a solid-colour PNG (the default grey is close to the base background)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    Image.new("RGB", size, colour).save(path)
    return path


def write_table(folder: Path, rows, header=("stimulus", "expected", "set", "density")) -> Path:
    lines = [",".join(header)] + [",".join(r) for r in rows]
    path = folder / "table.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def write_protocol(
    folder: Path,
    protocol: dict[str, object] | None = None,
    rows=None,
    *,
    image_size: tuple[int, int] = (200, 100),
    colour=(120, 120, 120),
) -> Path:
    """Write protocol.yaml, table.csv and one image per row; return the protocol path."""
    folder.mkdir(parents=True, exist_ok=True)
    rows = BASE_ROWS if rows is None else rows
    for r in rows:
        if not (folder / r[0]).exists():
            write_image(folder / r[0], image_size, colour)
    write_table(folder, rows)
    path = folder / "protocol.yaml"
    path.write_text(yaml.safe_dump(protocol or BASE_PROTOCOL, sort_keys=False), encoding="utf-8")
    return path


def merged(**changes: object) -> dict[str, object]:
    """The base protocol with top-level sections replaced or (for dicts) updated."""
    out = {k: (dict(v) if isinstance(v, dict) else v) for k, v in BASE_PROTOCOL.items()}
    for key, value in changes.items():
        if value is None:
            out.pop(key, None)
        elif isinstance(value, dict) and isinstance(out.get(key), dict):
            out[key] = {**out[key], **value}  # type: ignore[dict-item]
        else:
            out[key] = value
    return out
