"""The command line: refusal before anything is created, plain error lines, exit codes."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys

import pytest
from conftest import MINI_PROTOCOL, REPO

from runner.cli import main


def _bad_copy(tmp_path, old: str, new: str):
    folder = tmp_path / "proto"
    shutil.copytree(MINI_PROTOCOL.parent, folder)
    path = folder / "mini.yaml"
    text = path.read_text()
    assert old in text
    path.write_text(text.replace(old, new))
    return path


@pytest.mark.parametrize(
    "old, new, line, problem_code",
    [
        ("refresh_hz: 60", "refresh_hz: sixty", 3, "bad-type"),
        ("gap_ms: 300", "gap_msec: 300", 9, "unknown-field"),
        ("points: 9", "points: 14", 8, "out-of-range"),
        ("table: table.csv", "table: missing.csv", 6, "missing-file"),
        ("by: density", "by: colour", 14, "unknown-column"),
        ("study: mini-test", "study: mini test", 2, "bad-value"),
        ("unsure_key: u", "unsure_key: F1", 7, "unknown-key"),
    ],
)
def test_invalid_protocol_refuses_everywhere_and_creates_nothing(
    tmp_path, capsys, old, new, line, problem_code
):
    """`check` and `pilot` print FILE:LINE:COL: error: lines, exit 1, no traceback, create nothing."""
    import json

    path = _bad_copy(tmp_path, old, new)
    out_dir = tmp_path / "out"
    for argv in (
        ["check", str(path)],
        ["pilot", str(path), "--participant", "P01", "--out", str(out_dir)],
    ):
        code = main(argv)
        captured = capsys.readouterr()
        text = captured.out + captured.err
        assert code == 1
        assert "Traceback" not in text
        lines = [ln for ln in text.splitlines() if ": error: " in ln]
        assert lines, text
        assert any(ln.startswith(f"{path}:{line}:") for ln in lines), lines
    assert main(["check", str(path), "--json"]) == 1
    found = json.loads(capsys.readouterr().out)["problems"]
    assert (line, problem_code) in [(f["line"], f["code"]) for f in found], found
    assert not out_dir.exists()


def test_bad_participant_label_is_a_usage_error(tmp_path, capsys):
    """A participant label with a dash exits 2 with one plain sentence and creates nothing."""
    code = main(["pilot", str(MINI_PROTOCOL), "--participant", "P-1", "--out", str(tmp_path / "o")])
    err = capsys.readouterr().err
    assert code == 2 and err.startswith("error: ") and "letters and digits" in err
    assert not (tmp_path / "o").exists()


def test_missing_protocol_file(tmp_path, capsys):
    """A protocol path that does not exist gives a plain sentence and exit 1."""
    code = main(["check", str(tmp_path / "nope.yaml")])
    captured = capsys.readouterr()
    text = captured.out + captured.err
    assert code == 1 and "does not exist" in text and "Traceback" not in text


@pytest.mark.slow
def test_python_dash_m_runner_works():
    """`python -m runner --version` runs the same command line as the console script."""
    env = dict(os.environ)
    proc = subprocess.run(
        [sys.executable, "-m", "runner", "--version"],
        capture_output=True,
        text=True,
        cwd=REPO,
        env=env,
        timeout=60,
    )
    assert proc.returncode == 0 and proc.stdout.startswith("trialdeck ")


def test_schema_verb_prints_json(capsys):
    """`trialdeck schema` prints the protocol's JSON Schema."""
    import json

    assert main(["schema"]) == 0
    schema = json.loads(capsys.readouterr().out)
    assert "study" in schema["properties"]


# Contract verbs (README and DEVELOPERS.md); the parser must offer exactly these.
CONTRACT_VERBS = {
    "new",
    "check",
    "pilot",
    "run",
    "replay",
    "audit",
    "export",
    "summary",
    "stimuli",
    "schema",
    "selftest",
    "demo",
    "physio",
}
# Imported by a verb's own library call, never while the command line is parsed.
HEAVY = ("pygame", "pylsl", "pandas", "matplotlib", "networkx")
# Only the command line prints or ends the process. The one exception is `python -m runner`,
# which hands main()'s exit code to the interpreter. (The experimenter's console, a rich
# renderer the CLI makes and passes in, writes through its own object, not print().)
OUTPUT_ALLOWED = {"runner/__main__.py"}


def test_every_contract_verb_has_a_module_with_arguments_and_run():
    """Each verb is runner.cli.<verb> with add_arguments() and run(), and the list is the contract."""
    import importlib

    from runner.cli.app import VERBS

    assert {verb for verb, _ in VERBS} == CONTRACT_VERBS
    for verb, _ in VERBS:
        module = importlib.import_module(f"runner.cli.{verb}")
        assert callable(module.add_arguments) and callable(module.run), verb


@pytest.mark.parametrize("verb", sorted(CONTRACT_VERBS))
def test_parsing_a_verb_imports_no_heavy_module(verb):
    """Building the parser for any verb imports neither pygame, pylsl, pandas, matplotlib nor networkx."""
    allowed = {"export": ("pandas",)}.get(verb, ())
    code = (
        "import sys\n"
        "from runner.cli import build_parser\n"
        f"build_parser({verb!r})\n"
        f"print(','.join(m for m in {HEAVY!r} if m in sys.modules and m not in {allowed!r}))\n"
    )
    proc = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, cwd=REPO, timeout=120
    )
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == ""


def _output_calls(path) -> list[str]:
    """print() calls, sys.exit/exit/quit/os._exit calls and SystemExit names in one file."""
    import ast

    found = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Call):
            func = node.func
            if isinstance(func, ast.Name) and func.id in ("print", "exit", "quit"):
                found.append(f"{func.id}() at line {node.lineno}")
            elif (
                isinstance(func, ast.Attribute)
                and isinstance(func.value, ast.Name)
                and (func.value.id, func.attr) in (("sys", "exit"), ("os", "_exit"))
            ):
                found.append(f"{func.value.id}.{func.attr}() at line {node.lineno}")
        elif isinstance(node, ast.Name) and node.id == "SystemExit":
            found.append(f"SystemExit at line {node.lineno}")
    return found


def test_library_code_never_prints_or_exits():
    """Outside runner/cli/ no module calls print(), sys.exit() or names SystemExit."""
    runner = REPO / "runner"
    offenders = {}
    for path in sorted(runner.rglob("*.py")):
        rel = path.relative_to(REPO).as_posix()
        if rel.startswith("runner/cli/") or rel in OUTPUT_ALLOWED:
            continue
        calls = _output_calls(path)
        if calls:
            offenders[rel] = calls
    assert offenders == {}


def test_output_check_finds_print_and_exit(tmp_path):
    """The scan behind the previous test catches each form it looks for."""
    sample = tmp_path / "sample.py"
    sample.write_text(
        "import os, sys\nprint('x')\nsys.exit(1)\nos._exit(2)\nraise SystemExit(3)\n",
        encoding="utf-8",
    )
    found = sorted(c.split(" at ")[0] for c in _output_calls(sample))
    assert found == ["SystemExit", "os._exit()", "print()", "sys.exit()"]
