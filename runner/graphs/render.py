"""Drawing stimuli to PNG and SVG at a fixed pixel size, and measuring the drawn image.

matplotlib's Agg renderer draws the diagram (pygame is kept for the presenter). Nothing that
changes between runs goes into the files: no software tag, no date, a fixed SVG id salt, so the
same seed gives the same bytes. The two targets are told apart by shape as well as colour.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import cast

import matplotlib
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure
from PIL import Image

from runner.contract.outputs import replace_file
from runner.errors import StorageError

# Drawing is done at 100 dots per inch so one point is 100/72 pixels.
DPI = 100
POINTS_PER_INCH = 72
SVG_HASH_SALT = "trialdeck-stimuli"
# A pixel counts as ink when one of its channels differs from the background by at least this
# much (out of 255): faint anti-aliasing fringes are not ink a reader sees.
INK_THRESHOLD = 16
# WCAG 2.2 relative luminance (definition "relative luminance"), sRGB linearisation.
SRGB_KNEE = 0.04045
SRGB_SLOPE = 12.92
SRGB_OFFSET = 0.055
SRGB_GAMMA = 2.4
LUMA_WEIGHTS = (0.2126, 0.7152, 0.0722)
TARGET_MARKERS = {"square": "s", "diamond": "D", "circle": "o", "triangle": "^", "star": "*"}
LABEL_OFFSET_PX = 7.0
# Anti-aliasing shades kept between each drawing colour and what lies under it.
PALETTE_STEPS = 4


@dataclass(frozen=True)
class Style:
    """Colours (``#rrggbb``) and sizes (pixels) of a stimulus drawing."""

    background: str = "#8c8c8c"
    node_color: str = "#141414"
    link_color: str = "#1e1e1e"
    node_size_px: float = 9.0
    link_width_px: float = 1.6
    target_shapes: tuple[str, str] = ("square", "diamond")
    target_colors: tuple[str, str] = ("#f0e442", "#56b4e9")
    target_size_px: float = 28.0
    target_edge_color: str = "#000000"
    target_edge_px: float = 2.0
    labels: bool = False
    label_color: str = "#000000"
    label_size_px: float = 11.0


def _pt(px: float) -> float:
    """Pixels to points at :data:`DPI`."""
    return px * POINTS_PER_INCH / DPI


def figure(
    pos: np.ndarray,
    links: np.ndarray,
    targets: tuple[int, int],
    style: Style,
    size: tuple[int, int],
) -> Figure:
    """Build the matplotlib figure of one stimulus.

    Parameters
    ----------
    pos : numpy.ndarray
        Pixel positions (y downwards), shape ``(n, 2)``.
    links : numpy.ndarray
        Node index pairs, shape ``(m, 2)``.
    targets : tuple of int
        The two marked nodes, drawn with ``style.target_shapes`` in that order.
    style : Style
        Colours and sizes.
    size : tuple of int
        ``(width, height)`` in pixels.

    Returns
    -------
    matplotlib.figure.Figure
        A figure attached to an Agg canvas, exactly ``size`` pixels at :data:`DPI`.
    """
    width, height = size
    fig = Figure(figsize=(width / DPI, height / DPI), dpi=DPI, facecolor=style.background)
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0.0, 0.0, 1.0, 1.0))
    ax.set_xlim(0, width)
    ax.set_ylim(height, 0)
    ax.set_axis_off()
    ax.set_facecolor(style.background)
    seg = pos[links]
    ax.add_collection(
        LineCollection(
            seg, colors=style.link_color, linewidths=_pt(style.link_width_px), capstyle="round"
        )
    )
    others = np.setdiff1d(np.arange(len(pos)), np.asarray(targets))
    ax.scatter(
        pos[others, 0],
        pos[others, 1],
        s=_pt(style.node_size_px) ** 2,
        c=style.node_color,
        marker="o",
        linewidths=0,
        zorder=3,
    )
    for node, shape, colour in zip(targets, style.target_shapes, style.target_colors, strict=True):
        marker = TARGET_MARKERS[shape]
        ax.scatter(
            [pos[node, 0]],
            [pos[node, 1]],
            s=_pt(style.target_size_px) ** 2,
            c=colour,
            marker=marker,
            edgecolors=style.target_edge_color,
            linewidths=_pt(style.target_edge_px),
            zorder=4,
        )
    if style.labels:
        for node, (x, y) in enumerate(pos):
            ax.text(
                x + LABEL_OFFSET_PX,
                y - LABEL_OFFSET_PX,
                str(node),
                fontsize=_pt(style.label_size_px),
                color=style.label_color,
                zorder=5,
            )
    return fig


def rasterise(fig: Figure) -> np.ndarray:
    """Draw ``fig`` and return its pixels as an ``(height, width, 3)`` uint8 RGB array.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        A figure from :func:`figure`.

    Returns
    -------
    numpy.ndarray
        The opaque image (the background is opaque, so alpha is dropped).
    """
    fig.canvas.draw()
    # figure() gives every figure an Agg canvas.
    return np.array(cast(FigureCanvasAgg, fig.canvas).buffer_rgba())[:, :, :3]


