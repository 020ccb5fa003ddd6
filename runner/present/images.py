"""Stimulus images: decoded, scaled to the stimulus size and converted for display ahead of time.

A least-recently-used cache bounded in bytes keeps memory flat however many stimuli a protocol
has; the engine asks for the next trial's image during the gap before it, so no onset waits on
the disk.
"""

from __future__ import annotations

from collections import OrderedDict
from pathlib import Path

import pygame

from runner.errors import InputFileError

DEFAULT_CACHE_BYTES = 256 * 1024 * 1024


def fit_within(w: int, h: int, box_w: int, box_h: int) -> tuple[int, int]:
    """Largest size with the aspect ratio of (w, h) that fits in (box_w, box_h)."""
    scale = min(box_w / w, box_h / h)
    return max(1, round(w * scale)), max(1, round(h * scale))


class ImageCache:
    """Decoded, scaled, display-ready stimulus surfaces, bounded by ``max_bytes``."""

    def __init__(
        self, box: tuple[int, int], *, max_bytes: int = DEFAULT_CACHE_BYTES, background=(0, 0, 0)
    ):
        self.box = box
        self.max_bytes = max_bytes
        self.background = background
        self._items: OrderedDict[str, pygame.Surface] = OrderedDict()
        self._bytes = 0
        self.loads = 0
        self.misses_at_onset = 0

    @property
    def bytes_used(self) -> int:
        return self._bytes

    def _load(self, path: str) -> pygame.Surface:
        try:
            raw = pygame.image.load(path)
        except (pygame.error, FileNotFoundError, OSError) as exc:
            raise InputFileError(
                f"the stimulus {path} cannot be decoded as an image ({exc})."
            ) from None
        size = fit_within(raw.get_width(), raw.get_height(), *self.box)
        scaled = pygame.transform.smoothscale(
            raw.convert_alpha() if pygame.display.get_surface() else raw, size
        )
        if pygame.display.get_surface() is not None:
            # Flatten transparency onto the background once, so blitting at onset is a plain copy.
            flat = pygame.Surface(size).convert()
            flat.fill(self.background)
            flat.blit(scaled, (0, 0))
            scaled = flat
        self.loads += 1
        return scaled

    def prepare(self, path: str) -> pygame.Surface:
        """Return the display-ready surface for ``path``, decoding it now if needed."""
        surf = self._items.get(path)
        if surf is not None:
            self._items.move_to_end(path)
            return surf
        surf = self._load(path)
        cost = surf.get_width() * surf.get_height() * surf.get_bytesize()
        self._items[path] = surf
        self._bytes += cost
        while self._bytes > self.max_bytes and len(self._items) > 1:
            _, old = self._items.popitem(last=False)
            self._bytes -= old.get_width() * old.get_height() * old.get_bytesize()
        return surf

    def get(self, path: str) -> pygame.Surface:
        """The surface for an onset; counts a miss when it was not prepared in advance."""
        if path not in self._items:
            self.misses_at_onset += 1
        return self.prepare(path)

    @staticmethod
    def exists(path: str) -> bool:
        return Path(path).is_file()
