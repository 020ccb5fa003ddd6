"""Replay of real pilot sessions: frames compared pixel by pixel with the pilot's own frames."""

from __future__ import annotations

import argparse
import json
import math
import shutil
import statistics
from pathlib import Path

import matplotlib.image
import numpy as np
import pytest
from conftest import TEST_DATA, run_pilot

from runner.cli.replay import add_arguments as add_replay_arguments
from runner.cli.replay import run as run_replay
from runner.contract.outputs import MARKER_NAME, OutputRefused
from runner.errors import InputFileError, UsageError
from runner.present.contact_sheet import SHEET_COLUMNS, write_contact_sheet
from runner.qa.replay import CONTACT_SHEET, plan_replay, replay_session, write_png
from runner.session.journal import JOURNAL_NAME


@pytest.fixture(scope="module")
def protocol_dir(tmp_path_factory) -> Path:
    """A private copy of the mini protocol (its stimuli may be moved by a test)."""
    dest = tmp_path_factory.mktemp("protocol") / "mini"
    shutil.copytree(TEST_DATA / "mini", dest)
    return dest


@pytest.fixture(scope="module")
def pilot(protocol_dir, tmp_path_factory) -> tuple[Path, Path]:
    """(session folder, frames folder) of one headless pilot run with --frames."""
    frames = tmp_path_factory.mktemp("pilot-frames")
    result = run_pilot(
        protocol_dir / "mini.yaml", tmp_path_factory.mktemp("out"), speed=20, frames=frames
    )
    assert result.status == "completed"
    return result.folder, frames


def _pngs(folder: Path) -> list[Path]:
    return sorted(p for p in folder.glob("*.png") if p.name != CONTACT_SHEET)


def _assert_same_pixels(live: list[Path], replayed: list[Path]) -> None:
    assert [p.name for p in replayed] == [p.name for p in live]
    for a, b in zip(live, replayed, strict=True):
        pa, pb = matplotlib.image.imread(a), matplotlib.image.imread(b)
        assert pa.shape == pb.shape, a.name
        assert np.array_equal(pa, pb), f"{a.name} differs in {int((pa != pb).any(-1).sum())} px"


@pytest.mark.slow
def test_headless_frames_match_pilot_pixel_for_pixel(pilot, tmp_path):
    """Replayed frames equal the frames captured during the pilot, pixel for pixel.

    Source: the live run's own screen captures, decoded by matplotlib's PNG reader (not
    pygame, which wrote both sets).
    """
    folder, live_frames = pilot
    out = tmp_path / "replay"
    result = replay_session(plan_replay(folder), timed=False, frames_dir=out)
    live = _pngs(live_frames)
    assert len(live) > 20
    _assert_same_pixels(live, _pngs(out))
    assert result.frames == _pngs(out)
    assert result.notes == []


@pytest.mark.slow
def test_every_journaled_flip_is_replayed(pilot):
    """The plan holds one screen per flip line of the journal, in order, typed answers included."""
    folder, _ = pilot
    flips = [
        json.loads(x)
        for x in (folder / JOURNAL_NAME).read_text("utf-8").splitlines()
        if '"event":"flip"' in x
    ]
    plan = plan_replay(folder)
    assert [s.t for s in plan.screens] == [f["t"] for f in flips]
    assert [s.kind for s in plan.screens] == [f["kind"] for f in flips]
    typed = [s.view.typed for s in plan.screens if s.kind.endswith("typing")]
    want = [f["view"]["typed"] for f in flips if f["kind"].endswith("typing")]
    assert typed == want and typed


@pytest.mark.slow
def test_contact_sheet_has_one_cell_per_frame(pilot, tmp_path):
    """The contact sheet is a grid sized for every frame, and shows the frames (not blank)."""
    folder, _ = pilot
    result = replay_session(plan_replay(folder), timed=False, frames_dir=tmp_path / "r")
    sheet = matplotlib.image.imread(result.contact_sheet)
    first = matplotlib.image.imread(result.frames[0])
    rows = math.ceil(len(result.frames) / SHEET_COLUMNS)
    h, w = sheet.shape[:2]
    thumb_h = round(first.shape[0] * 192 / first.shape[1])
    assert w == SHEET_COLUMNS * (192 + 6) + 6
    assert h == rows * (thumb_h + 14 + 12) + 6
    assert sheet[..., :3].std() > 0.05


