"""The output-folder rules every writer follows: marker, refusals, no stale files, no links."""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest

from runner.contract.layout import JOURNAL_NAME
from runner.contract.outputs import (
    MARKER_NAME,
    OutputRefused,
    prepare_output_folder,
    replace_file,
)

CMD = "trialdeck test"


def _tree(root: Path) -> dict[str, bytes | str]:
    """Every entry below ``root``: file bytes, or the target of a link (links not followed)."""
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


def _write(target, name: str, text: str) -> Path:
    path = target.folder() / name
    with replace_file(path) as fh:
        fh.write(text)
    return path


def test_new_folder_is_created_and_marked_with_the_command(tmp_path):
    """A folder the command creates carries a marker naming the command and its files."""
    out = tmp_path / "new"
    target = prepare_output_folder(out, CMD)
    assert target.created and target.owned
    f = _write(target, "a.csv", "x\n")
    target.finish([f, tmp_path / "elsewhere.txt"])
    marker = json.loads((out / MARKER_NAME).read_text(encoding="utf-8"))
    assert marker == {"command": CMD, "files": ["a.csv"]}


def test_folder_of_another_is_refused_unless_forced(tmp_path):
    """A non-empty folder without this command's marker is refused; --force writes into it."""
    out = tmp_path / "mine"
    out.mkdir()
    (out / "trials.csv").write_text("user's own\n", encoding="utf-8")
    before = _tree(tmp_path)
    with pytest.raises(OutputRefused) as info:
        prepare_output_folder(out, CMD)
    assert info.value.reason == "not-empty" and _tree(tmp_path) == before
    other = tmp_path / "other"
    prepare_output_folder(other, "trialdeck other").finish([])
    (other / "x.txt").write_text("x", encoding="utf-8")
    with pytest.raises(OutputRefused) as info:
        prepare_output_folder(other, CMD)
    assert info.value.reason == "not-empty"
    forced = prepare_output_folder(out, CMD, force=True)
    assert not forced.owned and not (out / MARKER_NAME).exists()
    assert (out / "trials.csv").read_text(encoding="utf-8") == "user's own\n"


def test_rewriting_its_own_folder_removes_only_its_earlier_files(tmp_path):
    """Re-writing a folder of its own removes the files it listed (no stale file stays),
    keeps files the user added, and removes folders it emptied."""
    out = tmp_path / "out"
    first = prepare_output_folder(out, CMD)
    a = _write(first, "a.csv", "1")
    sub = first.folder("sub-P02", "beh")
    b = sub / "events.tsv"
    b.write_text("2", encoding="utf-8")
    first.finish([a, b])
    (out / "notes.txt").write_text("mine", encoding="utf-8")
    second = prepare_output_folder(out, CMD)
    assert second.owned and not second.created
    assert sorted(p.name for p in out.iterdir()) == [MARKER_NAME, "notes.txt"]
    assert sorted(second.removed) == sorted([a, b])


def test_listed_links_are_removed_themselves_never_their_targets(tmp_path):
    """A listed file that became a link is unlinked; a listed file under a linked folder is
    left alone; names that leave the folder are ignored."""
    outside = tmp_path / "outside"
    outside.mkdir()
    (outside / "a.csv").write_text("precious", encoding="utf-8")
    (outside / "b.csv").write_text("precious", encoding="utf-8")
    out = tmp_path / "out"
    prepare_output_folder(out, CMD).finish([])
    (out / "a.csv").symlink_to(outside / "a.csv")
    (out / "sub").symlink_to(outside, target_is_directory=True)
    files = ["a.csv", "sub/b.csv", "../outside/b.csv", "/etc/hostname"]
    (out / MARKER_NAME).write_text(json.dumps({"command": CMD, "files": files}), encoding="utf-8")
    before = _tree(outside)
    prepare_output_folder(out, CMD)
    assert _tree(outside) == before
    assert not os.path.lexists(out / "a.csv") and (out / "sub").is_symlink()


