"""The engine's typed seams: what it needs from the presenter, observers, console and outputs.

Every member the engine and :mod:`runner.session.run` use is declared here, so an implementation
either has it or fails the type check; nothing is probed for at run time. The pygame presenter is
:class:`runner.present.display.Display`; the test suite's fake presenter implements the same
protocol without a window or real time. The presenter, observer and console protocols are
runtime-checkable, so a test can confirm that an implementation has every member. Nothing here
imports pygame or pylsl.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import TYPE_CHECKING, Any, Protocol, runtime_checkable

from runner.session.views import KeyHit, RatingView, View

if TYPE_CHECKING:
    from runner.protocol.schedule import ScheduledTrial
    from runner.session.engine import Engine


class Box(Protocol):
    """A rectangle on the screen (``pygame.Rect`` in practice): only its size is read."""

    @property
    def width(self) -> int: ...

    @property
    def height(self) -> int: ...


class RefreshReport(Protocol):
    """What the display's refresh measurement tells (``runner.present.timing.RefreshCheck``)."""

    @property
    def flips(self) -> int: ...

    @property
    def nominal_interval_s(self) -> float: ...

    @property
    def measured_hz(self) -> float: ...

    @property
    def jitter_ms(self) -> float: ...

    def problems(self) -> list[str]:
        """Plain sentences for each way the display fails the protocol's timing (empty: fine)."""
        ...

    def as_dict(self) -> dict[str, object]: ...


@runtime_checkable
class Presenter(Protocol):
    """What the engine and the run wiring need from a display.

    Attributes
    ----------
    interval
        The refresh interval in seconds (measured when flips block, else the protocol's).
    hold
        Keys kept aside (in ``held``) when pressed while another screen waits for input: the
        experimenter's pause key, so a pause asked for during a trial starts when it ends.
    held
        Key presses kept aside under ``hold``, oldest first; the engine clears it.
    blocking
        True when a flip waits for the vertical blank.
    paced
        True when flips are paced by trialdeck's frame clock (they do not block).
    last_late
        Whether the last flip missed the frame it was meant for.
    late_flips
        How many flips were late so far.
    last_load_wait_ms
        How long the last drawing waited for a stimulus decode (0 when it was ready).
    stimulus_rect
        Where stimuli are drawn; its size is journaled in the header.
    refresh
        The refresh measurement made on opening (None: not measured).
    screen_size
        The window's real size in pixels (the protocol's screen is drawn 1:1, centred on it).
    desktop_size
        The desktop's own size (None when unknown, e.g. headless).
    on_lost
        Called when the display connection is lost, before the process ends (the session's
        emergency close); None: nothing to close.
    """

    interval: float
    on_lost: Callable[[], None] | None
    hold: frozenset[str]
    held: list[KeyHit]
    blocking: bool
    last_late: bool
    late_flips: int

    @property
    def paced(self) -> bool: ...

    @property
    def last_load_wait_ms(self) -> float: ...

    @property
    def stimulus_rect(self) -> Box: ...

    @property
    def refresh(self) -> RefreshReport | None: ...

    @property
    def screen_size(self) -> tuple[int, int]: ...

    @property
    def desktop_size(self) -> tuple[int, int] | None: ...

    def show(self, view: View, *, at: float | None = None, photodiode: bool = False) -> float:
        """Draw ``view`` and flip at (or just after) ``at``; return the time right after the flip."""
        ...

    def prepare(self, stimulus: str) -> None:
        """Decode and scale a stimulus now, so its onset later does not wait on the disk."""
        ...

    def wait_ready(self, stimulus: str) -> None:
        """Wait until a stimulus asked for with :meth:`prepare` is decoded (session start)."""
        ...

    def wait_key(self, accept: frozenset[str] | None, deadline: float | None) -> KeyHit | None:
        """Poll input until a key in ``accept`` (any key when None) or 'escape'; None at deadline."""
        ...

    def rating_at(self, view: RatingView, pos: tuple[int, int]) -> int | None:
        """The rating whose box holds a mouse position, or None."""
        ...

    def post_key(self, key: str) -> float:
        """Inject a key press through the real input path now; return the time it was posted."""
        ...

    def drain(self) -> None:
        """Drop pending input (keys in ``hold`` go to ``held``; Escape is kept)."""
        ...

    def early_keys(self, onset: float) -> list[KeyHit]:
        """Take the presses read before ``onset``, or whose blind window reaches back to it,
        out of the input queue (Escape and quit stay queued; keys in ``hold`` go to ``held``)."""
        ...

    def close(self) -> None: ...


@runtime_checkable
class Observer(Protocol):
    """Told about the session's progress: the experimenter console, the simulated participant."""

    def on_view(self, kind: str, t: float, trial: ScheduledTrial | None, view: View) -> None:
        """A screen was flipped at ``t`` (``kind`` names the screen, e.g. 'stimulus')."""
        ...

    def on_pause(self, paused: bool, engine: Engine) -> None:
        """The experimenter's pause started (True) or ended (False)."""
        ...

    def on_storage(self, problem: str | None, engine: Engine) -> None:
        """The journal cannot be written (the problem) or can be again (None)."""
        ...

    def on_trial_end(self, row: dict[str, Any], engine: Engine) -> None:
        """A trial ended with this trials.csv row."""
        ...


@runtime_checkable
class ConsoleLike(Protocol):
    """What the session needs from the experimenter console (see runner.session.console)."""

    def info(self, text: str) -> None: ...

    def warn(self, text: str) -> None: ...


class MarkerSink(Protocol):
    """The marker outlet (runner.session.markers.MarkerOutlet in practice)."""

    def push(self, payload: str, timestamp: float) -> float:
        """Send one marker stamped ``timestamp``; return the clock right after the push."""
        ...

    def have_consumers(self) -> bool:
        """True while a recorder is connected."""
        ...


class TriggerSink(Protocol):
    """Hardware trigger output (runner.session.triggers.SerialTriggers in practice)."""

    def send(self, event: str) -> int | None:
        """Send the event's code, if it has one; return the code sent (or None)."""
        ...
