"""How each screen looks: pure drawing of a view record onto a pygame surface.

The look is deliberately plain: one background colour for every screen (so the pupil sees a
steady mean luminance), dark text in one typeface, one accent colour for what the participant
is acting on, and hints in a muted tone at the bottom edge.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pygame

from runner.errors import InputFileError
from runner.protocol.model import Texts
from runner.protocol.texts import DEFAULT_FONT, heading_colour, hex_colour, hint_colour
from runner.session.views import (
    PATCH_OFF,
    PATCH_ON,
    AnswerView,
    BlankView,
    BreakView,
    ConfirmView,
    FeedbackView,
    FixationView,
    PageView,
    PauseView,
    RatingView,
    StimulusView,
    View,
    answer_box_rect,
    answer_box_size,
    fixation_rects,
    hint_top,
    photodiode_rect,
)

PAGE_WIDTH_FRACTION = 0.58
HINT_MARGIN_FRACTION = 0.07
BOX_RADIUS = 10
TEXT_CACHE_ENTRIES = 512
#: pygame sizes a font by its em; this share of ``font_px`` keeps the sizes that pygame's own
#: default font had (it applies the same factor internally), so layouts did not move.
FONT_SIZE_FACTOR = 0.6875


def page_lines(text: str) -> list[str]:
    """Logical lines of a simple Markdown page: headings, bullets, paragraphs and blank lines.

    As in Markdown, the lines of one paragraph (or one bullet, with indented continuation lines)
    are joined with spaces, so line breaks in the file do not show on the screen; a blank line
    separates paragraphs.
    """
    out: list[str] = []
    for raw in text.strip("\n").split("\n"):
        line = raw.rstrip()
        stripped = line.strip()
        if not stripped:
            out.append("")
        elif stripped.startswith("#") or stripped.startswith(("- ", "* ")):
            out.append(stripped)
        elif out and out[-1] and not out[-1].startswith("#"):
            out[-1] = f"{out[-1]} {stripped}"
        else:
            out.append(stripped)
    return out


def _rgb(colour: str) -> tuple[int, int, int]:
    c = colour.lstrip("#")
    if len(c) == 3:
        c = "".join(ch * 2 for ch in c)
    return int(c[0:2], 16), int(c[2:4], 16), int(c[4:6], 16)


def _mix(a: tuple[int, int, int], b: tuple[int, int, int], w: float) -> tuple[int, int, int]:
    return tuple(round(x * (1 - w) + y * w) for x, y in zip(a, b, strict=True))  # type: ignore[return-value]  # 3 in, 3 out


@dataclass
class Style:
    """Colours and fonts of the participant's screens, taken from the protocol's screen section."""

    background: tuple[int, int, int]
    text: tuple[int, int, int]
    accent: tuple[int, int, int]
    font_px: int
    photodiode_corner: str | None = None
    photodiode_px: int = 48
    font: Path = DEFAULT_FONT
    texts: Texts = Texts()

    @classmethod
    def from_colours(
        cls,
        background: str,
        text: str,
        accent: str,
        font_px: int,
        *,
        photodiode_corner: str | None = None,
        photodiode_px: int = 48,
        font: Path | None = None,
        texts: Texts | None = None,
    ) -> Style:
        return cls(
            _rgb(background),
            _rgb(text),
            _rgb(accent),
            font_px,
            photodiode_corner,
            photodiode_px,
            font if font is not None else DEFAULT_FONT,
            texts if texts is not None else Texts(),
        )

    @property
    def muted(self) -> tuple[int, int, int]:
        """Hints: the text colour moved toward the background while keeping 4.5:1 contrast."""
        return _rgb(hint_colour(hex_colour(self.text), hex_colour(self.background)))

    @property
    def emphasis(self) -> tuple[int, int, int]:
        """Headings and good feedback: the accent colour when legible (4.5:1), else the text's."""
        return _rgb(
            heading_colour(
                hex_colour(self.text), hex_colour(self.accent), hex_colour(self.background)
            )
        )

    @property
    def paper(self) -> tuple[int, int, int]:
        """The light fill of answer boxes: a lighter shade of the background."""
        return _mix(self.background, (255, 255, 255), 0.55)


