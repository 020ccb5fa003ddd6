"""Every writer of an output folder, as a user runs it: the cases of issue 13 item 15.

Each case runs the real command line in a subprocess in a scratch working folder. A refused case
exits 1 with one plain error line and leaves every file it did not make as it was (also outside
the folder, where links point); the other cases write without leaving stale files.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import pytest
from conftest import REPO, TEST_DATA, run_pilot

from runner.contract.layout import JOURNAL_NAME, TMP_SUFFIX, TRIALS_NAME
from runner.contract.outputs import MARKER_NAME

pytestmark = pytest.mark.slow

SPEC = """\
seed: 5
canvas: {size_px: [400, 300], margin_px: 30}
readability: {min_node_distance_px: 16, link_clearance_px: 6, attempts: 20}
count_targets: false
formats: [png]
sets:
  - name: main
    family: random
    layout: stress
    sizes: [10]
    densities: {sparse: 1.2}
    instances: 1
    pairs: {strategy: path_length, path_links: [2, 4], max_routes: 3}
"""


@pytest.fixture(scope="module")
def sessions(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Two piloted sessions of the mini protocol (P01 and P02) under one sessions folder."""
    root = tmp_path_factory.mktemp("sessions")
    for who in ("P01", "P02"):
        result = run_pilot(TEST_DATA / "mini" / "mini.yaml", root, participant=who, speed=50.0)
        assert result.status == "completed"
    return root


def _cli(cwd: Path, *args: str) -> subprocess.CompletedProcess[str]:
    env = dict(os.environ, PYTHONPATH=str(REPO))
    return subprocess.run(
        [sys.executable, "-m", "runner.cli", *args],
        capture_output=True,
        text=True,
        cwd=cwd,
        env=env,
        timeout=300,
    )


def _tree(root: Path) -> dict[str, bytes | str]:
    """Every entry below ``root`` (links not followed): file bytes, link targets, folders."""
    found: dict[str, bytes | str] = {}
    for dirpath, dirnames, filenames in os.walk(root):
        for name in dirnames + filenames:
            p = Path(dirpath) / name
            rel = str(p.relative_to(root))
            if p.is_symlink():
                found[rel] = "-> " + os.readlink(p)
            elif p.is_file():
                found[rel] = p.read_bytes()
            else:
                found[rel] = "dir"
    return found


def _session(sessions: Path, who: str) -> Path:
    return next(p.parent for p in sessions.rglob(JOURNAL_NAME) if f"sub-{who}" in str(p))


@dataclass
class Case:
    """One writer case: set up the working folder, then the command line to run in it."""

    name: str
    setup: Callable[[Path, Path], list[str]]  # (work, sessions) -> command line
    own: str = ""  # a folder the command made before (it may clear it); the rest must not change


def _export_here(work: Path, sessions: Path) -> list[str]:
    (work / TRIALS_NAME).write_text("stimulus,expected\nmine.png,3\n", encoding="utf-8")
    return ["export", str(sessions), "--out", "."]


def _summary_here(work: Path, sessions: Path) -> list[str]:
    (work / "participants.csv").write_text("participant\nP01\n", encoding="utf-8")
    return ["summary", str(sessions), "--out", "."]


def _export_into_session(work: Path, sessions: Path) -> list[str]:
    session = work / "copy"
    shutil.copytree(_session(sessions, "P01"), session)
    return ["export", str(session), "--out", str(session), "--force"]


def _export_above_sessions(work: Path, sessions: Path) -> list[str]:
    shutil.copytree(sessions, work / "sessions")
    return ["export", "sessions", "--out", ".", "--force"]


def _export_into_used_folder(work: Path, sessions: Path) -> list[str]:
    (work / "exp").mkdir()
    (work / "exp" / "analysis.R").write_text("# mine\n", encoding="utf-8")
    return ["export", str(_session(sessions, "P01")), "--out", "exp"]


