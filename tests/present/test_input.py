"""The display's input queue and the live run's display checks, on the real pygame (SDL dummy driver).

Key presses are posted to SDL's real event queue; the display reads them into its own queue with
the time of the poll that read them.
"""

from __future__ import annotations

import pygame
import pytest
from conftest import MINI_PROTOCOL

from runner.cli.app import main
from runner.cli.session import check_desktop
from runner.errors import EXIT_USAGE, DisplayError
from runner.present.display import Display
from runner.present.painter import Style
from runner.protocol.load import load_protocol

DIGITS = frozenset("0123456789") | {"return"}


@pytest.fixture
def display():
    style = Style.from_colours("#8c8c8c", "#000000", "#1f6feb", 28)
    d = Display(
        resolution=(800, 600),
        refresh_hz=60,
        style=style,
        stimulus_box=(480, 360),
        fullscreen=False,
        measure_flips=3,
    )
    yield d
    d.close()


def _post(kind: int, key: str) -> None:
    pygame.event.post(pygame.event.Event(kind, key=pygame.key.key_code(key), mod=0, scancode=0))


def test_a_burst_of_keys_is_kept_whole_and_in_order(display):
    """Two digits and Return read in one poll all come back, one per wait, in order."""
    for key in ("1", "2", "return"):
        display.post_key(key)
    got = [display.wait_key(DIGITS, None) for _ in range(3)]
    assert [h.key for h in got if h is not None] == ["1", "2", "return"]
    assert got[0].t == got[1].t == got[2].t  # read by one poll, stamped when it read them
    assert display.wait_key(DIGITS, display.clock()) is None


def test_a_held_key_counts_once_until_it_is_released(display):
    """Key-down events of a key still down (auto-repeat) are ignored; after key-up it counts again."""
    _post(pygame.KEYDOWN, "5")
    _post(pygame.KEYDOWN, "5")
    _post(pygame.KEYDOWN, "5")
    _post(pygame.KEYUP, "5")
    _post(pygame.KEYDOWN, "5")
    first = display.wait_key(DIGITS, None)
    second = display.wait_key(DIGITS, None)
    assert first is not None and second is not None
    assert (first.key, second.key) == ("5", "5")
    assert display.wait_key(DIGITS, display.clock()) is None


def test_keys_before_an_onset_are_taken_out_and_escape_stays(display):
    """early_keys returns the presses read before the onset; Escape and later presses stay."""
    display.post_key("4")
    display.post_key("escape")
    display.pump()
    onset = display.clock()
    display.pump()  # a poll after the onset: the next press cannot be from before it
    display.post_key("7")
    display.pump()
    early = display.early_keys(onset)
    assert [h.key for h in early] == ["4"]
    assert early[0].t < onset
    assert display.wait_key(DIGITS, None).key == "escape"
    assert display.wait_key(DIGITS, None).key == "7"


def test_a_keys_blind_window_holds_the_moment_it_was_pressed(display):
    """A press posted between polls is stamped by the next poll; its window reaches back to it."""
    from runner.session.views import BlankView

    display.show(BlankView())
    posted = display.post_key("3")  # read by the poll right before the next flip
    t_flip = display.show(BlankView())
    hit = display.wait_key(DIGITS, None)
    assert hit is not None and hit.key == "3"
    assert hit.earliest <= posted <= hit.t <= t_flip
    assert hit.blind_ms == pytest.approx((hit.t - hit.earliest) * 1000.0)


def test_run_refuses_a_headless_video_driver_before_creating_anything(tmp_path, monkeypatch):
    """`trialdeck run` with SDL_VIDEODRIVER=dummy is a usage error and creates no folder."""
    monkeypatch.setenv("SDL_VIDEODRIVER", "dummy")
    out = tmp_path / "out"
    code = main(["run", str(MINI_PROTOCOL), "--participant", "P01", "--out", str(out)])
    assert code == EXIT_USAGE
    assert not out.exists()


def test_desktop_other_than_the_protocol_is_refused_unless_allowed():
    """The dummy driver's 1024x768 desktop against an 800x600 protocol: refused, or allowed."""
    loaded = load_protocol(MINI_PROTOCOL)
    with pytest.raises(DisplayError, match="--allow-display-mismatch"):
        check_desktop(loaded, allow=False)
    assert check_desktop(loaded, allow=True) == (1024, 768)
