"""Malformed protocols and trial tables: one actionable line each, exit 1, no traceback, no files.

Every case starts from the same small valid protocol (BASE, line numbers as written) and its
trial table, changes one thing, and runs the real command line (``trialdeck check``).
"""

from __future__ import annotations

import os
import re
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

# (id, protocol text or bytes, table text or bytes, file, line, problem code)
CASES = [
    ("unknown key", edit({7: "ratng: {points: 9}"}), TABLE, P, 7, "unknown-field"),
    (
        "unknown nested key",
        edit({8: "timing: {fixation: [100, 200]}"}),
        TABLE,
        P,
        8,
        "unknown-field",
    ),
    ("duplicate key", edit(append="study: again\n"), TABLE, P, 14, "duplicate-key"),
    ("tab", edit({3: "stimulus_size:\t{width_px: 300}"}), TABLE, P, 3, "yaml-tab"),
    ("wrong type", edit({7: "rating: {points: nine}"}), TABLE, P, 7, "bad-type"),
    ("rating 1 point", edit({7: "rating: {points: 1}"}), TABLE, P, 7, "out-of-range"),
    ("rating 12 points", edit({7: "rating: {points: 12}"}), TABLE, P, 7, "out-of-range"),
    (
        "colour",
        edit({2: 'screen: {resolution: [640, 480], refresh_hz: 60, background: "grey"}'}),
        TABLE,
        P,
        2,
        "bad-value",
    ),
    (
        "refresh",
        edit({2: "screen: {resolution: [640, 480], refresh_hz: 5}"}),
        TABLE,
        P,
        2,
        "out-of-range",
    ),
    (
        "resolution one number",
        edit({2: "screen: {resolution: [640], refresh_hz: 60}"}),
        TABLE,
        P,
        2,
        "bad-length",
    ),
    (
        "two sizes",
        edit({3: "stimulus_size: {width_px: 300, height_px: 200}"}),
        TABLE,
        P,
        3,
        "bad-value",
    ),
    (
        "degrees without distance",
        edit({3: "stimulus_size: {width_deg: 10}"}),
        TABLE,
        P,
        3,
        "bad-value",
    ),
    (
        "cm without width",
        edit({3: "stimulus_size: {width_cm: 10}"}),
        TABLE,
        P,
        3,
        "bad-value",
    ),
    ("study name", edit({1: "study: courier check!"}), TABLE, P, 1, "bad-value"),
    ("markers missing", edit({4: "# no markers"}), TABLE, P, 1, "missing-field"),
    (
        "bad key name",
        edit({6: 'answer: {prompt: "How many?", unsure_key: F1}'}),
        TABLE,
        P,
        6,
        "unknown-key",
    ),
    (
        "same keys",
        edit({6: "answer: {unsure_key: space}"}),
        TABLE,
        P,
        6,
        "bad-value",
    ),
    ("answer mode", edit({6: "answer: {mode: during}"}), TABLE, P, 6, "bad-choice"),
    (
        "fixation order",
        edit({8: "timing: {fixation_ms: [900, 200]}"}),
        TABLE,
        P,
        8,
        "bad-value",
    ),
    ("negative gap", edit({8: "timing: {gap_ms: -5}"}), TABLE, P, 8, "out-of-range"),
    (
        "unknown step",
        edit({13: "  - pause: {seconds: 3}"}),
        TABLE,
        P,
        13,
        "bad-value",
    ),
    (
        "two steps in one",
        edit({13: "  - {page: {text: a}, rest: {seconds: 2}}"}),
        TABLE,
        P,
        13,
        "bad-value",
    ),
    ("page without text", edit({13: "  - page: {key: space}"}), TABLE, P, 13, "bad-value"),
    (
        "page file missing",
        edit({13: "  - page: {file: nothere.md}"}),
        TABLE,
        P,
        13,
        "missing-file",
    ),
    (
        "page file outside",
        edit({13: "  - page: {file: ../outside.md}"}),
        TABLE,
        P,
        13,
        "outside-folder",
    ),
    ("rest zero", edit({13: "  - rest: {seconds: 0}"}), TABLE, P, 13, "out-of-range"),
    (
        "rest show",
        edit({13: "  - rest: {seconds: 5, show: movie}"}),
        TABLE,
        P,
        13,
        "bad-choice",
    ),
    (
        "block order",
        edit({12: "  - blocks: {where: {set: main}, by: density, order: zigzag}"}),
        TABLE,
        P,
        12,
        "bad-choice",
    ),
    (
        "block factor",
        edit({12: "  - blocks: {where: {set: main}, by: colour}"}),
        TABLE,
        P,
        12,
        "unknown-column",
    ),
    (
        "where column",
        edit({11: "  - practice: {where: {kind: practice}}"}),
        TABLE,
        P,
        11,
        "unknown-column",
    ),
    (
        "where matches nothing",
        edit({11: "  - practice: {where: {set: warmup}}"}),
        TABLE,
        P,
        11,
        "no-matching-rows",
    ),
    (
        "fixed without levels",
        edit({12: "  - blocks: {where: {set: main}, by: density, order: fixed}"}),
        TABLE,
        P,
        12,
        "bad-levels",
    ),
    (
        "levels wrong",
        edit({12: "  - blocks: {where: {set: main}, by: density, levels: [sparse, thick]}"}),
        TABLE,
        P,
        12,
        "bad-levels",
    ),
    (
        "max_run column",
        edit({12: "  - blocks: {where: {set: main}, by: density, max_run: {nodes: 2}}"}),
        TABLE,
        P,
        12,
        "unknown-column",
    ),
    (
        "max_run zero",
        edit({12: "  - blocks: {where: {set: main}, by: density, max_run: {density: 0}}"}),
        TABLE,
        P,
        12,
        "out-of-range",
    ),
    (
        "max_run impossible",
        edit({12: "  - trials: {where: {set: main}, max_run: {density: 1}}"}),
        CROWDED,
        P,
        12,
        "impossible-order",
    ),
    (
        "no_repeat impossible",
        edit({12: "  - trials: {where: {set: main}}"}),
        SAME_PICTURE,
        P,
        12,
        "impossible-order",
    ),
    (
        "factor missing",
        edit({5: "trials: {table: table.csv, factors: [density, nodes]}"}),
        TABLE,
        P,
        5,
        "unknown-column",
    ),
    (
        "table missing",
        edit({5: "trials: {table: nope.csv}"}),
        TABLE,
        P,
        5,
        "missing-file",
    ),
    (
        "prompt column",
        edit({6: "answer: {prompt_column: question}"}),
        TABLE,
        P,
        6,
        "unknown-column",
    ),
    (
        "question column",
        edit({7: "rating: {question_column: ask}"}),
        TABLE,
        P,
        7,
        "unknown-column",
    ),
    (
        "no trial steps",
        edit({11: "  - page: {text: x}", 12: "  - page: {text: y}"}),
        TABLE,
        P,
        10,
        "bad-value",
    ),
    (
        "empty sequence",
        edit({9: "sequence: []", 10: "", 11: "", 12: "", 13: ""}),
        TABLE,
        P,
        9,
        "bad-length",
    ),
    ("anchor", edit(append="x: &a [1]\ny: *a\n"), TABLE, P, 14, "yaml-anchor"),
    (
        "breaks every 0",
        edit(append="breaks: {every_trials: 0}\n"),
        TABLE,
        P,
        14,
        "out-of-range",
    ),
    (
        "tolerance above 1",
        edit(append="checks: {luminance_tolerance: 2}\n"),
        TABLE,
        P,
        14,
        "out-of-range",
    ),
    (
        "checks unknown",
        edit(append="checks: {min_response: 100}\n"),
        TABLE,
        P,
        14,
        "unknown-field",
    ),
    (
        "photodiode corner",
        edit(append="photodiode: {corner: middle}\n"),
        TABLE,
        P,
        14,
        "bad-choice",
    ),
    ("top-level list", "- study: x\n", TABLE, P, 1, "not-a-mapping"),
    ("yaml syntax", edit({7: "rating: {points: 9"}), TABLE, P, 7, "yaml-syntax"),
    ("not UTF-8", BASE.encode().replace(b"Welcome", b"Welc\xffome"), TABLE, P, 10, "not-utf8"),
    (
        "NUL character",
        BASE.encode().replace(b"Welcome", b"Wel\x00come"),
        TABLE,
        P,
        10,
        "bad-character",
    ),
    ("empty file", b"", TABLE, P, 0, "empty-file"),
    ("only comments", b"# nothing\n", TABLE, P, 0, "empty-file"),
    ("oversize", BASE.encode() + b"#" + b"x" * 1_000_001 + b"\n", TABLE, P, 0, "file-too-large"),
    (
        "table: expected text",
        BASE,
        TABLE.replace("img/c.png,5", "img/c.png,five"),
        T,
        4,
        "bad-expected",
    ),
    (
        "table: expected negative",
        BASE,
        TABLE.replace("img/c.png,5", "img/c.png,-5"),
        T,
        4,
        "bad-expected",
    ),
    (
        "table: expected above max",
        BASE,
        TABLE.replace("img/c.png,5", "img/c.png,75"),
        T,
        4,
        "answer-above-max",
    ),
    (
        "table: short row",
        BASE,
        TABLE.replace("img/d.png,6,main,dense", "img/d.png,6,main"),
        T,
        5,
        "row-length",
    ),
    (
        "table: no stimulus column",
        BASE,
        TABLE.replace("stimulus,", "image,"),
        T,
        1,
        "missing-column",
    ),
    (
        "table: duplicate column",
        BASE,
        TABLE.replace("set,density", "set,set"),
        T,
        1,
        "duplicate-column",
    ),
    (
        "table: reserved column",
        BASE,
        TABLE.replace("set,density", "set,rating"),
        T,
        1,
        "reserved-column",
    ),
    (
        "table: empty stimulus",
        BASE,
        TABLE.replace("img/e.png,7", ",7"),
        T,
        6,
        "empty-stimulus",
    ),
    (
        "table: missing image",
        BASE,
        TABLE.replace("img/e.png", "img/zz.png"),
        T,
        6,
        "missing-file",
    ),
    (
        "table: image outside",
        BASE,
        TABLE.replace("img/e.png", "../outside.png"),
        T,
        6,
        "outside-folder",
    ),
    (
        "table: NUL in path",
        BASE,
        TABLE.replace("img/e.png", "img/e\x00.png"),
        T,
        6,
        "control-character",
    ),
    ("table: empty", BASE, "", T, 1, "empty-file"),
    ("table: header only", BASE, "stimulus,expected,set,density\n", T, 1, "no-rows"),
    (
        "table: not UTF-8",
        BASE,
        TABLE.encode().replace(b"sparse", b"sp\xe4rse", 1),
        T,
        2,
        "not-utf8",
    ),
    (
        "table: broken image",
        BASE,
        TABLE.replace("img/e.png", "img/broken.png"),
        T,
        6,
        "undecodable-stimulus",
    ),
    (
        "colour ending in a newline",
        edit({2: 'screen: {resolution: [640, 480], refresh_hz: 60, background: "#808080\\n"}'}),
        TABLE,
        P,
        2,
        "bad-value",
    ),
    (
        "table: stray quote swallows rows",
        BASE,
        TABLE.replace("img/b.png,4,main", 'img/b.png,4,"main'),
        T,
        3,
        "stray-quote",
    ),
    (
        "table: empty block factor",
        BASE,
        TABLE.replace("img/d.png,6,main,dense", "img/d.png,6,main,"),
        T,
        5,
        "empty-factor-cell",
    ),
    ("table: semicolons", BASE, TABLE.replace(",", ";"), T, 1, "wrong-delimiter"),
    (
        "table: 5000-digit expected",
        BASE,
        TABLE.replace("img/e.png,7", "img/e.png," + "9" * 5000),
        T,
        6,
        "bad-expected",
    ),
    (
        "protocol: 5000-digit number",
        edit({6: 'answer: {prompt: "How many stops?", max: ' + "9" * 5000 + "}"}),
        TABLE,
        P,
        6,
        "out-of-range",
    ),
    (
        "table: text named .png",
        BASE,
        TABLE.replace("img/e.png", "img/text.png"),
        T,
        6,
        "unsupported-image",
    ),
    (
        "table: 0-byte image",
        BASE,
        TABLE.replace("img/e.png", "img/empty.png"),
        T,
        6,
        "undecodable-stimulus",
    ),
    (
        "table: SVG stimulus",
        BASE,
        TABLE.replace("img/e.png", "img/drawing.svg"),
        T,
        6,
        "unsupported-image",
    ),
    ("table: stimulus folder", BASE, TABLE.replace("img/e.png", "img"), T, 6, "not-a-file"),
    (
        "table: truncated image",
        BASE,
        TABLE.replace("img/e.png", "img/cut.png"),
        T,
        6,
        "undecodable-stimulus",
    ),
]


