"""Tests for the WCAG 2.3.1 three-flash check on screen sequences."""

from __future__ import annotations

import pytest

from runner.protocol.flashes import (
    count_general_flashes_in_windows,
    flash_area_is_small,
    small_flash_area_limit_px,
)


def _alternate(a: float, b: float, hz: float, seconds: float) -> list[tuple[float, float]]:
    """Square-wave flicker between a and b at ``hz`` full cycles per second."""
    half = 1 / (2 * hz)
    n = round(seconds / half)
    return [(a if i % 2 == 0 else b, half) for i in range(n)]


@pytest.mark.parametrize(
    ("hz", "expected", "passes"),
    [(1, 1, True), (2, 2, True), (3, 3, True), (4, 4, False), (10, 10, False)],
)
def test_black_white_flicker_rate(hz: float, expected: int, passes: bool) -> None:
    """Black/white flicker at f Hz has f flashes per second: up to 3 Hz passes, 4 Hz fails.

    Source: WCAG 2.2 success criterion 2.3.1 and its general flash definition (constructed
    sequence: each cycle is one increase and one decrease of 1.0).
    """
    report = count_general_flashes_in_windows(_alternate(0.0, 1.0, hz, 5.0))
    assert report.max_flashes == expected
    assert report.passes is passes


def test_bright_pairs_never_flash() -> None:
    """0.85 vs 0.95 at 10 Hz is no general flash, because the darker screen is not below 0.80.

    Source: WCAG 2.2 definition of general flash threshold (darker image below 0.80).
    """
    report = count_general_flashes_in_windows(_alternate(0.85, 0.95, 10, 3.0))
    assert report.max_flashes == 0 and report.passes
    assert report.transitions and not any(t.qualifies for t in report.transitions)
    just_dark = count_general_flashes_in_windows(_alternate(0.79, 0.95, 10, 3.0))
    assert just_dark.max_flashes == 10 and not just_dark.passes


@pytest.mark.parametrize(
    ("low", "high", "expected"),
    [(0.40, 0.48, 0), (0.40, 0.4999, 0), (0.3, 0.4, 5), (0.0, 0.1, 5), (0.2, 0.7, 5)],
)
def test_change_size_threshold(low: float, high: float, expected: int) -> None:
    """Changes below 0.1 (10% of the maximum relative luminance 1.0) are not flashes; 0.1 is.

    Source: WCAG 2.2 definition of general flash threshold ("10% or more").
    """
    report = count_general_flashes_in_windows(_alternate(low, high, 5, 2.0))
    assert report.max_flashes == expected


def test_gradual_fade_counts_as_one_change() -> None:
    """A fade in steps of 0.05 adds up to one change of 1.0, so fast fades fail.

    Source: WCAG 2.2 general flash definition (a change is measured between the turning
    points of luminance, not per step); constructed triangle wave, 5 cycles per second.
    """
    ramp = [i * 0.05 for i in range(21)]
    cycle = ramp + ramp[-2:0:-1]  # 0 .. 1 .. 0.05, 40 screens
    step = 0.2 / len(cycle)
    seq = [(lum, step) for lum in cycle * 10 + [0.0]]
    report = count_general_flashes_in_windows(seq)
    assert report.max_flashes == 5 and not report.passes
    slow = [(lum, step * 2) for lum in cycle * 10 + [0.0]]  # 2.5 cycles per second
    assert count_general_flashes_in_windows(slow).max_flashes == 2


def test_small_wiggle_does_not_split_a_change() -> None:
    """A dip of 0.05 inside a bright phase neither counts nor splits the change.

    Source: WCAG 2.2 general flash definition (opposing changes of 10% or more).
    """
    seq = [(0.0, 0.1), (1.0, 0.1), (0.95, 0.1), (1.0, 0.1), (0.0, 0.1)]
    report = count_general_flashes_in_windows(seq)
    assert [(t.from_index, t.to_index) for t in report.transitions] == [(0, 1), (1, 4)]
    assert report.max_flashes == 1