def palette(style: Style) -> list[tuple[int, int, int]]:
    """Colours a stimulus PNG may use: the style's colours and anti-aliasing ramps between them.

    Storing the image with a small fixed palette keeps the files a few tens of kilobytes,
    and because the palette is built from the style (not fitted to the image) the two target
    colours are always kept exactly.

    Parameters
    ----------
    style : Style
        Colours of the drawing.

    Returns
    -------
    list of tuple of int
        At most 256 distinct RGB colours, the background first.
    """
    bg = hex_to_rgb(style.background)
    inks = [style.node_color, style.link_color, style.target_edge_color, style.label_color]
    fills = list(style.target_colors)
    pairs = [(bg, hex_to_rgb(c)) for c in inks + fills]
    pairs += [(hex_to_rgb(f), hex_to_rgb(style.target_edge_color)) for f in fills]
    colours: list[tuple[int, int, int]] = [bg]
    for a, b in pairs:
        for k in range(1, PALETTE_STEPS + 1):
            w = k / PALETTE_STEPS
            mix = tuple(int(round((1 - w) * x + w * y)) for x, y in zip(a, b, strict=True))
            if mix not in colours:
                colours.append(mix)  # type: ignore[arg-type]  # three channels, as a and b
    return colours


def to_palette(pixels: np.ndarray, colours: list[tuple[int, int, int]]) -> Image.Image:
    """Map every pixel to the nearest palette colour (no dithering).

    Parameters
    ----------
    pixels : numpy.ndarray
        ``(height, width, 3)`` uint8.
    colours : list of tuple of int
        Palette from :func:`palette`.

    Returns
    -------
    PIL.Image.Image
        A palette ("P" mode) image.
    """
    # Unused palette slots repeat the background so no stray colour can be matched.
    flat = [v for c in colours for v in c] + list(colours[0]) * (256 - len(colours))
    pal = Image.new("P", (1, 1))
    pal.putpalette(flat)
    return Image.fromarray(pixels, mode="RGB").quantize(palette=pal, dither=Image.Dither.NONE)


def write_png(image: Image.Image, path: Path) -> None:
    """Write an image as PNG with no text chunks, so the bytes depend on the pixels only.

    Parameters
    ----------
    image : PIL.Image.Image
        Image from :func:`to_palette`.
    path : pathlib.Path
        Destination file.
    """
    try:
        with replace_file(path, binary=True) as fh:  # never written through a link
            image.save(fh, format="PNG", optimize=True)
    except OSError as exc:
        raise StorageError(f"Cannot write the image {path}: {exc.strerror or exc}.") from exc


def write_svg(fig: Figure, path: Path) -> None:
    """Write ``fig`` as SVG with a fixed id salt and no date, so the bytes are repeatable.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        A figure from :func:`figure`.
    path : pathlib.Path
        Destination file.
    """
    try:
        with (
            matplotlib.rc_context({"svg.hashsalt": SVG_HASH_SALT}),
            replace_file(path, binary=True) as fh,
        ):
            fig.savefig(
                fh, format="svg", dpi=DPI, facecolor=fig.get_facecolor(), metadata={"Date": None}
            )
    except OSError as exc:
        raise StorageError(f"Cannot write the image {path}: {exc.strerror or exc}.") from exc


def hex_to_rgb(colour: str) -> tuple[int, int, int]:
    """Parse ``#rrggbb`` into three 0-255 integers.

    Parameters
    ----------
    colour : str
        Colour such as ``"#8c8c8c"``.

    Returns
    -------
    tuple of int
        Red, green and blue.
    """
    text = colour.lstrip("#")
    return int(text[0:2], 16), int(text[2:4], 16), int(text[4:6], 16)


def _linearise(c: np.ndarray) -> np.ndarray:
    """sRGB channel values in 0..1 to linear light (WCAG 2.2 formula)."""
    return np.where(
        c <= SRGB_KNEE, c / SRGB_SLOPE, ((c + SRGB_OFFSET) / (1 + SRGB_OFFSET)) ** SRGB_GAMMA
    )


def relative_luminance(rgb: np.ndarray) -> np.ndarray:
    """WCAG 2.2 relative luminance of 8-bit sRGB values.

    Parameters
    ----------
    rgb : numpy.ndarray
        Shape ``(..., 3)``, values 0-255.

    Returns
    -------
    numpy.ndarray
        Shape ``(...)``, values 0 (black) to 1 (white).
    """
    return _linearise(np.asarray(rgb, dtype=float) / 255.0) @ np.array(LUMA_WEIGHTS)


def mean_luminance(pixels: np.ndarray) -> float:
    """Mean WCAG relative luminance over all pixels of an opaque RGB image.

    Parameters
    ----------
    pixels : numpy.ndarray
        ``(height, width, 3)`` uint8, already composited on the background.

    Returns
    -------
    float
        Mean relative luminance, 0 to 1.
    """
    # One 256-entry table per channel keeps a megapixel image fast.
    table = np.outer(LUMA_WEIGHTS, _linearise(np.arange(256) / 255.0))
    lum = table[0][pixels[..., 0]] + table[1][pixels[..., 1]] + table[2][pixels[..., 2]]
    return float(lum.mean())


def ink_coverage(pixels: np.ndarray, background: str) -> float:
    """Share of pixels that differ visibly from the background.

    Parameters
    ----------
    pixels : numpy.ndarray
        ``(height, width, 3)`` uint8.
    background : str
        Background colour ``#rrggbb``.

    Returns
    -------
    float
        0 (blank) to 1 (every pixel inked); see :data:`INK_THRESHOLD`.
    """
    bg = np.array(hex_to_rgb(background), dtype=int)
    diff = np.abs(pixels.astype(int) - bg).max(axis=2)
    return float(np.mean(diff >= INK_THRESHOLD))
