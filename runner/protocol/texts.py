"""The words the participant reads: built-in texts from the protocol, the font, and text checks.

Every built-in sentence a participant sees (hints, feedback, the confirm dialog, the break
countdown, the pause page) comes from the protocol's ``texts`` section, whose keys and English
defaults are defined once, in :data:`runner.protocol.model.TEXT_DEFAULTS`. The session builds its
hints with the functions here, and ``trialdeck check`` uses :func:`participant_strings` to test
that the chosen font can draw every one of them. Nothing here imports pygame.
"""

from __future__ import annotations

import unicodedata
from collections.abc import Iterator
from functools import lru_cache
from pathlib import Path

from runner.protocol.model import Protocol, Texts

#: The bundled default font (DejaVu Sans 2.37; licence in runner/assets/LICENSE-DejaVu.txt).
DEFAULT_FONT = Path(__file__).resolve().parent.parent / "assets" / "DejaVuSans.ttf"
#: Characters the painter adds itself: the typed-count cursor, the bullet of list items, digits.
PAINTER_CHARACTERS = "_\u2022 0123456789"
#: Control characters a page file may hold (line ends and tabs are layout, not text).
LAYOUT_CONTROLS = frozenset("\n\r\t")
#: Where a protocol may name an example value for a placeholder, the value the check draws.
EXAMPLE_VALUES = {"key": "U", "points": "9", "expected": "12", "seconds": "15"}


def font_path(model: Protocol, protocol_path: Path) -> Path:
    """The font file the participant's text is drawn with: screen.font, or the bundled one."""
    if model.screen.font is None:
        return DEFAULT_FONT
    return (protocol_path.parent / model.screen.font).resolve()


def key_label(texts: Texts, key: str) -> str:
    """How a hint names a key: 'the space bar', 'the U key'."""
    if key == "space":
        return texts.key_space
    return texts.key_other.format(key=key.upper())


def page_hint(texts: Texts, key: str, *, last: bool = False) -> str:
    """The hint under an instruction page ('Press the space bar to continue.')."""
    template = texts.last_page_hint if last else texts.page_hint
    return template.format(key=key_label(texts, key))


def break_ready_hint(texts: Texts, key: str) -> str:
    """The hint when a break may end."""
    return texts.break_ready.format(key=key_label(texts, key))


def answer_hint(texts: Texts, unsure_key: str) -> str:
    """The hint while a count is typed: how to confirm, and the unsure key."""
    return f"{texts.answer_hint}   {texts.unsure_hint.format(key=unsure_key.upper())}"


def rating_hint(texts: Texts, points: int, how: str) -> str:
    """The rating hint, naming every way to answer that works for ``how`` (keys, mouse, both)."""
    if how == "mouse":
        return texts.rating_hint_mouse
    if how == "both":
        if points <= 9:
            return texts.rating_hint_mouse_keys.format(points=points)
        return texts.rating_hint_mouse_keys_ten
    if points <= 9:
        return texts.rating_hint_keys.format(points=points)
    return texts.rating_hint_keys_ten


def _built_in(texts: Texts) -> Iterator[tuple[tuple[str | int, ...], str]]:
    for name, value in texts.model_dump().items():
        yield ("texts", name), value.format(**EXAMPLE_VALUES)


def participant_strings(
    model: Protocol, pages: dict[int, str], column_values: dict[str, list[str]]
) -> list[tuple[tuple[str | int, ...], str]]:
    """Every string the participant can see, each with the protocol setting it comes from.

    ``pages`` are the page texts by sequence index (as loaded); ``column_values`` the trial-table
    values of the prompt and question columns, by column name.
    """
    out: list[tuple[tuple[str | int, ...], str]] = []
    out.append((("answer", "prompt"), model.answer.prompt))
    r = model.rating
    out.append((("rating", "question"), r.question))
    out.append((("rating", "low"), r.low))
    out.append((("rating", "high"), r.high))
    if r.mid is not None:
        out.append((("rating", "mid"), r.mid))
    if model.breaks is not None:
        out.append((("breaks", "text"), model.breaks.text))
    for i, text in sorted(pages.items()):
        out.append((("sequence", i, "page"), text))
    if model.answer.prompt_column:
        for v in column_values.get(model.answer.prompt_column, []):
            out.append((("answer", "prompt_column"), v))
    if r.question_column:
        for v in column_values.get(r.question_column, []):
            out.append((("rating", "question_column"), v))
    out.extend(_built_in(model.texts))
    out.append((("screen", "font"), PAINTER_CHARACTERS))
    return out


