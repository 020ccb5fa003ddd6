"""The participant's display: window, frame-exact flips stamped on the one clock, and key input.

Timing rules (see docs/timing.md):

* A screen change happens when the flip returns; the time taken right after it is the event's time.
* The live display is opened at the screen's own (desktop) size, fullscreen, and never scaled:
  the protocol's resolution is drawn pixel for pixel, centred (a desktop too small is refused),
  and the photodiode patch sits in the real screen's corner.
* With a display whose flip blocks until the vertical blank, a flip requested for time ``at`` is
  issued a little before ``at`` and lands on the refresh nearest to it.
* When flips do not block (the SDL dummy driver of tests and headless pilots, a driver without
  vsync, or one that only imitates vsync, which is then switched off), flips are paced by a frame
  clock at the protocol's refresh rate, so headless runs keep the frame-quantised timing.
* Input is read into a queue by :meth:`Display.pump`, which stamps every key with the clock when
  it reads it. It runs every 0.3 ms while waiting for a key or for a flip slot, and right before
  and right after every flip; each key keeps the time since the poll before (its blind window,
  a whole flip for a key that came in while the screen was flipping). A key held down counts
  once (key-up events end a press).
* On opening, :func:`runner.present.timing.measure_refresh` flips 120 times to measure the
  refresh interval and whether flips block; blocking flips then get the vsync check
  (:func:`runner.present.timing.check_vsync`).
* On Linux with X11, losing the connection to the X server runs the session's emergency close
  (``on_lost``) from Xlib's fatal-error hook, then ends the process (Xlib would end it anyway).
"""

from __future__ import annotations

import ctypes
import dataclasses
import os
import sys
import time
from collections import deque
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pygame

from runner.contract.outputs import replace_file
from runner.errors import DisplayError
from runner.present.images import ImageCache
from runner.present.painter import Painter, Style
from runner.present.timing import (
    LATE_INTERVALS,
    MIN_MEASURE_FLIPS,
    VSYNC_EMULATED,
    FramePacer,
    RefreshCheck,
    check_vsync,
    is_late,
    measure_refresh,
)
from runner.session.markers import local_clock
from runner.session.views import PATCH_OFF, PATCH_ON, KeyHit, RatingView, View, photodiode_rect

POLL_S = 0.0003  # input polling period while waiting: about 3 kHz
SPIN_S = 0.0015  # the last part of a wait is a busy spin, because sleep overshoots
EARLY_ISSUE = 0.6  # with blocking flips, issue the flip this many intervals before its target
KEYPAD = {f"[{d}]": d for d in "0123456789"} | {"enter": "return", "[enter]": "return"}


def spin(seconds: float, clock=local_clock) -> None:
    """Busy-wait ``seconds`` (the vsync check's random waits must not be rounded by sleep)."""
    end = clock() + seconds
    while clock() < end:
        pass


def key_name(event: pygame.event.Event) -> str:
    name = pygame.key.name(event.key)
    return KEYPAD.get(name, name)


def headless() -> bool:
    return os.environ.get("SDL_VIDEODRIVER", "") in ("dummy", "offscreen")


def desktop_size() -> tuple[int, int] | None:
    """The first screen's own size in pixels (None when the video driver cannot tell)."""
    try:
        pygame.display.init()
        sizes = pygame.display.get_desktop_sizes()
    except pygame.error:
        return None
    if not sizes or not sizes[0][0] or not sizes[0][1]:
        return None
    return (int(sizes[0][0]), int(sizes[0][1]))


# -- losing the X server ----------------------------------------------------------------------
_X_HOOK: Any = None  # the ctypes callback must stay alive as long as Xlib may call it
_LOST_ACTIONS: list[Callable[[], None]] = []
_AFTER_LOST: list[Callable[[], None]] = []  # what ends the process (set by the command line)


def after_display_lost(end: Callable[[], None] | None) -> None:
    """Set what runs after the session was closed on a lost display: the CLI's message and
    exit. Without it, Xlib ends the process itself when the hook returns."""
    _AFTER_LOST.clear()
    if end is not None:
        _AFTER_LOST.append(end)


def _display_lost(_xdisplay: object) -> int:
    """Xlib's fatal IO error hook: close the open sessions, then hand over to ``after``."""
    for action in list(_LOST_ACTIONS):
        try:
            action()
        except Exception:  # noqa: BLE001 - the process ends either way; close what can be
            pass
    for end in list(_AFTER_LOST):
        end()
    return 0


