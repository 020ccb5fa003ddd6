"""How each screen looks: pure drawing of a view record onto a pygame surface.

The look is deliberately plain: one background colour for every screen (so the pupil sees a
steady mean luminance), dark text in one typeface, one accent colour for what the participant
is acting on, and hints in a muted tone at the bottom edge.
"""

from __future__ import annotations

from dataclasses import dataclass

import pygame

from runner.session.views import (
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
)

FIXATION_ARM_FRACTION = 0.012  # half-length of a fixation arm, as a share of the screen height
FIXATION_THICKNESS_FRACTION = 0.003
PAGE_WIDTH_FRACTION = 0.58
HINT_MARGIN_FRACTION = 0.07
BOX_RADIUS = 10


def _rgb(colour: str) -> tuple[int, int, int]:
    c = colour.lstrip("#")
    if len(c) == 3:
        c = "".join(ch * 2 for ch in c)
    return int(c[0:2], 16), int(c[2:4], 16), int(c[4:6], 16)


def _mix(a: tuple[int, int, int], b: tuple[int, int, int], w: float) -> tuple[int, int, int]:
    return tuple(round(x * (1 - w) + y * w) for x, y in zip(a, b, strict=True))  # type: ignore[return-value]


@dataclass
class Style:
    """Colours and fonts of the participant's screens, taken from the protocol's screen section."""

    background: tuple[int, int, int]
    text: tuple[int, int, int]
    accent: tuple[int, int, int]
    font_px: int
    photodiode_corner: str | None = None
    photodiode_px: int = 48

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
    ) -> Style:
        return cls(
            _rgb(background), _rgb(text), _rgb(accent), font_px, photodiode_corner, photodiode_px
        )

    @property
    def muted(self) -> tuple[int, int, int]:
        return _mix(self.text, self.background, 0.45)

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
        fp = style.font_px
        self.body = pygame.font.Font(None, round(fp * 1.25))
        self.heading = pygame.font.Font(None, round(fp * 1.8))
        self.small = pygame.font.Font(None, round(fp * 0.95))
        self.big = pygame.font.Font(None, round(fp * 3.0))

    # -- helpers ----------------------------------------------------------------------------
    def _text(
        self, surf: pygame.Surface, font: pygame.font.Font, text: str, colour, center
    ) -> pygame.Rect:
        img = font.render(text, True, colour)
        rect = img.get_rect(center=center)
        surf.blit(img, rect)
        return rect

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
        s = self.style.photodiode_px
        w, h = self.size
        x = 0 if corner.endswith("left") else w - s
        y = 0 if corner.startswith("top") else h - s
        surf.fill((255, 255, 255) if on else (0, 0, 0), pygame.Rect(x, y, s, s))

    def _box(
        self, surf: pygame.Surface, rect: pygame.Rect, *, filled: bool, border: int = 3
    ) -> None:
        st = self.style
        pygame.draw.rect(surf, st.accent if filled else st.paper, rect, border_radius=BOX_RADIUS)
        pygame.draw.rect(surf, st.accent, rect, width=border, border_radius=BOX_RADIUS)

    # -- screens ----------------------------------------------------------------------------
    def draw(self, surf: pygame.Surface, view: View, *, photodiode: bool = False) -> None:
        surf.fill(self.style.background)
        method = getattr(self, "_draw_" + type(view).__name__)
        method(surf, view)
        self._photodiode(surf, photodiode)

    def _draw_BlankView(self, surf: pygame.Surface, view: BlankView) -> None:
        return None

    def _draw_FixationView(self, surf: pygame.Surface, view: FixationView) -> None:
        w, h = self.size
        arm = max(6, round(h * FIXATION_ARM_FRACTION))
        thick = max(2, round(h * FIXATION_THICKNESS_FRACTION))
        cx, cy = w // 2, h // 2
        surf.fill(self.style.text, pygame.Rect(cx - arm, cy - thick // 2, 2 * arm + 1, thick))
        surf.fill(self.style.text, pygame.Rect(cx - thick // 2, cy - arm, thick, 2 * arm + 1))

    def _draw_PageView(self, surf: pygame.Surface, view: PageView) -> None:
        w, h = self.size
        width = round(w * PAGE_WIDTH_FRACTION)
        blocks: list[tuple[pygame.font.Font, str, tuple[int, int, int]]] = []
        for raw in view.text.strip("\n").split("\n"):
            line = raw.rstrip()
            if line.startswith("#"):
                blocks.append((self.heading, line.lstrip("#").strip(), self.style.accent))
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
                surf.blit(font.render(text, True, colour), (x, y))
            y += lh
        self._hint(surf, view.hint)

    def _draw_StimulusView(self, surf: pygame.Surface, view: StimulusView) -> None:
        img = self.image_for(view.stimulus)
        rect = img.get_rect(center=self.stimulus_rect.center)
        surf.blit(img, rect)
        if view.typed is not None:
            # The answer box sits below the stimulus when there is room, else over its lower edge.
            bw, bh = round(self.style.font_px * 5), round(self.style.font_px * 2.4)
            below = self.size[1] - rect.bottom
            cy = rect.bottom + below // 2 if below > bh + 20 else rect.bottom - bh
            box = pygame.Rect(0, 0, bw, bh)
            box.center = (self.size[0] // 2, cy)
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

    def _draw_RatingView(self, surf: pygame.Surface, view: RatingView) -> None:
        w, h = self.size
        fp = self.style.font_px
        self._text(
            surf, self.body, view.question, self.style.text, (w // 2, h // 2 - round(fp * 3))
        )
        side = round(fp * 1.9)
        gap = round(fp * 0.6)
        total = view.points * side + (view.points - 1) * gap
        x0 = (w - total) // 2
        y0 = h // 2 - side // 2
        centers = []
        for i in range(view.points):
            rect = pygame.Rect(x0 + i * (side + gap), y0, side, side)
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
        colour = self.style.accent if view.good else self.style.text
        self._text(surf, self.heading, view.text, colour, (w // 2, h // 2))

    def _draw_BreakView(self, surf: pygame.Surface, view: BreakView) -> None:
        self._draw_PageView(surf, PageView(view.text, hint=""))
        w, h = self.size
        y = round(h * 0.78)
        if view.seconds_left > 0:
            self._text(
                surf,
                self.small,
                f"You can go on in {view.seconds_left} s.",
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
