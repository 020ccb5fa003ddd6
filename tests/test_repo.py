"""Repository promises: the README's quick start and CI agree, and every layer of runner/ keeps
its imports (the module list comes from the files on disk, so a new module is covered at once)."""

from __future__ import annotations

import ast
import re
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import REPO

README = REPO / "README.md"


def _quick_start_commands() -> list[str]:
    text = README.read_text(encoding="utf-8")
    section = text.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"```(?:sh|bash)?\n(.+?)\n```", section, flags=re.S)


def test_readme_has_exactly_two_quick_start_commands_and_ci_runs_the_test_one():
    """The quick start has two one-line commands (demo, tests) and .ci/run runs the second verbatim."""
    commands = _quick_start_commands()
    assert len(commands) == 2 and all("\n" not in c for c in commands)
    assert "trialdeck demo" in commands[0]
    assert "pytest" in commands[1] and ".[test]" in commands[1]
    ci = (REPO / ".ci" / "run").read_text(encoding="utf-8").splitlines()
    assert commands[1] in ci


RUNNER = REPO / "runner"

# What each subpackage of runner/ may load when it is imported (transitively): the packages it must
# not pull in. A subpackage that is not listed here fails test_every_subpackage_has_a_layer_rule.
NOT_AT_IMPORT: dict[str, tuple[str, ...]] = {
    # The contracts: file names, columns, event names, the journal line format.
    "contract": ("numpy", "pandas", "pygame", "pylsl", "pydantic", "yaml"),
    # Writing and reading journals works on any computer, without a display or LSL.
    "journal": ("numpy", "pandas", "pygame", "pylsl"),
    "protocol": ("pandas", "pygame", "pylsl"),
    # The engine talks to the screen through its ports; pylsl only through session/markers.py.
    "session": ("pandas", "pygame", "pyxdf"),
    "present": ("pandas", "pyxdf"),
    "recording": ("pandas", "pygame", "pylsl"),
    # Audit and replay run on an analysis computer; replay loads pygame only when it draws.
    "qa": ("pandas", "pygame", "pylsl"),
    "data": ("pygame", "pylsl"),
    "graphs": ("pandas", "pygame", "pylsl"),
    # The command line starts without a display or LSL; a verb loads them when it runs.
    "cli": ("pygame", "pylsl"),
    # Per-trial physiology runs on an analysis computer, like audit and export.
    "physio": ("pygame", "pylsl"),
}
# Where a package may be imported at all (any import statement, also inside a function).
# pygame only in runner/present/ is checked by tests/present/test_boundary.py.
ONLY_IN: dict[str, set[str]] = {
    "pylsl": {"session/markers.py"},
}


def _subpackages() -> list[str]:
    return sorted(p.parent.name for p in RUNNER.glob("*/__init__.py"))


def _modules(package: str) -> list[str]:
    """Every importable module of runner/<package>, from the files on disk (not __main__)."""
    names = []
    for path in sorted((RUNNER / package).rglob("*.py")):
        parts = path.relative_to(REPO).with_suffix("").parts
        if parts[-1] == "__main__":
            continue
        names.append(".".join(parts[:-1] if parts[-1] == "__init__" else parts))
    return names


def _imported(path: Path) -> set[str]:
    """Top-level names of every module an import statement in ``path`` names (anywhere)."""
    names: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            names.update(a.name.split(".")[0] for a in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            names.add(node.module.split(".")[0])
    return names


def _runner_imports(path: Path) -> set[str]:
    """The runner.* modules an import statement in ``path`` names (anywhere)."""
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            found.update(a.name for a in node.names if a.name.startswith("runner"))
        elif isinstance(node, ast.ImportFrom) and (node.module or "").startswith("runner"):
            found.add(str(node.module))
    return found


def test_every_subpackage_has_a_layer_rule():
    """Each subpackage of runner/ on disk has an import rule, and every rule names one on disk."""
    assert _subpackages() == sorted(NOT_AT_IMPORT)


def test_contract_uses_the_standard_library_only():
    """runner/contract imports nothing but the standard library, itself and runner.errors (the
    error types, themselves standard library only)."""
    allowed = set(sys.stdlib_module_names) | {"__future__"}
    for path in sorted((RUNNER / "contract").rglob("*.py")):
        outside = {m for m in _imported(path) if m not in allowed and m != "runner"}
        other = {
            m
            for m in _runner_imports(path)
            if not m.startswith("runner.contract") and m != "runner.errors"
        }
        assert (outside, other) == (set(), set()), path


@pytest.mark.parametrize("package", sorted(ONLY_IN))
def test_device_packages_are_imported_only_in_their_modules(package):
    """pylsl is imported (at top level or in a function) only in runner/session/markers.py."""
    places = sorted(
        path.relative_to(RUNNER).as_posix()
        for path in RUNNER.rglob("*.py")
        if package in _imported(path)
    )
    allowed = ONLY_IN[package]
    outside = [p for p in places if p not in allowed and p.split("/")[0] not in allowed]
    assert places and outside == []


@pytest.mark.parametrize("package", sorted(NOT_AT_IMPORT))
@pytest.mark.slow
def test_layers_import_without_heavy_edges(package):
    """Importing every module of a subpackage (listed from disk) loads none of its forbidden ones."""
    forbidden = NOT_AT_IMPORT[package]
    modules = _modules(package)
    assert modules
    code = (
        "import importlib, sys\n"
        f"for m in {modules!r}:\n"
        "    importlib.import_module(m)\n"
        f"print(','.join(m for m in {forbidden!r} if m in sys.modules))\n"
    )
    proc = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, cwd=REPO, timeout=120
    )
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == ""
