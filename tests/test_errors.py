"""Problem codes: stable, documented, set wherever a Problem is made, never printed in the line."""

from __future__ import annotations

import ast
import re

import pytest
from conftest import REPO

from runner.errors import PROBLEM_CODES, Problem

DOC = REPO / "docs" / "problem-codes.md"
CODE_RE = re.compile(r"[a-z][a-z0-9]*(?:-[a-z0-9]+)*")


def _documented() -> list[str]:
    return re.findall(r"^\| `([^`]+)` \|", DOC.read_text(encoding="utf-8"), flags=re.M)


def _sources() -> list[tuple[str, ast.Module]]:
    return [
        (path.relative_to(REPO).as_posix(), ast.parse(path.read_text(encoding="utf-8")))
        for path in sorted((REPO / "runner").rglob("*.py"))
    ]


def _codes_in_source() -> set[str]:
    """Every code the library sets: code= arguments, code = ... assignments, the _CODES map."""
    found: set[str] = set()
    for _, tree in _sources():
        for node in ast.walk(tree):
            values: list[ast.expr] = []
            if isinstance(node, ast.keyword) and node.arg == "code":
                values.append(node.value)
            elif isinstance(node, ast.Assign) and any(
                isinstance(t, ast.Name) and t.id in ("code", "_CODES") for t in node.targets
            ):
                # A map's keys are what it maps from (pydantic error types); its values are codes.
                is_map = isinstance(node.value, ast.Dict)
                values.extend(node.value.values if is_map else [node.value])
            for value in values:
                for sub in ast.walk(value):
                    if isinstance(sub, ast.Constant) and isinstance(sub.value, str):
                        if CODE_RE.fullmatch(sub.value):
                            found.add(sub.value)
    return found


def test_every_documented_code_exists_and_every_code_is_documented():
    """docs/problem-codes.md lists exactly the codes of runner.errors.PROBLEM_CODES, once each."""
    documented = _documented()
    assert len(documented) == len(set(documented))
    assert set(documented) == set(PROBLEM_CODES)


def test_codes_are_short_kebab_names():
    """Every code is lower-case words joined by hyphens, at most 24 characters."""
    assert all(CODE_RE.fullmatch(c) and len(c) <= 24 for c in PROBLEM_CODES)


def test_every_registered_code_is_used_and_every_used_code_is_registered():
    """The codes set in runner/ (code= arguments and maps) are exactly the registered ones."""
    assert _codes_in_source() == set(PROBLEM_CODES)


def test_every_problem_is_made_with_a_code():
    """Each Problem(...) and problem_at(...) call in runner/ passes code=."""
    missing = []
    for rel, tree in _sources():
        for node in ast.walk(tree):
            if not isinstance(node, ast.Call):
                continue
            func = node.func
            name = func.id if isinstance(func, ast.Name) else getattr(func, "attr", "")
            if name in ("Problem", "problem_at") and not any(
                k.arg == "code" for k in node.keywords
            ):
                missing.append(f"{rel}:{node.lineno}")
    assert missing == []


def test_unknown_code_is_refused():
    """A Problem with a code that is not registered cannot be made."""
    with pytest.raises(ValueError, match="unknown problem code"):
        Problem("error", "p.yaml", 1, 1, "x", code="no-such-code")


def test_code_is_in_the_json_form_but_not_in_the_printed_line():
    """format() keeps FILE:LINE:COL: severity: message; as_dict() adds the code."""
    problem = Problem(
        "error", "p.yaml", 3, 7, "timing.gap_ms: got -5", "timing.gap_ms", code="out-of-range"
    )
    assert problem.format() == "p.yaml:3:7: error: timing.gap_ms: got -5"
    assert problem.as_dict() == {
        "severity": "error",
        "file": "p.yaml",
        "line": 3,
        "column": 7,
        "message": "timing.gap_ms: got -5",
        "path": "timing.gap_ms",
        "code": "out-of-range",
    }