@pytest.mark.parametrize("where", ["equal", "inside", "above"])
def test_session_folders_are_refused_even_with_force(tmp_path, where):
    """The target may not be a session folder, lie inside one, or hold session folders."""
    session = tmp_path / "sessions" / "study" / "sub-P01" / "ses-1"
    session.mkdir(parents=True)
    (session / JOURNAL_NAME).write_text("{}\n", encoding="utf-8")
    target = {
        "equal": session,
        "inside": session / "frames",
        "above": tmp_path,
    }[where]
    before = _tree(tmp_path)
    with pytest.raises(OutputRefused) as info:
        prepare_output_folder(target, CMD, force=True)
    expected = "holds-sessions" if where == "above" else "session-folder"
    assert info.value.reason == expected and _tree(tmp_path) == before


def test_a_linked_folder_on_the_way_is_refused(tmp_path):
    """Writing into a subfolder that is a link to elsewhere is refused, nothing is created."""
    outside = tmp_path / "outside"
    outside.mkdir()
    out = tmp_path / "out"
    target = prepare_output_folder(out, CMD)
    (out / "images").symlink_to(outside, target_is_directory=True)
    with pytest.raises(OutputRefused) as info:
        target.folder("images", "deeper")
    assert info.value.reason == "link" and list(outside.iterdir()) == []


def test_replace_file_never_writes_through_links(tmp_path):
    """A link at the temporary name is refused; a link at the target is replaced, not followed;
    a plain temporary file left by an interrupted write is removed."""
    outside = tmp_path / "outside.txt"
    outside.write_text("precious", encoding="utf-8")
    target = tmp_path / "trials.csv"
    tmp = tmp_path / "trials.csv.tmp"
    tmp.symlink_to(outside)
    with pytest.raises(OutputRefused) as info, replace_file(target) as fh:
        fh.write("rows")
    assert info.value.reason == "link"
    assert outside.read_text(encoding="utf-8") == "precious" and not target.exists()
    tmp.unlink()
    target.symlink_to(outside)
    with replace_file(target) as fh:
        fh.write("rows")
    assert not target.is_symlink() and target.read_text(encoding="utf-8") == "rows"
    assert outside.read_text(encoding="utf-8") == "precious"
    tmp.write_text("left over", encoding="utf-8")
    with replace_file(target, durable=True) as fh:
        fh.write("again")
    assert target.read_text(encoding="utf-8") == "again" and not tmp.exists()


def test_failed_write_leaves_neither_target_nor_temporary_file(tmp_path):
    """An error while writing removes the temporary file and leaves the target as it was."""
    target = tmp_path / "facts.json"
    target.write_text("old", encoding="utf-8")
    with pytest.raises(RuntimeError), replace_file(target) as fh:
        fh.write("half")
        raise RuntimeError("disk trouble")
    assert target.read_text(encoding="utf-8") == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["facts.json"]


def test_a_file_in_place_of_the_folder_is_refused(tmp_path):
    """An output path that is a file is refused as not a folder."""
    path = tmp_path / "f"
    path.write_text("x", encoding="utf-8")
    with pytest.raises(OutputRefused) as info:
        prepare_output_folder(path, CMD, force=True)
    assert info.value.reason == "not-a-folder"


def test_a_marker_that_is_a_link_is_refused_and_never_followed(tmp_path):
    """A marker that is a link is refused (bad-marker); with force it is replaced, its target kept."""
    outside = tmp_path / "outside.json"
    outside.write_text(json.dumps({"command": CMD, "files": []}), encoding="utf-8")
    out = tmp_path / "out"
    out.mkdir()
    (out / MARKER_NAME).symlink_to(outside)
    with pytest.raises(OutputRefused) as info:
        prepare_output_folder(out, CMD)
    assert info.value.reason == "bad-marker"
    before = outside.read_bytes()
    target = prepare_output_folder(out, CMD, force=True)
    target.finish([])
    assert outside.read_bytes() == before and not (out / MARKER_NAME).is_symlink()
