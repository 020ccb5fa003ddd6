"""How screens are drawn: the partial redraw while typing over a stimulus matches a full draw."""

from __future__ import annotations

import pygame
from conftest import MINI_PROTOCOL as MINI

from runner.present.display import display_for
from runner.protocol.load import load_protocol
from runner.session.views import StimulusView


def test_typing_update_equals_full_redraw():
    """Redrawing only the answer box gives exactly the pixels of drawing the whole screen anew.

    Source: common practice (no published source): a dirty-rectangle update must be invisible.
    """
    loaded = load_protocol(MINI)
    display = display_for(loaded, fullscreen=False)
    try:
        path = str(loaded.table.stimulus_path(loaded.table.rows[2]))
        display.prepare(path)
        painter, surf = display.painter, display.surface
        views = [
            StimulusView(path, typed=t, prompt="How many?", hint="Enter")
            for t in ("", "1", "12", "1")
        ]
        for view in views:
            painter.draw(surf, view, photodiode=True)
        incremental = pygame.image.tobytes(surf, "RGB")
        painter.forget()
        painter.draw(surf, views[-1], photodiode=True)
        assert pygame.image.tobytes(surf, "RGB") == incremental
        painter.draw(
            surf, StimulusView(path, typed="7", prompt="How many?", hint="Enter"), photodiode=False
        )
        partial_other_patch = pygame.image.tobytes(surf, "RGB")
        painter.forget()
        painter.draw(
            surf, StimulusView(path, typed="7", prompt="How many?", hint="Enter"), photodiode=False
        )
        assert pygame.image.tobytes(surf, "RGB") == partial_other_patch
    finally:
        display.close()


def test_page_lines_join_paragraphs_like_markdown():
    """Lines of one paragraph or bullet are joined; blank lines, headings and bullets stay apart.

    Source: CommonMark specification (paragraph continuation lines and list items), from memory.
    """
    from runner.present.painter import page_lines

    text = "# Welcome\n\nOne line\nand its continuation.\n\n- first item\n  wraps here\n- second\n\nEnd."
    assert page_lines(text) == [
        "# Welcome",
        "",
        "One line and its continuation.",
        "",
        "- first item wraps here",
        "- second",
        "",
        "End.",
    ]
