"""The participant's display: window, frame-exact flips stamped on the one clock, and key polling.

Timing rules (see docs/timing.md):

* A screen change happens when the flip returns; the time taken right after it is the event's time.
* With a display whose flip blocks until the vertical blank, a flip requested for time ``at`` is
  issued a little before ``at`` and lands on the refresh nearest to it.
* When flips do not block (the SDL dummy driver of tests and headless pilots, or a driver without
  vsync), flips are paced by a frame clock at the protocol's refresh rate, so headless runs keep
  the lab display's frame-quantised timing.
* While waiting for a key nothing is redrawn, and input is polled every 0.3 ms (over 1 kHz).
* On opening, :func:`runner.present.timing.measure_refresh` flips 120 times to measure the
  refresh interval and whether flips block; the measured interval is then used for frame counts.
"""

from __future__ import annotations

import os
import time
from pathlib import Path

import pygame

from runner.contract.outputs import replace_file
from runner.errors import DisplayError
from runner.present.images import ImageCache
from runner.present.painter import Painter, Style
from runner.present.timing import (
    LATE_INTERVALS,
    MIN_MEASURE_FLIPS,
    FramePacer,
    RefreshCheck,
    is_late,
    measure_refresh,
)
from runner.session.markers import local_clock
from runner.session.views import KeyHit, RatingView, View

POLL_S = 0.0003  # input polling period while waiting: about 3 kHz
SPIN_S = 0.0015  # the last part of a wait is a busy spin, because sleep overshoots
EARLY_ISSUE = 0.6  # with blocking flips, issue the flip this many intervals before its target
KEYPAD = {f"[{d}]": d for d in "0123456789"} | {"enter": "return", "[enter]": "return"}


def sleep_until(t: float, clock=local_clock) -> None:
    """Sleep, then spin, until ``clock() >= t``."""
    while True:
        remaining = t - clock()
        if remaining <= 0:
            return
        if remaining > SPIN_S:
            time.sleep(remaining - SPIN_S)


def key_name(event: pygame.event.Event) -> str:
    name = pygame.key.name(event.key)
    return KEYPAD.get(name, name)


def headless() -> bool:
    return os.environ.get("SDL_VIDEODRIVER", "") in ("dummy", "offscreen")


