"""Tests for relative luminance of colours, images and screens."""

from __future__ import annotations

import numpy as np
import pytest
from matplotlib.colors import to_rgb
from PIL import Image

from runner.errors import InputFileError
from runner.protocol.luminance import (
    LuminanceCache,
    image_mean_luminance,
    mean_luminance_of_screen,
    parse_colour,
    relative_luminance,
    srgb_to_linear,
)


def _wcag_by_hand(c8: float) -> float:
    """The WCAG 2.2 linearisation written out once more, independently of the module."""
    c = c8 / 255
    return c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4


@pytest.mark.parametrize(
    ("colour", "expected"),
    [
        ("#ffffff", 1.0),
        ("#000000", 0.0),
        ("#ff0000", 0.2126),
        ("#777777", 0.184475),
        ((0, 255, 0), 0.7152),
        ("#00f", 0.0722),
    ],
)
def test_wcag_check_values(colour: object, expected: float) -> None:
    """White, black, primaries and #777777 have the published relative luminance.

    Source: WCAG 2.2, definition of relative luminance (weights 0.2126, 0.7152, 0.0722).
    """
    assert relative_luminance(colour) == pytest.approx(expected, abs=5e-7)


def test_srgb_to_linear_is_vectorised_and_follows_both_branches() -> None:
    """Arrays are linearised element-wise, using the linear branch up to 0.04045.

    Source: WCAG 2.2, definition of relative luminance (threshold 0.04045).
    """
    values = np.arange(256)
    got = srgb_to_linear(values)
    assert isinstance(got, np.ndarray) and got.shape == (256,)
    assert got == pytest.approx([_wcag_by_hand(v) for v in values], rel=1e-12)
    assert srgb_to_linear(10) == pytest.approx(10 / 255 / 12.92)
    assert srgb_to_linear(11) == pytest.approx(((11 / 255 + 0.055) / 1.055) ** 2.4)
    assert isinstance(srgb_to_linear(128), float)


def test_relative_luminance_of_array_matches_scalars() -> None:
    """An (h, w, 3) array gives the per-pixel luminance of each colour.

    Source: WCAG 2.2 definition of relative luminance, applied per pixel with plain Python floats.
    """
    rng = np.random.default_rng(3)
    pixels = rng.integers(0, 256, size=(4, 5, 3))
    got = relative_luminance(pixels)
    assert got.shape == (4, 5)
    assert got[2, 3] == pytest.approx(relative_luminance(tuple(int(v) for v in pixels[2, 3])))

    def wcag(c8: int) -> float:
        c = c8 / 255
        return c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4

    for y, x in ((0, 0), (3, 4), (1, 2)):
        r, g, b = (int(v) for v in pixels[y, x])
        assert got[y, x] == pytest.approx(0.2126 * wcag(r) + 0.7152 * wcag(g) + 0.0722 * wcag(b))


@pytest.mark.parametrize("text", ["#808080", "#abc", "#A0b1C2", " #123456 "])
def test_parse_colour_agrees_with_matplotlib(text: str) -> None:
    """Hex colours parse to the same channels as matplotlib.colors.to_rgb.

    Source: matplotlib.colors.to_rgb as the reference parser.
    """
    expected = tuple(round(v * 255) for v in to_rgb(text.strip()))
    assert parse_colour(text) == expected


@pytest.mark.parametrize(
    "bad",
    ["808080", "#12345", "#ggg", "grey", (0, 0), (0, 0, 256), (0.5, 0, 0), (True, 0, 0), 7, None],
)
def test_parse_colour_rejects(bad: object) -> None:
    """Anything but #rrggbb, #rgb or three integers 0-255 raises a ValueError that shows the form."""
    with pytest.raises(ValueError, match="#rrggbb"):
        parse_colour(bad)  # type: ignore[arg-type]


@pytest.mark.parametrize("bad", [-1, 256, float("nan")])
def test_srgb_to_linear_rejects_out_of_range(bad: float) -> None:
    """Channel values outside 0-255 are refused."""
    with pytest.raises(ValueError, match="between 0 and 255"):
        srgb_to_linear(bad)