def test_window_location_is_reported() -> None:
    """The report gives the start time and screens of the worst window.

    Source: common practice (no published source); constructed sequence with a burst at 5 s.
    """
    calm = [(0.2, 1.0)] * 5
    burst = _alternate(1.0, 0.0, 5, 1.0)  # 10 screens of 0.1 s starting at 5.0 s
    seq = calm + burst + [(0.2, 2.0)]
    report = count_general_flashes_in_windows(seq)
    assert report.max_flashes == 5
    assert report.window_start_s == pytest.approx(5.0)
    assert report.screen_indices[0] == 5
    assert len(report.screen_indices) == 10


def test_typical_trial_sequence_passes() -> None:
    """Fixation, stimulus, answer page and gap at their shortest durations pass.

    Source: WCAG 2.2 success criterion 2.3.1; values computed with the WCAG luminance formula.
    """
    grey, diagram, page = 0.2159, 0.80, 0.2159
    one_trial = [(grey, 0.7), (diagram, 0.5), (page, 0.3), (grey, 0.8)]
    report = count_general_flashes_in_windows(one_trial * 5)
    assert report.passes
    assert report.max_flashes >= 1


def test_no_changes() -> None:
    """A constant or empty sequence has no flashes and no window."""
    for seq in ([], [(0.5, 10.0)], [(0.5, 0.1)] * 30):
        report = count_general_flashes_in_windows(seq)
        assert report.max_flashes == 0 and report.window_start_s is None and report.passes


@pytest.mark.parametrize(
    ("seq", "window", "fragment"),
    [
        ([(1.2, 0.1)], 1.0, "between 0 and 1"),
        ([(-0.1, 0.1)], 1.0, "between 0 and 1"),
        ([(0.5, 0.0)], 1.0, "above 0"),
        ([(0.5,)], 1.0, "pair"),
        ([(0.5, 0.1)], 0.0, "positive number of seconds"),
    ],
)
def test_rejects_bad_sequences(seq, window: float, fragment: str) -> None:
    """Out-of-range luminance, non-positive durations or windows raise ValueError."""
    with pytest.raises(ValueError, match=fragment):
        count_general_flashes_in_windows(seq, window_s=window)


def test_small_area_limit_at_reference_and_scaled() -> None:
    """The small-area limit is a quarter of 341 x 256 px at 1024 x 768, scaled by pixel count.

    Source: WCAG 2.2 notes to general flash threshold (10-degree field 341 x 256 at
    1024 x 768; 0.006 sr about a quarter of it).
    """
    assert small_flash_area_limit_px(screen_w_px=1024, screen_h_px=768) == 341 * 256 / 4
    limit_hd = small_flash_area_limit_px(screen_w_px=1920, screen_h_px=1080)
    assert limit_hd == pytest.approx(21824 * (1920 * 1080) / (1024 * 768))
    assert flash_area_is_small(21824, screen_w_px=1024, screen_h_px=768)
    assert not flash_area_is_small(21825, screen_w_px=1024, screen_h_px=768)
    # A 48 px photodiode square is small; a full 1000 px stimulus is not.
    assert flash_area_is_small(48 * 48, screen_w_px=1920, screen_h_px=1080)
    assert not flash_area_is_small(1000 * 1000, screen_w_px=1920, screen_h_px=1080)


@pytest.mark.parametrize(
    ("area", "w", "h", "fragment"),
    [(-1, 1024, 768, "0 or more"), (10, 0, 768, "width"), (10, 1024, 7.5, "height")],
)
def test_flash_area_rejects(area, w, h, fragment: str) -> None:
    """Negative areas and bad resolutions raise ValueError."""
    with pytest.raises(ValueError, match=fragment):
        flash_area_is_small(area, screen_w_px=w, screen_h_px=h)
