"""The engine driven by a fake presenter on a virtual clock: whole sessions without real time.

The fake presenter implements :class:`runner.session.ports.Presenter`: its flips land on a 60 Hz
frame grid of a virtual clock, and its keys are pressed by a scripted participant (an observer)
at planned virtual times. Waiting for a key moves the clock to that key (or to the deadline), so
a session of minutes runs in milliseconds and every journaled time is known in advance. The
journal is the real one, on disk.
"""

from __future__ import annotations

import bisect
import math
import os
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest
from conftest import MINI_PROTOCOL

from runner.protocol.load import load_protocol
from runner.protocol.schedule import ScheduledTrial, build_schedule
from runner.session.engine import AbortRequested, Engine
from runner.session.journal import Journal, read_journal
from runner.session.ports import Observer, Presenter
from runner.session.views import KeyHit, PageView, RatingView, View

START = 5000.0  # the virtual clock's first reading: far from any real local_clock() value
HZ = 60.0
SPACE = "space"


class VirtualClock:
    """A clock that moves only when told to."""

    def __init__(self, start: float = START):
        self.now = start

    def __call__(self) -> float:
        return self.now

    def advance_to(self, t: float) -> None:
        self.now = max(self.now, t)


@dataclass
class Box:
    width: int
    height: int


@dataclass
class FakePresenter:
    """A presenter without a window: frame-grid flips and planned key presses on a virtual clock."""

    clock: VirtualClock
    interval: float = 1.0 / HZ
    hold: frozenset[str] = frozenset()
    held: list[KeyHit] = field(default_factory=list)
    blocking: bool = False
    last_late: bool = False
    late_flips: int = 0
    shown: list[tuple[float, View, bool]] = field(default_factory=list)
    prepared: list[str] = field(default_factory=list)
    ready: list[str] = field(default_factory=list)
    _keys: list[tuple[float, int, str]] = field(default_factory=list)
    _n: int = 0
    on_lost: Callable[[], None] | None = None
    screen_size: tuple[int, int] = (800, 600)
    desktop_size: tuple[int, int] | None = None

    @property
    def paced(self) -> bool:
        return not self.blocking

    @property
    def last_load_wait_ms(self) -> float:
        return 0.0

    @property
    def stimulus_rect(self) -> Box:
        return Box(480, 360)

    @property
    def refresh(self) -> None:
        return None

    def press(self, t: float, key: str) -> None:
        """Plan a key press at virtual time ``t``."""
        bisect.insort(self._keys, (t, self._n, key))
        self._n += 1

    def show(self, view: View, *, at: float | None = None, photodiode: bool = False) -> float:
        target = self.clock.now if at is None else max(at, self.clock.now)
        t = math.ceil(target / self.interval - 1e-6) * self.interval
        self.last_late = at is not None and t - at > 0.5 * self.interval
        self.late_flips += self.last_late
        self.clock.advance_to(t)
        self.shown.append((t, view, photodiode))
        return t

    def prepare(self, stimulus: str) -> None:
        self.prepared.append(stimulus)

    def wait_ready(self, stimulus: str) -> None:
        self.ready.append(stimulus)

    def wait_key(self, accept: frozenset[str] | None, deadline: float | None) -> KeyHit | None:
        while self._keys and (deadline is None or self._keys[0][0] <= deadline):
            t, _, key = self._keys.pop(0)
            self.clock.advance_to(t)
            if accept is None or key in accept or key in ("escape", "quit"):
                return KeyHit(key, self.clock.now)
            if key in self.hold:
                self.held.append(KeyHit(key, self.clock.now))
        if deadline is None:
            raise AssertionError("the engine waits for a key that nobody will press")
        self.clock.advance_to(deadline)
        return None

    def rating_at(self, view: RatingView, pos: tuple[int, int]) -> int | None:
        return None

    def post_key(self, key: str) -> float:
        self.press(self.clock.now, key)
        return self.clock.now

    def drain(self) -> None:
        keep = []
        for t, n, key in self._keys:
            if t > self.clock.now or key == "escape":
                keep.append((t, n, key))
            elif key in self.hold:
                self.held.append(KeyHit(key, t))
        self._keys = keep

    def early_keys(self, onset: float) -> list[KeyHit]:
        early, keep = [], []
        for t, n, key in self._keys:
            if t > onset or key == "escape":
                keep.append((t, n, key))
            elif key in self.hold:
                self.held.append(KeyHit(key, t))
            else:
                early.append(KeyHit(key, t))
        self._keys = keep
        return early

    def close(self) -> None:
        return None


class FakeMarkers:
    """A marker outlet that remembers what it was given (and pushes without delay)."""

    def __init__(self) -> None:
        self.pushed: list[tuple[str, float]] = []

    def push(self, payload: str, timestamp: float) -> float:
        self.pushed.append((payload, timestamp))
        return timestamp

    def have_consumers(self) -> bool:
        return True