def _lum_by_hand(rgb: tuple[float, float, float]) -> float:
    r, g, b = (_wcag_by_hand(v) for v in rgb)
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def test_image_composited_on_background(tmp_path) -> None:
    """A 2x2 RGBA image over grey has the hand-computed mean of blended pixel luminances.

    Source: WCAG 2.2 relative luminance, with 8-bit alpha blending computed by hand.
    """
    pixels = np.array(
        [[[255, 255, 255, 255], [0, 0, 0, 255]], [[255, 0, 0, 0], [255, 255, 255, 128]]],
        dtype=np.uint8,
    )
    path = tmp_path / "diagram.png"
    Image.fromarray(pixels, "RGBA").save(path)
    grey = 128
    a = 128 / 255
    blended = a * 255 + (1 - a) * grey
    expected = (1.0 + 0.0 + _lum_by_hand((grey,) * 3) + _lum_by_hand((blended,) * 3)) / 4
    assert image_mean_luminance(path, background="#808080") == pytest.approx(expected, rel=1e-12)
    # Over black the transparent pixel is black and the half-white pixel is 128.
    on_black = (1.0 + _lum_by_hand((a * 255,) * 3)) / 4
    assert image_mean_luminance(path, background=(0, 0, 0)) == pytest.approx(on_black, rel=1e-12)


@pytest.mark.parametrize("listed_colours", [1 << 16, 1])
def test_opaque_rgb_image_matches_per_pixel_mean(tmp_path, monkeypatch, listed_colours) -> None:
    """For a random opaque RGB image the mean equals the per-pixel luminance average.

    Source: WCAG 2.2 relative luminance applied pixel by pixel with numpy as the reference.
    """
    import runner.protocol.luminance as module

    monkeypatch.setattr(module, "MAX_LISTED_COLOURS", listed_colours)
    rng = np.random.default_rng(11)
    pixels = rng.integers(0, 256, size=(37, 53, 3), dtype=np.uint8)
    path = tmp_path / "noise.png"
    Image.fromarray(pixels, "RGB").save(path)
    lin = np.vectorize(_wcag_by_hand)(pixels.astype(float))
    expected = float((lin @ np.array([0.2126, 0.7152, 0.0722])).mean())
    assert image_mean_luminance(path, background="#000") == pytest.approx(expected, rel=1e-12)


def test_sixteen_bit_png_is_read(tmp_path) -> None:
    """A 16-bit grey PNG (read through matplotlib) gives the luminance of its grey level.

    Source: WCAG 2.2 relative luminance; 16-bit value 32896 is 128/255 of full scale.
    """
    path = tmp_path / "deep.png"
    Image.fromarray(np.full((4, 6), 32896, dtype=np.uint16)).save(path)
    with Image.open(path) as check:
        assert check.mode.startswith("I")
    got = image_mean_luminance(path, background="#fff")
    assert got == pytest.approx(_lum_by_hand((128, 128, 128)), rel=1e-6)


def test_cache_decodes_each_content_once(tmp_path) -> None:
    """Same content under two names and two backgrounds is decoded once; new content again."""
    pixels = np.zeros((8, 8, 4), dtype=np.uint8)
    pixels[..., 3] = 100
    first, second = tmp_path / "a.png", tmp_path / "b.png"
    Image.fromarray(pixels, "RGBA").save(first)
    second.write_bytes(first.read_bytes())
    cache = LuminanceCache()
    on_grey = cache.mean_luminance(first, "#808080")
    assert cache.mean_luminance(second, "#808080") == on_grey
    on_white = cache.mean_luminance(second, "#ffffff")
    assert on_white > on_grey
    assert cache.decoded == 1 and len(cache) == 1
    pixels[..., 3] = 255
    Image.fromarray(pixels, "RGBA").save(tmp_path / "c.png")
    assert cache.mean_luminance(tmp_path / "c.png", "#ffffff") == 0.0
    assert cache.decoded == 2


def test_missing_and_broken_images(tmp_path) -> None:
    """A missing or undecodable image raises InputFileError naming the file."""
    with pytest.raises(InputFileError, match="does not exist"):
        image_mean_luminance(tmp_path / "nope.png", background="#000")
    broken = tmp_path / "broken.png"
    broken.write_bytes(b"\x89PNG not really")
    with pytest.raises(InputFileError, match="broken.png"):
        image_mean_luminance(broken, background="#000")


def _raster_mean(size, background, layers) -> float:
    """Reference: paint a full pixel array and average the per-pixel luminance."""
    w, h = size
    screen = np.empty((h, w, 3), dtype=np.uint8)
    screen[:] = parse_colour(background)
    for (x, y, rw, rh), fill in layers:
        x0, y0, x1, y1 = max(0, x), max(0, y), min(w, x + rw), min(h, y + rh)
        if x1 > x0 and y1 > y0:
            screen[y0:y1, x0:x1] = fill if isinstance(fill, np.ndarray) else parse_colour(fill)
    lin = srgb_to_linear(screen)
    return float((lin @ np.array([0.2126, 0.7152, 0.0722])).mean())