@pytest.mark.slow
def test_moved_stimuli_found_with_stimuli_dir(tmp_path, protocol_dir):
    """When the live stimulus paths are gone, --stimuli DIR finds them and frames still match."""
    src = tmp_path / "proto"
    shutil.copytree(protocol_dir, src)
    live_frames = tmp_path / "live"
    result = run_pilot(src / "mini.yaml", tmp_path / "out", speed=20, frames=live_frames)
    moved = tmp_path / "moved"
    shutil.copytree(src, moved)
    shutil.rmtree(src / "img")
    with pytest.raises(InputFileError, match="cannot be found"):
        plan_replay(result.folder)
    plan = plan_replay(result.folder, stimuli_dir=moved)
    assert any("no longer exists" in n for n in plan.notes)
    out = tmp_path / "replay"
    replay_session(plan, timed=False, frames_dir=out)
    _assert_same_pixels(_pngs(live_frames), _pngs(out))


@pytest.mark.slow
def test_timed_replay_keeps_recorded_timing(pilot):
    """A timed replay flips each screen at its recorded time divided by the speed, within a frame.

    Source: common practice (no published source): flips can only land on refresh slots, so
    one refresh interval (16.7 ms at 60 Hz) is the tolerance.
    """
    folder, _ = pilot
    plan = plan_replay(folder)
    # The pilot ran at speed 20, so its screens are already as close as one frame apart: a
    # faster replay would ask for more than one screen per refresh.
    speed = 1.0
    result = replay_session(plan, speed=speed, timed=True)
    interval_ms = 1000.0 / plan.model.screen.refresh_hz
    assert result.timed and not result.stopped_early
    assert len(result.lateness_ms) == len(plan.screens)
    assert statistics.median(result.lateness_ms) < interval_ms
    span = (plan.screens[-1].t - plan.screens[0].t) / speed
    assert result.seconds == pytest.approx(span, abs=0.5)


def test_contact_sheet_refuses_no_frames(tmp_path):
    """A contact sheet of nothing is refused with a sentence, not a crash."""
    with pytest.raises(InputFileError, match="no frames"):
        write_contact_sheet([], tmp_path / "sheet.png")


def _args(*argv: str) -> argparse.Namespace:
    p = argparse.ArgumentParser()
    add_replay_arguments(p)
    return p.parse_args(list(argv))


@pytest.mark.slow
def test_command_headless_needs_frames(pilot):
    """Headless, `replay` without --frames is a usage error saying what to add."""
    folder, _ = pilot
    with pytest.raises(UsageError, match="--frames"):
        run_replay(_args(str(folder)))


@pytest.mark.slow
def test_command_writes_frames_and_refuses_a_used_folder(pilot, tmp_path, capsys):
    """`replay --frames DIR` writes the frames and sheet; its own DIR is re-written without
    stale files, a DIR holding other files is refused."""
    folder, live_frames = pilot
    out = tmp_path / "frames"
    assert run_replay(_args(str(folder), "--frames", str(out))) == 0
    printed = capsys.readouterr().out
    assert f"Frames: {len(_pngs(live_frames))} PNG files" in printed
    assert (out / CONTACT_SHEET).is_file()
    first = sorted(p.name for p in out.iterdir())
    stale = out / "99999-StimulusView.png"
    stale.write_bytes(b"x")  # as if an earlier replay had written one more frame
    marker = json.loads((out / MARKER_NAME).read_text(encoding="utf-8"))
    marker["files"].append(stale.name)
    (out / MARKER_NAME).write_text(json.dumps(marker), encoding="utf-8")
    assert run_replay(_args(str(folder), "--frames", str(out))) == 0
    assert sorted(p.name for p in out.iterdir()) == first
    other = tmp_path / "other"
    other.mkdir()
    (other / "notes.txt").write_text("mine", encoding="utf-8")
    with pytest.raises(OutputRefused) as info:
        run_replay(_args(str(folder), "--frames", str(other)))
    assert info.value.reason == "not-empty"
    assert sorted(p.name for p in other.iterdir()) == ["notes.txt"]


def test_png_writer_round_trips_through_a_reference_decoder(tmp_path):
    """Pixels written by write_png read back unchanged.

    Source: W3C PNG specification (signature, IHDR, IDAT, IEND, CRC-32), decoded by
    matplotlib's PNG reader as the reference, which checks the chunk CRCs.
    """
    rng = np.random.default_rng(7)
    pixels = rng.integers(0, 256, size=(37, 53, 3), dtype=np.uint8)
    path = write_png(tmp_path / "x.png", pixels.tobytes(), (53, 37))
    back = matplotlib.image.imread(path)
    assert back.shape == (37, 53, 3)
    assert np.array_equal(np.round(back * 255).astype(np.uint8), pixels)
