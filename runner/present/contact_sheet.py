"""Contact sheets: a grid of small copies of a session's screens, one caption under each.

Replay builds one while it draws frames (from the display's RGB pixels) or afterwards from the PNG
files a timed replay saved. The drawing is pygame's, so it lives here with the rest of it.
"""

from __future__ import annotations

import math
from pathlib import Path

import pygame

from runner.contract.outputs import replace_file
from runner.errors import InputFileError

SHEET_COLUMNS = 10
SHEET_THUMB_W = 192
SHEET_LABEL_PX = 14
SHEET_PAD = 6
SHEET_BACKGROUND = (32, 32, 32)
SHEET_TEXT = (230, 230, 230)


class ContactSheet:
    """A grid of small copies of screens, with a caption under each, built as frames are drawn."""

    def __init__(
        self,
        frame_size: tuple[int, int],
        *,
        columns: int = SHEET_COLUMNS,
        thumb_width: int = SHEET_THUMB_W,
    ):
        pygame.font.init()
        w, h = frame_size
        self.size = (int(w), int(h))
        self.tw, self.th = thumb_width, max(1, round(h * thumb_width / w))
        self.columns = columns
        self.font = pygame.font.Font(None, SHEET_LABEL_PX + 4)
        self.cells: list[tuple[pygame.Surface, pygame.Surface]] = []

    def add(self, rgb: bytes, label: str) -> None:
        """Add a thumbnail of a frame (8-bit RGB rows, top to bottom, of the frame size)."""
        self._add_surface(pygame.image.frombuffer(rgb, self.size, "RGB"), label)

    def _add_surface(self, surface: pygame.Surface, label: str) -> None:
        thumb = pygame.transform.smoothscale(surface, (self.tw, self.th))
        self.cells.append((thumb, self.font.render(label, True, SHEET_TEXT)))

    def save(self, out: Path) -> Path:
        """Write the sheet to ``out`` (PNG) and return it."""
        if not self.cells:
            raise InputFileError("there are no frames to put on a contact sheet.")
        cell_w, cell_h = self.tw + SHEET_PAD, self.th + SHEET_LABEL_PX + 2 * SHEET_PAD
        cols = max(1, min(self.columns, len(self.cells)))
        rows = math.ceil(len(self.cells) / cols)
        sheet = pygame.Surface((cols * cell_w + SHEET_PAD, rows * cell_h + SHEET_PAD))
        sheet.fill(SHEET_BACKGROUND)
        for i, (thumb, text) in enumerate(self.cells):
            x = SHEET_PAD + (i % cols) * cell_w
            y = SHEET_PAD + (i // cols) * cell_h
            sheet.blit(thumb, (x, y))
            sheet.blit(text, (x, y + self.th + 2))
        out.parent.mkdir(parents=True, exist_ok=True)
        with replace_file(out, binary=True) as fh:  # never written through a link
            pygame.image.save(sheet, fh, out.name)
        return out


def write_contact_sheet(
    frames: list[Path],
    out: Path,
    *,
    labels: list[str] | None = None,
    columns: int = SHEET_COLUMNS,
    thumb_width: int = SHEET_THUMB_W,
) -> Path:
    """Write a grid of small copies of ``frames`` (PNG files) to ``out`` (PNG).

    Parameters
    ----------
    frames : list of Path
        The frame images, in order.
    out : Path
        The contact sheet to write.
    labels : list of str, optional
        A caption under each thumbnail (default: the file names).
    columns, thumb_width : int
        Grid columns and thumbnail width in pixels.

    Returns
    -------
    Path
        ``out``.
    """
    if not frames:
        raise InputFileError("there are no frames to put on a contact sheet.")
    pygame.font.init()
    first = pygame.image.load(str(frames[0]))
    sheet = ContactSheet(first.get_size(), columns=columns, thumb_width=thumb_width)
    captions = labels if labels is not None else [p.stem for p in frames]
    for i, path in enumerate(frames):
        img = first if i == 0 else pygame.image.load(str(path))
        sheet._add_surface(img, captions[i] if i < len(captions) else path.stem)
    return sheet.save(out)