def install_display_lost_hook() -> bool:
    """Install :func:`_display_lost` as Xlib's IO error handler (Linux with X11 only).

    Xlib calls this handler when the connection to the X server breaks, and calls ``exit()``
    from C after it, so Python's ``finally`` blocks and ``atexit`` never run; the handler is the
    only place the session can still be closed. Returns False where it does not apply.
    """
    global _X_HOOK
    if not sys.platform.startswith("linux"):
        return False
    try:
        if pygame.display.get_driver() != "x11":
            return False
        lib = ctypes.CDLL("libX11.so.6")  # the library SDL loaded: dlopen returns the same one
    except (pygame.error, OSError):
        return False
    handler_type = ctypes.CFUNCTYPE(ctypes.c_int, ctypes.c_void_p)
    hook = handler_type(_display_lost)
    lib.XSetIOErrorHandler.restype = ctypes.c_void_p
    lib.XSetIOErrorHandler.argtypes = [handler_type]
    lib.XSetIOErrorHandler(hook)
    _X_HOOK = hook
    return True


class Display:
    """A pygame window implementing :class:`runner.session.views.Presenter`.

    ``size`` is the protocol's resolution: the canvas every view is drawn on, pixel for pixel.
    ``screen_size`` is the window's real size: the desktop's own size for a live fullscreen
    display, else ``size``. The canvas is centred on the screen.
    """

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
        # Input read by pump(), oldest first; keys down now (a held key counts once).
        self._queue: deque[KeyHit] = deque()
        self._down: set[str] = set()
        self._pump_start = clock()
        self.on_lost: Callable[[], None] | None = None  # the session's emergency close
        try:
            pygame.display.init()
            pygame.font.init()
        except pygame.error as exc:
            raise DisplayError(f"the display cannot be opened: {exc}.") from None
        self.fullscreen = fullscreen and not headless()
        desktop = desktop_size() if not headless() else None
        self.desktop_size: tuple[int, int] | None = desktop
        self.screen_size = desktop if (self.fullscreen and desktop is not None) else self.size
        if self.size[0] > self.screen_size[0] or self.size[1] > self.screen_size[1]:
            raise DisplayError(
                f"the protocol's screen of {self.size[0]}x{self.size[1]} pixels does not fit on"
                f" this display ({self.screen_size[0]}x{self.screen_size[1]}); trialdeck draws it"
                " pixel for pixel and never scales it. Use a larger display or lower"
                " screen.resolution in the protocol."
            )
        self.origin = (
            (self.screen_size[0] - self.size[0]) // 2,
            (self.screen_size[1] - self.size[1]) // 2,
        )
        self.vsync_requested = not headless()
        self._open(vsync=self.vsync_requested)
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
        # The patch is drawn by the display in the real screen's corner, not in the canvas.
        self.patch_style = style
        self.painter = Painter(
            dataclasses.replace(style, photodiode_corner=None), self.size, box, self.images.get
        )
        self.blocking = False
        self.refresh: RefreshCheck = self.measure(measure_flips)
        if self.refresh.vsync == VSYNC_EMULATED:
            # Flips that only sleep are no vsync, and they blind input while they sleep: switch
            # vsync off and pace flips with the polling frame clock (the check stays journaled).
            verdict = self.refresh
            self._open(vsync=False)
            self.vsync_requested = False
            # Flips are paced from here on. The measurement of the imitated vsync is kept: it
            # is what the journal and the refusal report.
            self.surface.fill(style.background)
            self.painter.forget()
            pygame.display.flip()
            self.blocking = False
            self.interval = self.nominal_interval
            self._pacer = FramePacer(self.interval)
            self.refresh = dataclasses.replace(verdict, blocking=False)

    def _open(self, *, vsync: bool) -> None:
        """Create the window at ``screen_size`` (never scaled), with or without vsync."""
        if pygame.display.get_surface() is not None:
            pygame.display.quit()
            pygame.display.init()
        flags = pygame.FULLSCREEN if self.fullscreen else 0
        try:
            if vsync:
                self.surface = pygame.display.set_mode(self.screen_size, flags, vsync=1)
            else:
                self.surface = pygame.display.set_mode(self.screen_size, flags)
        except pygame.error:
            try:
                self.surface = pygame.display.set_mode(self.screen_size, flags)
                self.vsync_requested = False
            except pygame.error as exc:
                raise DisplayError(
                    f"the display cannot be opened at {self.screen_size[0]}x"
                    f"{self.screen_size[1]}: {exc}."
                ) from None
        if self.surface.get_size() != self.screen_size:
            got = self.surface.get_size()
            pygame.display.quit()
            raise DisplayError(
                f"the display opened at {got[0]}x{got[1]} instead of {self.screen_size[0]}x"
                f"{self.screen_size[1]}; trialdeck never scales the picture."
            )
        self.canvas = self.surface.subsurface(pygame.Rect(self.origin, self.size))
        pygame.display.set_caption("trialdeck")
        pygame.mouse.set_visible(False)
        pygame.event.set_blocked(None)
        pygame.event.set_allowed(
            [pygame.KEYDOWN, pygame.KEYUP, pygame.QUIT, pygame.MOUSEBUTTONDOWN]
        )
        if install_display_lost_hook() and self._lost not in _LOST_ACTIONS:
            _LOST_ACTIONS.append(self._lost)

    def _lost(self) -> None:
        if self.on_lost is not None:
            self.on_lost()

    # -- flipping ---------------------------------------------------------------------------
    def measure(self, flips: int = MIN_MEASURE_FLIPS, *, vsync_check: bool = True) -> RefreshCheck:
        """Flip a plain background ``flips`` times; adopt the measured interval if flips block.

        Without blocking flips (SDL dummy driver, vsync off) the protocol's interval is kept and
        flips are paced by a frame clock instead. Blocking flips get the vsync check: flips that
        only sleep to imitate vsync are reported (``refresh.vsync == 'emulated'``).
        """
        self.surface.fill(self.painter.style.background)
        self.painter.forget()
        check = measure_refresh(pygame.display.flip, self.clock, self.nominal_interval, flips)
        if check.blocking and vsync_check:
            verdict, spread = check_vsync(
                pygame.display.flip,
                self.clock,
                check.interval_s,
                wait=lambda seconds: spin(seconds, self.clock),
            )
            check = check.with_vsync(verdict, spread)
        self.blocking = check.blocking and check.vsync != VSYNC_EMULATED
        self.interval = check.interval_s if self.blocking else self.nominal_interval
        self._pacer = FramePacer(self.interval)
        self.refresh = check
        self._queue.clear()  # nothing is waiting for keys yet
        return check

    @property
    def paced(self) -> bool:
        """True when flips are paced by trialdeck's frame clock (flips do not block)."""
        return not self.blocking

    def _wait_until(self, t: float) -> None:
        """Wait until ``clock() >= t``, reading input all the while (a polling wait)."""
        while True:
            self.pump()
            remaining = t - self.clock()
            if remaining <= 0:
                return
            if remaining > SPIN_S:
                time.sleep(min(POLL_S, remaining - SPIN_S))

    def _flip(self, at: float | None) -> float:
        self.pump()
        now = self.clock()
        if self.blocking:
            if at is not None:
                self._wait_until(at - EARLY_ISSUE * self.interval)
        else:
            self._wait_until(self._pacer.slot(now, at))
        self.pump()
        pygame.display.flip()
        t = self.clock()
        self.pump()
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

    def _paint(self, view: View, photodiode: bool) -> None:
        self.painter.draw(self.canvas, view, photodiode=photodiode)
        corner = self.patch_style.photodiode_corner
        if corner:
            rect = photodiode_rect(self.screen_size, corner, self.patch_style.photodiode_px)
            self.surface.fill(
                pygame.Color(PATCH_ON if photodiode else PATCH_OFF), pygame.Rect(rect)
            )

    def show(self, view: View, *, at: float | None = None, photodiode: bool = False) -> float:
        self._save_pending()
        self.pump()
        self._paint(view, photodiode)
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
        self._paint(view, photodiode)
        self._current = view

    def pixels(self) -> bytes:
        """What was last drawn, as 8-bit RGB rows from top to bottom (``size`` pixels)."""
        return pygame.image.tobytes(self.canvas, "RGB")

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
            pygame.image.save(self.canvas, fh, path.name)
        self.frames_written.append(path)
        self._last_saved = view
        return path

    def prepare(self, stimulus: str) -> None:
        self.images.prepare(stimulus)

    def wait_ready(self, stimulus: str) -> None:
        """Wait for a stimulus asked for with :meth:`prepare` to be decoded (session start)."""
        self.images.wait_ready(stimulus)

    # -- input ------------------------------------------------------------------------------
    def pump(self) -> None:
        """Read pending input into the queue, each press stamped with the clock now.

        Every press also gets its blind window: the time since the poll before this one began,
        within which it happened. A key already down (auto-repeat) is not a new press.
        """
        start = self.clock()
        events = pygame.event.get()
        t = self.clock()
        blind_ms = (t - self._pump_start) * 1000.0
        self._pump_start = start
        for ev in events:
            if ev.type == pygame.KEYDOWN:
                name = key_name(ev)
                if name in self._down:
                    continue
                self._down.add(name)
                self._queue.append(KeyHit(name, t, blind_ms=blind_ms))
            elif ev.type == pygame.KEYUP:
                self._down.discard(key_name(ev))
            elif ev.type == pygame.MOUSEBUTTONDOWN:
                if ev.button == 1:
                    pos = (ev.pos[0] - self.origin[0], ev.pos[1] - self.origin[1])
                    self._queue.append(KeyHit("click", t, pos, blind_ms=blind_ms))
            elif ev.type == pygame.QUIT:
                self._queue.append(KeyHit("quit", t, blind_ms=blind_ms))

    def wait_key(self, accept: frozenset[str] | None, deadline: float | None) -> KeyHit | None:
        """The first queued press in ``accept`` (or Escape, or quit); None at ``deadline``.

        Presses before it that are not accepted are dropped (keys in ``hold`` go to ``held``);
        presses after it stay queued for the next wait, with their own times.
        """
        self._save_pending()
        self.pump()
        while True:
            while self._queue:
                hit = self._queue.popleft()
                if hit.key == "quit":
                    return hit
                if hit.key == "click":
                    if accept is not None and "click" in accept:
                        return hit
                    continue
                if accept is None or hit.key in accept or hit.key == "escape":
                    return hit
                if hit.key in self.hold:
                    self.held.append(hit)
            self.polls += 1
            if deadline is not None and self.clock() >= deadline:
                return None
            time.sleep(POLL_S)
            self.pump()

    def early_keys(self, onset: float) -> list[KeyHit]:
        """Take the presses that came before ``onset`` (or may have) out of the queue.

        A press counts as early when it was read before ``onset`` or when its blind window
        reaches back to ``onset`` (it came in while the onset's flip ran). Escape and quit stay
        queued for the engine; keys in ``hold`` go to ``held``.
        """
        self.pump()
        early: list[KeyHit] = []
        keep: deque[KeyHit] = deque()
        for hit in self._queue:
            if hit.key in ("escape", "quit") or hit.earliest > onset:
                keep.append(hit)
            elif hit.key in self.hold:
                self.held.append(hit)
            else:
                early.append(hit)
        self._queue = keep
        return early

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
            x, y = self.painter.rating_boxes(points)[int(key.split(":", 1)[1]) - 1].center
            pos = (x + self.origin[0], y + self.origin[1])
            t = self.clock()
            pygame.event.post(pygame.event.Event(pygame.MOUSEBUTTONDOWN, button=1, pos=pos))
            return t
        code = pygame.key.key_code(key)
        char = key if len(key) == 1 else (" " if key == "space" else "")
        t = self.clock()
        pygame.event.post(
            pygame.event.Event(pygame.KEYDOWN, key=code, unicode=char, mod=0, scancode=0)
        )
        pygame.event.post(
            pygame.event.Event(pygame.KEYUP, key=code, unicode=char, mod=0, scancode=0)
        )
        return t

    def drain(self) -> None:
        """Forget pending input (keys pressed before a screen that must not take them).

        The experimenter's held keys (pause) are kept for the engine, and Escape and quit are
        kept so an abort request is never lost.
        """
        self.pump()
        keep: deque[KeyHit] = deque()
        for hit in self._queue:
            if hit.key in ("escape", "quit"):
                keep.append(hit)
            elif hit.key in self.hold:
                self.held.append(hit)
        self._queue = keep

    def close(self) -> None:
        if self._lost in _LOST_ACTIONS:
            _LOST_ACTIONS.remove(self._lost)
        self.on_lost = None
        self._save_pending()
        self.images.close()
        pygame.display.quit()


def display_for(loaded, *, fullscreen: bool, frames_dir: Path | None = None) -> Display:
    """Open the participant's display as a loaded protocol describes it."""
    from runner.protocol.sizes import stimulus_box
    from runner.protocol.texts import font_path

    screen = loaded.model.screen
    pd = loaded.model.photodiode
    style = Style.from_colours(
        screen.background,
        screen.text_colour,
        screen.accent_colour,
        screen.font_px,
        photodiode_corner=pd.corner if pd else None,
        photodiode_px=pd.size_px if pd else 48,
        font=font_path(loaded.model, loaded.path),
        texts=loaded.model.texts,
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
