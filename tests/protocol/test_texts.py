"""The participant's text: translatable built-in texts, the font's coverage, and text contrast."""

from __future__ import annotations

import shutil
from pathlib import Path

import pygame
import pygame.freetype
import pytest
from protofix import merged, write_protocol

from runner.protocol.check import check_protocol
from runner.protocol.model import TEXT_DEFAULTS, Texts
from runner.protocol.texts import (
    DEFAULT_FONT,
    contrast_ratio,
    hint_colour,
    page_hint,
    rating_hint,
)


def _coded(report, code: str) -> list:
    return [p for p in report.problems if p.code == code]


def _wcag_ratio(a: tuple[int, int, int], b: tuple[int, int, int]) -> float:
    """WCAG 2.2 contrast ratio, written out independently of runner.protocol."""

    def lum(rgb: tuple[int, int, int]) -> float:
        c = [v / 255 for v in rgb]
        lin = [x / 12.92 if x <= 0.04045 else ((x + 0.055) / 1.055) ** 2.4 for x in c]
        return 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]

    hi, lo = sorted((lum(a), lum(b)), reverse=True)
    return (hi + 0.05) / (lo + 0.05)


def test_contrast_ratio_matches_wcag_examples() -> None:
    """Black on white is 21:1 and #777777 on white 4.48:1.

    Source: WCAG 2.2, definitions of contrast ratio and relative luminance; the #777777 value is
    the one the WebAIM contrast checker reports (4.48:1).
    """
    assert contrast_ratio("#000000", "#ffffff") == pytest.approx(21.0)
    assert contrast_ratio("#777777", "#ffffff") == pytest.approx(4.48, abs=0.005)


def test_demo_hint_and_heading_colours_meet_four_and_a_half() -> None:
    """On the demo's grey the hint colour keeps at least 4.5:1 and is lighter than the text.

    Source: WCAG 2.2 success criterion 1.4.3 (4.5:1 for normal text); the ratio is recomputed
    from the definition in this test.
    """
    hint = hint_colour("#141414", "#8c8c8c")
    rgb = tuple(int(hint[i : i + 2], 16) for i in (1, 3, 5))
    assert _wcag_ratio(rgb, (0x8C, 0x8C, 0x8C)) >= 4.5
    assert rgb[0] > 0x14


def test_low_contrast_text_is_a_warning_with_the_ratio(tmp_path: Path) -> None:
    """Text #6e6e6e on #8c8c8c is reported with its measured ratio (about 1.5:1).

    Source: WCAG 2.2 definitions of contrast ratio and relative luminance (recomputed here).
    """
    screen = {"text_colour": "#6e6e6e", "background": "#8c8c8c"}
    report = check_protocol(write_protocol(tmp_path, merged(screen=screen)))
    hits = _coded(report, "low-contrast")
    assert hits and all(p.severity == "warning" for p in hits)
    expected = _wcag_ratio((0x6E,) * 3, (0x8C,) * 3)
    assert f"{expected:.2f}:1" in hits[0].message


def test_characters_the_font_lacks_are_errors(tmp_path: Path) -> None:
    """A prompt in Chinese names exactly the characters the bundled font has no glyph for.

    Source: pygame.freetype reports no metrics for a character without a glyph (its own
    reading of the font file, independent of the fontTools cmap the check uses).
    """
    prompt = "有几个？ ≈ ok"
    report = check_protocol(write_protocol(tmp_path, merged(answer={"prompt": prompt})))
    hits = _coded(report, "missing-glyph")
    assert len(hits) == 1 and hits[0].severity == "error" and hits[0].path == "answer.prompt"
    pygame.freetype.init()
    face = pygame.freetype.Font(str(DEFAULT_FONT), 20)
    lacking = {ch for ch in prompt if face.get_metrics(ch)[0] is None}
    assert lacking == {"有", "几", "个", "？"}
    for ch in lacking:
        assert f"U+{ord(ch):04X}" in hits[0].message
    assert "U+2248" not in hits[0].message


def test_nul_and_zero_width_only_texts_are_refused(tmp_path: Path) -> None:
    """A NUL in the question and a zero-width-only label are errors naming the setting."""
    rating = {"question": "How\x00 hard?", "low": "\u200b"}
    report = check_protocol(write_protocol(tmp_path, merged(rating=rating)))
    hits = _coded(report, "unshowable-text")
    assert {p.path for p in hits} == {"rating.question", "rating.low"}
    assert all(p.severity == "error" for p in hits)


def test_missing_font_file_is_an_error(tmp_path: Path) -> None:
    """screen.font naming a file that is not there is an error at that setting."""
    report = check_protocol(write_protocol(tmp_path, merged(screen={"font": "nope.ttf"})))
    hits = _coded(report, "unusable-font")
    assert len(hits) == 1 and hits[0].path == "screen.font"


