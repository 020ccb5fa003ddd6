"""The stimulus cache: decoded ahead in the background, scaled to fit, bounded in bytes."""

from __future__ import annotations

import time

import pygame
import pytest

from runner.errors import InputFileError
from runner.present.images import ImageCache, fit_within, surface_bytes

BOX = (200, 150)
BACKGROUND = (140, 140, 140)


@pytest.fixture(scope="module")
def display():
    pygame.display.init()
    surface = pygame.display.set_mode((640, 480))
    yield surface
    pygame.display.quit()


def _png(folder, name, size=(400, 300), colour=(10, 200, 30, 255)):
    surf = pygame.Surface(size, pygame.SRCALPHA)
    surf.fill(colour)
    path = folder / name
    pygame.image.save(surf, str(path))
    return str(path)


def _ready(cache, path, timeout=5.0):
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        fut = cache._pending.get(path)
        if fut is None or fut.done():
            return
        time.sleep(0.005)


@pytest.mark.parametrize(
    "size, box, expected",
    [
        ((400, 300), (200, 150), (200, 150)),
        ((2000, 2000), (1000, 800), (800, 800)),
        ((300, 600), (500, 500), (250, 500)),
        ((100, 50), (400, 400), (400, 200)),  # enlarged to fit
    ],
)
def test_fit_within_keeps_the_aspect_ratio(size, box, expected):
    """The scaled size is the largest that fits the box with the image's aspect ratio.

    Source: common practice (no published source): scale = min(box_w / w, box_h / h).
    """
    assert fit_within(*size, *box) == expected


def test_prefetched_image_is_ready_at_onset(display, tmp_path):
    """An image asked for ahead is decoded in the background: its onset neither waits nor misses."""
    path = _png(tmp_path, "a.png")
    cache = ImageCache(BOX, background=BACKGROUND)
    try:
        cache.prepare(path)
        _ready(cache, path)
        surf = cache.get(path)
        assert surf.get_size() == (200, 150)
        assert cache.waits_at_onset == 0 and cache.misses_at_onset == 0
        assert cache.loads == 1
        cache.prepare(path)  # already cached: no second decode
        cache.get(path)
        assert cache.loads == 1
    finally:
        cache.close()


def test_unprepared_image_counts_a_miss(display, tmp_path):
    """An onset whose image was never asked for is decoded on the spot and counted as a miss."""
    path = _png(tmp_path, "b.png")
    cache = ImageCache(BOX)
    try:
        cache.get(path)
        assert cache.misses_at_onset == 1
        assert cache.last_wait_s > 0
    finally:
        cache.close()


def test_memory_stays_within_the_byte_bound(display, tmp_path):
    """Forty distinct stimuli through a cache sized for three never hold more than the bound."""
    paths = [_png(tmp_path, f"s{i}.png", colour=(i * 6, 0, 0, 255)) for i in range(40)]
    cache = ImageCache(BOX, background=BACKGROUND)
    one = None
    try:
        for i, path in enumerate(paths):
            cache.prepare(path)
            if i + 1 < len(paths):
                cache.prepare(paths[i + 1])
            surf = cache.get(path)
            if one is None:
                one = surface_bytes(surf)
                cache.max_bytes = 3 * one
            assert cache.bytes_used <= cache.max_bytes
            assert len(cache) <= 3
        assert cache.peak_bytes <= 3 * one
        assert cache.loads == 40
    finally:
        cache.close()


def test_least_recently_used_image_goes_first(display, tmp_path):
    """When the bound is reached the image used longest ago is dropped, a recently used one kept."""
    a, b, c = (_png(tmp_path, f"{n}.png") for n in "abc")
    cache = ImageCache(BOX, threaded=False)
    cache.prepare(a)
    cache.max_bytes = 2 * cache.bytes_used
    cache.prepare(b)
    cache.get(a)  # a is now the most recent
    cache.prepare(c)  # over the bound: b goes
    assert set(cache._items) == {a, c}


def test_transparency_is_flattened_onto_the_background(display, tmp_path):
    """Transparent pixels show the screen background once converted for display."""
    path = _png(tmp_path, "t.png", colour=(255, 0, 0, 0))
    cache = ImageCache(BOX, background=BACKGROUND, threaded=False)
    surf = cache.get(path)
    assert tuple(surf.get_at((10, 10)))[:3] == BACKGROUND
    assert surf.get_alpha() is None


def test_damaged_stimulus_raises_at_onset(display, tmp_path):
    """A file that is not an image fails its onset with a plain InputFileError naming it."""
    bad = tmp_path / "bad.png"
    bad.write_bytes(b"not a png")
    cache = ImageCache(BOX)
    try:
        cache.prepare(str(bad))
        with pytest.raises(InputFileError, match="bad.png cannot be decoded"):
            cache.get(str(bad))
    finally:
        cache.close()


def test_downscaling_keeps_flat_colour_and_mean_luminance(tmp_path):
    """Shrinking a stimulus keeps a flat background colour exactly and the mean pixel value
    (pygame's smoothscale turned grey 140 into 137, a visible frame and a luminance shift).

    Source: common practice (no published source): area averaging preserves the mean of an image;
    numpy computes the reference mean.
    """
    import pygame

    from runner.present.images import resample

    pygame.display.init()
    pygame.display.set_mode((64, 64))
    src = pygame.Surface((1000, 1000))
    src.fill((140, 140, 140))
    pygame.draw.line(src, (20, 20, 20), (0, 500), (999, 500), 10)
    out = resample(src, (500, 500))
    assert tuple(out.get_at((5, 5)))[:3] == (140, 140, 140)
    before = pygame.surfarray.array3d(src).astype(float).mean()
    after = pygame.surfarray.array3d(out).astype(float).mean()
    assert abs(before - after) < 0.05
