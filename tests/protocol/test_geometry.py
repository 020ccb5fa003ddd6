"""Tests for visual angle and pixel conversions."""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from runner.protocol.geometry import cm_to_px, deg_to_px, fit_size, px_to_deg, visual_angle_deg

INCH_CM = 2.54
SCREEN = {"screen_width_cm": 52.7, "screen_width_px": 1920, "distance_cm": 60.0}


def test_css_reference_pixel() -> None:
    """One pixel at 96 dpi seen from 28 inches subtends about 0.0213 degrees.

    Source: CSS Values and Units Module Level 4, reference pixel (computed 0.021315).
    """
    angle = visual_angle_deg(1 / 96, 28)
    assert angle == pytest.approx(0.021315, abs=5e-7)
    # The same through the screen conversion: a 96 dpi screen 1920 px wide is 20 inches wide.
    via_screen = px_to_deg(
        1, screen_width_cm=20 * INCH_CM, screen_width_px=1920, distance_cm=28 * INCH_CM
    )
    assert via_screen == pytest.approx(0.021315, abs=5e-7)


def test_visual_angle_formula_known_values() -> None:
    """An object as wide as twice the distance subtends 90 degrees; size 0 gives 0.

    Source: V = 2 atan(S / 2D) with atan(1) = 45 degrees (trigonometry).
    """
    assert visual_angle_deg(2.0, 1.0) == pytest.approx(90.0)
    assert visual_angle_deg(0.0, 57.0) == 0.0
    # Rule of thumb: 1 cm at 57 cm is about 1 degree.
    assert visual_angle_deg(1.0, 57.0) == pytest.approx(1.0051, abs=1e-4)


def test_deg_to_px_example() -> None:
    """24 degrees at 60 cm on a 52.7 cm, 1920 px screen is 2*60*tan(12 deg) cm in pixels.

    Source: V = 2 atan(S / 2D), evaluated with math.tan as the reference.
    """
    expected = 2 * 60 * math.tan(math.radians(12)) * 1920 / 52.7
    assert deg_to_px(24, **SCREEN) == pytest.approx(expected)
    assert round(expected) == 929


def test_cm_to_px() -> None:
    """cm_to_px scales by pixels per centimetre."""
    assert cm_to_px(2.54, screen_width_cm=50.8, screen_width_px=1920) == pytest.approx(96.0)


@given(st.floats(min_value=0.0, max_value=170.0))
def test_deg_px_round_trip(deg: float) -> None:
    """px_to_deg undoes deg_to_px for any angle below 170 degrees.

    Source: common practice (no published source): V = 2 atan(S / 2D) and S = 2 D tan(V / 2) are inverses.
    """
    assert px_to_deg(deg_to_px(deg, **SCREEN), **SCREEN) == pytest.approx(deg, abs=1e-9)


@pytest.mark.parametrize(
    ("call", "fragment"),
    [
        (lambda: visual_angle_deg(1, 0), "distance must be a positive"),
        (lambda: visual_angle_deg(-1, 10), "size must be 0 or more"),
        (lambda: deg_to_px(180, **SCREEN), "below 180"),
        (lambda: cm_to_px(1, screen_width_cm=0, screen_width_px=1920), "screen width in cm"),
        (lambda: fit_size(0, 10, width_px=5), "image width"),
        (lambda: fit_size(10, 10, height_px=-5), "requested height"),
    ],
)
def test_rejects_bad_values(call, fragment: str) -> None:
    """Impossible geometry raises ValueError naming the quantity."""
    with pytest.raises(ValueError, match=fragment):
        call()


@pytest.mark.parametrize(
    ("native", "kwargs", "expected"),
    [
        ((1000, 800), {}, (1000, 800)),
        ((1000, 800), {"width_px": 500}, (500, 400)),
        ((1000, 800), {"height_px": 200}, (250, 200)),
        ((1000, 800), {"width_px": 500, "height_px": 500}, (500, 400)),
        ((800, 1000), {"width_px": 500, "height_px": 500}, (400, 500)),
        ((1000, 1), {"width_px": 10}, (10, 1)),
        ((999, 333), {"width_px": 929}, (929, 310)),
    ],
)
def test_fit_size(native: tuple[int, int], kwargs: dict, expected: tuple[int, int]) -> None:
    """fit_size keeps the aspect ratio and fits the requested box."""
    assert fit_size(*native, **kwargs) == expected