def test_a_font_next_to_the_protocol_is_used(tmp_path: Path) -> None:
    """screen.font relative to the protocol is read, and named in the check's facts."""
    shutil.copy(DEFAULT_FONT, tmp_path / "MyFont.ttf")
    report = check_protocol(write_protocol(tmp_path, merged(screen={"font": "MyFont.ttf"})))
    assert not report.has_errors, report.problems
    assert any("MyFont.ttf" in f for f in report.facts)


def test_translated_texts_build_the_hints() -> None:
    """Protocol texts replace the English hints, with the key and points filled in."""
    texts = Texts(
        key_space="die Leertaste",
        page_hint="Weiter mit {key}.",
        rating_hint_keys="Drücken Sie 1 bis {points}.",
    )
    assert page_hint(texts, "space") == "Weiter mit die Leertaste."
    assert rating_hint(texts, 7, "keys") == "Drücken Sie 1 bis 7."


def test_rating_hints_name_every_way_that_works() -> None:
    """The default rating hints name the number keys, the arrows with Enter, and the mouse."""
    t = Texts()
    keys = rating_hint(t, 9, "keys")
    assert "1 to 9" in keys and "arrow" in keys and "Enter" in keys
    both = rating_hint(t, 11, "both")
    assert "Click" in both and "0 for 10" in both and "arrow" in both


def test_unknown_placeholder_in_a_text_is_an_error(tmp_path: Path) -> None:
    """A text using a placeholder it does not have is refused at that text's setting."""
    report = check_protocol(write_protocol(tmp_path, merged(texts={"page_hint": "Go {name}"})))
    assert report.has_errors
    assert any(p.path == "texts.page_hint" for p in report.problems)


def test_every_text_key_has_a_default_and_is_documented() -> None:
    """Each key of TEXT_DEFAULTS is a Texts field and is listed in docs/protocol.md."""
    docs = (Path(__file__).parents[2] / "docs" / "protocol.md").read_text(encoding="utf-8")
    assert set(Texts.model_fields) == set(TEXT_DEFAULTS)
    for key in TEXT_DEFAULTS:
        assert f"`{key}`" in docs, key


def test_painter_survives_zero_width_text() -> None:
    """Drawing a zero-width-only page line leaves the screen drawn, without an exception."""
    from runner.present.painter import Painter, Style
    from runner.session.views import PageView

    pygame.display.init()
    try:
        surf = pygame.Surface((640, 480))
        style = Style.from_colours("#8c8c8c", "#141414", "#1f4e79", 20)
        painter = Painter(style, (640, 480), pygame.Rect(0, 0, 200, 200), lambda p: None)
        painter.draw(surf, PageView("# Hello\n\n\u200b", hint="x\x00"))
        assert surf.get_at((0, 0))[:3] == (0x8C, 0x8C, 0x8C)
    finally:
        pygame.display.quit()


def test_painter_refuses_a_file_that_is_not_a_font(tmp_path: Path) -> None:
    """A screen.font that is not a font file is a plain InputFileError, not a pygame crash."""
    from runner.errors import InputFileError
    from runner.present.painter import Painter, Style

    bad = tmp_path / "font.ttf"
    bad.write_text("not a font", encoding="utf-8")
    style = Style.from_colours("#8c8c8c", "#141414", "#1f4e79", 20, font=bad)
    pygame.display.init()
    try:
        with pytest.raises(InputFileError, match="cannot be used as a font"):
            Painter(style, (640, 480), pygame.Rect(0, 0, 10, 10), lambda p: None)
    finally:
        pygame.display.quit()


def test_demo_page_draws_heading_and_hint_at_four_and_a_half() -> None:
    """On the demo's colours the drawn heading and hint pixels keep 4.5:1 with the grey.

    Source: WCAG 2.2 success criterion 1.4.3 and the contrast-ratio definition, recomputed here
    from the painter's own pixels (the darkest pixel of each text is its full colour).
    """
    from runner.present.painter import HINT_MARGIN_FRACTION, Painter, Style
    from runner.session.views import PageView

    size = (960, 540)
    pygame.display.init()
    try:
        surf = pygame.Surface(size)
        style = Style.from_colours("#8c8c8c", "#141414", "#1f4e79", 34)
        painter = Painter(style, size, pygame.Rect(0, 0, 10, 10), lambda p: None)
        painter.draw(surf, PageView("# Thank you", hint="Press the space bar to continue."))
        hint_y = round(size[1] * (1 - HINT_MARGIN_FRACTION))
        bands = {"heading": range(0, size[1] // 2), "hint": range(hint_y - 12, hint_y + 12)}
        for name, rows in bands.items():
            colours = {
                tuple(surf.get_at((x, y))[:3]) for y in rows for x in range(0, size[0], 2)
            } - {(0x8C, 0x8C, 0x8C)}
            assert colours, name
            darkest = min(colours, key=sum)
            assert _wcag_ratio(darkest, (0x8C, 0x8C, 0x8C)) >= 4.5, (name, darkest)
    finally:
        pygame.display.quit()
