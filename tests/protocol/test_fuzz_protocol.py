"""Property-based fuzzing of the protocol loader and check: never a crash, never a traceback."""

from __future__ import annotations

import atexit
import contextlib
import io
import re
import shutil
import tempfile
from pathlib import Path

import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from protofix import BASE_PROTOCOL, BASE_ROWS, write_protocol

from runner.cli import main
from runner.errors import ProtocolError
from runner.protocol.check import check_protocol
from runner.protocol.load import load_protocol

LINE_RE = re.compile(r"^.+:\d+:\d+: (error|warning): \S")
FOLDER = Path(tempfile.mkdtemp(prefix="trialdeck-fuzz-"))
atexit.register(shutil.rmtree, FOLDER, ignore_errors=True)
PROTOCOL = write_protocol(FOLDER, BASE_PROTOCOL)
VALID_TEXT = PROTOCOL.read_text(encoding="utf-8")
TABLE_TEXT = (FOLDER / "table.csv").read_text(encoding="utf-8")
YAML_CHARS = ":-[]{},#&*!|>'\"@`?~\t\n \\ab1.\x00\xe9"

VALUES = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(min_value=-(10**6), max_value=10**6),
    st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=12),
    st.lists(st.integers(min_value=-5, max_value=2000), max_size=3),
    st.dictionaries(
        st.sampled_from(["by", "where", "text", "x", "seconds"]), st.integers(), max_size=2
    ),
)


def _budget(examples: int) -> settings:
    return settings(
        max_examples=examples, deadline=None, suppress_health_check=[HealthCheck.too_slow]
    )


def _paths(node, prefix=()):
    yield prefix
    if isinstance(node, dict):
        for key, value in node.items():
            yield from _paths(value, (*prefix, key))
    elif isinstance(node, list):
        for index, value in enumerate(node):
            yield from _paths(value, (*prefix, index))


PATHS = [p for p in _paths(BASE_PROTOCOL) if p]


def _set(tree, path, value, *, delete: bool = False):
    import copy

    tree = copy.deepcopy(tree)
    node = tree
    for key in path[:-1]:
        node = node[key]
    if delete:
        del node[path[-1]]
    else:
        node[path[-1]] = value
    return tree


def _run_cli(text: bytes, name: str) -> tuple[int, str]:
    path = FOLDER / name
    path.write_bytes(text)
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(["check", str(path)])
    return code, out.getvalue() + err.getvalue()


def _assert_clean(code: int, text: str) -> None:
    assert code in (0, 1), text
    assert "Traceback" not in text and "internal error" not in text, text
    problem_lines = [row for row in text.splitlines() if ": error: " in row or ": warning: " in row]
    assert all(LINE_RE.match(row) for row in problem_lines), text
    if code == 1:
        assert any(": error: " in row for row in problem_lines), text


@_budget(120)
@given(
    position=st.integers(min_value=0, max_value=len(VALID_TEXT)),
    cut=st.integers(min_value=0, max_value=8),
    insert=st.text(alphabet=YAML_CHARS, max_size=6),
)
def test_text_mutations_never_crash(position: int, cut: int, insert: str) -> None:
    """Any edit of a valid protocol's text checks cleanly: exit 0 or 1, problem lines only."""
    text = VALID_TEXT[:position] + insert + VALID_TEXT[position + cut :]
    _assert_clean(*_run_cli(text.encode("utf-8"), "text.yaml"))


@_budget(120)
@given(path=st.sampled_from(PATHS), value=VALUES, delete=st.booleans())
def test_value_mutations_never_crash(path, value, delete: bool) -> None:
    """Replacing or deleting any setting gives a loaded protocol or ProtocolError problems."""
    tree = _set(BASE_PROTOCOL, path, value, delete=delete)
    target = FOLDER / "value.yaml"
    target.write_text(yaml.safe_dump(tree, sort_keys=False), encoding="utf-8")
    try:
        load_protocol(target)
    except ProtocolError as exc:
        assert exc.problems and all(p.severity == "error" for p in exc.problems)
        assert all(LINE_RE.match(p.format()) for p in exc.problems)
    report = check_protocol(target)
    assert all(LINE_RE.match(p.format()) for p in report.problems)


@_budget(60)
@given(
    row=st.integers(min_value=0, max_value=len(BASE_ROWS)),
    field=st.integers(min_value=0, max_value=3),
    value=st.text(alphabet='ab1-.,"/ \x00\xe9', max_size=6),
)
def test_table_mutations_never_crash(row: int, field: int, value: str) -> None:
    """Any edit of one trial-table field checks cleanly and names the table file when wrong."""
    lines = TABLE_TEXT.splitlines()
    cells = lines[row].split(",")
    cells[field] = value
    lines[row] = ",".join(cells)
    table = FOLDER / "table.csv"
    try:
        table.write_text("\n".join(lines) + "\n", encoding="utf-8")
        code, text = _run_cli(VALID_TEXT.encode("utf-8"), "table-case.yaml")
    finally:
        table.write_text(TABLE_TEXT, encoding="utf-8")
    _assert_clean(code, text)
