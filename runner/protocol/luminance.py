"""Relative luminance of colours, images and whole screens (WCAG 2.2 definition).

Relative luminance follows the WCAG 2.2 definition: each 8-bit sRGB channel C8 becomes
``C = C8 / 255``, is linearised as ``C / 12.92`` when ``C <= 0.04045`` and
``((C + 0.055) / 1.055) ** 2.4`` otherwise, and ``L = 0.2126 R + 0.7152 G + 0.0722 B``.
It runs from 0 (black) to 1 (white).

The mean luminance of an image or screen is the average of the per-pixel relative luminance
(linear light, what a photometer over the screen would integrate), not the luminance of the
average colour. Semi-transparent image pixels are first blended with the background on the 8-bit
sRGB values, as ordinary alpha blending on the display surface does.

Images are decoded with Pillow (installed with matplotlib); formats Pillow cannot give as 8-bit
channels (16-bit PNG, for example) are read with ``matplotlib.image.imread``.
"""

from __future__ import annotations

import hashlib
import io
import os
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import cast

import numpy as np
from PIL import Image, UnidentifiedImageError

from runner.errors import InputFileError

__all__ = [
    "ImageStats",
    "LuminanceCache",
    "image_mean_luminance",
    "mean_luminance_of_screen",
    "parse_colour",
    "relative_luminance",
    "srgb_to_linear",
]

# WCAG 2.2, definition of relative luminance.
SRGB_MAX = 255
LINEAR_THRESHOLD = 0.04045
LINEAR_SLOPE = 12.92
GAMMA_OFFSET = 0.055
GAMMA_SCALE = 1.055
GAMMA_EXPONENT = 2.4
RGB_WEIGHTS = np.array([0.2126, 0.7152, 0.0722])

_HEX_DIGITS = set("0123456789abcdefABCDEF")
# Pillow modes whose pixels convert to 8-bit RGB(A) without loss of range.
_EIGHT_BIT_MODES = {"1", "L", "LA", "P", "PA", "RGB", "RGBA", "RGBa", "CMYK", "YCbCr", "La"}
# Diagrams usually hold few distinct colours; up to this many, Pillow lists them with counts,
# which is faster than per-channel histograms and exact for semi-transparent pixels too.
MAX_LISTED_COLOURS = 1 << 16

Rect = tuple[float, float, float, float]
ColourSpec = str | Sequence[int]


def srgb_to_linear(c8: float | Sequence[float] | np.ndarray) -> float | np.ndarray:
    """Linearise 8-bit sRGB channel values (0-255) as in the WCAG 2.2 definition.

    Parameters
    ----------
    c8 : float or array_like
        Channel values from 0 to 255 (fractions allowed, e.g. after blending).

    Returns
    -------
    float or numpy.ndarray
        Linear values from 0 to 1, a float for scalar input, otherwise an array of the same
        shape.

    Raises
    ------
    ValueError
        If a value lies outside 0-255 or is not a number.
    """
    values = np.asarray(c8, dtype=float)
    if values.size and (
        not np.all(np.isfinite(values)) or values.min() < 0 or values.max() > SRGB_MAX
    ):
        raise ValueError("sRGB channel values must lie between 0 and 255.")
    c = values / SRGB_MAX
    linear = np.where(
        c <= LINEAR_THRESHOLD,
        c / LINEAR_SLOPE,
        ((c + GAMMA_OFFSET) / GAMMA_SCALE) ** GAMMA_EXPONENT,
    )
    if linear.ndim == 0:
        return float(linear)
    return linear


# Lookup table for the 256 integer channel values: decoding an image then needs only counts.
_LINEAR_LUT = np.asarray(srgb_to_linear(np.arange(SRGB_MAX + 1)))


