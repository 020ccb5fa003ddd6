"""The presenter package is the only place that imports pygame."""

from __future__ import annotations

import ast
import subprocess
import sys

import pytest
from conftest import REPO

RUNNER = REPO / "runner"


def _imports_pygame(path) -> bool:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    for node in ast.walk(tree):
        if isinstance(node, ast.Import) and any(
            a.name.split(".")[0] == "pygame" for a in node.names
        ):
            return True
        if isinstance(node, ast.ImportFrom) and (node.module or "").split(".")[0] == "pygame":
            return True
    return False


def test_pygame_is_imported_only_under_runner_present():
    """No module outside runner/present/ has an import of pygame, at top level or in a function."""
    outside = [
        str(p.relative_to(REPO))
        for p in sorted(RUNNER.rglob("*.py"))
        if "present" not in p.relative_to(RUNNER).parts and _imports_pygame(p)
    ]
    assert outside == []
    assert _imports_pygame(RUNNER / "present" / "display.py")


@pytest.mark.slow
def test_replay_module_imports_without_pygame():
    """Importing runner.qa.replay (planning a replay) loads neither pygame nor the presenter."""
    code = (
        "import sys\n"
        "import runner.qa.replay\n"
        "print(','.join(m for m in ('pygame', 'runner.present.display') if m in sys.modules))\n"
    )
    proc = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, cwd=REPO, timeout=120
    )
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == ""
