"""The session engine: one loop for live runs and pilots (replays redraw its journaled views).

The engine walks the schedule, asks the presenter to show views at frame-exact times, stamps
every screen change with the time right after its flip, sends a marker with that same timestamp,
and journals everything. It imports neither pygame nor pylsl: the presenter, the marker outlet
and the clock are handed in (their types are in :mod:`runner.session.ports`).

This module is the loop over the schedule's items (pages, rests, breaks, blocks) and the shared
means of showing, marking and waiting; one trial's screens are in :mod:`runner.session.trial`,
pauses, aborts and storage pauses in :mod:`runner.session.interrupts`.
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from runner.protocol.load import LoadedProtocol
from runner.protocol.schedule import Item, Schedule, ScheduledTrial
from runner.protocol.texts import break_ready_hint, page_hint
from runner.session.events import MARKED_EVENTS, encode_marker
from runner.session.interrupts import (
    QUIT_KEY,
    WATCH_S,
    AbortRequested,
    Interruptions,
)
from runner.session.journal import Journal
from runner.session.ports import MarkerSink, Observer, Presenter, TriggerSink
from runner.session.trial import TrialOutcome, TrialScreens, frames_for, stimulus_abspath
from runner.session.views import (
    BlankView,
    BreakView,
    FixationView,
    KeyHit,
    PageView,
    View,
    view_to_dict,
)

__all__ = ["AbortRequested", "Engine", "SessionState", "frames_for", "resume_index"]

PAYLOAD_FIELDS = (
    "stimulus",
    "block",
    "part",
    "label",
    "key",
    "answer",
    "unsure",
    "rating",
    "status",
)
PREFETCH_AHEAD = 2  # stimuli decoded ahead, so a slow decode never reaches an onset
RECENT_SCREENS = 32
DEFAULT_PAUSE_KEY = "p"


@dataclass
class SessionState:
    """The session's progress, for the console and the run's result."""

    done_trials: set[int] = field(default_factory=set)
    answered: int = 0
    correct: int = 0
    unsure: int = 0
    recorder_connected: bool | None = None
    started: float = 0.0
    attempt: int = 1
    paused: bool = False
    storage_problem: str | None = None
    current_part: str = ""
    current_block: str = ""
    current_trial: int | None = None
    trial_seconds: list[float] = field(default_factory=list)


class Engine:
    """Runs one session's schedule on a presenter.

    Parameters
    ----------
    loaded, schedule
        The validated protocol and this participant's schedule.
    presenter
        The display (``runner.present.display.Display`` in practice).
    journal, markers
        Where events go. Every marked event is pushed with its flip time as the LSL timestamp.
    clock
        The one clock (``pylsl.local_clock``).
    speed
        Pilots only: every wait and time limit is divided by this.
    observers
        Told about every screen change (console, simulated participant).
    skip_trials
        Trials already completed in an earlier attempt (resume).
    extra_row
        Adds pilot columns (``sim_rt_ms``) to each trial record.
    on_recorder_change
        Called with True/False when a recorder connects to or drops from the marker stream.
    pause_key
        The experimenter's pause key, taken between trials and during untimed waits (None: off).
    triggers
        Optional hardware trigger output; each marked event with a code sends it.
    resume_attempt
        On resume, the attempt number (2 for the first resume): the session continues at the
        first incomplete trial with a ``session_resume`` marker instead of ``session_start``.
    """

    def __init__(
        self,
        loaded: LoadedProtocol,
        schedule: Schedule,
        *,
        presenter: Presenter,
        journal: Journal,
        markers: MarkerSink,
        clock: Callable[[], float],
        speed: float = 1.0,
        observers: list[Observer] | None = None,
        skip_trials: set[int] | None = None,
        extra_row: Callable[[ScheduledTrial], dict[str, Any]] | None = None,
        on_recorder_change: Callable[[bool], None] | None = None,
        pause_key: str | None = DEFAULT_PAUSE_KEY,
        triggers: TriggerSink | None = None,
        resume_attempt: int | None = None,
    ):
        self.loaded = loaded
        self.model = loaded.model
        self.schedule = schedule
        self.presenter = presenter
        self.journal = journal
        self.markers = markers
        self.clock = clock
        self.speed = float(speed)
        self.observers = observers or []
        self.skip = skip_trials or set()
        self.extra_row = extra_row
        self.on_recorder_change = on_recorder_change
        self.state = SessionState()
        # When the next timed screen is due (None: as soon as possible).
        self.next_at: float | None = None
        # What is on the screen now, to bring it back after an interruption.
        self.current_view: View = BlankView()
        self.current_photodiode = False
        self.current_kind: str = "blank"
        self.current_screen_trial: ScheduledTrial | None = None
        self.total_trials = len(schedule.trials)
        self.push_delays_us: list[float] = []
        self._pushed: tuple[str, float, str, float, int | None] | None = None
        self.pause_key = pause_key
        self.triggers = triggers
        self.resume_attempt = resume_attempt
        self._screen_t: float | None = None
        # The last screens shown (flip time, kind), to name the screen an early key was pressed on.
        self._recent_screens: deque[tuple[float, str]] = deque(maxlen=RECENT_SCREENS)
        self._screen_frames: int | None = None
        self.interrupted = False  # the current trial was interrupted by a storage pause
        self.trial_t0 = 0.0
        self.interrupts = Interruptions(self)
        self.trial_screens = TrialScreens(self)
        if pause_key is not None:
            # Keys the display keeps when pressed while another screen waits for input, so a
            # pause asked for during a trial starts when that trial ends.
            presenter.hold = frozenset({pause_key})
        journal.on_error = self.interrupts.storage_failed
        journal.on_recover = self.interrupts.storage_recovered
        # Start of the current stretch of trials: breaks.every_minutes counts from here.
        self.since_pause = 0.0

    # -- journaling and markers ---------------------------------------------------------------
    def emit(
        self, event: str, t: float, *, trial: int | None = None, **fields: Any
    ) -> dict[str, Any]:
        """Journal an event at time ``t``; marked events also go out as an LSL marker stamped ``t``."""
        record: dict[str, Any] = {"t": t}
        if trial is not None:
            record["trial"] = trial
        record.update(fields)
        if event in MARKED_EVENTS:
            pushed = self._pushed
            if pushed is not None and pushed[0] == event and pushed[1] == t:
                payload, delay, code = pushed[2], pushed[3], pushed[4]
                self._pushed = None
            else:
                payload = self.marker_payload(event, trial, fields)
                delay, code = self.push_marker(event, payload, t)
            record["marker"] = payload
            record["push_us"] = round(delay, 1)
            if code is not None:
                record["trigger"] = code
        return self.journal.append(event, **record)

    @staticmethod
    def marker_payload(event: str, trial: int | None, fields: dict[str, Any]) -> str:
        """The marker's JSON payload: the event, the trial and the fields markers carry."""
        payload_fields: dict[str, Any] = {"trial": trial} if trial is not None else {}
        payload_fields.update({k: v for k, v in fields.items() if k in PAYLOAD_FIELDS})
        return encode_marker(event, **payload_fields)

    def push_marker(self, event: str, payload: str, t: float) -> tuple[float, int | None]:
        """Push a marker stamped ``t`` (and its trigger code); return the push delay in us and the code."""
        after = self.markers.push(payload, t)
        delay = (after - t) * 1e6
        self.push_delays_us.append(delay)
        code = self.triggers.send(event) if self.triggers is not None else None
        return delay, code

    def frames(self, ms: float) -> int:
        """A requested duration as whole frames at the display's refresh interval."""
        return frames_for(ms, self.presenter.interval, self.speed)

    def show(
        self,
        view: View,
        kind: str,
        trial: ScheduledTrial | None = None,
        *,
        at: float | None = None,
        photodiode: bool = False,
        mark: str | None = None,
        frames: int | None = None,
        **mark_fields: Any,
    ) -> float:
        """Show a view; with ``mark``, push that event's marker straight after the flip.

        The marker goes out before anything else runs (observers, journal), so the delay from
        flip to push stays small; :meth:`emit` then journals it with the same timestamp.
        ``frames`` is the screen's requested duration in whole frames, when it has one; the
        next flip journals it next to the duration the screen actually had.
        """
        payload = None
        if mark is not None:
            payload = self.marker_payload(
                mark, trial.trial if trial is not None else None, mark_fields
            )
        t = self.presenter.show(view, at=at, photodiode=photodiode)
        if mark is not None and payload is not None:
            self._pushed = (mark, t, payload, *self.push_marker(mark, payload, t))
        self.current_view = view
        self.current_photodiode = photodiode
        self.current_kind, self.current_screen_trial = kind, trial
        # Every screen change is journaled with what was drawn, so audit can time each screen
        # and replay can redraw it exactly.
        flip: dict[str, Any] = {"t": t, "kind": kind, "view": view_to_dict(view)}
        if trial is not None:
            flip["trial"] = trial.trial
        if photodiode:
            flip["photodiode"] = True
        if at is not None:
            flip["at"] = at
        if frames is not None:
            flip["frames"] = frames
        if self._screen_t is not None:
            shown = t - self._screen_t
            flip["prev_ms"] = round(shown * 1000, 3)
            if self._screen_frames is not None:
                flip["prev_requested_frames"] = self._screen_frames
                flip["prev_frames"] = round(shown / self.presenter.interval)
        if self.presenter.last_late:
            flip["late"] = True
        wait_ms = self.presenter.last_load_wait_ms
        if wait_ms:
            flip["load_wait_ms"] = round(wait_ms, 3)
        self._screen_t, self._screen_frames = t, frames
        self._recent_screens.append((t, kind))
        self.journal.append("flip", **flip)
        for obs in self.observers:
            obs.on_view(kind, t, trial, view)
        return t

    def screen_at(self, t: float) -> str:
        """The kind of screen that was showing at ``t`` ('before' when older than those kept)."""
        for flip_t, kind in reversed(self._recent_screens):
            if flip_t <= t:
                return kind
        return "before"

    def anticipations(self, trial: ScheduledTrial, onset: float) -> list[KeyHit]:
        """Journal the presses that came before the stimulus ``onset`` as ``anticipation``s.

        They are taken out of the input queue, so none of them can become the response. A press
        whose blind window reaches back to the onset (it came in during the onset's flip) counts
        as early too: it may have been pressed before the stimulus was on the screen.
        """
        early = self.presenter.early_keys(onset)
        for hit in early:
            self.journal.append(
                "anticipation",
                t=hit.t,
                trial=trial.trial,
                key=hit.key,
                screen=self.screen_at(hit.earliest),
                blind_ms=round(hit.blind_ms, 3),
                before_onset_ms=round((onset - hit.t) * 1000, 3),
            )
        return early

    def limit(self, seconds: float | None) -> float | None:
        """A protocol time limit in seconds at this run's speed (None: no limit)."""
        return None if seconds is None else seconds / self.speed

    # -- input with abort confirmation ----------------------------------------------------------
    def key(
        self,
        accept: frozenset[str] | None,
        deadline: float | None,
        outcome: TrialOutcome | None = None,
        trial: ScheduledTrial | None = None,
        *,
        pausable: bool = False,
    ) -> KeyHit | None:
        """Wait for a key in ``accept`` until ``deadline``; Escape asks to abort, quit aborts.

        With ``pausable`` the experimenter's pause key pauses the session here and the wait goes
        on afterwards. An abort that is cancelled marks ``outcome`` as interrupted.
        """
        pause = self.pause_key if pausable and accept is not None else None
        if pause is not None and accept is not None and pause in accept:
            pause = None  # the screen's own key wins
        wanted = accept if pause is None or accept is None else accept | {pause}
        while True:
            hit = self.presenter.wait_key(wanted, deadline)
            if hit is not None and hit.key == QUIT_KEY:
                # The window was closed or the program was told to stop: a deliberate act, not
                # a stray key, so it ends the session without asking.
                self.journal.append(
                    "abort_requested", t=hit.t, source="window closed or stop signal"
                )
                raise AbortRequested()
            if hit is not None and pause is not None and hit.key == pause:
                self.interrupts.pause(trial)
                continue
            if hit is None or hit.key != "escape":
                return hit
            self.interrupts.confirm_abort(trial)
            if outcome is not None:
                outcome.interrupted = True

    def wait(self, accept: frozenset[str], trial: ScheduledTrial | None = None) -> KeyHit:
        """An untimed wait (page, break, pause): pausable, and watching the recorder."""
        while True:
            self.watch_recorder(self.clock())
            hit = self.key(accept, self.clock() + WATCH_S, trial=trial, pausable=True)
            if hit is not None:
                return hit

    # -- the session ----------------------------------------------------------------------------
    def run(self) -> None:
        """Run every schedule item. Raises AbortRequested when the experimenter ends the session."""
        self.state.started = self.clock()
        self.since_pause = self.state.started
        self.prefetch(None)
        items = list(self.schedule.items)
        first = 0
        if self.resume_attempt is None:
            self.emit(
                "session_start",
                self.state.started,
                participant=self.schedule.participant,
                session=self.schedule.session,
            )
        else:
            self.state.attempt = self.resume_attempt
            first = resume_index(self.schedule, self.skip)
            self.emit(
                "session_resume",
                self.state.started,
                participant=self.schedule.participant,
                session=self.schedule.session,
                attempt=self.resume_attempt,
                trials_done=len(self.skip),
                item=first,
            )
        self.journal.sync()
        if self.resume_attempt is not None and first < len(items):
            self._resume_page()
        for item in items[first:]:
            if item.kind == "block" and all(t.trial in self.skip for t in item.trials):
                continue
            if item.kind == "page":
                self._page(item)
            elif item.kind == "rest":
                self._rest(item)
            elif item.kind == "break":
                if not self._break_already_done(item):
                    self._break(item)
            elif item.kind == "block":
                self._block(item)
        t = self.show(BlankView(), "end", mark="session_end", status="completed")
        self.emit("session_end", t, status="completed")
        self.journal.sync()

    def _resume_page(self) -> None:
        """After a crash the participant is told the session goes on, and starts it with a key."""
        texts = self.model.texts
        t = self.show(
            PageView(texts.resume, hint=page_hint(texts, "space")), "page", mark="page_onset"
        )
        self.emit("page_onset", t, item=None, step=None, resume=True)
        hit = self.wait(frozenset({"space"}))
        self.emit("page_end", hit.t, item=None, key=hit.key)
        self.next_at = None
        self.since_pause = hit.t

    def _break_already_done(self, item: Item) -> bool:
        # On resume, a break between two completed trials is not repeated.
        idx = list(self.schedule.items).index(item)
        later = [
            t.trial
            for it in self.schedule.items[idx + 1 :]
            if it.kind == "block"
            for t in it.trials
        ]
        return bool(later) and later[0] in self.skip

    def _page(self, item: Item) -> None:
        last = item is self.schedule.items[-1]
        hint = page_hint(self.model.texts, item.key, last=last)
        t = self.show(
            PageView(item.text, hint=hint, key=item.key),
            "page",
            at=self.next_at,
            mark="page_onset",
        )
        self.emit("page_onset", t, item=item.index, step=item.step)
        self.journal.sync()
        hit = self.wait(frozenset({item.key}))
        self.emit("page_end", hit.t, item=item.index, key=hit.key)
        self.next_at = None
        self.since_pause = hit.t

    def _rest(self, item: Item) -> None:
        view: View = FixationView() if item.show == "fixation" else BlankView()
        frames = self.frames(item.seconds * 1000.0)
        t0 = self.show(
            view, "rest", at=self.next_at, mark="rest_start", frames=frames, label=item.label
        )
        self.emit("rest_start", t0, label=item.label, requested_s=item.seconds, frames=frames)
        self.journal.sync()
        end = t0 + frames * self.presenter.interval
        while self.clock() < end - self.presenter.interval * 0.75:
            self.watch_recorder(self.clock())
            self.key(frozenset(), min(end - self.presenter.interval * 0.75, self.clock() + WATCH_S))
        t1 = self.show(BlankView(), "rest-end", at=end, mark="rest_end", label=item.label)
        self.emit("rest_end", t1, label=item.label, actual_s=round(t1 - t0, 6))
        self.journal.sync()
        self.next_at = None
        self.since_pause = t1

    def _break(self, item: Item) -> None:
        min_s = item.seconds / self.speed
        hint_ready = break_ready_hint(self.model.texts, item.key)
        t0 = self.show(
            BreakView(item.text, math.ceil(min_s)), "break", at=self.next_at, mark="break_start"
        )
        self.emit("break_start", t0, item=item.index, requested_s=item.seconds)
        self.journal.sync()
        shown = math.ceil(min_s)
        while True:
            left = min_s - (self.clock() - t0)
            if left <= 0:
                break
            if math.ceil(left) != shown:
                shown = math.ceil(left)
                self.show(BreakView(item.text, shown), "break-tick")
            self.watch_recorder(self.clock())
            self.key(frozenset(), min(self.clock() + 0.25, t0 + min_s), pausable=True)
        self.show(BreakView(item.text, 0, hint=hint_ready, key=item.key), "break-ready")
        hit = self.wait(frozenset({item.key}))
        self.emit("break_end", hit.t, item=item.index, actual_s=round(hit.t - t0, 6))
        self.journal.sync()
        self.next_at = None
        self.since_pause = hit.t

    def _block(self, item: Item) -> None:
        t = self.clock()
        self.emit(
            "block_start",
            t,
            block=item.label,
            part=item.part,
            block_index=item.trials[0].block_index,
        )
        self.state.current_part, self.state.current_block = item.part, item.label
        for trial in item.trials:
            if trial.trial in self.skip:
                continue
            if item.part == "main":
                self._timed_break(item)
            self.interrupts.between_trials(trial)
            self.trial_screens.run(trial)
        self.emit("block_end", self.clock(), block=item.label, part=item.part)
        self.journal.sync()

    def _timed_break(self, item: Item) -> None:
        """A break once breaks.every_minutes have passed since the last pause (item -1 in the journal)."""
        breaks = self.model.breaks
        if breaks is None or not breaks.every_minutes:
            return
        if self.clock() - self.since_pause < breaks.every_minutes * 60.0 / self.speed:
            return
        self._break(
            Item("break", -1, item.step, text=breaks.text, key=breaks.key, seconds=breaks.min_s)
        )

    def prefetch(self, after: ScheduledTrial | None) -> None:
        """Ask the display to decode the next trials' stimuli (after ``after``, or the first)."""
        todo = [t for t in self.schedule.trials if t.trial not in self.skip]
        if after is not None:
            todo = [t for t in todo if t.trial > after.trial]
        for t in todo[:PREFETCH_AHEAD]:
            self.presenter.prepare(str(stimulus_abspath(self.loaded, t)))
        if after is None and todo:
            # Before the session starts there is time: make sure the first onset finds its image.
            self.presenter.wait_ready(str(stimulus_abspath(self.loaded, todo[0])))

    def watch_recorder(self, t: float) -> None:
        connected = self.markers.have_consumers()
        if connected != self.state.recorder_connected:
            changed = self.state.recorder_connected is not None or connected
            self.state.recorder_connected = connected
            if changed:
                self.journal.append("recorder_connected" if connected else "recorder_lost", t=t)
                if self.on_recorder_change is not None:
                    self.on_recorder_change(connected)


def resume_index(schedule: Schedule, done: set[int]) -> int:
    """Index of the schedule item a resumed session starts at.

    That is the block holding the first incomplete trial (its completed trials are skipped);
    every page, rest and break before it was already seen. When every trial is done, the
    session continues after the last block (closing pages).
    """
    items = list(schedule.items)
    last_block = -1
    for i, item in enumerate(items):
        if item.kind == "block":
            last_block = i
            if any(t.trial not in done for t in item.trials):
                return i
    return last_block + 1
