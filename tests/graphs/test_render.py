"""Tests of rendering: luminance, ink, palette images, repeatable bytes, target marking."""

from __future__ import annotations

import numpy as np
import pytest
from PIL import Image

from runner.graphs.render import (
    Style,
    figure,
    hex_to_rgb,
    ink_coverage,
    mean_luminance,
    palette,
    rasterise,
    relative_luminance,
    to_palette,
    write_png,
    write_svg,
)

SIZE = (400, 300)


@pytest.mark.parametrize(
    ("colour", "expected"),
    [("#ffffff", 1.0), ("#000000", 0.0), ("#ff0000", 0.2126), ("#777777", 0.184475)],
)
def test_relative_luminance_check_values(colour: str, expected: float) -> None:
    """Relative luminance of sRGB colours matches the WCAG 2.2 check values.

    Source: WCAG 2.2, definition "relative luminance" (white 1, black 0, red 0.2126,
    #777777 0.184475).
    """
    assert relative_luminance(np.array(hex_to_rgb(colour))) == pytest.approx(expected, abs=1e-6)


def test_mean_luminance_averages_pixels() -> None:
    """Mean luminance of a half-black, half-white image is 0.5.

    Source: WCAG 2.2 relative luminance (black 0, white 1), averaged over pixels.
    """
    pixels = np.zeros((10, 10, 3), dtype=np.uint8)
    pixels[:, 5:] = 255
    assert mean_luminance(pixels) == pytest.approx(0.5)


def test_ink_coverage_counts_visible_pixels() -> None:
    """Ink coverage is the share of pixels visibly different from the background.

    Source: common practice (no published source).
    """
    pixels = np.full((10, 10, 3), 140, dtype=np.uint8)
    pixels[0, :] = 20
    pixels[1, :] = 145  # a faint fringe below the threshold is not ink
    assert ink_coverage(pixels, "#8c8c8c") == pytest.approx(0.1)


def _drawing(style: Style):
    pos = np.array([[50.0, 50.0], [350.0, 60.0], [200.0, 250.0], [100.0, 200.0]])
    links = np.array([[0, 1], [1, 2], [2, 3], [0, 2]])
    return figure(pos, links, (0, 2), style, SIZE)


def test_image_has_fixed_size_and_both_target_colours(tmp_path) -> None:
    """The PNG has the canvas size and shows both target colours, kept exact by the palette.

    Source: common practice (no published source).
    """
    style = Style()
    fig = _drawing(style)
    image = to_palette(rasterise(fig), palette(style))
    write_png(image, tmp_path / "a.png")
    with Image.open(tmp_path / "a.png") as im:
        assert im.size == SIZE
        pixels = np.array(im.convert("RGB"))
    for colour in style.target_colors:
        assert np.all(pixels == hex_to_rgb(colour), axis=2).sum() > 100
    # The two target markers are the same area.
    counts = [np.all(pixels == hex_to_rgb(c), axis=2).sum() for c in style.target_colors]
    assert abs(counts[0] - counts[1]) / max(counts) < 0.1


def test_same_drawing_same_bytes(tmp_path) -> None:
    """Drawing the same stimulus twice gives byte-identical PNG and SVG files.

    Source: common practice (no published source).
    """
    style = Style()
    for name in ("a", "b"):
        fig = _drawing(style)
        write_png(to_palette(rasterise(fig), palette(style)), tmp_path / f"{name}.png")
        write_svg(fig, tmp_path / f"{name}.svg")
    assert (tmp_path / "a.png").read_bytes() == (tmp_path / "b.png").read_bytes()
    assert (tmp_path / "a.svg").read_bytes() == (tmp_path / "b.svg").read_bytes()
    assert b"<dc:date>" not in (tmp_path / "a.svg").read_bytes()


def test_labels_only_when_asked(tmp_path) -> None:
    """Node labels appear only when the style asks for them.

    Source: common practice (no published source).
    """
    plain = rasterise(_drawing(Style()))
    labelled = rasterise(_drawing(Style(labels=True)))
    label_ink = np.all(labelled == 0, axis=2).sum()
    assert np.all(plain == 0, axis=2).sum() < label_ink
