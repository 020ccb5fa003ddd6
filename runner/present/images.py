"""Stimulus images: decoded, scaled to the stimulus size and converted for display ahead of time.

A least-recently-used cache bounded in bytes keeps memory flat however many stimuli a protocol
has. :meth:`ImageCache.prepare` hands the decoding to one background thread, so the engine can
ask for the next trials' images during the gap before them and carry on timing its screens; an
onset then finds its image ready (:meth:`ImageCache.get` counts and times any wait).

The work is split so that the background thread holds Python's interpreter lock as little as
possible: PNG decoding (pygame-ce) and resampling (Pillow's area-averaging filter, see
:func:`resample`) run with the lock released; the copies between pygame and Pillow and the final
conversion to the display's pixel format hold it, for about a millisecond per megapixel.
"""

from __future__ import annotations

import time
from collections import OrderedDict
from concurrent.futures import Future, ThreadPoolExecutor

import pygame
from PIL import Image

from runner.errors import InputFileError

# Enough for the trials decoded ahead plus a few recently shown (16 stimuli of 1000x1000 at 4
# bytes a pixel); a larger bound only raises peak memory, since stimuli are decoded ahead anyway.
DEFAULT_CACHE_BYTES = 64 * 1024 * 1024


def resample(surface: pygame.Surface, size: tuple[int, int]) -> pygame.Surface:
    """Scale an image to ``size`` without changing its mean luminance.

    pygame's smoothscale darkens flat areas when it shrinks an image (a flat grey of 140 comes
    out as 137), which would give the stimulus a visible frame and shift the luminance a pupil
    study controls. Pillow's area-averaging (box) filter keeps flat areas and the mean exact when
    shrinking; Lanczos is used when enlarging.
    """
    if surface.get_size() == tuple(size):
        return surface.convert_alpha() if pygame.display.get_surface() else surface.copy()
    w, h = surface.get_size()
    img = Image.frombytes("RGBA", (w, h), pygame.image.tobytes(surface, "RGBA"))
    shrinking = size[0] <= w and size[1] <= h
    img = img.resize(size, Image.Resampling.BOX if shrinking else Image.Resampling.LANCZOS)
    return pygame.image.frombytes(img.tobytes(), size, "RGBA")


def fit_within(w: int, h: int, box_w: int, box_h: int) -> tuple[int, int]:
    """Largest size with the aspect ratio of (w, h) that fits in (box_w, box_h)."""
    scale = min(box_w / w, box_h / h)
    return max(1, round(w * scale)), max(1, round(h * scale))


def surface_bytes(surf: pygame.Surface) -> int:
    """Memory held by a surface's pixels."""
    return surf.get_width() * surf.get_height() * surf.get_bytesize()


class ImageCache:
    """Decoded, scaled, display-ready stimulus surfaces, bounded by ``max_bytes``.

    Parameters
    ----------
    box
        The stimulus area (width, height) in pixels; images are scaled to fit it.
    max_bytes
        Upper bound of the pixel memory kept; least recently used images are dropped first.
    background
        Colour transparent parts are flattened onto, so blitting at onset is a plain copy.
    threaded
        Decode in a background thread (the default); False decodes inside :meth:`prepare`.
    """

    def __init__(
        self,
        box: tuple[int, int],
        *,
        max_bytes: int = DEFAULT_CACHE_BYTES,
        background=(0, 0, 0),
        threaded: bool = True,
    ):
        self.box = box
        self.max_bytes = max_bytes
        self.background = background
        self._items: OrderedDict[str, pygame.Surface] = OrderedDict()
        self._pending: dict[str, Future[pygame.Surface]] = {}
        self._bytes = 0
        self._pool = (
            ThreadPoolExecutor(max_workers=1, thread_name_prefix="stimulus-decode")
            if threaded
            else None
        )
        self.loads = 0
        self.peak_bytes = 0
        self.misses_at_onset = 0  # onsets whose image had not even been asked for
        self.waits_at_onset = 0  # onsets that had to wait for a decode still running
        self.wait_s_total = 0.0
        self.last_wait_s = 0.0

    @property
    def bytes_used(self) -> int:
        return self._bytes

    def __len__(self) -> int:
        return len(self._items)

    def _load(self, path: str) -> pygame.Surface:
        try:
            raw = pygame.image.load(path)
        except (pygame.error, FileNotFoundError, OSError) as exc:
            raise InputFileError(
                f"the stimulus {path} cannot be decoded as an image ({exc})."
            ) from None
        size = fit_within(raw.get_width(), raw.get_height(), *self.box)
        scaled = resample(raw, size)
        del raw
        display = pygame.display.get_surface()
        if display is not None:
            # Flatten transparency onto the background in the display's own pixel format.
            flat = pygame.Surface(size, 0, display)
            flat.fill(self.background)
            flat.blit(scaled, (0, 0))
            scaled = flat
        self.loads += 1
        return scaled

    def _store(self, path: str, surf: pygame.Surface) -> pygame.Surface:
        self._items[path] = surf
        self._bytes += surface_bytes(surf)
        while self._bytes > self.max_bytes and len(self._items) > 1:
            _, old = self._items.popitem(last=False)
            self._bytes -= surface_bytes(old)
        self.peak_bytes = max(self.peak_bytes, self._bytes)
        return surf

    def _harvest(self) -> None:
        # Finished decodes join the cache (and its byte count) as soon as they are seen, so
        # memory stays bounded; failed ones stay pending and raise at their onset.
        for path in [p for p, f in self._pending.items() if f.done() and f.exception() is None]:
            self._store(path, self._pending.pop(path).result())

    def prepare(self, path: str) -> None:
        """Start decoding ``path`` now (in the background) unless it is ready or on its way."""
        self._harvest()
        if path in self._items:
            self._items.move_to_end(path)
            return
        if path in self._pending:
            return
        if self._pool is None:
            self._store(path, self._load(path))
            return
        self._pending[path] = self._pool.submit(self._load, path)

    def get(self, path: str) -> pygame.Surface:
        """The surface for an onset, waiting for its decode if it is still running.

        Decoding errors (a damaged file) are raised here as :class:`InputFileError`.
        """
        t0 = time.perf_counter()
        self._harvest()
        surf = self._items.get(path)
        if surf is not None:
            self._items.move_to_end(path)
            self.last_wait_s = 0.0
            return surf
        future = self._pending.pop(path, None)
        if future is None:
            self.misses_at_onset += 1
            surf = self._load(path)
        else:
            if not future.done():
                self.waits_at_onset += 1
            surf = future.result()
        self.last_wait_s = time.perf_counter() - t0
        self.wait_s_total += self.last_wait_s
        return self._store(path, surf)

    def wait_ready(self, path: str) -> None:
        """Block until the decode of ``path`` (asked for with :meth:`prepare`) has finished."""
        future = self._pending.get(path)
        if future is not None:
            future.exception()  # waits; an error is raised later, at the onset
        self._harvest()

    def close(self) -> None:
        """Stop the background thread (pending decodes are dropped)."""
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None
        self._pending.clear()