def parse_colour(colour: ColourSpec) -> tuple[int, int, int]:
    """Return ``(r, g, b)`` 0-255 for ``"#rrggbb"``, ``"#rgb"`` or a 3-sequence of integers.

    Parameters
    ----------
    colour : str or sequence of int
        A hex colour with a leading ``#`` or three whole numbers from 0 to 255.

    Returns
    -------
    tuple of int

    Raises
    ------
    ValueError
        With a message saying which forms are accepted.
    """
    hint = 'write it as "#rrggbb" (for example "#808080"), "#rgb", or three numbers 0-255'
    if isinstance(colour, str):
        text = colour.strip()
        digits = text[1:]
        if not text.startswith("#") or len(digits) not in (3, 6) or not set(digits) <= _HEX_DIGITS:
            raise ValueError(f"The colour {colour!r} is not understood; {hint}.")
        if len(digits) == 3:
            digits = "".join(d * 2 for d in digits)
        return int(digits[0:2], 16), int(digits[2:4], 16), int(digits[4:6], 16)
    try:
        parts = list(colour)
    except TypeError:
        raise ValueError(f"The colour {colour!r} is not understood; {hint}.") from None
    if len(parts) != 3 or not all(
        isinstance(p, int | np.integer) and not isinstance(p, bool) and 0 <= p <= SRGB_MAX
        for p in parts
    ):
        raise ValueError(f"The colour {colour!r} is not understood; {hint}.")
    return int(parts[0]), int(parts[1]), int(parts[2])


def relative_luminance(rgb: ColourSpec | np.ndarray) -> float | np.ndarray:
    """Return the WCAG 2.2 relative luminance of a colour or an array of colours.

    Parameters
    ----------
    rgb : str, sequence of int, or numpy.ndarray
        A colour accepted by :func:`parse_colour`, or an array whose last axis holds R, G, B
        values 0-255.

    Returns
    -------
    float or numpy.ndarray
        A float for one colour, an array (without the last axis) for an array of colours.
    """
    if isinstance(rgb, np.ndarray) and rgb.ndim > 1:
        if rgb.shape[-1] != 3:
            raise ValueError("An array of colours needs R, G and B along its last axis.")
        return np.asarray(srgb_to_linear(rgb)) @ RGB_WEIGHTS
    # A 1-D array of R, G, B is a sequence of int, which parse_colour accepts.
    channels: np.ndarray = np.array(parse_colour(rgb))  # type: ignore[arg-type]
    return float(_LINEAR_LUT[channels] @ RGB_WEIGHTS)


def _blend_luminance(rgb8: np.ndarray, alpha8: np.ndarray, background: np.ndarray) -> np.ndarray:
    """Luminance of colours blended with ``background`` on 8-bit values, alpha 0-255."""
    a = alpha8.astype(float)[:, None] / SRGB_MAX
    blended = a * rgb8.astype(float) + (1.0 - a) * background.astype(float)[None, :]
    return np.asarray(srgb_to_linear(blended)) @ RGB_WEIGHTS


@dataclass(frozen=True)
class ImageStats:
    """What is needed to compute an image's mean luminance over any background.

    Attributes
    ----------
    width, height : int
        Size in pixels.
    opaque_sum : float
        Sum of the relative luminance of the fully opaque pixels.
    n_opaque, n_transparent : int
        Number of fully opaque and fully transparent pixels.
    partial_rgba : numpy.ndarray
        Distinct (r, g, b, alpha) values of partly transparent pixels, shape (k, 4).
    partial_counts : numpy.ndarray
        How many pixels have each of those values, shape (k,).
    """

    width: int
    height: int
    opaque_sum: float
    n_opaque: int
    n_transparent: int
    partial_rgba: np.ndarray
    partial_counts: np.ndarray

    def mean_luminance(self, background: ColourSpec) -> float:
        """Return the mean relative luminance with the image drawn over ``background``."""
        bg = np.array(parse_colour(background))
        total = self.opaque_sum + self.n_transparent * float(_LINEAR_LUT[bg] @ RGB_WEIGHTS)
        if len(self.partial_counts):
            lum = _blend_luminance(self.partial_rgba[:, :3], self.partial_rgba[:, 3], bg)
            total += float(lum @ self.partial_counts)
        return total / (self.width * self.height)


