"""A simulated participant for pilots: real key presses, posted at planned times.

It watches the screens the engine shows and, for each, schedules key presses on a helper thread
that posts them through the presenter's real input path at the planned instants. Its behaviour
is seeded per trial, so a pilot is reproducible, and follows the trial's difficulty: a weighted
sum of the trial table's columns (the protocol's ``pilot`` settings,
:class:`runner.protocol.model.PilotSettings`; by default the expected count). With difficulty d:

* response time is ex-Gaussian (a normal part plus an exponential tail, the shape response
  times take: Ratcliff 1979, Psychological Bulletin 86(3); Luce 1986, *Response Times*):
  ``rt_base_s + rt_per_difficulty_s * d + Normal(0, rt_sd_s) + Exponential(rt_tau_s +
  rt_tau_per_difficulty_s * d)``, at least ``rt_min_s``;
* P(correct) = ``correct_at_zero - correct_per_difficulty * d``, at least ``correct_min``; a
  wrong count is off by 1 or 2;
* P(unsure) = ``unsure_at_zero + unsure_per_difficulty * d``, at most ``unsure_max``;
* the rating climbs ``rating_per_difficulty`` of the scale per unit of d, plus normal noise
  (sd ``rating_sd``), and a little more after "unsure";
* from ``give_up_difficulty`` on it gives up: presses "unsure", or (``give_up: timeout``)
  answers nothing and lets the time limit end the trial (unsure when no limit applies).

The model's numbers are invented for piloting the software; they are not a model of people.
"""

from __future__ import annotations

import heapq
import random
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from runner.protocol.model import PilotSettings
from runner.protocol.schedule import ScheduledTrial
from runner.session.views import BreakView, PageView, View

if TYPE_CHECKING:
    from runner.session.engine import Engine

PAGE_READ_S = 1.2
FRESH_SCREENS = frozenset({"page", "fixation", "answer", "rating", "break-ready"})
BREAK_EXTRA_S = 0.6
KEY_GAP_S = 0.16  # between typed digits
CONFIRM_GAP_S = 0.22
RATING_RT_S = 0.75
SPIN_S = 0.0015


@dataclass(frozen=True)
class TrialPlan:
    """What the simulated participant will do in one trial."""

    rt_s: float  # intended decision time after stimulus onset, before dividing by speed
    unsure: bool
    answer: int | None
    rating: int
    difficulty: float = 0.0
    timeout: bool = False  # give up by answering nothing until the time limit


def trial_difficulty(trial: ScheduledTrial, settings: PilotSettings) -> float:
    """The pilot's difficulty of a trial (:meth:`PilotSettings.difficulty_of`)."""
    return settings.difficulty_of(trial.expected, trial.values)


def plan_trial(
    seed: int,
    trial: ScheduledTrial,
    *,
    points: int,
    max_answer: int,
    settings: PilotSettings | None = None,
    can_time_out: bool = True,
) -> TrialPlan:
    """The seeded plan of one trial (pure: the same inputs give the same plan)."""
    p = settings if settings is not None else PilotSettings()
    rng = random.Random(f"{seed}:{trial.trial}")
    d = trial_difficulty(trial, p)
    p_unsure = min(p.unsure_max, max(0.0, p.unsure_at_zero + p.unsure_per_difficulty * d))
    p_correct = min(1.0, max(p.correct_min, p.correct_at_zero - p.correct_per_difficulty * d))
    tau = p.rt_tau_s + p.rt_tau_per_difficulty_s * d
    rt = p.rt_base_s + p.rt_per_difficulty_s * d + rng.gauss(0.0, p.rt_sd_s)
    rt += rng.expovariate(1.0 / tau) if tau > 0 else 0.0
    rt = max(p.rt_min_s, rt)
    # Every draw is made whatever the outcome, so one setting never shifts the others' draws.
    u_unsure, u_correct, u_wrong, u_free = rng.random(), rng.random(), rng.random(), rng.random()
    noise = rng.gauss(0.0, p.rating_sd)
    gives_up = p.give_up_difficulty is not None and d >= p.give_up_difficulty
    timeout = gives_up and p.give_up == "timeout" and can_time_out
    unsure = (gives_up and not timeout) or (not gives_up and u_unsure < p_unsure)
    answer: int | None = None
    if not unsure and not timeout:
        if trial.expected is None:
            answer = int(u_free * (min(9, max_answer) + 1))
        elif u_correct < p_correct:
            answer = trial.expected
        else:
            answer = max(0, trial.expected + (-2, -1, 1, 2)[int(u_wrong * 4)])
        answer = min(answer, max_answer)
    level = p.rating_per_difficulty * d + noise + (0.15 if unsure or timeout else 0.0)
    rating = int(min(points, max(1, round(1 + (points - 1) * level))))
    return TrialPlan(
        rt_s=rt, unsure=unsure, answer=answer, rating=rating, difficulty=d, timeout=timeout
    )