@lru_cache(maxsize=8)
def font_characters(path: Path) -> frozenset[int]:
    """The code points a TrueType/OpenType font file has glyphs for (its best cmap).

    Raises
    ------
    OSError, ValueError
        When the file cannot be read as a font (fontTools raises various errors; callers
        report them as an unreadable font).
    """
    from fontTools.ttLib import TTFont  # type: ignore[import-untyped]

    with TTFont(str(path), lazy=True) as font:
        cmap = font.getBestCmap()
        if cmap is None:
            raise ValueError("the font has no character map")
        return frozenset(cmap)


def _invisible(ch: str) -> bool:
    return unicodedata.category(ch) in ("Cf", "Mn", "Me", "Zs", "Zl", "Zp") or ch in LAYOUT_CONTROLS


def text_faults(text: str) -> list[str]:
    """What makes a text impossible to show: control characters, or nothing visible to draw."""
    faults: list[str] = []
    controls = sorted(
        {ch for ch in text if unicodedata.category(ch) == "Cc" and ch not in LAYOUT_CONTROLS}
    )
    if controls:
        names = ", ".join(f"U+{ord(ch):04X}" for ch in controls)
        faults.append(f"control character(s) {names} cannot be shown; remove them")
    visible = [ch for ch in text if not _invisible(ch) and unicodedata.category(ch) != "Cc"]
    if text and not visible:
        faults.append(
            "the text has no visible character (only spaces or zero-width characters); write"
            " the text, or leave the setting out"
        )
    return faults


def missing_characters(text: str, available: frozenset[int]) -> list[str]:
    """Characters of ``text`` the font has no glyph for (layout and zero-width ones aside)."""
    missing = {
        ch
        for ch in text
        if ord(ch) not in available
        and ch not in LAYOUT_CONTROLS
        and unicodedata.category(ch) not in ("Cf", "Cc", "Mn")
    }
    return sorted(missing)


def contrast_ratio(a: str, b: str) -> float:
    """WCAG 2.2 contrast ratio (L1 + 0.05) / (L2 + 0.05) of two '#rrggbb' colours, L1 the lighter."""
    from runner.protocol.luminance import relative_luminance

    la = float(relative_luminance(_rgb(a)))
    lb = float(relative_luminance(_rgb(b)))
    hi, lo = max(la, lb), min(la, lb)
    return (hi + 0.05) / (lo + 0.05)


def _rgb(colour: str) -> tuple[int, int, int]:
    c = colour.lstrip("#")
    if len(c) == 3:
        c = "".join(ch * 2 for ch in c)
    return int(c[0:2], 16), int(c[2:4], 16), int(c[4:6], 16)


def hex_colour(rgb: tuple[int, int, int]) -> str:
    """'#rrggbb' of an RGB triple."""
    return "#{:02x}{:02x}{:02x}".format(*rgb)


#: WCAG 2.2 success criterion 1.4.3: normal text needs at least this contrast ratio.
MIN_TEXT_CONTRAST = 4.5


def hint_colour(text: str, background: str) -> str:
    """The muted colour of hints: the text colour moved toward the background, keeping 4.5:1.

    Moves at most 45% of the way; stops where the contrast with the background would fall
    below :data:`MIN_TEXT_CONTRAST` (and stays the text colour when even that is below it).
    """
    t, b = _rgb(text), _rgb(background)
    best = text
    for step in range(1, 46):
        w = step / 100
        mixed = tuple(round(x * (1 - w) + y * w) for x, y in zip(t, b, strict=True))
        candidate = hex_colour(mixed)  # type: ignore[arg-type]
        if contrast_ratio(candidate, background) < MIN_TEXT_CONTRAST:
            break
        best = candidate
    return best


def heading_colour(text: str, accent: str, background: str) -> str:
    """Headings and good feedback use the accent colour when it is legible, else the text colour."""
    if contrast_ratio(accent, background) >= MIN_TEXT_CONTRAST:
        return accent
    return text