def _setup(folder: Path, protocol: str | bytes, table: str | bytes) -> Path:
    for row in BASE_ROWS:
        write_image(folder / row[0])
    (folder / "img" / "broken.png").write_bytes(b"\x89PNG\r\n\x1a\n not really an image")
    (folder / "img" / "text.png").write_text("not an image\n", encoding="utf-8")
    (folder / "img" / "empty.png").write_bytes(b"")
    (folder / "img" / "drawing.svg").write_text(
        '<svg xmlns="http://www.w3.org/2000/svg" width="9" height="9"/>\n', encoding="utf-8"
    )
    (folder / "img" / "cut.png").write_bytes((folder / "img" / "a.png").read_bytes()[:-40])
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
    ("protocol", "table", "file", "line", "problem_code"),
    [c[1:] for c in CASES],
    ids=[c[0] for c in CASES],
)
def test_malformed_input_is_one_coded_error_at_its_line(
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
    capsys: pytest.CaptureFixture[str],
    protocol: str | bytes,
    table: str | bytes,
    file: str,
    line: int,
    problem_code: str,
) -> None:
    """`trialdeck check` exits 1 with an error of the expected code at FILE:LINE, writing nothing."""
    import json

    folder = tmp_path / "study"
    folder.mkdir()
    path = _setup(folder, protocol, table)
    monkeypatch.chdir(tmp_path)
    before = _snapshot(tmp_path)
    code = main(["check", str(path), "--json"])
    out, err = capsys.readouterr()
    assert code == 1, out + err
    assert "Traceback" not in err and "internal error" not in err
    found = json.loads(out)["problems"]
    hits = [
        f
        for f in found
        if f["severity"] == "error" and f["file"].endswith(file) and f["line"] == line
    ]
    assert problem_code in [f["code"] for f in hits], found
    assert _snapshot(tmp_path) == before


