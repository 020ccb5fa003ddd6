"""The session engine: one loop for live runs, pilots and (through the same views) replays.

The engine walks the schedule, asks the presenter to show views at frame-exact times, stamps
every screen change with the time right after its flip, sends a marker with that same timestamp,
and journals everything. It imports neither pygame nor pylsl: the presenter, the marker outlet
and the clock are handed in.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from runner.protocol.load import LoadedProtocol
from runner.protocol.schedule import Item, Schedule, ScheduledTrial
from runner.session.events import MARKED_EVENTS, encode_marker
from runner.session.journal import Journal
from runner.session.ports import MarkerSink, Observer, Presenter, TriggerSink
from runner.session.views import (
    RATING_SHOW_CHOICE_S,
    AnswerView,
    BlankView,
    BreakView,
    ConfirmView,
    FeedbackView,
    FixationView,
    KeyHit,
    PageView,
    PauseView,
    RatingView,
    StimulusView,
    View,
    view_to_dict,
)

DIGITS = frozenset("0123456789")
CONFIRM_KEY = "y"
QUIT_KEY = "quit"  # what the presenter reports for a window close or a stop signal
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
WATCH_S = 0.5  # untimed waits (pages, breaks, pauses) look at the recorder this often
STORAGE_RETRY_S = 1.0  # while the journal cannot be written, try again this often
DEFAULT_PAUSE_KEY = "p"
STORAGE_PAUSE_TEXT = "The session is paused. Please wait for the experimenter."
RESUME_TEXT = "The session continues where it stopped."


class AbortRequested(Exception):
    """The experimenter confirmed an abort."""


@dataclass
class TrialOutcome:
    decision_t: float | None = None
    decision_key: str | None = None
    answer: int | None = None
    unsure: bool = False
    timed_out: bool = False
    confirm_t: float | None = None
    rating: int | None = None
    rating_t: float | None = None
    rating_onset_t: float | None = None
    interrupted: bool = False


@dataclass
class SessionState:
    done_trials: set[int] = field(default_factory=set)
    answered: int = 0
    correct: int = 0
    unsure: int = 0
    last_rt_ms: float | None = None
    recorder_connected: bool | None = None
    started: float = 0.0
    attempt: int = 1
    paused: bool = False
    storage_problem: str | None = None
    current_part: str = ""
    current_block: str = ""
    current_trial: int | None = None
    trial_seconds: list[float] = field(default_factory=list)


def outcome_of(expected: int | None, answer: int | None, unsure: bool) -> str:
    """One word for a trial's result: correct, wrong, unsure, unanswered or unscored."""
    if unsure:
        return "unsure"
    if answer is None:
        return "unanswered"
    if expected is None:
        return "unscored"
    return "correct" if answer == expected else "wrong"


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
        self._next_at: float | None = None
        self._current: View = BlankView()
        self._current_photodiode = False
        self._current_kind: str = "blank"
        self._current_trial: ScheduledTrial | None = None
        self.total_trials = len(schedule.trials)
        self.push_delays_us: list[float] = []
        self._pushed: tuple[str, float, str, float, int | None] | None = None
        self.pause_key = pause_key
        self.triggers = triggers
        self.resume_attempt = resume_attempt
        self._screen_t: float | None = None
        self._screen_frames: int | None = None
        self._interrupted = False
        self._trial_t0 = 0.0
        self._storage_pause: tuple[float, str, float, int | None] | None = None
        if pause_key is not None:
            # Keys the display keeps when pressed while another screen waits for input, so a
            # pause asked for during a trial starts when that trial ends.
            presenter.hold = frozenset({pause_key})
        journal.on_error = self._storage_failed
        journal.on_recover = self._storage_recovered
        # Start of the current stretch of trials: breaks.every_minutes counts from here.
        self._since_pause = 0.0

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
                payload = self._payload(event, trial, fields)
                delay, code = self._push(event, payload, t)
            record["marker"] = payload
            record["push_us"] = round(delay, 1)
            if code is not None:
                record["trigger"] = code
        return self.journal.append(event, **record)

    @staticmethod
    def _payload(event: str, trial: int | None, fields: dict[str, Any]) -> str:
        payload_fields: dict[str, Any] = {"trial": trial} if trial is not None else {}
        payload_fields.update({k: v for k, v in fields.items() if k in PAYLOAD_FIELDS})
        return encode_marker(event, **payload_fields)

    def _push(self, event: str, payload: str, t: float) -> tuple[float, int | None]:
        after = self.markers.push(payload, t)
        delay = (after - t) * 1e6
        self.push_delays_us.append(delay)
        code = self.triggers.send(event) if self.triggers is not None else None
        return delay, code

    def _frames(self, ms: float) -> int:
        """A requested duration as whole frames at the display's refresh interval."""
        return frames_for(ms, self.presenter.interval, self.speed)

    def _show(
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
            payload = self._payload(mark, trial.trial if trial is not None else None, mark_fields)
        t = self.presenter.show(view, at=at, photodiode=photodiode)
        if mark is not None and payload is not None:
            self._pushed = (mark, t, payload, *self._push(mark, payload, t))
        self._current = view
        self._current_photodiode = photodiode
        self._current_kind, self._current_trial = kind, trial
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
        self.journal.append("flip", **flip)
        for obs in self.observers:
            obs.on_view(kind, t, trial, view)
        return t

    def _limit(self, seconds: float | None) -> float | None:
        return None if seconds is None else seconds / self.speed

    # -- input with abort confirmation ----------------------------------------------------------
    def _key(
        self,
        accept: frozenset[str] | None,
        deadline: float | None,
        outcome: TrialOutcome | None = None,
        trial: ScheduledTrial | None = None,
        *,
        pausable: bool = False,
    ) -> KeyHit | None:
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
                self._pause(trial)
                continue
            if hit is None or hit.key != "escape":
                return hit
            self._confirm_abort(trial)
            if outcome is not None:
                outcome.interrupted = True

    def _wait(self, accept: frozenset[str], trial: ScheduledTrial | None = None) -> KeyHit:
        """An untimed wait (page, break, pause): pausable, and watching the recorder."""
        while True:
            self._watch_recorder(self.clock())
            hit = self._key(accept, self.clock() + WATCH_S, trial=trial, pausable=True)
            if hit is not None:
                return hit

    def _pause(self, trial: ScheduledTrial | None, *, between_trials: bool = False) -> None:
        """The experimenter's pause: the participant sees a pause page until the key again."""
        assert self.pause_key is not None
        previous, photodiode = self._current, self._current_photodiode
        number = trial.trial if trial is not None else None
        t0 = self._show(PauseView(), "pause", trial, mark="pause_start", reason="experimenter")
        self.emit("pause_start", t0, trial=number, reason="experimenter")
        self.journal.sync()
        self.state.paused = True
        for obs in self.observers:
            obs.on_pause(True, self)
        while True:
            self._watch_recorder(self.clock())
            hit = self.presenter.wait_key(frozenset({self.pause_key}), self.clock() + WATCH_S)
            if hit is None:
                continue
            if hit.key == "escape":
                self._confirm_abort(trial)
                continue
            break
        if between_trials:
            t1 = self._show(BlankView(), "pause-end", mark="pause_end", reason="experimenter")
            self._next_at = t1 + self._frames(self.model.timing.gap_ms) * self.presenter.interval
        else:
            t1 = self._show(
                previous,
                "pause-end",
                trial,
                photodiode=photodiode,
                mark="pause_end",
                reason="experimenter",
            )
        self.emit("pause_end", t1, trial=number, reason="experimenter", paused_s=round(t1 - t0, 6))
        self.journal.sync()
        self.state.paused = False
        for obs in self.observers:
            obs.on_pause(False, self)

    def _between_trials(self, trial: ScheduledTrial) -> None:
        """Take a pause (or abort) asked for since the last trial; drop keys pressed in the gap."""
        if self.pause_key is None:
            return
        held = self.presenter.held
        wanted = any(h.key == self.pause_key for h in held)
        held.clear()
        hit = self.presenter.wait_key(frozenset({self.pause_key}), self.clock())
        if hit is not None and hit.key == "escape":
            self._confirm_abort(trial)
        elif hit is not None:
            wanted = True
        if wanted:
            self._pause(trial, between_trials=True)

    # -- storage failures -------------------------------------------------------------------------
    def _storage_failed(self, err: Exception) -> None:
        """The journal cannot be written: pause (without journaling) and let it try again.

        Called by the journal for every failed attempt; returning asks it to retry. Nothing is
        journaled from here (that is what fails); the pause is journaled once writing works.
        """
        if self._storage_pause is None:
            t = self.presenter.show(PauseView(STORAGE_PAUSE_TEXT))
            payload = self._payload("pause_start", None, {"reason": "storage"})
            delay, code = self._push("pause_start", payload, t)
            self._storage_pause = (t, payload, delay, code)
            self._interrupted = True
            self.state.paused = True
            self.state.storage_problem = str(err)
            for obs in self.observers:
                obs.on_storage(str(err), self)
        hit = self.presenter.wait_key(frozenset(), self.clock() + STORAGE_RETRY_S)
        if hit is not None and hit.key == "escape":
            self.presenter.show(ConfirmView())
            answer = self.presenter.wait_key(None, None)
            if answer is not None and answer.key == CONFIRM_KEY:
                # Give up: from here a failed write raises, so the session ends with what is
                # on disk.
                self.journal.on_error = None
                raise AbortRequested()
            self.presenter.show(PauseView(STORAGE_PAUSE_TEXT))

    def _storage_recovered(self) -> None:
        if self._storage_pause is None:
            return
        t0, payload, delay, code = self._storage_pause
        self._storage_pause = None
        problem = self.state.storage_problem
        t1 = self.presenter.show(self._current, photodiode=self._current_photodiode)
        end_payload = self._payload("pause_end", None, {"reason": "storage"})
        end_delay, end_code = self._push("pause_end", end_payload, t1)
        start: dict[str, Any] = {"marker": payload, "push_us": round(delay, 1)}
        end: dict[str, Any] = {"marker": end_payload, "push_us": round(end_delay, 1)}
        if code is not None:
            start["trigger"] = code
        if end_code is not None:
            end["trigger"] = end_code
        self.journal.append("pause_start", t=t0, reason="storage", message=problem, **start)
        self.journal.append("pause_end", t=t1, reason="storage", paused_s=round(t1 - t0, 6), **end)
        self.journal.append("flip", t=t1, kind="storage-resume", view=view_to_dict(self._current))
        self.journal.sync()
        self.state.paused, self.state.storage_problem = False, None
        for obs in self.observers:
            obs.on_storage(None, self)
        # The screen is back: whoever answers it (the simulated participant) starts it afresh.
        kind = self._current_kind.removesuffix("-typing")
        for obs in self.observers:
            obs.on_view(kind, t1, self._current_trial, self._current)

    def _confirm_abort(self, trial: ScheduledTrial | None) -> None:
        previous, photodiode = self._current, self._current_photodiode
        t = self._show(ConfirmView(), "confirm", trial)
        self.journal.append("abort_requested", t=t, trial=trial.trial if trial else None)
        self.journal.sync()
        hit = self.presenter.wait_key(None, None)
        if hit is not None and hit.key in (CONFIRM_KEY, QUIT_KEY):
            raise AbortRequested()
        self.journal.append("abort_cancelled", t=hit.t if hit else self.clock())
        self._show(previous, "resume-view", trial, photodiode=photodiode)

    # -- the session ----------------------------------------------------------------------------
    def run(self) -> None:
        """Run every schedule item. Raises AbortRequested when the experimenter ends the session."""
        self.state.started = self.clock()
        self._since_pause = self.state.started
        self._prefetch(None)
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
        t = self._show(BlankView(), "end", mark="session_end", status="completed")
        self.emit("session_end", t, status="completed")
        self.journal.sync()

    def _resume_page(self) -> None:
        """After a crash the participant is told the session goes on, and starts it with a key."""
        t = self._show(PageView(RESUME_TEXT), "page", mark="page_onset")
        self.emit("page_onset", t, item=None, step=None, resume=True)
        hit = self._wait(frozenset({"space"}))
        self.emit("page_end", hit.t, item=None, key=hit.key)
        self._next_at = None
        self._since_pause = hit.t

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
        key_label = "the space bar" if item.key == "space" else f"the {item.key.upper()} key"
        t = self._show(
            PageView(item.text, hint=f"Press {key_label} to continue.", key=item.key),
            "page",
            at=self._next_at,
            mark="page_onset",
        )
        self.emit("page_onset", t, item=item.index, step=item.step)
        self.journal.sync()
        hit = self._wait(frozenset({item.key}))
        self.emit("page_end", hit.t, item=item.index, key=hit.key)
        self._next_at = None
        self._since_pause = hit.t

    def _rest(self, item: Item) -> None:
        view: View = FixationView() if item.show == "fixation" else BlankView()
        frames = self._frames(item.seconds * 1000.0)
        t0 = self._show(
            view, "rest", at=self._next_at, mark="rest_start", frames=frames, label=item.label
        )
        self.emit("rest_start", t0, label=item.label, requested_s=item.seconds, frames=frames)
        self.journal.sync()
        end = t0 + frames * self.presenter.interval
        while self.clock() < end - self.presenter.interval * 0.75:
            self._watch_recorder(self.clock())
            self._key(
                frozenset(), min(end - self.presenter.interval * 0.75, self.clock() + WATCH_S)
            )
        t1 = self._show(BlankView(), "rest-end", at=end, mark="rest_end", label=item.label)
        self.emit("rest_end", t1, label=item.label, actual_s=round(t1 - t0, 6))
        self.journal.sync()
        self._next_at = None
        self._since_pause = t1

    def _break(self, item: Item) -> None:
        min_s = item.seconds / self.speed
        hint_ready = (
            "Press the space bar when you are ready to go on."
            if item.key == "space"
            else f"Press {item.key.upper()} when you are ready to go on."
        )
        t0 = self._show(
            BreakView(item.text, math.ceil(min_s)), "break", at=self._next_at, mark="break_start"
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
                self._show(BreakView(item.text, shown), "break-tick")
            self._watch_recorder(self.clock())
            self._key(frozenset(), min(self.clock() + 0.25, t0 + min_s), pausable=True)
        self._show(BreakView(item.text, 0, hint=hint_ready), "break-ready")
        hit = self._wait(frozenset({item.key}))
        self.emit("break_end", hit.t, item=item.index, actual_s=round(hit.t - t0, 6))
        self.journal.sync()
        self._next_at = None
        self._since_pause = hit.t

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
            self._between_trials(trial)
            self._trial(trial)
        self.emit("block_end", self.clock(), block=item.label, part=item.part)
        self.journal.sync()

    def _timed_break(self, item: Item) -> None:
        """A break once breaks.every_minutes have passed since the last pause (item -1 in the journal)."""
        breaks = self.model.breaks
        if breaks is None or not breaks.every_minutes:
            return
        if self.clock() - self._since_pause < breaks.every_minutes * 60.0 / self.speed:
            return
        self._break(
            Item("break", -1, item.step, text=breaks.text, key=breaks.key, seconds=breaks.min_s)
        )

    # -- one trial ------------------------------------------------------------------------------
    def _prompt(self, trial: ScheduledTrial) -> str:
        col = self.model.answer.prompt_column
        return (
            trial.values.get(col, "") or self.model.answer.prompt
            if col
            else self.model.answer.prompt
        )

    def _question(self, trial: ScheduledTrial) -> str:
        col = self.model.rating.question_column
        return (
            trial.values.get(col, "") or self.model.rating.question
            if col
            else self.model.rating.question
        )

    def _trial(self, trial: ScheduledTrial) -> None:
        model = self.model
        ans = model.answer
        interval = self.presenter.interval
        path = str(stimulus_abspath(self.loaded, trial))
        self._interrupted = False
        self.state.current_trial = trial.trial
        self._trial_t0 = self.clock()
        self.journal.append(
            "trial_start",
            t=self.clock(),
            trial=trial.trial,
            block=trial.block,
            part=trial.part,
            stimulus=trial.stimulus,
            expected=trial.expected,
            row=trial.row,
        )
        self.presenter.prepare(path)  # normally already decoded during an earlier gap
        out = TrialOutcome()

        fix_frames = self._frames(trial.fixation_ms)
        t_fix = self._show(
            FixationView(),
            "fixation",
            trial,
            at=self._next_at,
            mark="fixation_onset",
            frames=fix_frames,
        )
        self.emit(
            "fixation_onset",
            t_fix,
            trial=trial.trial,
            requested_ms=trial.fixation_ms,
            frames=fix_frames,
        )
        # Keys pressed before the fixation (e.g. late presses from the previous trial) must not
        # count as a response to this stimulus.
        self.presenter.drain()

        unsure_hint = f"{ans.unsure_key.upper()} = unsure"
        if ans.mode == "after":
            stim_view = StimulusView(path)
        else:
            stim_view = StimulusView(
                path,
                typed="",
                prompt=self._prompt(trial),
                hint=f"Type the number, then press Enter.   {unsure_hint}",
            )
        t_on = self._show(
            stim_view,
            "stimulus",
            trial,
            at=t_fix + fix_frames * interval,
            photodiode=True,
            mark="stimulus_onset",
            stimulus=trial.stimulus,
        )
        self.emit(
            "stimulus_onset",
            t_on,
            trial=trial.trial,
            stimulus=trial.stimulus,
            fixation_actual_ms=round((t_on - t_fix) * 1000, 3),
            load_wait_ms=round(self.presenter.last_load_wait_ms, 3),
        )

        limit = self._limit(model.timing.stimulus_limit_s)
        deadline = None if limit is None else t_on + limit
        if ans.mode == "after":
            hit = self._key(frozenset({ans.decision_key, ans.unsure_key}), deadline, out, trial)
            if hit is None:
                out.timed_out = True
                t_dec = self.clock()
            else:
                out.decision_t, out.decision_key = hit.t, hit.key
                out.unsure = hit.key == ans.unsure_key
                self.emit(
                    "decision",
                    hit.t,
                    trial=trial.trial,
                    key=hit.key,
                    rt_ms=round((hit.t - t_on) * 1000, 3),
                )
                t_dec = hit.t
            if out.unsure:
                t_off = self._show(BlankView(), "offset", trial, mark="stimulus_offset")
                self.emit(
                    "stimulus_offset",
                    t_off,
                    trial=trial.trial,
                    viewing_ms=round((t_off - t_on) * 1000, 3),
                )
                out.confirm_t = t_dec
                self.emit("answer", t_dec, trial=trial.trial, answer=None, unsure=True)
            else:
                view = AnswerView(
                    self._prompt(trial),
                    "",
                    hint=f"Type the number, then press Enter.   {unsure_hint}",
                )
                t_off = self._show(view, "answer", trial, mark="stimulus_offset")
                self.emit(
                    "stimulus_offset",
                    t_off,
                    trial=trial.trial,
                    viewing_ms=round((t_off - t_on) * 1000, 3),
                    timed_out=out.timed_out,
                )
                self.emit("answer_onset", t_off, trial=trial.trial)
                self._type_answer(
                    trial,
                    out,
                    t_off,
                    lambda typed: AnswerView(view.prompt, typed, view.hint),
                    first_key_is_decision=False,
                    kind="answer",
                )
        else:
            self._type_answer(
                trial,
                out,
                t_on,
                lambda typed: StimulusView(path, typed, stim_view.prompt, stim_view.hint),
                first_key_is_decision=True,
                kind="stimulus",
                deadline=deadline,
                photodiode=True,
            )
            t_off = self._show(BlankView(), "offset", trial, mark="stimulus_offset")
            self.emit(
                "stimulus_offset",
                t_off,
                trial=trial.trial,
                viewing_ms=round((t_off - t_on) * 1000, 3),
                timed_out=out.timed_out,
            )

        self._rate(trial, out)
        self._finish(trial, out, t_on, t_fix)

    def _type_answer(
        self,
        trial: ScheduledTrial,
        out: TrialOutcome,
        t0: float,
        make_view: Callable[[str], View],
        *,
        first_key_is_decision: bool,
        kind: str,
        deadline: float | None = None,
        photodiode: bool = False,
    ) -> None:
        ans = self.model.answer
        max_len = len(str(ans.max))
        if deadline is None:
            limit = self._limit(self.model.timing.answer_limit_s)
            deadline = None if limit is None else t0 + limit
        typed = ""
        accept = DIGITS | {"backspace", "return", ans.unsure_key}
        while True:
            hit = self._key(frozenset(accept), deadline, out, trial)
            if hit is None:
                out.timed_out = True
                self.emit(
                    "answer",
                    self.clock(),
                    trial=trial.trial,
                    answer=None,
                    unsure=False,
                    timed_out=True,
                )
                return
            if (
                first_key_is_decision
                and out.decision_t is None
                and hit.key in DIGITS | {ans.unsure_key}
            ):
                out.decision_t, out.decision_key = hit.t, hit.key
                self.emit(
                    "decision",
                    hit.t,
                    trial=trial.trial,
                    key=hit.key,
                    rt_ms=round((hit.t - t0) * 1000, 3),
                )
            if hit.key == ans.unsure_key:
                out.unsure, out.confirm_t = True, hit.t
                self.emit("answer", hit.t, trial=trial.trial, answer=None, unsure=True)
                return
            if hit.key == "return":
                if typed:
                    value = int(typed)
                    if value <= ans.max:
                        out.answer, out.confirm_t = value, hit.t
                        self.emit("answer", hit.t, trial=trial.trial, answer=value, unsure=False)
                        return
                continue
            if hit.key == "backspace":
                typed = typed[:-1]
            elif hit.key in DIGITS and len(typed) < max_len:
                typed = (typed + hit.key).lstrip("0") or "0"
            else:
                continue
            t = self._show(make_view(typed), kind + "-typing", trial, photodiode=photodiode)
            self.journal.append(
                "typing", t=t, trial=trial.trial, typed=typed, key=hit.key, key_t=hit.t
            )

    def _rate(self, trial: ScheduledTrial, out: TrialOutcome) -> None:
        r = self.model.rating
        keys = r.input != "mouse"
        mouse = r.input != "keys"
        hint = (
            f"Press a number key from 1 to {r.points}."
            if r.points <= 9
            else "Use the arrow keys and press Enter, or press 1 to 9 (0 for 10)."
        )
        if mouse:
            hint = "Click a box." if not keys else "Click a box, or p" + hint[1:]
        base = RatingView(self._question(trial), r.points, r.low, r.high, r.mid, None, hint)
        t_r = self._show(base, "rating", trial, mark="rating_onset")
        out.rating_onset_t = t_r
        self.emit("rating_onset", t_r, trial=trial.trial)
        limit = self._limit(self.model.timing.rating_limit_s)
        deadline = None if limit is None else t_r + limit
        number_keys = {str(i) for i in range(1, min(r.points, 9) + 1)} | (
            {"0"} if r.points >= 10 else set()
        )
        if not keys:
            number_keys = set()
        accept = frozenset(
            number_keys
            | ({"left", "right", "return"} if keys else set())
            | ({"click"} if mouse else set())
        )
        selected: int | None = None
        while True:
            hit = self._key(accept, deadline, out, trial)
            if hit is None:
                self.emit("rating", self.clock(), trial=trial.trial, rating=None, timed_out=True)
                return
            if hit.key == "click":
                picked = self.presenter.rating_at(base, hit.pos) if hit.pos is not None else None
                if picked is None:
                    continue
                choice = picked
            elif hit.key in number_keys:
                choice = 10 if hit.key == "0" else int(hit.key)
            elif hit.key in ("left", "right"):
                step = -1 if hit.key == "left" else 1
                selected = min(
                    r.points, max(1, (selected or (r.points + 1) // 2) + (step if selected else 0))
                )
                t = self._show(
                    RatingView(base.question, r.points, r.low, r.high, r.mid, selected, hint),
                    "rating-select",
                    trial,
                )
                self.journal.append("rating_select", t=t, trial=trial.trial, selected=selected)
                continue
            elif hit.key == "return" and selected is not None:
                choice = selected
            else:
                continue
            out.rating, out.rating_t = choice, hit.t
            self.emit(
                "rating",
                hit.t,
                trial=trial.trial,
                rating=choice,
                rt_ms=round((hit.t - t_r) * 1000, 3),
                via="mouse" if hit.key == "click" else "keys",
            )
            frames = max(1, round(RATING_SHOW_CHOICE_S / self.speed / self.presenter.interval))
            t = self._show(
                RatingView(base.question, r.points, r.low, r.high, r.mid, choice, hint),
                "rating-chosen",
                trial,
                frames=frames,
            )
            self._next_at = t + frames * self.presenter.interval
            return

    def _finish(self, trial: ScheduledTrial, out: TrialOutcome, t_on: float, t_fix: float) -> None:
        timing = self.model.timing
        outcome = outcome_of(trial.expected, out.answer, out.unsure)
        if trial.feedback:
            if outcome == "correct":
                text, good = "Correct.", True
            elif outcome in ("wrong", "unanswered", "unsure") and trial.expected is not None:
                text, good = f"The answer was {trial.expected}.", False
            else:
                text, good = "Thank you.", True
            fb_frames = self._frames(timing.feedback_ms)
            t_fb = self._show(
                FeedbackView(text, good),
                "feedback",
                trial,
                at=self._next_at,
                mark="feedback_onset",
                frames=fb_frames,
            )
            self.emit("feedback_onset", t_fb, trial=trial.trial, outcome=outcome)
            self._next_at = t_fb + fb_frames * self.presenter.interval
        gap_frames = self._frames(timing.gap_ms)
        t_gap = self._show(
            BlankView(), "gap", trial, at=self._next_at, mark="gap_onset", frames=gap_frames
        )
        self.emit("gap_onset", t_gap, trial=trial.trial)
        self._next_at = t_gap + gap_frames * self.presenter.interval
        # Start decoding the next trials' stimuli now, inside the gap.
        self._prefetch(trial)

        rt_ms = None if out.decision_t is None else round((out.decision_t - t_on) * 1000, 3)
        correct = None if outcome not in ("correct", "wrong") else int(outcome == "correct")
        rating_rt = None
        if out.rating_t is not None and out.rating_onset_t is not None:
            rating_rt = round((out.rating_t - out.rating_onset_t) * 1000, 3)
        row: dict[str, Any] = {
            "participant": self.schedule.participant,
            "session": self.schedule.session,
            "block": trial.block,
            "trial": trial.trial,
            "stimulus": trial.stimulus,
            "expected": trial.expected,
            "answer": out.answer,
            "unsure": int(out.unsure),
            "correct": correct,
            "rating": out.rating,
            "rt_ms": rt_ms,
            "onset_lsl": t_on,
            "part": trial.part,
            "outcome": outcome,
            "block_index": trial.block_index,
            "typing_ms": None
            if out.unsure or out.confirm_t is None or out.decision_t is None
            else round((out.confirm_t - out.decision_t) * 1000, 3),
            "rating_rt_ms": rating_rt,
            "timed_out": int(out.timed_out),
            "fixation_ms": round((t_on - t_fix) * 1000, 3),
            "interrupted": int(out.interrupted or self._interrupted),
            "values": trial.values,
        }
        if self.extra_row is not None:
            row.update(self.extra_row(trial))
        self.journal.append("trial_end", t=t_gap, trial=trial.trial, record=row)
        self.journal.sync()
        self.state.done_trials.add(trial.trial)
        self.state.trial_seconds.append(t_gap - self._trial_t0)
        self.state.current_trial = None
        self._tally(outcome, rt_ms)
        self._watch_recorder(t_gap)
        for obs in self.observers:
            obs.on_trial_end(row, self)

    def _next_trial(self, trial: ScheduledTrial) -> ScheduledTrial | None:
        trials = [t for t in self.schedule.trials if t.trial not in self.skip]
        for a, b in zip(trials, trials[1:], strict=False):
            if a.trial == trial.trial:
                return b
        return None

    def _prefetch(self, after: ScheduledTrial | None) -> None:
        """Ask the display to decode the next trials' stimuli (after ``after``, or the first)."""
        todo = [t for t in self.schedule.trials if t.trial not in self.skip]
        if after is not None:
            todo = [t for t in todo if t.trial > after.trial]
        for t in todo[:PREFETCH_AHEAD]:
            self.presenter.prepare(str(stimulus_abspath(self.loaded, t)))
        if after is None and todo:
            # Before the session starts there is time: make sure the first onset finds its image.
            self.presenter.wait_ready(str(stimulus_abspath(self.loaded, todo[0])))

    def _tally(self, outcome: str, rt_ms: float | None) -> None:
        s = self.state
        if outcome in ("correct", "wrong"):
            s.answered += 1
            s.correct += outcome == "correct"
        if outcome == "unsure":
            s.unsure += 1
        s.last_rt_ms = rt_ms

    def _watch_recorder(self, t: float) -> None:
        connected = self.markers.have_consumers()
        if connected != self.state.recorder_connected:
            changed = self.state.recorder_connected is not None or connected
            self.state.recorder_connected = connected
            if changed:
                self.journal.append("recorder_connected" if connected else "recorder_lost", t=t)
                if self.on_recorder_change is not None:
                    self.on_recorder_change(connected)


def stimulus_abspath(loaded: LoadedProtocol, trial: ScheduledTrial) -> Path:
    return loaded.table.stimulus_path(loaded.table.rows[trial.row - 1])


def frames_for(ms: float, interval: float, speed: float = 1.0) -> int:
    """A requested duration in ms as whole refresh frames (at least 1 for any positive duration).

    Parameters
    ----------
    ms
        The requested duration in milliseconds (0 or less means no screen at all).
    interval
        The display's refresh interval in seconds (measured, or 1 / refresh_hz).
    speed
        Pilots only: the duration is divided by this first.

    Returns
    -------
    int
        The nearest whole number of frames.
    """
    if ms <= 0:
        return 0
    return max(1, round(ms / 1000.0 / speed / interval))


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