def _colour_luminance(rgb8: np.ndarray) -> np.ndarray:
    """Luminance of integer colours (k, 3) by table look-up."""
    return _LINEAR_LUT[rgb8] @ RGB_WEIGHTS


def _stats_from_colours(
    width: int, height: int, colours: list[tuple[int, tuple[int, ...]]]
) -> ImageStats:
    """Stats from Pillow's list of (count, colour) for every distinct RGB or RGBA colour."""
    counts = np.array([count for count, _ in colours], dtype=np.int64)
    values = np.array([colour for _, colour in colours], dtype=np.intp).reshape(len(colours), -1)
    if values.shape[1] == 3:
        values = np.column_stack([values, np.full(len(values), SRGB_MAX)])
    alpha = values[:, 3]
    opaque = alpha == SRGB_MAX
    transparent = alpha == 0
    partial = ~(opaque | transparent)
    return ImageStats(
        width,
        height,
        float(counts[opaque] @ _colour_luminance(values[opaque, :3])),
        int(counts[opaque].sum()),
        int(counts[transparent].sum()),
        values[partial].astype(np.uint8),
        counts[partial],
    )


def _stats_from_histograms(rgba: Image.Image) -> ImageStats:
    """Stats for images with many colours: channel histograms plus the partly clear pixels."""
    width, height = rgba.size
    if rgba.mode == "RGB":
        hist = np.array(rgba.histogram(), dtype=np.int64).reshape(3, SRGB_MAX + 1)
        opaque_sum = float((hist @ _LINEAR_LUT) @ RGB_WEIGHTS)
        empty = np.zeros((0, 4), dtype=np.uint8)
        return ImageStats(width, height, opaque_sum, width * height, 0, empty, np.zeros(0))
    alpha = rgba.getchannel("A")
    alpha_counts = alpha.histogram()
    n_opaque, n_transparent = alpha_counts[SRGB_MAX], alpha_counts[0]
    # Pillow counts only pixels where the mask is non-zero: here the fully opaque ones.
    opaque_mask = alpha.point([0] * SRGB_MAX + [SRGB_MAX])
    hist = np.array(rgba.convert("RGB").histogram(mask=opaque_mask), dtype=np.int64)
    per_channel = hist.reshape(3, SRGB_MAX + 1) @ _LINEAR_LUT
    opaque_sum = float(per_channel @ RGB_WEIGHTS)
    rgba_values = np.zeros((0, 4), dtype=np.uint8)
    counts = np.zeros(0, dtype=np.int64)
    if n_opaque + n_transparent < width * height:
        # Pack each RGBA pixel into one 32-bit word (a view, no copy) to count distinct values.
        packed = np.asarray(rgba).reshape(-1, 4).view(np.uint32).ravel()
        alpha8 = np.asarray(alpha).ravel()
        partial = (alpha8 != 0) & (alpha8 != SRGB_MAX)
        unique, counts = np.unique(packed[partial], return_counts=True)
        rgba_values = unique.view(np.uint8).reshape(-1, 4)
    return ImageStats(width, height, opaque_sum, n_opaque, n_transparent, rgba_values, counts)


def _stats_from_float(pixels: np.ndarray) -> ImageStats:
    """Stats for images decoded as floats 0-1 (grey, RGB or RGBA)."""
    if pixels.ndim == 2:
        pixels = np.repeat(pixels[:, :, None], 3, axis=2)
    height, width = pixels.shape[:2]
    flat = pixels.reshape(-1, pixels.shape[2]).astype(float) * SRGB_MAX
    rgb = flat[:, :3]
    if flat.shape[1] == 4:
        alpha = flat[:, 3]
    else:
        alpha = np.full(len(flat), float(SRGB_MAX))
    opaque = alpha >= SRGB_MAX
    transparent = alpha <= 0
    partial = ~(opaque | transparent)
    lum_opaque = float((np.asarray(srgb_to_linear(rgb[opaque])) @ RGB_WEIGHTS).sum())
    return ImageStats(
        width,
        height,
        lum_opaque,
        int(opaque.sum()),
        int(transparent.sum()),
        np.column_stack([rgb[partial], alpha[partial]]),
        np.ones(int(partial.sum())),
    )