def test_screen_mean_matches_raster_reference(tmp_path) -> None:
    """Image plus overlapping and off-screen patches equal a painted pixel array's mean.

    Source: brute-force rasterisation with numpy as the reference for the area computation.
    """
    rng = np.random.default_rng(5)
    picture = rng.integers(0, 256, size=(30, 40, 3), dtype=np.uint8)
    path = tmp_path / "stim.png"
    Image.fromarray(picture, "RGB").save(path)
    size = (160, 90)
    image_rect = (60, 20, 40, 30)
    patches = [
        ((0, 0, 12, 12), "#ffffff"),  # photodiode corner
        ((75, 60, 10, 2), "#000000"),  # fixation bar, below the image
        ((150, 80, 30, 30), "#ff0000"),  # partly off-screen
        ((-5, 50, 20, 20), "#00ff00"),
        ((5, 55, 20, 20), "#0000ff"),  # overlaps the previous one
    ]
    got = mean_luminance_of_screen(size, "#808080", patches=patches, image=(path, image_rect))
    expected = _raster_mean(size, "#808080", [(image_rect, picture), *patches])
    assert got == pytest.approx(expected, rel=1e-12)


def test_screen_of_background_only_and_half_white() -> None:
    """A bare screen has the background luminance; a white half adds (1 - L_bg) / 2.

    Source: WCAG 2.2 relative luminance of #808080 (0.21586) and area weighting.
    """
    grey = relative_luminance("#808080")
    assert mean_luminance_of_screen((1920, 1080), "#808080") == pytest.approx(grey)
    half = mean_luminance_of_screen((100, 50), "#808080", patches=[((0, 0, 50, 50), "#fff")])
    assert half == pytest.approx((grey + 1) / 2)
    assert grey == pytest.approx(0.2158605, abs=1e-7)


@pytest.mark.parametrize(
    ("size", "patches", "fragment"),
    [
        ((0, 10), [], "screen size"),
        ((10, 10), [((0, 0, -1, 5), "#fff")], "0 or more"),
        ((10, 10), [((0, 0, 1, 1), "white")], "#rrggbb"),
    ],
)
def test_screen_rejects_bad_input(size, patches, fragment: str) -> None:
    """Bad sizes, rectangles or colours raise ValueError."""
    with pytest.raises(ValueError, match=fragment):
        mean_luminance_of_screen(size, "#000", patches=patches)


@pytest.mark.parametrize("listed_colours", [1 << 16, 1])
def test_semi_transparent_random_image_both_decoders(tmp_path, monkeypatch, listed_colours) -> None:
    """Colour-list and histogram decoding both equal per-pixel blending for a random RGBA image.

    Source: WCAG 2.2 relative luminance with 8-bit alpha blending, pixel by pixel in numpy.
    """
    import runner.protocol.luminance as module

    monkeypatch.setattr(module, "MAX_LISTED_COLOURS", listed_colours)
    rng = np.random.default_rng(7)
    pixels = rng.integers(0, 256, size=(40, 30, 4), dtype=np.uint8)
    pixels[:10, :, 3] = 255
    pixels[10:20, :, 3] = 0
    path = tmp_path / "mixed.png"
    Image.fromarray(pixels, "RGBA").save(path)
    bg = np.array([128, 64, 200], dtype=float)
    a = pixels[..., 3:4].astype(float) / 255
    blended = a * pixels[..., :3] + (1 - a) * bg
    lin = np.vectorize(_wcag_by_hand)(blended)
    expected = float((lin @ np.array([0.2126, 0.7152, 0.0722])).mean())
    got = image_mean_luminance(path, background=(128, 64, 200))
    assert got == pytest.approx(expected, rel=1e-12)


def test_empty_cache_passed_in_is_used(tmp_path) -> None:
    """A fresh (empty) cache handed to the functions is filled, not replaced."""
    path = tmp_path / "one.png"
    Image.fromarray(np.zeros((3, 3, 3), dtype=np.uint8), "RGB").save(path)
    cache = LuminanceCache()
    image_mean_luminance(path, background="#000", cache=cache)
    mean_luminance_of_screen((10, 10), "#000", image=(path, (0, 0, 3, 3)), cache=cache)
    assert cache.decoded == 1 and len(cache) == 1


def test_palette_image_with_transparent_index(tmp_path) -> None:
    """A palette PNG whose transparent index shows the background is measured correctly.

    Source: WCAG 2.2 relative luminance; half white, half background by construction.
    """
    img = Image.new("P", (4, 2), 0)
    img.putpalette([0, 0, 0, 255, 255, 255] + [0] * 762)
    img.paste(1, (0, 0, 2, 2))
    path = tmp_path / "palette.png"
    img.save(path, transparency=0)
    expected = (1.0 + relative_luminance("#808080")) / 2
    assert image_mean_luminance(path, background="#808080") == pytest.approx(expected)
