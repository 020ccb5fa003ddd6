"""Viewing geometry: visual angle, centimetres and pixels on the lab display.

The visual angle V subtended by an object of size S seen from distance D (same units) is
``V = 2 atan(S / (2 D))``. Pixels are assumed square, with ``screen_width_px`` of them across
``screen_width_cm`` of visible screen, and the object is assumed to be centred on the line of
sight (the usual convention for stimulus sizes).
"""

from __future__ import annotations

import math

__all__ = ["cm_to_px", "deg_to_px", "fit_size", "px_to_deg", "visual_angle_deg"]


def _positive(name: str, value: float) -> float:
    number = float(value)
    if not math.isfinite(number) or number <= 0:
        raise ValueError(f"{name} must be a positive number, not {value!r}.")
    return number


def visual_angle_deg(size: float, distance: float) -> float:
    """Return the visual angle in degrees of an object of ``size`` at ``distance``.

    Parameters
    ----------
    size : float
        Extent of the object (0 or more), in the same unit as ``distance``.
    distance : float
        Viewing distance, positive.

    Returns
    -------
    float
        ``2 * atan(size / (2 * distance))`` in degrees.
    """
    size_value = float(size)
    if not math.isfinite(size_value) or size_value < 0:
        raise ValueError(f"The size must be 0 or more, not {size!r}.")
    return math.degrees(2.0 * math.atan(size_value / (2.0 * _positive("The distance", distance))))


def cm_to_px(cm: float, *, screen_width_cm: float, screen_width_px: int) -> float:
    """Return the number of pixels covering ``cm`` centimetres on the screen.

    Parameters
    ----------
    cm : float
        Length on the screen surface in centimetres.
    screen_width_cm : float
        Visible width of the screen in centimetres.
    screen_width_px : int
        Horizontal resolution in pixels.

    Returns
    -------
    float
        Length in pixels (not rounded).
    """
    width_cm = _positive("The screen width in cm", screen_width_cm)
    width_px = _positive("The screen width in pixels", screen_width_px)
    return float(cm) * width_px / width_cm


def deg_to_px(
    deg: float, *, screen_width_cm: float, screen_width_px: int, distance_cm: float
) -> float:
    """Return the pixel extent of an object subtending ``deg`` degrees.

    Parameters
    ----------
    deg : float
        Visual angle in degrees, 0 <= deg < 180.
    screen_width_cm, screen_width_px
        The screen, as for :func:`cm_to_px`.
    distance_cm : float
        Eye-to-screen distance in centimetres.

    Returns
    -------
    float
        ``2 * D * tan(deg / 2)`` converted to pixels (not rounded).
    """
    angle = float(deg)
    if not math.isfinite(angle) or not 0 <= angle < 180:
        raise ValueError(f"A visual angle must be at least 0 and below 180 degrees, not {deg!r}.")
    distance = _positive("The viewing distance", distance_cm)
    size_cm = 2.0 * distance * math.tan(math.radians(angle) / 2.0)
    return cm_to_px(size_cm, screen_width_cm=screen_width_cm, screen_width_px=screen_width_px)


def px_to_deg(
    px: float, *, screen_width_cm: float, screen_width_px: int, distance_cm: float
) -> float:
    """Return the visual angle in degrees of ``px`` pixels on the screen.

    Parameters
    ----------
    px : float
        Extent in pixels, 0 or more.
    screen_width_cm, screen_width_px, distance_cm
        The screen and viewing distance, as for :func:`deg_to_px`.

    Returns
    -------
    float
        Visual angle in degrees; the inverse of :func:`deg_to_px`.
    """
    width_cm = _positive("The screen width in cm", screen_width_cm)
    width_px = _positive("The screen width in pixels", screen_width_px)
    return visual_angle_deg(float(px) * width_cm / width_px, distance_cm)


def fit_size(
    image_w: int, image_h: int, *, width_px: int | None = None, height_px: int | None = None
) -> tuple[int, int]:
    """Return the drawn size of an image, keeping its aspect ratio.

    Parameters
    ----------
    image_w, image_h : int
        Native size of the image in pixels.
    width_px, height_px : int, optional
        Requested width and/or height. With one of them the other follows from the aspect
        ratio; with both the image is made as large as fits inside that box; with neither the
        native size is returned.

    Returns
    -------
    tuple of int
        ``(w, h)`` in whole pixels, each at least 1.
    """
    native_w = _positive("The image width", image_w)
    native_h = _positive("The image height", image_h)
    if width_px is None and height_px is None:
        return int(native_w), int(native_h)
    scales = []
    if width_px is not None:
        scales.append(_positive("The requested width", width_px) / native_w)
    if height_px is not None:
        scales.append(_positive("The requested height", height_px) / native_h)
    scale = min(scales)
    return max(1, round(native_w * scale)), max(1, round(native_h * scale))