@pytest.mark.parametrize(
    ("case", "suggestion"),
    [
        ("unknown key", "did you mean 'rating'"),
        ("unknown nested key", "did you mean 'fixation_ms'"),
        ("checks unknown", "did you mean 'min_response_ms'"),
    ],
)
def test_unknown_setting_line_suggests_the_closest_name(
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
    capsys: pytest.CaptureFixture[str],
    case: str,
    suggestion: str,
) -> None:
    """The printed line for a misspelt setting names the setting it most likely meant."""
    _, protocol, table, file, line, _ = next(c for c in CASES if c[0] == case)
    folder = tmp_path / "study"
    folder.mkdir()
    path = _setup(folder, protocol, table)
    monkeypatch.chdir(tmp_path)
    assert main(["check", str(path)]) == 1
    rows = [r for r in capsys.readouterr().out.splitlines() if f"{file}:{line}:" in r]
    assert any(": error: " in r and suggestion in r for r in rows), rows


def test_json_findings_carry_position_and_path(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """`check --json` prints objects with severity, file, line, column, path, message and code."""
    import json

    path = _setup(tmp_path, edit({8: "timing: {gap_ms: -5}"}), TABLE)
    code = main(["check", str(path), "--json"])
    found = json.loads(capsys.readouterr().out)["problems"]
    assert code == 1
    assert found == [
        {
            "severity": "error",
            "file": found[0]["file"],
            "line": 8,
            "column": 18,
            "message": found[0]["message"],
            "path": "timing.gap_ms",
            "code": "out-of-range",
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
    ("protocol", "table", "file", "line", "problem_code"),
    [c[1:] for c in SUBPROCESS_CASES],
    ids=[c[0] for c in SUBPROCESS_CASES],
)
@pytest.mark.slow
def test_malformed_input_through_a_real_process(
    tmp_path: Path,
    protocol: str | bytes,
    table: str | bytes,
    file: str,
    line: int,
    problem_code: str,
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
    # The printed form: FILE:LINE:COL: error: message, one line, the code only in --json.
    rows = [row for row in text.splitlines() if f"{file}:{line}:" in row]
    assert any(re.search(rf"{re.escape(file)}:{line}:\d+: error: \S", r) for r in rows), text
    assert not any(problem_code in r for r in rows)
