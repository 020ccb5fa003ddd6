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
    "old, new, line, fragment",
    [
        ("refresh_hz: 60", "refresh_hz: sixty", 3, "screen.refresh_hz"),
        ("gap_ms: 300", "gap_msec: 300", 9, "did you mean 'gap_ms'"),
        ("points: 9", "points: 14", 8, "rating.points"),
        ("table: table.csv", "table: missing.csv", 6, "does not exist"),
        ("by: density", "by: colour", 14, "not a column of the trial table"),
        ("study: mini-test", "study: mini test", 2, "study"),
        ("unsure_key: u", "unsure_key: F1", 7, "unsure_key"),
    ],
)
def test_invalid_protocol_refuses_everywhere_and_creates_nothing(
    tmp_path, capsys, old, new, line, fragment
):
    """`check` and `pilot` print FILE:LINE:COL: error: lines, exit 1, no traceback, create nothing."""
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
        assert any(f":{line}:" in ln and fragment in ln for ln in lines), lines
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
