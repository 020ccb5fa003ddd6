"""Interruptions of a session: the experimenter's pause, a confirmed abort, and a storage pause.

Each is a detour from the current screen and back: the participant sees a pause page (or the
abort question), the detour is journaled and marked, and the screen that was there comes back.
A storage pause is special: the journal is what fails, so nothing is journaled until writing
works again, and the pause is then journaled after the fact with its real times.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from runner.protocol.schedule import ScheduledTrial
from runner.session.views import BlankView, ConfirmView, PauseView, view_to_dict

if TYPE_CHECKING:
    from runner.session.engine import Engine

CONFIRM_KEY = "y"
QUIT_KEY = "quit"  # what the presenter reports for a window close or a stop signal
WATCH_S = 0.5  # untimed waits (pages, breaks, pauses) look at the recorder this often
STORAGE_RETRY_S = 1.0  # while the journal cannot be written, try again this often


class AbortRequested(Exception):
    """The experimenter confirmed an abort."""


class Interruptions:
    """Pause, abort and storage pause of one engine's session."""

    def __init__(self, engine: Engine):
        self.engine = engine
        # While the journal cannot be written: the pause's start (time, payload, push delay,
        # trigger code), journaled once writing works again.
        self._storage_pause: tuple[float, str, float, int | None] | None = None

    def pause(self, trial: ScheduledTrial | None, *, between_trials: bool = False) -> None:
        """The experimenter's pause: the participant sees a pause page until the key again."""
        e = self.engine
        assert e.pause_key is not None
        previous, photodiode = e.current_view, e.current_photodiode
        number = trial.trial if trial is not None else None
        t0 = e.show(
            PauseView(e.model.texts.pause),
            "pause",
            trial,
            mark="pause_start",
            reason="experimenter",
        )
        e.emit("pause_start", t0, trial=number, reason="experimenter")
        e.journal.sync()
        e.state.paused = True
        for obs in e.observers:
            obs.on_pause(True, e)
        while True:
            e.watch_recorder(e.clock())
            hit = e.presenter.wait_key(frozenset({e.pause_key}), e.clock() + WATCH_S)
            if hit is None:
                continue
            if hit.key == "escape":
                self.confirm_abort(trial)
                continue
            break
        if between_trials:
            t1 = e.show(BlankView(), "pause-end", mark="pause_end", reason="experimenter")
            e.next_at = t1 + e.frames(e.model.timing.gap_ms) * e.presenter.interval
        else:
            t1 = e.show(
                previous,
                "pause-end",
                trial,
                photodiode=photodiode,
                mark="pause_end",
                reason="experimenter",
            )
        e.emit("pause_end", t1, trial=number, reason="experimenter", paused_s=round(t1 - t0, 6))
        e.journal.sync()
        e.state.paused = False
        for obs in e.observers:
            obs.on_pause(False, e)

    def between_trials(self, trial: ScheduledTrial) -> None:
        """Take a pause (or abort) asked for since the last trial; drop keys pressed in the gap."""
        e = self.engine
        if e.pause_key is None:
            return
        held = e.presenter.held
        wanted = any(h.key == e.pause_key for h in held)
        held.clear()
        hit = e.presenter.wait_key(frozenset({e.pause_key}), e.clock())
        if hit is not None and hit.key == "escape":
            self.confirm_abort(trial)
        elif hit is not None:
            wanted = True
        if wanted:
            self.pause(trial, between_trials=True)

    def storage_failed(self, err: Exception) -> None:
        """The journal cannot be written: pause (without journaling) and let it try again.

        Called by the journal for every failed attempt; returning asks it to retry. Nothing is
        journaled from here (that is what fails); the pause is journaled once writing works.
        """
        e = self.engine
        if self._storage_pause is None:
            t = e.presenter.show(PauseView(e.model.texts.pause))
            payload = e.marker_payload("pause_start", None, {"reason": "storage"})
            delay, code = e.push_marker("pause_start", payload, t)
            self._storage_pause = (t, payload, delay, code)
            e.interrupted = True
            e.state.paused = True
            e.state.storage_problem = str(err)
            for obs in e.observers:
                obs.on_storage(str(err), e)
        hit = e.presenter.wait_key(frozenset(), e.clock() + STORAGE_RETRY_S)
        if hit is not None and hit.key == "escape":
            e.presenter.show(ConfirmView(e.model.texts.confirm, e.model.texts.confirm_hint))
            answer = e.presenter.wait_key(None, None)
            if answer is not None and answer.key == CONFIRM_KEY:
                # Give up: from here a failed write raises, so the session ends with what is
                # on disk.
                e.journal.on_error = None
                raise AbortRequested()
            e.presenter.show(PauseView(e.model.texts.pause))

    def storage_recovered(self) -> None:
        """The journal takes writes again: journal the storage pause and bring the screen back."""
        e = self.engine
        if self._storage_pause is None:
            return
        t0, payload, delay, code = self._storage_pause
        self._storage_pause = None
        problem = e.state.storage_problem
        t1 = e.presenter.show(e.current_view, photodiode=e.current_photodiode)
        end_payload = e.marker_payload("pause_end", None, {"reason": "storage"})
        end_delay, end_code = e.push_marker("pause_end", end_payload, t1)
        start: dict[str, Any] = {"marker": payload, "push_us": round(delay, 1)}
        end: dict[str, Any] = {"marker": end_payload, "push_us": round(end_delay, 1)}
        if code is not None:
            start["trigger"] = code
        if end_code is not None:
            end["trigger"] = end_code
        e.journal.append("pause_start", t=t0, reason="storage", message=problem, **start)
        e.journal.append("pause_end", t=t1, reason="storage", paused_s=round(t1 - t0, 6), **end)
        e.journal.append("flip", t=t1, kind="storage-resume", view=view_to_dict(e.current_view))
        e.journal.sync()
        e.state.paused, e.state.storage_problem = False, None
        for obs in e.observers:
            obs.on_storage(None, e)
        # The screen is back: whoever answers it (the simulated participant) starts it afresh.
        kind = e.current_kind.removesuffix("-typing")
        for obs in e.observers:
            obs.on_view(kind, t1, e.current_screen_trial, e.current_view)

    def confirm_abort(self, trial: ScheduledTrial | None) -> None:
        """Escape was pressed: ask the experimenter; raise AbortRequested on Y, else go back."""
        e = self.engine
        previous, photodiode = e.current_view, e.current_photodiode
        t = e.show(ConfirmView(e.model.texts.confirm, e.model.texts.confirm_hint), "confirm", trial)
        e.journal.append("abort_requested", t=t, trial=trial.trial if trial else None)
        e.journal.sync()
        hit = e.presenter.wait_key(None, None)
        if hit is not None and hit.key in (CONFIRM_KEY, QUIT_KEY):
            raise AbortRequested()
        e.journal.append("abort_cancelled", t=hit.t if hit else e.clock())
        e.show(previous, "resume-view", trial, photodiode=photodiode)