def _pilot_frames_into_used_folder(work: Path, sessions: Path) -> list[str]:
    (work / "frames").mkdir()
    (work / "frames" / "00001-PageView.png").write_bytes(b"an earlier session's frame")
    return [
        "pilot",
        str(TEST_DATA / "mini" / "mini.yaml"),
        "--participant",
        "P09",
        "--out",
        "sessions",
        "--speed",
        "50",
        "--frames",
        "frames",
    ]


def _stimuli_force_through_link(work: Path, sessions: Path) -> list[str]:
    outside = work / "outside"
    outside.mkdir()
    (outside / "holiday.png").write_bytes(b"a user's photo")
    (work / "kit").mkdir()
    (work / "kit" / "images").symlink_to(outside, target_is_directory=True)
    (work / "spec.yaml").write_text(SPEC, encoding="utf-8")
    return ["stimuli", "spec.yaml", "--out", "kit", "--force"]


def _export_tmp_link(work: Path, sessions: Path) -> list[str]:
    first = _cli(work, "export", str(_session(sessions, "P01")), "--out", "exp")
    assert first.returncode == 0, first.stderr
    (work / "outside.csv").write_text("precious\n", encoding="utf-8")
    (work / "exp" / (TRIALS_NAME + TMP_SUFFIX)).symlink_to(work / "outside.csv")
    return ["export", str(_session(sessions, "P01")), "--out", "exp"]


def _session_tmp_link(work: Path, sessions: Path) -> list[str]:
    folder = work / "sessions" / "mini-test" / "sub-P07" / "ses-1"
    folder.mkdir(parents=True)
    (work / "outside.csv").write_text("precious\n", encoding="utf-8")
    (folder / (TRIALS_NAME + TMP_SUFFIX)).symlink_to(work / "outside.csv")
    return [
        "pilot",
        str(TEST_DATA / "mini" / "mini.yaml"),
        "--participant",
        "P07",
        "--out",
        "sessions",
        "--speed",
        "50",
    ]


REFUSED = [
    Case("export --out . over the user's trials.csv", _export_here),
    Case("summary --out . over the user's participants.csv", _summary_here),
    Case("export --out SESSION (even with --force)", _export_into_session),
    Case("export --out a folder holding sessions (even with --force)", _export_above_sessions),
    Case("export into a used folder it did not make", _export_into_used_folder),
    Case("pilot --frames into a used folder", _pilot_frames_into_used_folder),
    Case("stimuli --force with images linked outside", _stimuli_force_through_link),
    Case("export with trials.csv.tmp linked outside", _export_tmp_link, own="exp"),
]


@pytest.mark.parametrize("case", REFUSED, ids=[c.name for c in REFUSED])
def test_refused_writes_change_nothing(case: Case, sessions: Path, tmp_path: Path) -> None:
    """A refused writer exits 1 with one plain line and changes no file it did not make."""
    work = tmp_path / "work"
    work.mkdir()
    argv = case.setup(work, sessions)

    def others() -> dict[str, bytes | str]:
        tree = _tree(work)
        if case.own:
            link = str(Path(case.own) / (TRIALS_NAME + TMP_SUFFIX))
            return {k: v for k, v in tree.items() if not k.startswith(case.own) or k == link}
        return tree

    before = others()
    proc = _cli(work, *argv)
    assert proc.returncode == 1, proc.stdout + proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), proc.stderr
    assert "Traceback" not in proc.stderr
    assert others() == before


def test_session_end_refuses_a_linked_trials_tmp(sessions: Path, tmp_path: Path) -> None:
    """A trials.csv.tmp link in the session folder is refused at the end (exit 1, one line);
    the file it points at is untouched and the journal holds the session."""
    work = tmp_path / "work"
    work.mkdir()
    argv = _session_tmp_link(work, sessions)
    proc = _cli(work, *argv)
    assert proc.returncode == 1, proc.stdout + proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), proc.stderr
    assert (work / "outside.csv").read_text(encoding="utf-8") == "precious\n"
    folder = work / "sessions" / "mini-test" / "sub-P07" / "ses-1"
    assert (folder / JOURNAL_NAME).is_file() and not (folder / TRIALS_NAME).exists()


