"""One trial's screens: fixation, stimulus, answer, rating, feedback and gap, and its record.

The engine hands each trial of a block to :class:`TrialScreens`, which shows its screens at
frame-exact times through the engine (so every flip is journaled and marked the same way),
takes the participant's keys, and journals the trial's ``trial_end`` line with its trials.csv row.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from runner.protocol.load import LoadedProtocol
from runner.protocol.schedule import ScheduledTrial
from runner.protocol.texts import answer_hint, rating_hint
from runner.session.views import (
    RATING_SHOW_CHOICE_S,
    AnswerView,
    BlankView,
    FeedbackView,
    FixationView,
    RatingView,
    StimulusView,
    View,
)

if TYPE_CHECKING:
    from runner.session.engine import Engine

DIGITS = frozenset("0123456789")


@dataclass
class TrialOutcome:
    """What happened in one trial, filled in as its screens are answered."""

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


def outcome_of(expected: int | None, answer: int | None, unsure: bool) -> str:
    """One word for a trial's result: correct, wrong, unsure, unanswered or unscored."""
    if unsure:
        return "unsure"
    if answer is None:
        return "unanswered"
    if expected is None:
        return "unscored"
    return "correct" if answer == expected else "wrong"


class TrialScreens:
    """Runs single trials on an engine's presenter, journal and markers."""

    def __init__(self, engine: Engine):
        self.engine = engine

    def run(self, trial: ScheduledTrial) -> None:
        """Show one trial's screens, take its answers and journal its ``trial_end`` record."""
        e = self.engine
        model = e.model
        ans = model.answer
        interval = e.presenter.interval
        path = str(stimulus_abspath(e.loaded, trial))
        e.interrupted = False
        e.state.current_trial = trial.trial
        e.trial_t0 = e.clock()
        e.journal.append(
            "trial_start",
            t=e.clock(),
            trial=trial.trial,
            block=trial.block,
            part=trial.part,
            stimulus=trial.stimulus,
            expected=trial.expected,
            row=trial.row,
        )
        e.presenter.prepare(path)  # normally already decoded during an earlier gap
        out = TrialOutcome()

        fix_frames = e.frames(trial.fixation_ms)
        t_fix = e.show(
            FixationView(),
            "fixation",
            trial,
            at=e.next_at,
            mark="fixation_onset",
            frames=fix_frames,
        )
        e.emit(
            "fixation_onset",
            t_fix,
            trial=trial.trial,
            requested_ms=trial.fixation_ms,
            frames=fix_frames,
        )

        typing_hint = answer_hint(model.texts, ans.unsure_key)
        if ans.mode == "after":
            stim_view = StimulusView(path)
        else:
            stim_view = StimulusView(
                path,
                typed="",
                prompt=self._prompt(trial),
                hint=typing_hint,
            )
        t_on = e.show(
            stim_view,
            "stimulus",
            trial,
            at=t_fix + fix_frames * interval,
            photodiode=True,
            mark="stimulus_onset",
            stimulus=trial.stimulus,
        )
        e.emit(
            "stimulus_onset",
            t_on,
            trial=trial.trial,
            stimulus=trial.stimulus,
            fixation_actual_ms=round((t_on - t_fix) * 1000, 3),
            load_wait_ms=round(e.presenter.last_load_wait_ms, 3),
        )
        # Keys pressed before the onset (during the fixation or earlier), or that may have been
        # (they came in while the onset's flip ran), are never the response: journal them.
        e.anticipations(trial, t_on)

        limit = e.limit(model.timing.stimulus_limit_s)
        deadline = None if limit is None else t_on + limit
        if ans.mode == "after":
            hit = e.key(frozenset({ans.decision_key, ans.unsure_key}), deadline, out, trial)
            if hit is None:
                out.timed_out = True
                t_dec = e.clock()
            else:
                out.decision_t, out.decision_key = hit.t, hit.key
                out.unsure = hit.key == ans.unsure_key
                e.emit(
                    "decision",
                    hit.t,
                    trial=trial.trial,
                    key=hit.key,
                    rt_ms=round((hit.t - t_on) * 1000, 3),
                    blind_ms=round(hit.blind_ms, 3),
                )
                t_dec = hit.t
            if out.unsure:
                t_off = e.show(BlankView(), "offset", trial, mark="stimulus_offset")
                e.emit(
                    "stimulus_offset",
                    t_off,
                    trial=trial.trial,
                    viewing_ms=round((t_off - t_on) * 1000, 3),
                )
                out.confirm_t = t_dec
                e.emit("answer", t_dec, trial=trial.trial, answer=None, unsure=True)
            else:
                view = AnswerView(
                    self._prompt(trial),
                    "",
                    hint=typing_hint,
                )
                t_off = e.show(view, "answer", trial, mark="stimulus_offset")
                e.emit(
                    "stimulus_offset",
                    t_off,
                    trial=trial.trial,
                    viewing_ms=round((t_off - t_on) * 1000, 3),
                    timed_out=out.timed_out,
                )
                e.emit("answer_onset", t_off, trial=trial.trial)
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
            t_off = e.show(BlankView(), "offset", trial, mark="stimulus_offset")
            e.emit(
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
        e = self.engine
        ans = e.model.answer
        max_len = len(str(ans.max))
        if deadline is None:
            limit = e.limit(e.model.timing.answer_limit_s)
            deadline = None if limit is None else t0 + limit
        typed = ""
        accept = DIGITS | {"backspace", "return", ans.unsure_key}
        while True:
            hit = e.key(frozenset(accept), deadline, out, trial)
            if hit is None:
                out.timed_out = True
                e.emit(
                    "answer",
                    e.clock(),
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
                e.emit(
                    "decision",
                    hit.t,
                    trial=trial.trial,
                    key=hit.key,
                    rt_ms=round((hit.t - t0) * 1000, 3),
                    blind_ms=round(hit.blind_ms, 3),
                )
            if hit.key == ans.unsure_key:
                out.unsure, out.confirm_t = True, hit.t
                e.emit(
                    "answer",
                    hit.t,
                    trial=trial.trial,
                    answer=None,
                    unsure=True,
                    blind_ms=round(hit.blind_ms, 3),
                )
                return
            if hit.key == "return":
                if typed:
                    value = int(typed)
                    if value <= ans.max:
                        out.answer, out.confirm_t = value, hit.t
                        e.emit(
                            "answer",
                            hit.t,
                            trial=trial.trial,
                            answer=value,
                            unsure=False,
                            blind_ms=round(hit.blind_ms, 3),
                        )
                        return
                continue
            if hit.key == "backspace":
                typed = typed[:-1]
            elif hit.key in DIGITS and len(typed) < max_len:
                typed = (typed + hit.key).lstrip("0") or "0"
            else:
                continue
            t = e.show(make_view(typed), kind + "-typing", trial, photodiode=photodiode)
            e.journal.append(
                "typing",
                t=t,
                trial=trial.trial,
                typed=typed,
                key=hit.key,
                key_t=hit.t,
                key_blind_ms=round(hit.blind_ms, 3),
            )

    def _rate(self, trial: ScheduledTrial, out: TrialOutcome) -> None:
        e = self.engine
        r = e.model.rating
        keys = r.input != "mouse"
        mouse = r.input != "keys"
        hint = rating_hint(e.model.texts, r.points, r.input)
        base = RatingView(self._question(trial), r.points, r.low, r.high, r.mid, None, hint)
        t_r = e.show(base, "rating", trial, mark="rating_onset")
        out.rating_onset_t = t_r
        e.emit("rating_onset", t_r, trial=trial.trial)
        limit = e.limit(e.model.timing.rating_limit_s)
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
            hit = e.key(accept, deadline, out, trial)
            if hit is None:
                e.emit("rating", e.clock(), trial=trial.trial, rating=None, timed_out=True)
                return
            if hit.key == "click":
                picked = e.presenter.rating_at(base, hit.pos) if hit.pos is not None else None
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
                t = e.show(
                    RatingView(base.question, r.points, r.low, r.high, r.mid, selected, hint),
                    "rating-select",
                    trial,
                )
                e.journal.append("rating_select", t=t, trial=trial.trial, selected=selected)
                continue
            elif hit.key == "return" and selected is not None:
                choice = selected
            else:
                continue
            out.rating, out.rating_t = choice, hit.t
            e.emit(
                "rating",
                hit.t,
                trial=trial.trial,
                rating=choice,
                rt_ms=round((hit.t - t_r) * 1000, 3),
                via="mouse" if hit.key == "click" else "keys",
                blind_ms=round(hit.blind_ms, 3),
            )
            frames = max(1, round(RATING_SHOW_CHOICE_S / e.speed / e.presenter.interval))
            t = e.show(
                RatingView(base.question, r.points, r.low, r.high, r.mid, choice, hint),
                "rating-chosen",
                trial,
                frames=frames,
            )
            e.next_at = t + frames * e.presenter.interval
            return

    def _finish(self, trial: ScheduledTrial, out: TrialOutcome, t_on: float, t_fix: float) -> None:
        e = self.engine
        timing = e.model.timing
        outcome = outcome_of(trial.expected, out.answer, out.unsure)
        if trial.feedback:
            if outcome == "correct":
                text, good = e.model.texts.feedback_correct, True
            elif outcome in ("wrong", "unanswered", "unsure") and trial.expected is not None:
                text, good = e.model.texts.feedback_answer.format(expected=trial.expected), False
            else:
                text, good = e.model.texts.feedback_thanks, True
            fb_frames = e.frames(timing.feedback_ms)
            t_fb = e.show(
                FeedbackView(text, good),
                "feedback",
                trial,
                at=e.next_at,
                mark="feedback_onset",
                frames=fb_frames,
            )
            e.emit("feedback_onset", t_fb, trial=trial.trial, outcome=outcome)
            e.next_at = t_fb + fb_frames * e.presenter.interval
        gap_frames = e.frames(timing.gap_ms)
        t_gap = e.show(BlankView(), "gap", trial, at=e.next_at, mark="gap_onset", frames=gap_frames)
        e.emit("gap_onset", t_gap, trial=trial.trial)
        e.next_at = t_gap + gap_frames * e.presenter.interval
        # Start decoding the next trials' stimuli now, inside the gap.
        e.prefetch(trial)

        rt_ms = None if out.decision_t is None else round((out.decision_t - t_on) * 1000, 3)
        correct = None if outcome not in ("correct", "wrong") else int(outcome == "correct")
        rating_rt = None
        if out.rating_t is not None and out.rating_onset_t is not None:
            rating_rt = round((out.rating_t - out.rating_onset_t) * 1000, 3)
        row: dict[str, Any] = {
            "participant": e.schedule.participant,
            "session": e.schedule.session,
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
            "interrupted": int(out.interrupted or e.interrupted),
            "values": trial.values,
        }
        if e.extra_row is not None:
            row.update(e.extra_row(trial))
        e.journal.append("trial_end", t=t_gap, trial=trial.trial, record=row)
        e.journal.sync()
        e.state.done_trials.add(trial.trial)
        e.state.trial_seconds.append(t_gap - e.trial_t0)
        e.state.current_trial = None
        self._tally(outcome)
        e.watch_recorder(t_gap)
        for obs in e.observers:
            obs.on_trial_end(row, e)

    def _prompt(self, trial: ScheduledTrial) -> str:
        e = self.engine
        col = e.model.answer.prompt_column
        return trial.values.get(col, "") or e.model.answer.prompt if col else e.model.answer.prompt

    def _question(self, trial: ScheduledTrial) -> str:
        e = self.engine
        col = e.model.rating.question_column
        return (
            trial.values.get(col, "") or e.model.rating.question if col else e.model.rating.question
        )

    def _tally(self, outcome: str) -> None:
        e = self.engine
        s = e.state
        if outcome in ("correct", "wrong"):
            s.answered += 1
            s.correct += outcome == "correct"
        if outcome == "unsure":
            s.unsure += 1


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