class Painter:
    """Draws views. Fonts are created once; the stimulus image comes from a callable cache."""

    def __init__(self, style: Style, size: tuple[int, int], stimulus_rect: pygame.Rect, image_for):
        self.style = style
        self.size = size
        self.stimulus_rect = stimulus_rect
        self.image_for = image_for
        pygame.font.init()
        fp = style.font_px * FONT_SIZE_FACTOR
        try:
            self.body = pygame.font.Font(style.font, round(fp * 1.25))
            self.heading = pygame.font.Font(style.font, round(fp * 1.8))
            self.small = pygame.font.Font(style.font, round(fp * 0.95))
            self.big = pygame.font.Font(style.font, round(fp * 3.0))
            self.body.render("A", True, style.text)  # pygame opens any file; drawing tells
        except (OSError, pygame.error) as exc:
            raise InputFileError(f"{style.font}: cannot be used as a font ({exc}).") from None
        self._text_cache: dict[tuple, pygame.Surface] = {}
        self._box_cache: dict[tuple, pygame.Surface] = {}
        self._last: tuple[View, bool] | None = None

    # -- helpers ----------------------------------------------------------------------------
    def _text(
        self, surf: pygame.Surface, font: pygame.font.Font, text: str, colour, center
    ) -> pygame.Rect:
        img = self._render(font, text, colour)
        rect = img.get_rect(center=center)
        surf.blit(img, rect)
        return rect

    def _render(self, font: pygame.font.Font, text: str, colour) -> pygame.Surface:
        """Rendered text, cached: the same hint or digits need not be rasterised every frame."""
        key = (id(font), text, tuple(colour))
        img = self._text_cache.get(key)
        if img is None:
            if len(self._text_cache) >= TEXT_CACHE_ENTRIES:
                self._text_cache.clear()
            try:
                img = font.render(text, True, colour)
            except (pygame.error, ValueError):
                # Zero-width or NUL text (which `check` refuses): draw nothing, never crash.
                img = pygame.Surface((0, font.get_linesize()), pygame.SRCALPHA)
            self._text_cache[key] = img
        return img

    def _wrap(self, font: pygame.font.Font, text: str, width: int) -> list[str]:
        lines: list[str] = []
        for para in text.split("\n"):
            words = para.split()
            if not words:
                lines.append("")
                continue
            line = words[0]
            for w in words[1:]:
                trial = f"{line} {w}"
                if font.size(trial)[0] <= width:
                    line = trial
                else:
                    lines.append(line)
                    line = w
            lines.append(line)
        return lines

    def _hint(self, surf: pygame.Surface, hint: str) -> None:
        if hint:
            y = round(self.size[1] * (1 - HINT_MARGIN_FRACTION))
            self._text(surf, self.small, hint, self.style.muted, (self.size[0] // 2, y))

    def _photodiode(self, surf: pygame.Surface, on: bool) -> None:
        corner = self.style.photodiode_corner
        if not corner:
            return
        rect = photodiode_rect(self.size, corner, self.style.photodiode_px)
        surf.fill(_rgb(PATCH_ON if on else PATCH_OFF), pygame.Rect(rect))

    def _box(
        self, surf: pygame.Surface, rect: pygame.Rect, *, filled: bool, border: int = 3
    ) -> None:
        key = (rect.width, rect.height, filled, border)
        img = self._box_cache.get(key)
        if img is None:
            # Drawn once per size on a transparent surface, then blitted: rounded rectangles
            # are slow to rasterise and the answer box is redrawn at every typed digit.
            st = self.style
            img = pygame.Surface(rect.size, pygame.SRCALPHA)
            local = pygame.Rect(0, 0, rect.width, rect.height)
            pygame.draw.rect(
                img, st.accent if filled else st.paper, local, border_radius=BOX_RADIUS
            )
            pygame.draw.rect(img, st.accent, local, width=border, border_radius=BOX_RADIUS)
            self._box_cache[key] = img
        surf.blit(img, rect)

    # -- screens ----------------------------------------------------------------------------
    def draw(self, surf: pygame.Surface, view: View, *, photodiode: bool = False) -> None:
        last, self._last = self._last, (view, photodiode)
        if (
            isinstance(view, StimulusView)
            and last is not None
            and isinstance(last[0], StimulusView)
            and last[1] == photodiode
            and last[0].typed is not None
            and view.typed is not None
            and (last[0].stimulus, last[0].prompt, last[0].hint)
            == (view.stimulus, view.prompt, view.hint)
        ):
            # Only the typed count changed: redraw just the answer box (same pixels as a full draw).
            self._redraw_answer_box(surf, view)
            return
        surf.fill(self.style.background)
        method = getattr(self, "_draw_" + type(view).__name__)
        method(surf, view)
        self._photodiode(surf, photodiode)

    def forget(self) -> None:
        """Make the next draw a full one (after something else drew on the surface)."""
        self._last = None

    def _answer_box(self, image_rect: pygame.Rect) -> pygame.Rect:
        # Outside the stimulus: below it when there is room above the hint line, else beside
        # it (runner.session.views.answer_box_rect, the rule `check` applies too). Only when
        # it fits nowhere (a protocol `check` refuses) does it sit over the stimulus's lower edge.
        bw, bh = answer_box_size(self.style.font_px)
        top = hint_top(self.size, self.style.font_px, self.small.get_linesize())
        image = (image_rect.x, image_rect.y, image_rect.width, image_rect.height)
        placed = answer_box_rect(self.size, image, (bw, bh), top)
        if placed is not None:
            return pygame.Rect(placed)
        box = pygame.Rect(0, 0, bw, bh)
        box.center = (self.size[0] // 2, min(image_rect.bottom, top) - bh // 2)
        return box

    def _redraw_answer_box(self, surf: pygame.Surface, view: StimulusView) -> None:
        img = self.image_for(view.stimulus)
        rect = img.get_rect(center=self.stimulus_rect.center)
        box = self._answer_box(rect)
        surf.fill(self.style.background, box)
        overlap = box.clip(rect)
        if overlap.width and overlap.height:
            surf.blit(img, overlap, overlap.move(-rect.left, -rect.top))
        self._box(surf, box, filled=False)
        assert view.typed is not None  # called only while a count is typed over the stimulus
        self._text(surf, self.body, view.typed + "_", self.style.text, box.center)
        # Whatever else a full draw puts over the box area (the hint on small screens) goes
        # back on, clipped to the box, so both ways of drawing give the same pixels.
        surf.set_clip(box)
        self._hint(surf, view.hint)
        self._photodiode(surf, self._last[1] if self._last else False)
        surf.set_clip(None)

    def _draw_BlankView(self, surf: pygame.Surface, view: BlankView) -> None:
        return None

    def _draw_FixationView(self, surf: pygame.Surface, view: FixationView) -> None:
        for rect in fixation_rects(self.size):
            surf.fill(self.style.text, pygame.Rect(rect))

    def _draw_PageView(self, surf: pygame.Surface, view: PageView) -> None:
        w, h = self.size
        width = round(w * PAGE_WIDTH_FRACTION)
        blocks: list[tuple[pygame.font.Font, str, tuple[int, int, int]]] = []
        for line in page_lines(view.text):
            if line.startswith("#"):
                blocks.append((self.heading, line.lstrip("#").strip(), self.style.emphasis))
            elif line.startswith(("- ", "* ")):
                for k, part in enumerate(self._wrap(self.body, line[2:], width - 40)):
                    blocks.append(
                        (self.body, ("\u2022 " if k == 0 else "   ") + part, self.style.text)
                    )
            else:
                for part in self._wrap(self.body, line, width):
                    blocks.append((self.body, part, self.style.text))
        heights = [f.get_linesize() for f, _, _ in blocks]
        y = max(40, (h - sum(heights)) // 2)
        x = (w - width) // 2
        for (font, text, colour), lh in zip(blocks, heights, strict=True):
            if text:
                surf.blit(self._render(font, text, colour), (x, y))
            y += lh
        self._hint(surf, view.hint)

    def _draw_StimulusView(self, surf: pygame.Surface, view: StimulusView) -> None:
        img = self.image_for(view.stimulus)
        rect = img.get_rect(center=self.stimulus_rect.center)
        surf.blit(img, rect)
        if view.typed is not None:
            box = self._answer_box(rect)
            self._box(surf, box, filled=False)
            self._text(surf, self.body, view.typed + "_", self.style.text, box.center)
        self._hint(surf, view.hint)

    def _draw_AnswerView(self, surf: pygame.Surface, view: AnswerView) -> None:
        w, h = self.size
        fp = self.style.font_px
        self._text(
            surf, self.body, view.prompt, self.style.text, (w // 2, h // 2 - round(fp * 2.6))
        )
        box = pygame.Rect(0, 0, round(fp * 6), round(fp * 3.2))
        box.center = (w // 2, h // 2 + fp // 2)
        self._box(surf, box, filled=False)
        self._text(surf, self.big, view.typed if view.typed else "_", self.style.text, box.center)
        self._hint(surf, view.hint)

    def rating_boxes(self, points: int) -> list[pygame.Rect]:
        """Where the boxes of a rating scale are drawn (also used to hit-test mouse clicks)."""
        w, h = self.size
        fp = self.style.font_px
        side = round(fp * 1.9)
        gap = round(fp * 0.6)
        total = points * side + (points - 1) * gap
        x0 = (w - total) // 2
        y0 = h // 2 - side // 2
        return [pygame.Rect(x0 + i * (side + gap), y0, side, side) for i in range(points)]

    def _draw_RatingView(self, surf: pygame.Surface, view: RatingView) -> None:
        w, h = self.size
        fp = self.style.font_px
        self._text(
            surf, self.body, view.question, self.style.text, (w // 2, h // 2 - round(fp * 3))
        )
        boxes = self.rating_boxes(view.points)
        side, y0 = boxes[0].height, boxes[0].top
        centers = []
        for i, rect in enumerate(boxes):
            chosen = view.selected == i + 1
            self._box(surf, rect, filled=chosen)
            colour = self.style.paper if chosen else self.style.text
            self._text(surf, self.body, str(i + 1), colour, rect.center)
            centers.append(rect.center)
        label_y = y0 + side + round(fp * 1.0)
        self._text(surf, self.small, view.low, self.style.text, (centers[0][0], label_y))
        self._text(surf, self.small, view.high, self.style.text, (centers[-1][0], label_y))
        if view.mid and view.points % 2 == 1:
            self._text(
                surf, self.small, view.mid, self.style.text, (centers[view.points // 2][0], label_y)
            )
        self._hint(surf, view.hint)

    def _draw_FeedbackView(self, surf: pygame.Surface, view: FeedbackView) -> None:
        w, h = self.size
        colour = self.style.emphasis if view.good else self.style.text
        self._text(surf, self.heading, view.text, colour, (w // 2, h // 2))

    def _draw_BreakView(self, surf: pygame.Surface, view: BreakView) -> None:
        self._draw_PageView(surf, PageView(view.text, hint=""))
        w, h = self.size
        y = round(h * 0.78)
        if view.seconds_left > 0:
            self._text(
                surf,
                self.small,
                self.style.texts.break_countdown.format(seconds=view.seconds_left),
                self.style.muted,
                (w // 2, y),
            )
        self._hint(surf, view.hint)

    def _draw_ConfirmView(self, surf: pygame.Surface, view: ConfirmView) -> None:
        w, h = self.size
        fp = self.style.font_px
        panel = pygame.Rect(0, 0, round(w * 0.5), round(fp * 6))
        panel.center = (w // 2, h // 2)
        self._box(surf, panel, filled=False)
        self._text(surf, self.body, view.text, self.style.text, (w // 2, h // 2 - fp))
        self._text(surf, self.small, view.hint, self.style.muted, (w // 2, h // 2 + fp))

    def _draw_PauseView(self, surf: pygame.Surface, view: PauseView) -> None:
        self._draw_PageView(surf, PageView(view.text, hint=view.hint))
