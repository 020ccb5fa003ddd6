"""The stimulus area in pixels, from the protocol's size in px, cm or degrees of visual angle."""

from __future__ import annotations

from runner.protocol.geometry import cm_to_px, deg_to_px
from runner.protocol.model import Protocol


def stimulus_box(model: Protocol) -> tuple[int, int]:
    """The (width, height) box a stimulus is scaled into, keeping its aspect ratio.

    One dimension is set by the protocol; the other is bounded by the screen, so a stimulus is
    scaled to the requested width (or height) unless it would then not fit on the screen.
    """
    sw, sh = model.screen.resolution
    size = model.stimulus_size
    screen = model.screen

    def cm(value: float) -> int:
        assert screen.width_cm is not None
        return round(cm_to_px(value, screen_width_cm=screen.width_cm, screen_width_px=sw))

    def deg(value: float) -> int:
        assert screen.width_cm is not None and screen.distance_cm is not None
        return round(
            deg_to_px(
                value,
                screen_width_cm=screen.width_cm,
                screen_width_px=sw,
                distance_cm=screen.distance_cm,
            )
        )

    if size.width_px is not None:
        return min(size.width_px, sw), sh
    if size.height_px is not None:
        return sw, min(size.height_px, sh)
    if size.width_cm is not None:
        return min(cm(size.width_cm), sw), sh
    if size.height_cm is not None:
        return sw, min(cm(size.height_cm), sh)
    if size.width_deg is not None:
        return min(deg(size.width_deg), sw), sh
    assert size.height_deg is not None
    return sw, min(deg(size.height_deg), sh)