def _decode(data: bytes, name: str) -> ImageStats:
    try:
        with Image.open(io.BytesIO(data)) as img:
            if img.mode in _EIGHT_BIT_MODES:
                # Plain RGB and RGBA are used as decoded; converting would copy the pixels.
                keep = img.mode == "RGBA" or (img.mode == "RGB" and "transparency" not in img.info)
                pixels = img if keep else img.convert("RGBA")
                pixels.load()
                width, height = pixels.size
                colours = pixels.getcolors(MAX_LISTED_COLOURS)
                if colours is not None:
                    # RGB and RGBA images list each colour as a tuple of channels.
                    rgba = cast(list[tuple[int, tuple[int, ...]]], colours)
                    return _stats_from_colours(width, height, rgba)
                return _stats_from_histograms(pixels)
    except (UnidentifiedImageError, OSError, ValueError) as err:
        raise InputFileError(
            f"The image {name} cannot be read ({err}); check that it is a PNG or JPEG file "
            "and not damaged."
        ) from err
    import matplotlib.image

    try:
        array = matplotlib.image.imread(io.BytesIO(data))
    except (OSError, ValueError, SyntaxError) as err:
        raise InputFileError(f"The image {name} cannot be read ({err}).") from err
    array = np.asarray(array)
    if array.dtype.kind in "ui":
        array = array / np.iinfo(array.dtype).max
    try:
        return _stats_from_float(array)
    except ValueError as err:
        raise InputFileError(
            f"The image {name} uses a pixel format whose brightness cannot be measured; "
            "save it as an 8-bit or 16-bit PNG."
        ) from err


class LuminanceCache:
    """Remembers image statistics by the SHA-256 of the file content.

    Each distinct file content is decoded once, however many paths or trials refer to it and
    whatever background it is later drawn on. A path whose size and modification time are
    unchanged is not even re-read.
    """

    def __init__(self) -> None:
        self._by_hash: dict[str, ImageStats] = {}
        self._hash_by_stat: dict[tuple[str, int, int], str] = {}
        self.decoded = 0

    def __len__(self) -> int:
        return len(self._by_hash)

    def stats(self, path: str | os.PathLike[str]) -> ImageStats:
        """Return the statistics of the image at ``path``, decoding it only if it is new.

        Raises
        ------
        InputFileError
            If the file is missing, unreadable or not an image.
        """
        file = Path(path)
        try:
            info = file.stat()
            stat_key = (str(file.resolve()), info.st_size, info.st_mtime_ns)
            digest = self._hash_by_stat.get(stat_key)
            data = None
            if digest is None:
                data = file.read_bytes()
                digest = hashlib.sha256(data).hexdigest()
                self._hash_by_stat[stat_key] = digest
        except FileNotFoundError:
            raise InputFileError(
                f"The image {file} does not exist; check the stimulus path."
            ) from None
        except OSError as err:
            raise InputFileError(f"The image {file} cannot be read: {err.strerror}.") from err
        cached = self._by_hash.get(digest)
        if cached is not None:
            return cached
        if data is None:
            data = file.read_bytes()
        stats = _decode(data, str(file))
        self.decoded += 1
        self._by_hash[digest] = stats
        return stats

    def mean_luminance(self, path: str | os.PathLike[str], background: ColourSpec) -> float:
        """Return the mean relative luminance of the image at ``path`` over ``background``."""
        return self.stats(path).mean_luminance(background)


