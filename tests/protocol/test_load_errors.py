"""Malformed protocols and trial tables: one actionable line each, exit 1, no traceback, no files.

Every case starts from the same small valid protocol (BASE, line numbers as written) and its
trial table, changes one thing, and runs the real command line (``trialdeck check``).
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import pytest
from protofix import BASE_ROWS, write_image

from runner.cli import main

BASE = """study: courier-check
screen: {resolution: [640, 480], refresh_hz: 60, background: "#808080"}
stimulus_size: {width_px: 300}
markers: {stream: courier-check-markers}
trials: {table: table.csv, factors: [density]}
answer: {prompt: "How many stops?", max: 60}
rating: {points: 9}
timing: {fixation_ms: [100, 200], gap_ms: 100, feedback_ms: 200}
sequence:
  - page: {text: "Welcome"}
  - practice: {where: {set: practice}, feedback: true}
  - blocks: {where: {set: main}, by: density}
  - page: {text: "Thank you."}
"""
TABLE = "stimulus,expected,set,density\n" + "".join(",".join(r) + "\n" for r in BASE_ROWS)
# Rows for ordering rules that cannot be met: three 'sparse' in four trials with at most one in
# a row, and one picture three times in four trials that must never follow itself.
CROWDED = TABLE.replace("img/e.png,7,main,dense", "img/e.png,7,main,sparse")
SAME_PICTURE = TABLE.replace("img/c.png", "img/b.png").replace("img/d.png", "img/b.png")


def edit(lines: dict[int, str] | None = None, append: str = "") -> str:
    rows = BASE.splitlines()
    for number, text in (lines or {}).items():
        rows[number - 1] = text
    return "\n".join(rows) + "\n" + append


P, T = "protocol.yaml", "table.csv"

# (id, protocol text or bytes, table text or bytes, file, line, message fragment)
CASES = [
    ("unknown key", edit({7: "ratng: {points: 9}"}), TABLE, P, 7, "did you mean 'rating'"),
    (
        "unknown nested key",
        edit({8: "timing: {fixation: [100, 200]}"}),
        TABLE,
        P,
        8,
        "did you mean 'fixation_ms'",
    ),
    ("duplicate key", edit(append="study: again\n"), TABLE, P, 14, "appears twice"),
    ("tab", edit({3: "stimulus_size:\t{width_px: 300}"}), TABLE, P, 3, "tab character"),
    ("wrong type", edit({7: "rating: {points: nine}"}), TABLE, P, 7, "whole number, got 'nine'"),
    ("rating 1 point", edit({7: "rating: {points: 1}"}), TABLE, P, 7, "at least 2 and at most 11"),
    ("rating 12 points", edit({7: "rating: {points: 12}"}), TABLE, P, 7, "got 12"),
    (
        "colour",
        edit({2: 'screen: {resolution: [640, 480], refresh_hz: 60, background: "grey"}'}),
        TABLE,
        P,
        2,
        "'#808080' (got 'grey')",
    ),
    (
        "refresh",
        edit({2: "screen: {resolution: [640, 480], refresh_hz: 5}"}),
        TABLE,
        P,
        2,
        "screen.refresh_hz: got 5",
    ),
    (
        "resolution one number",
        edit({2: "screen: {resolution: [640], refresh_hz: 60}"}),
        TABLE,
        P,
        2,
        "[width, height]",
    ),
    (
        "two sizes",
        edit({3: "stimulus_size: {width_px: 300, height_px: 200}"}),
        TABLE,
        P,
        3,
        "exactly one of",
    ),
    (
        "degrees without distance",
        edit({3: "stimulus_size: {width_deg: 10}"}),
        TABLE,
        P,
        3,
        "needs screen.width_cm and screen.distance_cm",
    ),
    (
        "cm without width",
        edit({3: "stimulus_size: {width_cm: 10}"}),
        TABLE,
        P,
        3,
        "needs screen.width_cm",
    ),
    ("study name", edit({1: "study: courier check!"}), TABLE, P, 1, "got 'courier check!'"),
    ("markers missing", edit({4: "# no markers"}), TABLE, P, 1, "missing required field 'markers'"),
    (
        "bad key name",
        edit({6: 'answer: {prompt: "How many?", unsure_key: F1}'}),
        TABLE,
        P,
        6,
        "(got 'F1')",
    ),
    (
        "same keys",
        edit({6: "answer: {unsure_key: space}"}),
        TABLE,
        P,
        6,
        "give them different keys",
    ),
    ("answer mode", edit({6: "answer: {mode: during}"}), TABLE, P, 6, "'after' or 'over'"),
    (
        "fixation order",
        edit({8: "timing: {fixation_ms: [900, 200]}"}),
        TABLE,
        P,
        8,
        "low end 900.0 is above the high end 200.0",
    ),
    ("negative gap", edit({8: "timing: {gap_ms: -5}"}), TABLE, P, 8, "timing.gap_ms: got -5"),
    (
        "unknown step",
        edit({13: "  - pause: {seconds: 3}"}),
        TABLE,
        P,
        13,
        "one of page, rest, practice, blocks, trials",
    ),
    (
        "two steps in one",
        edit({13: "  - {page: {text: a}, rest: {seconds: 2}}"}),
        TABLE,
        P,
        13,
        "one of page, rest",
    ),
    ("page without text", edit({13: "  - page: {key: space}"}), TABLE, P, 13, "text or file"),
    (
        "page file missing",
        edit({13: "  - page: {file: nothere.md}"}),
        TABLE,
        P,
        13,
        "'nothere.md' does not exist",
    ),
    (
        "page file outside",
        edit({13: "  - page: {file: ../outside.md}"}),
        TABLE,
        P,
        13,
        "outside the protocol's folder",
    ),
    ("rest zero", edit({13: "  - rest: {seconds: 0}"}), TABLE, P, 13, "must be more than 0"),
    (
        "rest show",
        edit({13: "  - rest: {seconds: 5, show: movie}"}),
        TABLE,
        P,
        13,
        "'fixation' or 'blank'",
    ),
    (
        "block order",
        edit({12: "  - blocks: {where: {set: main}, by: density, order: zigzag}"}),
        TABLE,
        P,
        12,
        "'balanced-latin', 'fixed' or 'random'",
    ),
    (
        "block factor",
        edit({12: "  - blocks: {where: {set: main}, by: colour}"}),
        TABLE,
        P,
        12,
        "block factor 'colour' is not a column",
    ),
    (
        "where column",
        edit({11: "  - practice: {where: {kind: practice}}"}),
        TABLE,
        P,
        11,
        "'kind' is not a column",
    ),
    (
        "where matches nothing",
        edit({11: "  - practice: {where: {set: warmup}}"}),
        TABLE,
        P,
        11,
        "no row of the trial table matches",
    ),
    (
        "fixed without levels",
        edit({12: "  - blocks: {where: {set: main}, by: density, order: fixed}"}),
        TABLE,
        P,
        12,
        "needs the list of levels",
    ),
    (
        "levels wrong",
        edit({12: "  - blocks: {where: {set: main}, by: density, levels: [sparse, thick]}"}),
        TABLE,
        P,
        12,
        "must list each level of 'density' once",
    ),
    (
        "max_run column",
        edit({12: "  - blocks: {where: {set: main}, by: density, max_run: {nodes: 2}}"}),
        TABLE,
        P,
        12,
        "'nodes' is not a column",
    ),
    (
        "max_run zero",
        edit({12: "  - blocks: {where: {set: main}, by: density, max_run: {density: 0}}"}),
        TABLE,
        P,
        12,
        "must be at least 1",
    ),
    (
        "max_run impossible",
        edit({12: "  - trials: {where: {set: main}, max_run: {density: 1}}"}),
        CROWDED,
        P,
        12,
        "density",
    ),
    (
        "no_repeat impossible",
        edit({12: "  - trials: {where: {set: main}}"}),
        SAME_PICTURE,
        P,
        12,
        "stimulus",
    ),
    (
        "factor missing",
        edit({5: "trials: {table: table.csv, factors: [density, nodes]}"}),
        TABLE,
        P,
        5,
        "factor 'nodes' is not a column",
    ),
    (
        "table missing",
        edit({5: "trials: {table: nope.csv}"}),
        TABLE,
        P,
        5,
        "'nope.csv' does not exist",
    ),
    (
        "prompt column",
        edit({6: "answer: {prompt_column: question}"}),
        TABLE,
        P,
        6,
        "'question' is not a column",
    ),
    (
        "question column",
        edit({7: "rating: {question_column: ask}"}),
        TABLE,
        P,
        7,
        "'ask' is not a column",
    ),
    (
        "no trial steps",
        edit({11: "  - page: {text: x}", 12: "  - page: {text: y}"}),
        TABLE,
        P,
        10,
        "the sequence has no trials",
    ),
    (
        "empty sequence",
        edit({9: "sequence: []", 10: "", 11: "", 12: "", 13: ""}),
        TABLE,
        P,
        9,
        "at least 1 item",
    ),
    ("anchor", edit(append="x: &a [1]\ny: *a\n"), TABLE, P, 14, "Anchors such as '&a'"),
    (
        "breaks every 0",
        edit(append="breaks: {every_trials: 0}\n"),
        TABLE,
        P,
        14,
        "must be at least 1",
    ),
    (
        "tolerance above 1",
        edit(append="checks: {luminance_tolerance: 2}\n"),
        TABLE,
        P,
        14,
        "at most 1",
    ),
    (
        "checks unknown",
        edit(append="checks: {min_response: 100}\n"),
        TABLE,
        P,
        14,
        "did you mean 'min_response_ms'",
    ),
    (
        "photodiode corner",
        edit(append="photodiode: {corner: middle}\n"),
        TABLE,
        P,
        14,
        "'top-left', 'top-right'",
    ),
    ("top-level list", "- study: x\n", TABLE, P, 1, "starts with a list"),
    ("yaml syntax", edit({7: "rating: {points: 9"}), TABLE, P, 8, "YAML syntax error"),
    ("not UTF-8", BASE.encode().replace(b"Welcome", b"Welc\xffome"), TABLE, P, 10, "not UTF-8"),
    ("NUL character", BASE.encode().replace(b"Welcome", b"Wel\x00come"), TABLE, P, 10, "U+0000"),
    ("empty file", b"", TABLE, P, 0, "empty or holds only comments"),
    ("only comments", b"# nothing\n", TABLE, P, 0, "empty or holds only comments"),
    ("oversize", BASE.encode() + b"#" + b"x" * 1_000_001 + b"\n", TABLE, P, 0, "byte limit"),
    (
        "table: expected text",
        BASE,
        TABLE.replace("img/c.png,5", "img/c.png,five"),
        T,
        4,
        "whole number or empty, got 'five'",
    ),
    (
        "table: expected negative",
        BASE,
        TABLE.replace("img/c.png,5", "img/c.png,-5"),
        T,
        4,
        "must not be negative",
    ),
    (
        "table: expected above max",
        BASE,
        TABLE.replace("img/c.png,5", "img/c.png,75"),
        T,
        4,
        "above answer.max (60)",
    ),
    (
        "table: short row",
        BASE,
        TABLE.replace("img/d.png,6,main,dense", "img/d.png,6,main"),
        T,
        5,
        "3 fields but the header has 4",
    ),
    (
        "table: no stimulus column",
        BASE,
        TABLE.replace("stimulus,", "image,"),
        T,
        1,
        "no 'stimulus' column",
    ),
    (
        "table: duplicate column",
        BASE,
        TABLE.replace("set,density", "set,set"),
        T,
        1,
        "'set' appears twice",
    ),
    (
        "table: reserved column",
        BASE,
        TABLE.replace("set,density", "set,rating"),
        T,
        1,
        "'rating' is a name trialdeck writes",
    ),
    (
        "table: empty stimulus",
        BASE,
        TABLE.replace("img/e.png,7", ",7"),
        T,
        6,
        "stimulus field is empty",
    ),
    (
        "table: missing image",
        BASE,
        TABLE.replace("img/e.png", "img/zz.png"),
        T,
        6,
        "'img/zz.png' does not exist",
    ),
    (
        "table: image outside",
        BASE,
        TABLE.replace("img/e.png", "../outside.png"),
        T,
        6,
        "outside the protocol's folder",
    ),
    (
        "table: NUL in path",
        BASE,
        TABLE.replace("img/e.png", "img/e\x00.png"),
        T,
        6,
        "control character",
    ),
    ("table: empty", BASE, "", T, 1, "the trial table is empty"),
    ("table: header only", BASE, "stimulus,expected,set,density\n", T, 1, "header but no rows"),
    (
        "table: not UTF-8",
        BASE,
        TABLE.encode().replace(b"sparse", b"sp\xe4rse", 1),
        T,
        2,
        "not UTF-8",
    ),
    (
        "table: broken image",
        BASE,
        TABLE.replace("img/e.png", "img/broken.png"),
        T,
        6,
        "cannot be decoded",
    ),
]


def _setup(folder: Path, protocol: str | bytes, table: str | bytes) -> Path:
    for row in BASE_ROWS:
        write_image(folder / row[0])
    (folder / "img" / "broken.png").write_bytes(b"\x89PNG\r\n\x1a\n not really an image")
    (folder.parent / "outside.png").write_bytes((folder / "img" / "a.png").read_bytes())
    (folder.parent / "outside.md").write_text("# outside\n", encoding="utf-8")
    path = folder / P
    path.write_bytes(protocol if isinstance(protocol, bytes) else protocol.encode("utf-8"))
    (folder / T).write_bytes(table if isinstance(table, bytes) else table.encode("utf-8"))
    return path


def _snapshot(*folders: Path) -> set[tuple[str, int]]:
    return {(str(p), p.stat().st_mtime_ns) for folder in folders for p in folder.rglob("*")}


def test_case_table_is_large_enough() -> None:
    """The table holds at least 40 malformed protocols and trial tables, with distinct names."""
    names = [c[0] for c in CASES]
    assert len(names) >= 40 and len(set(names)) == len(names)


@pytest.mark.parametrize(
    ("protocol", "table", "file", "line", "fragment"),
    [c[1:] for c in CASES],
    ids=[c[0] for c in CASES],
)
def test_malformed_input_is_one_actionable_line(
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
    capsys: pytest.CaptureFixture[str],
    protocol: str | bytes,
    table: str | bytes,
    file: str,
    line: int,
    fragment: str,
) -> None:
    """`trialdeck check` exits 1 with a FILE:LINE:COL error naming the problem, writing nothing."""
    folder = tmp_path / "study"
    folder.mkdir()
    path = _setup(folder, protocol, table)
    monkeypatch.chdir(tmp_path)
    before = _snapshot(tmp_path)
    code = main(["check", str(path)])
    out, err = capsys.readouterr()
    text = out + err
    assert code == 1, text
    assert "Traceback" not in text and "internal error" not in text
    errors = [row for row in text.splitlines() if ": error: " in row]
    assert errors, text
    wanted = f"{file}:{line}:"
    hits = [row for row in errors if wanted in row and fragment in row]
    assert hits, f"no error line at {wanted} with {fragment!r} in:\n{text}"
    assert _snapshot(tmp_path) == before


def test_json_findings_carry_position_and_path(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """`check --json` prints a list of objects with severity, file, line, column, path, message."""
    import json

    path = _setup(tmp_path, edit({8: "timing: {gap_ms: -5}"}), TABLE)
    code = main(["check", str(path), "--json"])
    found = json.loads(capsys.readouterr().out)
    assert code == 1
    assert found == [
        {
            "severity": "error",
            "file": found[0]["file"],
            "line": 8,
            "column": 18,
            "message": found[0]["message"],
            "path": "timing.gap_ms",
        }
    ]
    assert found[0]["file"].endswith("protocol.yaml") and "got -5" in found[0]["message"]


def test_alias_bomb_is_refused_within_a_second(tmp_path: Path) -> None:
    """A 'billion laughs' alias bomb is refused at once, not expanded.

    Source: common practice (no published source); the document is the classic nested-alias
    form from the YAML security literature, written from memory.
    """
    levels = ['a0: &a0 ["lol","lol","lol","lol","lol","lol","lol","lol","lol"]']
    for i in range(1, 10):
        prev = f"*a{i - 1}"
        levels.append(f"a{i}: &a{i} [{', '.join([prev] * 9)}]")
    path = _setup(tmp_path, BASE + "\n".join(levels) + "\n", TABLE)
    start = time.perf_counter()
    code = main(["check", str(path)])
    assert time.perf_counter() - start < 1.0
    assert code == 1


SUBPROCESS_CASES = [c for c in CASES if c[0] in ("unknown key", "table: short row", "not UTF-8")]


@pytest.mark.parametrize(
    ("protocol", "table", "file", "line", "fragment"),
    [c[1:] for c in SUBPROCESS_CASES],
    ids=[c[0] for c in SUBPROCESS_CASES],
)
@pytest.mark.slow
def test_malformed_input_through_a_real_process(
    tmp_path: Path, protocol: str | bytes, table: str | bytes, file: str, line: int, fragment: str
) -> None:
    """`python -m runner check` in its own process prints the line and exits 1, no traceback."""
    path = _setup(tmp_path, protocol, table)
    env = dict(os.environ, TRIALDECK_DEBUG="1")
    proc = subprocess.run(
        [sys.executable, "-m", "runner", "check", str(path)],
        capture_output=True,
        text=True,
        env=env,
        cwd=tmp_path,
        timeout=60,
    )
    text = proc.stdout + proc.stderr
    assert proc.returncode == 1, text
    assert "Traceback" not in text
    assert any(f"{file}:{line}:" in row and fragment in row for row in text.splitlines()), text
