"""Repository promises: the README's quick start and CI agree, and layers import in order."""

from __future__ import annotations

import re
import subprocess
import sys

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


@pytest.mark.parametrize(
    "module, forbidden",
    [
        ("runner.protocol.load", ("pygame", "pylsl")),
        ("runner.protocol.schedule", ("pygame", "pylsl")),
        ("runner.protocol.check", ("pygame", "pylsl")),
        ("runner.session.engine", ("pygame", "pylsl")),
        ("runner.session.journal", ("pygame", "pylsl")),
        ("runner.session.records", ("pygame", "pylsl")),
        ("runner.session.markers", ("pygame",)),
        ("runner.recording", ("pygame", "pylsl")),
        ("runner.data.summary", ("pygame", "pylsl")),
    ],
)
@pytest.mark.slow
def test_layers_import_without_heavy_edges(module, forbidden):
    """Pure layers import without pygame (and without pylsl outside the marker module)."""
    code = (
        "import sys\n"
        f"import {module}\n"
        f"bad = [m for m in {forbidden!r} if m in sys.modules]\n"
        "print(','.join(bad))\n"
    )
    proc = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, cwd=REPO, timeout=120
    )
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == ""