@dataclass
class Plan:
    """What the scripted participant does in one trial (times in virtual seconds)."""

    action: str = "correct"  # correct, wrong, unsure, silent, abort, cancel-abort
    rt_s: float = 1.25
    pause_during: bool = False
    fixation_key: str | None = None  # pressed 50 ms into the fixation (an anticipation)


@dataclass
class ScriptedParticipant:
    """An observer that answers each screen with planned key presses on the fake presenter."""

    presenter: FakePresenter
    plans: dict[int, Plan] = field(default_factory=dict)
    rating: int = 6
    pause_s: float = 3.0
    onsets: dict[int, float] = field(default_factory=dict)
    trial_ends: list[dict[str, Any]] = field(default_factory=list)
    pauses: list[bool] = field(default_factory=list)
    storage: list[str | None] = field(default_factory=list)
    at_stimulus: Callable[[int], None] | None = None

    def on_view(self, kind: str, t: float, trial: ScheduledTrial | None, view: View) -> None:
        press = self.presenter.press
        plan = self.plans.get(trial.trial, Plan()) if trial is not None else Plan()
        if kind == "page" and isinstance(view, PageView):
            press(t + 0.5, view.key)
        elif kind == "fixation" and trial is not None and plan.fixation_key is not None:
            press(t + 0.05, plan.fixation_key)
        elif kind == "break-ready":
            press(t + 0.2, SPACE)
        elif kind == "pause":
            press(t + self.pause_s, "p")
        elif kind == "stimulus" and trial is not None:
            self.onsets.setdefault(trial.trial, t)
            if self.at_stimulus is not None:
                self.at_stimulus(trial.trial)
            if plan.pause_during:
                press(t + plan.rt_s / 2, "p")
            if plan.action in ("abort", "cancel-abort"):
                press(t + plan.rt_s / 2, "escape")
            if plan.action in ("correct", "wrong", "cancel-abort"):
                press(t + plan.rt_s, SPACE)
            elif plan.action == "unsure":
                press(t + plan.rt_s, "u")
        elif kind == "confirm" and trial is not None:
            press(t + 0.3, "y" if plan.action == "abort" else "n")
        elif kind == "answer" and trial is not None and plan.action != "silent":
            value = trial.expected if plan.action != "wrong" else trial.expected + 1
            for i, digit in enumerate(str(value)):
                press(t + 0.4 + 0.1 * i, digit)
            press(t + 0.4 + 0.1 * len(str(value)) + 0.1, "return")
        elif kind == "rating" and trial is not None:
            press(t + 0.5, str(self.rating))

    def on_pause(self, paused: bool, engine: Engine) -> None:
        self.pauses.append(paused)

    def on_storage(self, problem: str | None, engine: Engine) -> None:
        self.storage.append(problem)

    def on_trial_end(self, row: dict[str, Any], engine: Engine) -> None:
        self.trial_ends.append(row)


@dataclass
class Session:
    engine: Engine
    clock: VirtualClock
    presenter: FakePresenter
    markers: FakeMarkers
    participant: ScriptedParticipant
    folder: Path
    aborted: bool = False

    @property
    def records(self) -> list[dict[str, Any]]:
        return read_journal(self.folder / "journal.jsonl").records

    def events(self, name: str) -> list[dict[str, Any]]:
        return [r for r in self.records if r.get("event") == name]

    def rows(self) -> dict[int, dict[str, Any]]:
        return {r["trial"]: r["record"] for r in self.events("trial_end")}


def run_session(
    tmp_path: Path,
    plans: dict[int, Plan] | None = None,
    at_stimulus: Callable[[int], None] | None = None,
) -> Session:
    """Run the mini protocol's whole session on the fake presenter and virtual clock."""
    loaded = load_protocol(MINI_PROTOCOL)
    schedule = build_schedule(loaded, "P01", "1")
    clock = VirtualClock()
    presenter = FakePresenter(clock)
    markers = FakeMarkers()
    participant = ScriptedParticipant(presenter, plans or {}, at_stimulus=at_stimulus)
    folder = tmp_path / "session"
    journal = Journal.create(folder, {"study": loaded.model.study})
    engine = Engine(
        loaded,
        schedule,
        presenter=presenter,
        journal=journal,
        markers=markers,
        clock=clock,
        observers=[participant],
    )
    session = Session(engine, clock, presenter, markers, participant, folder)
    try:
        engine.run()
    except AbortRequested:
        session.aborted = True
    finally:
        journal.close()
    return session