class KeyScheduler:
    """A thread that posts key presses at planned clock times."""

    def __init__(self, post: Callable[[str], float], clock: Callable[[], float]):
        self._post = post
        self._clock = clock
        self._heap: list[tuple[float, int, str]] = []
        self._n = 0
        self._cv = threading.Condition()
        self._stop = False
        self._thread = threading.Thread(
            target=self._loop, name="simulated-participant", daemon=True
        )
        self.posted: list[tuple[str, float, float]] = []  # (key, planned, posted)

    def start(self) -> None:
        self._thread.start()

    def at(self, t: float, key: str) -> None:
        with self._cv:
            heapq.heappush(self._heap, (t, self._n, key))
            self._n += 1
            self._cv.notify()

    def clear(self) -> None:
        with self._cv:
            self._heap.clear()

    def stop(self) -> None:
        with self._cv:
            self._stop = True
            self._cv.notify()
        self._thread.join(timeout=2)

    def _loop(self) -> None:
        while True:
            with self._cv:
                while not self._stop and not self._heap:
                    self._cv.wait()
                if self._stop:
                    return
                t, _, key = self._heap[0]
                wait = t - self._clock() - SPIN_S
                if wait > 0:
                    self._cv.wait(timeout=wait)
                    continue
                heapq.heappop(self._heap)
            while self._clock() < t:
                time.sleep(0)  # spin without holding the GIL, so the engine's polling loop runs
            posted = self._post(key)
            self.posted.append((key, t, posted))