class Display:
    """A pygame window implementing :class:`runner.session.views.Presenter`."""

    def __init__(
        self,
        *,
        resolution: tuple[int, int],
        refresh_hz: float,
        style: Style,
        stimulus_box: tuple[int, int],
        fullscreen: bool = True,
        frames_dir: Path | None = None,
        cache_bytes: int | None = None,
        clock=local_clock,
        measure_flips: int = MIN_MEASURE_FLIPS,
    ):
        self.clock = clock
        self.size = (int(resolution[0]), int(resolution[1]))
        self.interval = 1.0 / float(refresh_hz)
        self.late_flips = 0
        self.last_late = False
        self.flips = 0
        self.polls = 0  # input polls while waiting (the self-test reports their rate)
        self.hold: frozenset[str] = frozenset()
        self.held: list[KeyHit] = []
        self.frames_dir = frames_dir
        self.frames_written: list[Path] = []
        self._last_saved: View | None = None
        self._pending: View | None = None
        self._current: View | None = None  # the view last drawn
        self._pacer = FramePacer(self.interval)
        self.nominal_interval = self.interval
        try:
            pygame.display.init()
            pygame.font.init()
        except pygame.error as exc:
            raise DisplayError(f"the display cannot be opened: {exc}.") from None
        flags = pygame.FULLSCREEN if fullscreen and not headless() else 0
        self.vsync_requested = not headless()
        try:
            if self.vsync_requested:
                self.surface = pygame.display.set_mode(self.size, flags | pygame.SCALED, vsync=1)
            else:
                self.surface = pygame.display.set_mode(self.size, flags)
        except pygame.error:
            try:
                self.surface = pygame.display.set_mode(self.size, flags)
                self.vsync_requested = False
            except pygame.error as exc:
                raise DisplayError(
                    f"the display cannot be opened at {self.size[0]}x{self.size[1]}: {exc}."
                ) from None
        pygame.display.set_caption("trialdeck")
        pygame.mouse.set_visible(False)
        pygame.event.set_blocked(None)
        pygame.event.set_allowed([pygame.KEYDOWN, pygame.QUIT, pygame.MOUSEBUTTONDOWN])
        self.mouse_ratings = False  # show the pointer on rating screens (protocol rating.input)
        self._pointer = False
        box = pygame.Rect(0, 0, *stimulus_box)
        box.center = (self.size[0] // 2, self.size[1] // 2)
        self.stimulus_rect = box
        self.images = (
            ImageCache(stimulus_box, background=style.background, max_bytes=cache_bytes)
            if cache_bytes
            else ImageCache(stimulus_box, background=style.background)
        )
        self.painter = Painter(style, self.size, box, self.images.get)
        self.blocking = False
        self.refresh: RefreshCheck = self.measure(measure_flips)

    # -- flipping ---------------------------------------------------------------------------
    def measure(self, flips: int = MIN_MEASURE_FLIPS) -> RefreshCheck:
        """Flip a plain background ``flips`` times; adopt the measured interval if flips block.

        Without blocking flips (SDL dummy driver, vsync off) the protocol's interval is kept and
        flips are paced by a frame clock instead.
        """
        self.surface.fill(self.painter.style.background)
        self.painter.forget()
        check = measure_refresh(pygame.display.flip, self.clock, self.nominal_interval, flips)
        self.blocking = check.blocking
        self.interval = check.interval_s if check.blocking else self.nominal_interval
        self._pacer = FramePacer(self.interval)
        self.refresh = check
        return check

    @property
    def paced(self) -> bool:
        """True when flips are paced by trialdeck's frame clock (flips do not block)."""
        return not self.blocking

    def _flip(self, at: float | None) -> float:
        now = self.clock()
        if self.blocking:
            if at is not None:
                sleep_until(at - EARLY_ISSUE * self.interval, self.clock)
            pygame.display.flip()
            t = self.clock()
        else:
            sleep_until(self._pacer.slot(now, at), self.clock)
            pygame.display.flip()
            t = self.clock()
        self.flips += 1
        if at is not None:
            late = is_late(t, at, self.interval)
        else:
            # Asked for "now": it should land within the next refresh.
            late = t - now > LATE_INTERVALS * self.interval
        self.last_late = late
        self.late_flips += late
        return t

    @property
    def last_load_wait_ms(self) -> float:
        """How long the last drawing waited for a stimulus decode, in ms (0 when it was ready)."""
        return self.images.last_wait_s * 1000.0

    def show(self, view: View, *, at: float | None = None, photodiode: bool = False) -> float:
        self._save_pending()
        self.painter.draw(self.surface, view, photodiode=photodiode)
        pointer = self.mouse_ratings and isinstance(view, RatingView)
        if pointer != self._pointer:
            pygame.mouse.set_visible(pointer)
            self._pointer = pointer
        self._current = view
        t = self._flip(at)
        if self.frames_dir is not None and view != self._last_saved:
            # Saved later (before the next drawing or input wait), so the marker push that
            # follows this flip is not delayed by PNG encoding.
            self._pending = view
        return t

    def draw(self, view: View, *, photodiode: bool = False) -> None:
        """Draw ``view`` without flipping (headless frame export reads it with :meth:`pixels`)."""
        self._save_pending()
        self.painter.draw(self.surface, view, photodiode=photodiode)
        self._current = view

    def pixels(self) -> bytes:
        """What was last drawn, as 8-bit RGB rows from top to bottom (``size`` pixels)."""
        return pygame.image.tobytes(self.surface, "RGB")

    def _save_pending(self) -> None:
        view = self._pending
        if view is not None:
            self._pending = None
            self.save_frame(view)

    def save_frame(self, view: View) -> Path:
        assert self.frames_dir is not None
        self.frames_dir.mkdir(parents=True, exist_ok=True)
        path = self.frames_dir / f"{len(self.frames_written) + 1:05d}-{type(view).__name__}.png"
        with replace_file(path, binary=True) as fh:  # never written through a link
            pygame.image.save(self.surface, fh, path.name)
        self.frames_written.append(path)
        self._last_saved = view
        return path

    def prepare(self, stimulus: str) -> None:
        self.images.prepare(stimulus)

    def wait_ready(self, stimulus: str) -> None:
        """Wait for a stimulus asked for with :meth:`prepare` to be decoded (session start)."""
        self.images.wait_ready(stimulus)

    # -- input ------------------------------------------------------------------------------
    def wait_key(self, accept: frozenset[str] | None, deadline: float | None) -> KeyHit | None:
        self._save_pending()
        while True:
            for ev in pygame.event.get():
                if ev.type == pygame.QUIT:
                    return KeyHit("quit", self.clock())
                if ev.type == pygame.MOUSEBUTTONDOWN:
                    if ev.button == 1 and accept is not None and "click" in accept:
                        return KeyHit("click", self.clock(), tuple(ev.pos))
                    continue
                if ev.type == pygame.KEYDOWN:
                    t = self.clock()
                    name = key_name(ev)
                    if accept is None or name in accept or name == "escape":
                        return KeyHit(name, t)
                    if name in self.hold:
                        self.held.append(KeyHit(name, t))
            self.polls += 1
            if deadline is not None and self.clock() >= deadline:
                return None
            time.sleep(POLL_S)

    def rating_at(self, view: RatingView, pos: tuple[int, int]) -> int | None:
        """The rating whose box holds ``pos`` (1-based), or None for a click beside the boxes."""
        for i, rect in enumerate(self.painter.rating_boxes(view.points)):
            if rect.collidepoint(pos):
                return i + 1
        return None

    def post_key(self, key: str) -> float:
        if key.startswith("click:"):
            # The simulated participant clicks the centre of a box of the rating on screen.
            view = self._current
            points = view.points if isinstance(view, RatingView) else 9
            pos = self.painter.rating_boxes(points)[int(key.split(":", 1)[1]) - 1].center
            t = self.clock()
            pygame.event.post(pygame.event.Event(pygame.MOUSEBUTTONDOWN, button=1, pos=pos))
            return t
        code = pygame.key.key_code(key)
        char = key if len(key) == 1 else (" " if key == "space" else "")
        t = self.clock()
        pygame.event.post(
            pygame.event.Event(pygame.KEYDOWN, key=code, unicode=char, mod=0, scancode=0)
        )
        return t

    def drain(self) -> None:
        """Forget pending input (keys pressed before a screen that must not take them).

        The experimenter's held keys (pause) are kept for the engine, and Escape is kept so an
        abort request is never lost.
        """
        for ev in pygame.event.get():
            if ev.type == pygame.QUIT:
                pygame.event.post(pygame.event.Event(pygame.QUIT))
            elif ev.type == pygame.KEYDOWN:
                name = key_name(ev)
                if name in self.hold:
                    self.held.append(KeyHit(name, self.clock()))
                elif name == "escape":
                    pygame.event.post(ev)
                    return

    def close(self) -> None:
        self._save_pending()
        self.images.close()
        pygame.display.quit()


def display_for(loaded, *, fullscreen: bool, frames_dir: Path | None = None) -> Display:
    """Open the participant's display as a loaded protocol describes it."""
    from runner.protocol.sizes import stimulus_box

    screen = loaded.model.screen
    pd = loaded.model.photodiode
    style = Style.from_colours(
        screen.background,
        screen.text_colour,
        screen.accent_colour,
        screen.font_px,
        photodiode_corner=pd.corner if pd else None,
        photodiode_px=pd.size_px if pd else 48,
    )
    display = Display(
        resolution=screen.resolution,
        refresh_hz=screen.refresh_hz,
        style=style,
        stimulus_box=stimulus_box(loaded.model),
        fullscreen=fullscreen,
        frames_dir=frames_dir,
    )
    display.mouse_ratings = loaded.model.rating.input != "keys"
    return display