def test_fakes_implement_the_ports():
    """The fake presenter and scripted participant have every member the ports declare."""
    presenter = FakePresenter(VirtualClock())
    assert isinstance(presenter, Presenter)
    assert isinstance(ScriptedParticipant(presenter), Observer)
    assert not isinstance(object(), Presenter)


def test_complete_session_journals_every_trial_with_its_answers(tmp_path):
    """A whole session runs: five trials, each answered, rated and scored, then session_end."""
    s = run_session(tmp_path)
    assert not s.aborted
    (end,) = s.events("session_end")
    assert end["status"] == "completed"
    rows = s.rows()
    assert sorted(rows) == [1, 2, 3, 4, 5]
    assert [r["trial"] for r in s.participant.trial_ends] == [1, 2, 3, 4, 5]
    for trial in s.engine.schedule.trials:
        row = rows[trial.trial]
        assert row["answer"] == trial.expected
        assert (row["outcome"], row["correct"], row["rating"]) == ("correct", 1, 6)
        assert row["timed_out"] == 0 and row["unsure"] == 0
    assert s.engine.state.correct == s.engine.state.answered == 5
    # A break after every two main trials, and the practice trial's feedback screen.
    assert len(s.events("break_start")) == 1
    assert len(s.events("feedback_onset")) == 1
    assert s.presenter.ready == [s.presenter.prepared[0]]


def test_response_times_come_from_the_virtual_clock(tmp_path):
    """Response times equal the planned delays, and every journaled time is a virtual one."""
    s = run_session(tmp_path, {2: Plan(rt_s=2.5), 4: Plan(rt_s=0.75)})
    rows = s.rows()
    assert rows[2]["rt_ms"] == pytest.approx(2500.0, abs=1e-6)
    assert rows[4]["rt_ms"] == pytest.approx(750.0, abs=1e-6)
    assert rows[1]["rt_ms"] == pytest.approx(1250.0, abs=1e-6)
    times = [r["t"] for r in s.records if isinstance(r.get("t"), float)]
    assert times and all(START <= t <= s.clock.now for t in times)
    assert s.events("session_end")[0]["t"] == s.clock.now  # the last flip is the last reading
    onsets = {r["trial"]: r["t"] for r in s.events("stimulus_onset")}
    assert onsets == s.participant.onsets
    assert {t for t, _, pd in s.presenter.shown if pd} >= set(onsets.values())
    for trial, t in onsets.items():
        assert rows[trial]["onset_lsl"] == t


def test_markers_carry_the_journaled_flip_times(tmp_path):
    """Every marked event's marker was pushed with the journaled time as its timestamp."""
    s = run_session(tmp_path)
    marked = [r for r in s.records if "marker" in r]
    assert [(r["marker"], r["t"]) for r in marked] == s.markers.pushed
    kinds = [r["event"] for r in marked]
    assert kinds[0] == "session_start" and kinds[-1] == "session_end"
    assert kinds.count("stimulus_onset") == 5


def test_keys_during_fixation_are_anticipations_not_responses(tmp_path):
    """A decision key pressed during the fixation is journaled as an anticipation, not taken."""
    s = run_session(tmp_path, {2: Plan(fixation_key=SPACE), 3: Plan(fixation_key="4")})
    rows = s.rows()
    assert rows[2]["rt_ms"] == pytest.approx(1250.0, abs=1e-6)  # the planned press, not 0 ms
    assert rows[2]["answer"] == s.engine.schedule.trials[1].expected
    found = [(r["trial"], r["key"], r["screen"]) for r in s.events("anticipation")]
    assert found == [(2, SPACE, "fixation"), (3, "4", "fixation")]
    fixations = {r["trial"]: r["t"] for r in s.events("fixation_onset")}
    for r in s.events("anticipation"):
        assert r["t"] == pytest.approx(fixations[r["trial"]] + 0.05, abs=1e-9)


def test_screen_durations_are_whole_frames(tmp_path):
    """Timed screens last their requested number of frames on the fake 60 Hz grid."""
    s = run_session(tmp_path)
    flips = [r for r in s.events("flip") if "prev_requested_frames" in r]
    assert flips
    assert all(r["prev_frames"] == r["prev_requested_frames"] for r in flips)
    assert s.presenter.late_flips == 0


def test_silence_times_out_viewing_then_the_answer(tmp_path):
    """Without keys the stimulus ends at its limit, then the answer times out; the rating follows."""
    s = run_session(tmp_path, {3: Plan(action="silent")})
    row = s.rows()[3]
    assert (row["timed_out"], row["answer"], row["rating"]) == (1, None, 6)
    assert row["outcome"] == "unanswered" and row["rt_ms"] is None
    (offset,) = [r for r in s.events("stimulus_offset") if r["trial"] == 3]
    assert offset["timed_out"] is True
    model = s.engine.model
    assert offset["viewing_ms"] == pytest.approx(model.timing.stimulus_limit_s * 1000, abs=17)
    (answer,) = [r for r in s.events("answer") if r["trial"] == 3]
    assert answer["timed_out"] is True and answer["answer"] is None
    assert answer["t"] - offset["t"] == pytest.approx(model.timing.answer_limit_s, abs=1e-6)
    assert s.rows()[4]["outcome"] == "correct"