def test_session_start_refuses_a_linked_frozen_copy_tmp(tmp_path: Path) -> None:
    """A protocol.yaml.tmp link in the session folder is refused (exit 1, one line) and the
    file it points at is untouched."""
    work = tmp_path / "work"
    work.mkdir()
    folder = work / "sessions" / "mini-test" / "sub-P08" / "ses-1"
    folder.mkdir(parents=True)
    (work / "outside.yaml").write_text("precious\n", encoding="utf-8")
    (folder / "protocol.yaml.tmp").symlink_to(work / "outside.yaml")
    proc = _cli(
        work,
        "pilot",
        str(TEST_DATA / "mini" / "mini.yaml"),
        "--participant",
        "P08",
        "--out",
        "sessions",
        "--speed",
        "50",
    )
    assert proc.returncode == 1, proc.stdout + proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), proc.stderr
    assert (work / "outside.yaml").read_text(encoding="utf-8") == "precious\n"
    assert (folder / "protocol.yaml.tmp").is_symlink()


def test_re_export_of_a_subset_leaves_no_stale_files(sessions: Path, tmp_path: Path) -> None:
    """Exporting two sessions, then one, into the same folder leaves only the one's files
    (and a file the user added)."""
    work = tmp_path / "work"
    work.mkdir()
    assert _cli(work, "export", str(sessions), "--out", "exp").returncode == 0
    assert any("sub-P02" in str(p) for p in (work / "exp").rglob("*"))
    (work / "exp" / "notes.txt").write_text("mine\n", encoding="utf-8")
    proc = _cli(work, "export", str(_session(sessions, "P01")), "--out", "exp")
    assert proc.returncode == 0, proc.stderr
    assert not any("sub-P02" in str(p) for p in (work / "exp").rglob("*"))
    assert (work / "exp" / "notes.txt").read_text(encoding="utf-8") == "mine\n"
    marker = json.loads((work / "exp" / MARKER_NAME).read_text(encoding="utf-8"))
    listed = {work / "exp" / name for name in marker["files"]}
    on_disk = {p for p in (work / "exp").rglob("*") if p.is_file()}
    assert listed == on_disk - {work / "exp" / MARKER_NAME, work / "exp" / "notes.txt"}


def test_pilot_frames_rewrite_their_own_folder(tmp_path: Path) -> None:
    """A second pilot with --frames into the folder the first made holds only its own frames."""
    work = tmp_path / "work"
    work.mkdir()
    base = ["pilot", str(TEST_DATA / "mini" / "mini.yaml"), "--out", "sessions", "--speed", "50"]
    assert _cli(work, *base, "--participant", "P01", "--frames", "frames").returncode == 0
    (work / "frames" / "99999-StimulusView.png").write_bytes(b"x")
    first_frame = sorted((work / "frames").glob("00001-*.png"))[0]
    (work / "outside.png").write_bytes(b"precious")
    first_frame.unlink()
    first_frame.symlink_to(work / "outside.png")  # a frame of its own replaced by a link
    marker = json.loads((work / "frames" / MARKER_NAME).read_text(encoding="utf-8"))
    marker["files"].append("99999-StimulusView.png")  # as if the first had drawn one more
    (work / "frames" / MARKER_NAME).write_text(json.dumps(marker), encoding="utf-8")
    assert _cli(work, *base, "--participant", "P02", "--frames", "frames").returncode == 0
    marker = json.loads((work / "frames" / MARKER_NAME).read_text(encoding="utf-8"))
    on_disk = sorted(p.name for p in (work / "frames").iterdir() if p.name != MARKER_NAME)
    assert on_disk == sorted(marker["files"]) and "99999-StimulusView.png" not in on_disk
    assert on_disk[0].startswith("00001-")
    assert (work / "outside.png").read_bytes() == b"precious"
    assert not any(p.is_symlink() for p in (work / "frames").iterdir())