def image_mean_luminance(
    path: str | os.PathLike[str], *, background: ColourSpec, cache: LuminanceCache | None = None
) -> float:
    """Return the mean relative luminance of an image drawn over ``background``.

    Parameters
    ----------
    path : path-like
        The image file.
    background : str or sequence of int
        Colour that shows through pixels with alpha below 1.
    cache : LuminanceCache, optional
        Reuse statistics of files already decoded.

    Returns
    -------
    float
        Mean per-pixel relative luminance, 0 to 1.

    Raises
    ------
    InputFileError
        If the file is missing or cannot be decoded.
    """
    return (cache if cache is not None else LuminanceCache()).mean_luminance(path, background)


def _clip(rect: Rect, width: int, height: int) -> tuple[float, float, float, float]:
    x, y, w, h = (float(v) for v in rect)
    if w < 0 or h < 0:
        raise ValueError(f"A rectangle needs a width and height of 0 or more, not {rect!r}.")
    return max(0.0, x), max(0.0, y), min(float(width), x + w), min(float(height), y + h)


def mean_luminance_of_screen(
    size: tuple[int, int],
    background: ColourSpec,
    *,
    patches: Iterable[tuple[Rect, ColourSpec]] = (),
    image: tuple[str | os.PathLike[str], Rect] | None = None,
    cache: LuminanceCache | None = None,
) -> float:
    """Return the mean relative luminance of a whole screen.

    The screen is filled with ``background``; the image (if any) is drawn into its rectangle,
    then each patch (fixation cross bars, photodiode square, text box ...) is drawn on top in
    the given order. Rectangles are ``(x, y, w, h)`` in pixels and are clipped to the screen.

    Parameters
    ----------
    size : tuple of int
        Screen ``(width, height)`` in pixels.
    background : str or sequence of int
        Background colour.
    patches : iterable of (rect, colour), optional
        Solid rectangles, later ones covering earlier ones.
    image : (path, rect), optional
        An image file and the rectangle it is drawn into.
    cache : LuminanceCache, optional
        Shared cache so each image file is decoded once.

    Returns
    -------
    float
        Area-weighted mean relative luminance, 0 to 1.

    Notes
    -----
    The image contributes its mean luminance (native pixels, transparent parts over the
    background) times its visible area. Scaling to the rectangle is assumed to keep the mean,
    and where a patch covers part of the image the covered part is assumed to have the
    image's mean; both hold closely for smooth scaling and small patches.
    """
    width, height = (int(v) for v in size)
    if width <= 0 or height <= 0:
        raise ValueError(f"The screen size must be positive, not {size!r}.")
    layers: list[tuple[tuple[float, float, float, float], float]] = [
        ((0.0, 0.0, float(width), float(height)), float(relative_luminance(background)))
    ]
    if image is not None:
        path, rect = image
        lum = (cache if cache is not None else LuminanceCache()).mean_luminance(path, background)
        layers.append((_clip(rect, width, height), lum))
    for rect, colour in patches:
        layers.append((_clip(rect, width, height), float(relative_luminance(colour))))
    # Exact painter's algorithm on the grid formed by all rectangle edges: each grid cell
    # shows the top-most layer that covers it.
    xs = np.unique([v for (x0, _, x1, _), _ in layers for v in (x0, x1) if x1 > x0] + [0.0, width])
    ys = np.unique([v for (_, y0, _, y1), _ in layers for v in (y0, y1) if y1 > y0] + [0.0, height])
    cx = (xs[:-1] + xs[1:]) / 2
    cy = (ys[:-1] + ys[1:]) / 2
    cell_area = np.outer(np.diff(ys), np.diff(xs))
    shown = np.zeros(cell_area.shape)
    for (x0, y0, x1, y1), lum in layers:
        if x1 <= x0 or y1 <= y0:
            continue
        cover = np.outer((cy > y0) & (cy < y1), (cx > x0) & (cx < x1))
        shown[cover] = lum
    return float((shown * cell_area).sum() / (width * height))
