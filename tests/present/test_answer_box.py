"""Answers typed over the stimulus ('over' mode): the answer box never covers the stimulus.

The painter's real rectangles and pixels are measured under the SDL dummy driver; a protocol
whose stimuli leave no room is refused at load (so by `check` and `pilot` alike), with sizes that
do fit.
"""

from __future__ import annotations

from pathlib import Path

import pygame
import pytest
from protofix import merged, write_protocol

from runner.errors import ProtocolError
from runner.present import painter as painter_module
from runner.present.display import display_for
from runner.protocol.load import load_protocol
from runner.session import views
from runner.session.views import StimulusView, answer_box_size, answer_fit_limits, hint_top

RED = (200, 30, 30)


def _protocol(folder: Path, resolution, width_px: int, image: tuple[int, int]) -> Path:
    protocol = merged(
        screen={"resolution": list(resolution), "refresh_hz": 60, "background": "#808080"},
        stimulus_size={"width_px": width_px},
        answer={"mode": "over", "max": 60},
    )
    return write_protocol(folder, protocol, image_size=image, colour=RED)


@pytest.mark.parametrize(
    ("resolution", "width_px", "image", "where"),
    [
        ((640, 480), 200, (200, 100), "below"),
        ((640, 480), 240, (240, 480), "beside"),
        ((1920, 1080), 1000, (1000, 1000), "beside"),
        ((800, 600), 400, (400, 200), "below"),
    ],
)
def test_answer_box_leaves_every_stimulus_pixel_visible(
    tmp_path, resolution, width_px, image, where
):
    """Typing over the stimulus leaves all its pixels showing; the box is on the screen, clear
    of the stimulus and above the hint line.

    Source: common practice (no published source): a count typed over a diagram must not hide it.
    """
    loaded = load_protocol(_protocol(tmp_path, resolution, width_px, image))
    display = display_for(loaded, fullscreen=False)
    try:
        path = str(loaded.table.stimulus_path(loaded.table.rows[1]))
        display.prepare(path)
        painter, surf = display.painter, display.surface
        # No hint: a hint line over a full-height stimulus is the hint's matter, not the box's.
        painter.draw(surf, StimulusView(path, typed="12", prompt="How many?", hint=""))
        img = painter.image_for(path)
        rect = img.get_rect(center=painter.stimulus_rect.center)
        box = painter._answer_box(rect)
        pixels = pygame.surfarray.pixels3d(surf)
        shown = int(((pixels[:, :, 0] == RED[0]) & (pixels[:, :, 1] == RED[1])).sum())
        del pixels
        assert shown == rect.width * rect.height
        assert not box.colliderect(rect)
        assert pygame.Rect(0, 0, *resolution).contains(box)
        top = hint_top(resolution, loaded.model.screen.font_px, painter.small.get_linesize())
        assert box.bottom <= top
        assert (box.top >= rect.bottom) == (where == "below")
    finally:
        display.close()


def test_full_screen_stimuli_with_over_answers_are_refused_with_sizes_that_fit(tmp_path):
    """Stimuli filling the screen leave the box no room: load refuses at answer.mode, naming the
    largest stimulus height and width that fit; those limits hold exactly.

    Source: common practice (no published source); the limits are checked by loading protocols
    at and just beyond them.
    """
    size = (640, 480)
    font_px = merged()["screen"].get("font_px", 34)  # type: ignore[union-attr]
    max_h, _ = answer_fit_limits(size, answer_box_size(font_px), hint_top(size, font_px))
    with pytest.raises(ProtocolError) as info:
        load_protocol(_protocol(tmp_path / "full", size, 640, (640, 480)))
    problem = next(p for p in info.value.problems if p.code == "answer-covers-stimulus")
    assert problem.path == "answer.mode" and f"at most {max_h} px high" in problem.message
    load_protocol(_protocol(tmp_path / "fits", size, 640, (640, max_h)))
    with pytest.raises(ProtocolError) as info:
        load_protocol(_protocol(tmp_path / "over", size, 640, (640, max_h + 2)))
    assert [p.code for p in info.value.problems] == ["answer-covers-stimulus"]


@pytest.mark.parametrize("font_px", [10, 20, 34, 60, 120, 200])
def test_load_places_the_hint_line_no_lower_than_the_painter(font_px):
    """The hint line height load assumes is at least the painter's real one, and both use the
    same margin, so a layout load accepts always fits on the screen."""
    pygame.font.init()
    small = pygame.font.Font(None, round(font_px * 0.95))
    assert small.get_linesize() <= round(font_px * views.HINT_LINE_EM)
    assert painter_module.HINT_MARGIN_FRACTION == views.HINT_MARGIN_FRACTION
