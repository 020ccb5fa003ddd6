"""The experimenter's day on the command line: new, audit of a study folder, what to do next."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
from conftest import MINI_PROTOCOL, REPO

from runner.cli import main


def test_new_refuses_a_folder_that_holds_something(tmp_path: Path, capsys) -> None:
    """`trialdeck new` into a non-empty folder (or onto a file) changes nothing and exits 1."""
    folder = tmp_path / "mine"
    folder.mkdir()
    (folder / "notes.txt").write_text("keep", encoding="utf-8")
    assert main(["new", str(folder)]) == 1
    assert [p.name for p in folder.iterdir()] == ["notes.txt"]
    file = tmp_path / "a-file"
    file.write_text("x", encoding="utf-8")
    assert main(["new", str(file)]) == 1
    assert "not empty" in capsys.readouterr().err


@pytest.mark.slow
def test_new_starter_checks_clean_and_pilots_to_the_end(tmp_path: Path, capsys) -> None:
    """The starter study passes `check` without errors and its pilot completes every trial."""
    folder = tmp_path / "my study"
    assert main(["new", str(folder)]) == 0
    out = capsys.readouterr().out
    protocol = folder / "protocol.yaml"
    assert protocol.is_file() and (folder / "welcome.md").is_file()
    assert "trialdeck check" in out and "trialdeck pilot" in out
    assert main(["check", str(protocol), "--json"]) == 0
    report = json.loads(capsys.readouterr().out)
    assert report["ok"] and report["counts"]["trials"] >= 4
    sessions = tmp_path / "sessions"
    code = main(
        ["pilot", str(protocol), "--participant", "P01", "--out", str(sessions), "--speed", "50"]
    )
    out = capsys.readouterr().out
    assert code == 0, out
    n = report["counts"]["trials"]
    assert f"Session completed: {n} of {n} trials." in out


@pytest.mark.slow
def test_aborted_pilot_says_how_to_resume_and_audit(tmp_path: Path, capsys) -> None:
    """A session ended early prints the --resume command and the audit command; both work."""
    args = ["pilot", str(MINI_PROTOCOL), "--participant", "P01", "--out", str(tmp_path)]
    assert main([*args, "--speed", "20", "--sim-abort-at", "2"]) == 1
    out = capsys.readouterr().out
    resume = next(ln.strip() for ln in out.splitlines() if "--resume" in ln)
    audit = next(ln.strip() for ln in out.splitlines() if ln.strip().startswith("trialdeck audit"))
    folder = tmp_path / "mini-test" / "sub-P01" / "ses-1"
    assert audit.split()[2] == str(folder)
    argv = resume.split()[1:]
    assert argv[:2] == ["pilot", str(MINI_PROTOCOL)] and argv[-1] == "--resume"
    assert main([*argv, "--speed", "20"]) == 0
    capsys.readouterr()
    assert main(["audit", str(folder)]) == 0


@pytest.mark.slow
def test_audit_accepts_a_study_folder(tmp_path: Path, capsys) -> None:
    """`audit STUDY_DIR` audits every session under it, as export and summary find them."""
    for p in ("P01", "P02"):
        args = ["pilot", str(MINI_PROTOCOL), "--participant", p, "--out", str(tmp_path)]
        assert main([*args, "--speed", "30"]) == 0
    capsys.readouterr()
    assert main(["audit", str(tmp_path / "mini-test"), "--json"]) == 0
    audits = json.loads(capsys.readouterr().out)["sessions"]
    assert len(audits) == 2


def test_audit_of_a_folder_without_sessions_says_so(tmp_path: Path, capsys) -> None:
    """A folder with no session journal anywhere below it is one plain error line."""
    (tmp_path / "empty").mkdir()
    assert main(["audit", str(tmp_path / "empty")]) == 1
    err = capsys.readouterr().err
    assert "journal" in err and "Traceback" not in err


@pytest.mark.slow
def test_demo_ends_with_what_to_do_next(tmp_path: Path, capsys, monkeypatch) -> None:
    """After the demo the next steps name audit, replay, summary and `new`, with real paths."""
    repo = REPO
    monkeypatch.chdir(tmp_path)
    shutil.copytree(repo / "configs", tmp_path / "configs")
    shutil.copytree(repo / "stimuli_demo", tmp_path / "stimuli_demo")
    assert main(["demo", "--speed", "200", "--out", "ds"]) == 0
    out = capsys.readouterr().out
    steps = out[out.index("What next:") :]
    for verb in ("audit", "replay", "summary", "new"):
        assert f"trialdeck {verb}" in steps
    audit = next(ln.split()[2] for ln in steps.splitlines() if "trialdeck audit" in ln)
    assert (Path(audit) / "journal.jsonl").is_file()


def test_late_flips_are_explained_under_the_dummy_driver(monkeypatch) -> None:
    """Headless, the late-flip count comes with a note that it says nothing about the lab."""
    from runner.cli.session import late_flips_note

    monkeypatch.setenv("SDL_VIDEODRIVER", "dummy")
    assert "headless" in late_flips_note() and "selftest" in late_flips_note()
    monkeypatch.setenv("SDL_VIDEODRIVER", "x11")
    assert late_flips_note() == ""


@pytest.mark.slow
def test_late_flips_printed_at_the_end_agree_with_the_audit(tmp_path: Path, capsys) -> None:
    """The 'Late flips' count after a pilot is the count `audit --json` gives (0: no line)."""
    args = ["pilot", str(MINI_PROTOCOL), "--participant", "P01", "--out", str(tmp_path)]
    assert main([*args, "--speed", "20"]) == 0
    out = capsys.readouterr().out
    printed = [int(ln.split()[2]) for ln in out.splitlines() if ln.startswith("Late flips:")]
    folder = tmp_path / "mini-test" / "sub-P01" / "ses-1"
    assert main(["audit", str(folder), "--json"]) == 0
    (audit,) = json.loads(capsys.readouterr().out)["sessions"]
    late = audit["facts"]["timing"]["late_flips"]
    assert printed == ([late] if late else [])