def test_unsure_answer_skips_the_count(tmp_path):
    """The unsure key ends the trial's answer at once: unsure, no count, still rated."""
    s = run_session(tmp_path, {2: Plan(action="unsure", rt_s=1.5)})
    row = s.rows()[2]
    assert (row["unsure"], row["answer"], row["outcome"]) == (1, None, "unsure")
    assert row["correct"] is None and row["rating"] == 6
    assert row["rt_ms"] == pytest.approx(1500.0, abs=1e-6)
    assert s.engine.state.unsure == 1
    assert [r for r in s.events("flip") if r.get("trial") == 2 and r["kind"] == "answer"] == []


def test_pause_asked_during_a_trial_starts_after_it(tmp_path):
    """A pause key during trial 2 lets it finish, then pauses until the key again."""
    s = run_session(tmp_path, {2: Plan(pause_during=True)})
    (start,) = s.events("pause_start")
    (end,) = s.events("pause_end")
    trial_ends = {r["trial"]: r["t"] for r in s.events("trial_end")}
    onsets = {r["trial"]: r["t"] for r in s.events("stimulus_onset")}
    assert trial_ends[2] <= start["t"] < end["t"] < onsets[3]
    assert start["reason"] == end["reason"] == "experimenter"
    assert end["paused_s"] == pytest.approx(s.participant.pause_s, abs=1.0 / HZ + 1e-9)
    assert s.participant.pauses == [True, False]
    assert s.rows()[2]["outcome"] == "correct" and sorted(s.rows()) == [1, 2, 3, 4, 5]


def test_confirmed_abort_ends_the_session_after_the_completed_trials(tmp_path):
    """Escape then Y during trial 3 raises AbortRequested; trials 1 and 2 are journaled."""
    s = run_session(tmp_path, {3: Plan(action="abort")})
    assert s.aborted
    assert sorted(s.rows()) == [1, 2]
    (asked,) = s.events("abort_requested")
    assert asked["trial"] == 3
    assert s.events("session_end") == []  # the run wiring journals the end of an aborted run


def test_cancelled_abort_goes_on_and_marks_the_trial(tmp_path):
    """Escape then another key during trial 3 goes back to the stimulus; the trial is marked."""
    s = run_session(tmp_path, {3: Plan(action="cancel-abort")})
    assert not s.aborted
    rows = s.rows()
    assert rows[3]["interrupted"] == 1 and rows[3]["outcome"] == "correct"
    assert rows[2]["interrupted"] == 0
    assert len(s.events("abort_cancelled")) == 1
    assert rows[3]["rt_ms"] == pytest.approx(1250.0, abs=1e-6)


def test_storage_failure_pauses_the_session_and_journals_the_pause_afterwards(
    tmp_path, monkeypatch
):
    """Failed journal writes at trial 3's onset pause it; once writing works the pause is journaled."""
    real_write = os.write
    failures = {"left": 0, "armed": False}

    def flaky(fd: int, data: Any) -> int:
        if failures["left"]:
            failures["left"] -= 1
            raise OSError(28, "No space left on device")
        return real_write(fd, data)

    def arm(trial: int) -> None:
        if trial == 3 and not failures["armed"]:
            failures.update(left=3, armed=True)

    monkeypatch.setattr(os, "write", flaky)
    s = run_session(tmp_path, at_stimulus=arm)
    monkeypatch.undo()
    read = read_journal(s.folder / "journal.jsonl")
    assert not read.chain_errors and not read.torn_tail
    (start,) = s.events("pause_start")
    (end,) = s.events("pause_end")
    assert start["reason"] == end["reason"] == "storage"
    assert "No space left on device" in start["message"]
    # Three failed attempts, each followed by a one-second wait on the virtual clock.
    assert end["paused_s"] == pytest.approx(3.0, abs=1.0 / HZ + 1e-9)
    assert s.participant.storage == [start["message"], None]
    rows = s.rows()
    assert sorted(rows) == [1, 2, 3, 4, 5]
    assert rows[3]["interrupted"] == 1 and rows[2]["interrupted"] == 0
    onset = s.participant.onsets[3]
    assert rows[3]["onset_lsl"] == onset
    assert rows[3]["rt_ms"] == pytest.approx((end["t"] + 1.25 - onset) * 1000, abs=1e-6)