class SimulatedParticipant:
    """Observer of the engine's screens that answers like a (simple, seeded) participant.

    ``abort_at`` makes it press Escape and confirm at that trial's stimulus onset, to pilot the
    abort path. ``pause_at`` makes it press the pause key during that trial's stimulus (the
    pause starts when the trial ends) and press it again ``pause_s`` (divided by speed) after
    the pause page appears, to pilot the experimenter's pause.
    """

    def __init__(
        self,
        *,
        seed: int,
        points: int,
        max_answer: int,
        unsure_key: str,
        decision_key: str,
        mode: str,
        speed: float,
        post: Callable[[str], float],
        clock: Callable[[], float],
        abort_at: int | None = None,
        pause_at: int | None = None,
        rating_input: str = "keys",
        pause_key: str = "p",
        pause_s: float = 2.0,
        settings: PilotSettings | None = None,
        stimulus_limited: bool = False,
        answer_limited: bool = False,
    ):
        self.seed = seed
        self.points = points
        self.max_answer = max_answer
        self.unsure_key = unsure_key
        self.decision_key = decision_key
        self.mode = mode
        self.rating_input = rating_input
        self.speed = float(speed)
        self.abort_at = abort_at
        self.pause_at = pause_at
        self.pause_key = pause_key
        self.pause_s = pause_s
        self.settings = settings if settings is not None else PilotSettings()
        self.stimulus_limited = stimulus_limited
        self.answer_limited = answer_limited
        self.keys = KeyScheduler(post, clock)
        self.plans: dict[int, TrialPlan] = {}
        self.intended_rt_ms: dict[int, float] = {}
        self._last_page_t: float | None = None

    def start(self) -> None:
        self.keys.start()

    def stop(self) -> None:
        self.keys.stop()

    def _s(self, seconds: float) -> float:
        return seconds / self.speed

    def _type(self, t: float, plan: TrialPlan) -> None:
        if plan.unsure:
            self.keys.at(t, self.unsure_key)
            return
        for i, ch in enumerate(str(plan.answer)):
            self.keys.at(t + i * self._s(KEY_GAP_S), ch)
        self.keys.at(
            t + len(str(plan.answer)) * self._s(KEY_GAP_S) + self._s(CONFIRM_GAP_S), "return"
        )

    def _rate(self, t: float, rating: int) -> None:
        if self.rating_input == "mouse":
            self.keys.at(t, f"click:{rating}")
        elif rating <= 9:
            self.keys.at(t, str(rating))
        elif rating == 10 and self.points >= 10:
            self.keys.at(t, "0")
        else:
            # 11 on an 11-point scale: move right from the middle, then confirm.
            start = (self.points + 1) // 2
            self.keys.at(t, "right")
            for k in range(rating - start):
                self.keys.at(t + (k + 1) * self._s(KEY_GAP_S), "right")
            self.keys.at(t + (rating - start + 2) * self._s(KEY_GAP_S), "return")

    def on_view(self, kind: str, t: float, trial: ScheduledTrial | None, view: View) -> None:
        if kind in FRESH_SCREENS:
            # A new screen makes keys planned for the previous one obsolete (e.g. after a time
            # limit ended viewing), so they cannot leak into the next trial.
            self.keys.clear()
        if kind == "page":
            key = view.key if isinstance(view, PageView) else ""
            self.keys.at(t + self._s(PAGE_READ_S), key or "space")
        elif kind == "break-ready":
            # The break's minimum is over and the screen says so: go on after a moment, with
            # the break's own key.
            key = view.key if isinstance(view, BreakView) else ""
            self.keys.at(t + self._s(BREAK_EXTRA_S), key or "space")
        elif kind == "pause":
            self.keys.at(t + self._s(self.pause_s), self.pause_key)
        elif kind == "stimulus" and trial is not None:
            plan = plan_trial(
                self.seed,
                trial,
                points=self.points,
                max_answer=self.max_answer,
                settings=self.settings,
                # 'after' mode gives up on the answer screen, which needs its limit; 'over' mode
                # types over the stimulus, ended by the viewing limit or else the answer limit.
                can_time_out=self.answer_limited
                if self.mode == "after"
                else self.stimulus_limited or self.answer_limited,
            )
            self.plans[trial.trial] = plan
            rt = self._s(plan.rt_s)
            if not plan.timeout:
                self.intended_rt_ms[trial.trial] = rt * 1000.0
            if self.abort_at == trial.trial:
                self.keys.at(t + rt / 2, "escape")
                self.keys.at(t + rt / 2 + self._s(0.3), "y")
                return
            if self.pause_at == trial.trial:
                self.keys.at(t + rt / 2, self.pause_key)
            if plan.timeout:
                # Giving up by silence: in 'after' mode end viewing, then type nothing until the
                # answer screen's limit runs out; in 'over' mode press nothing at all.
                if self.mode == "after":
                    self.keys.at(t + rt, self.decision_key)
                return
            if self.mode == "after":
                self.keys.at(t + rt, self.unsure_key if plan.unsure else self.decision_key)
            else:
                self._type(t + rt, plan)
        elif kind == "answer" and trial is not None:
            planned = self.plans.get(trial.trial)
            if planned is not None and not planned.timeout:
                self._type(t + self._s(0.5), planned)
        elif kind == "rating" and trial is not None:
            planned = self.plans.get(trial.trial)
            if planned is not None:
                self._rate(t + self._s(RATING_RT_S), planned.rating)

    def on_pause(self, paused: bool, engine: Engine) -> None:
        """The experimenter's pause needs nothing: the pause page itself is answered in on_view."""

    def on_storage(self, problem: str | None, engine: Engine) -> None:
        """While the session is paused for storage, keys already planned are dropped."""
        if problem is not None:
            self.keys.clear()

    def on_trial_end(self, row: dict[str, Any], engine: Engine) -> None:
        """Nothing to do: the next trial's screens bring their own plans."""

    def extra_row(self, trial: ScheduledTrial) -> dict[str, float | None]:
        """The pilot-only trials.csv column: the intended response time in ms."""
        rt = self.intended_rt_ms.get(trial.trial)
        return {"sim_rt_ms": None if rt is None else round(rt, 3)}
