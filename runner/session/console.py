"""The experimenter's console, in the terminal beside the participant's screen.

Two forms share one interface (``info``, ``warn`` and the engine's observer hooks):

* plain progress lines, one per trial (pilots, tests, terminals that are not interactive);
* a live status panel (``live=True``, for ``trialdeck run`` in a terminal) that shows the part,
  block, trial n of N, elapsed and estimated remaining time, running accuracy and unsure rate,
  the last response time, whether a recorder is connected to the marker stream, late flips, and
  whether the session is paused. Warnings are printed above the panel as they happen.

Given the participant's schedule (:meth:`Console.plan`), both forms also show what the
participant is doing as a state (a trial, an instruction page, a rest, a break, the experimenter's
pause), the block order with the current block, and when the next break comes.
"""

from __future__ import annotations

import statistics
import time
from typing import TYPE_CHECKING, Any

from rich.console import Console as RichConsole
from rich.live import Live
from rich.table import Table

if TYPE_CHECKING:
    from runner.protocol.schedule import Schedule, ScheduledTrial
    from runner.session.engine import Engine
    from runner.session.views import View

SAFETY_REMINDER = (
    "Before you start: the participant has given informed consent under your ethics approval, "
    "knows they may stop at any time (tell them how), and has been asked about photosensitive "
    "epilepsy. Recorders are set up as their manufacturers instruct. Offer the planned breaks and "
    "watch for fatigue. Press Escape, then Y, to end the session; press {pause} between trials to "
    "pause it."
)
REFRESH_PER_S = 4
#: What the participant's screen kind (as the engine journals it) means for the experimenter.
SCREEN_STATES = {
    "page": "instruction page (waiting for the participant's key)",
    "rest": "REST: the participant looks at the screen",
    "rest-end": "rest over",
    "break": "BREAK: the participant rests",
    "break-tick": "BREAK: the participant rests",
    "break-ready": "BREAK: may end now (waiting for the participant's key)",
    "pause": "PAUSED by the experimenter",
    "confirm": "ASKING: end the session? (Y ends it)",
    "end": "session over",
}


def break_points(schedule: Schedule) -> list[int]:
    """Trial numbers after which a planned break comes (from the schedule's break items)."""
    points: list[int] = []
    last = 0
    for item in schedule.items:
        if item.kind == "block" and item.trials:
            last = item.trials[-1].trial
        elif item.kind == "break":
            points.append(last)
    return points


def block_order_text(schedule: Schedule, current: str = "") -> str:
    """The blocks in the participant's order, the current one in brackets."""
    names = [it.trials[0].block for it in schedule.items if it.kind == "block" and it.trials]
    return " → ".join(f"[{n}]" if n == current and current else n for n in names) or "-"


def format_duration(seconds: float | None) -> str:
    """``m:ss`` (or ``h:mm:ss``) for the console; ``-`` when unknown."""
    if seconds is None or seconds != seconds:
        return "-"
    s = max(0, round(seconds))
    h, rem = divmod(s, 3600)
    m, sec = divmod(rem, 60)
    return f"{h}:{m:02d}:{sec:02d}" if h else f"{m}:{sec:02d}"


def remaining_estimate(trial_seconds: list[float], trials_left: int) -> float | None:
    """Seconds left at the median pace of the trials so far (None before the first trial)."""
    if not trial_seconds:
        return None
    return statistics.median(trial_seconds) * trials_left


class Console:
    """Progress and warnings for the experimenter. ``quiet`` keeps only warnings."""

    def __init__(
        self,
        *,
        quiet: bool = False,
        live: bool = False,
        rich_console: RichConsole | None = None,
        pause_key: str = "p",
    ):
        self.quiet = quiet
        self.out = rich_console or RichConsole(highlight=False, soft_wrap=True)
        self.live = live
        self.pause_key = pause_key
        self._live: Live | None = None
        self._engine: Engine | None = None
        self._last_rt: float | None = None
        self._t0 = time.monotonic()
        self._note = ""
        self._schedule: Schedule | None = None
        self._screen = ""
        self._block = ""

    # -- plain output ----------------------------------------------------------------------------
    def info(self, text: str) -> None:
        if not self.quiet:
            self.out.print(text, markup=False)

    def warn(self, text: str) -> None:
        self.out.print("[bold yellow]warning:[/] ", end="")
        self.out.print(text, markup=False, soft_wrap=True)

    def plan(self, schedule: Schedule) -> None:
        """The participant's schedule: block order and break points for the panel and lines."""
        self._schedule = schedule
        if not self.quiet and not self.live:
            self.info(f"Block order: {block_order_text(schedule)}")
            points = break_points(schedule)
            if points:
                self.info("Breaks after trials " + ", ".join(str(p) for p in points) + ".")

    def plan_rows(self, done: int) -> dict[str, str]:
        """The block order (current block marked) and the next break, after ``done`` trials."""
        if self._schedule is None:
            return {}
        upcoming = [p for p in break_points(self._schedule) if p >= max(done, 1)]
        if upcoming:
            n = upcoming[0] - done
            after = f"after trial {upcoming[0]}" + (f" (in {n} trials)" if n > 0 else " (now)")
        else:
            after = "none planned"
        return {"block order": block_order_text(self._schedule, self._block), "next break": after}

    # -- the live panel ----------------------------------------------------------------------------
    def start(self) -> None:
        """Show the live panel (when ``live``); call :meth:`stop` when the session ends."""
        if self.live and self._live is None:
            self._t0 = time.monotonic()
            self._live = Live(
                self.panel(), console=self.out, refresh_per_second=REFRESH_PER_S, transient=False
            )
            self._live.start()

    def stop(self) -> None:
        if self._live is not None:
            self._live.update(self.panel())
            self._live.stop()
            self._live = None

    def _refresh(self) -> None:
        if self._live is not None:
            self._live.update(self.panel())

    def status(self, engine: Engine | None = None) -> dict[str, str]:
        """The panel's rows as plain text (also used by tests)."""
        engine = engine or self._engine
        if engine is None:
            return {"state": SCREEN_STATES.get(self._screen, "starting"), **self.plan_rows(0)}
        st = engine.state
        done = len(st.done_trials) + len(engine.skip)
        total = engine.total_trials
        current = st.current_trial if st.current_trial is not None else min(done + 1, total)
        elapsed = time.monotonic() - self._t0
        left = remaining_estimate(st.trial_seconds, total - done)
        recorder = {True: "connected", False: "NOT CONNECTED", None: "not checked yet"}
        state = SCREEN_STATES.get(self._screen, "trial running")
        if st.storage_problem:
            state = "PAUSED: cannot save data - " + st.storage_problem
        elif st.paused:
            state = f"PAUSED (press {self.pause_key.upper()} to go on)"
        return {
            "state": state,
            "part / block": f"{st.current_part or '-'} / {st.current_block or '-'}",
            "trial": f"{current} of {total}"
            + (f"  (attempt {st.attempt})" if st.attempt > 1 else ""),
            "elapsed": format_duration(elapsed),
            "remaining (est.)": format_duration(left),
            "correct": f"{100 * st.correct / st.answered:.0f}% of {st.answered}"
            if st.answered
            else "-",
            "unsure": f"{100 * st.unsure / max(1, len(st.done_trials)):.0f}%",
            "last response": "-" if self._last_rt is None else f"{self._last_rt / 1000:.2f} s",
            "recorder": recorder[st.recorder_connected],
            "late flips": str(engine.presenter.late_flips),
            **self.plan_rows(done),
            "note": self._note or "-",
        }

    def panel(self) -> Table:
        table = Table(title="trialdeck session", show_header=False, box=None, pad_edge=False)
        table.add_column(style="bold")
        table.add_column()
        for key, value in self.status().items():
            style = "bold red" if ("NOT" in value or "PAUSED" in value) else ""
            table.add_row(key, value, style=style)
        return table

    # -- engine observer hooks ---------------------------------------------------------------------
    def on_view(self, kind: str, t: float, trial: ScheduledTrial | None, view: View) -> None:
        before, self._screen = self._screen, kind
        if trial is not None:
            self._block = trial.block
        if self._live is not None:
            self._refresh()
        elif not self.quiet and kind in ("rest", "break", "break-ready") and before != kind:
            self.info(SCREEN_STATES[kind])

    def on_pause(self, paused: bool, engine: Engine) -> None:
        self._engine = engine
        if self._live is not None:
            self._refresh()
        elif not self.quiet:
            self.info("Session paused." if paused else "Session goes on.")

    def on_storage(self, problem: str | None, engine: Engine) -> None:
        self._engine = engine
        if problem is not None:
            self.warn(
                f"{problem} The session is paused so nothing goes unlogged: free disk space or"
                " reconnect the drive; it goes on by itself once the journal can be written"
                " (Escape, then Y, ends it instead)."
            )
        else:
            self.info("Writing works again; the session goes on.")
        self._refresh()

    def on_trial_end(self, row: dict[str, Any], engine: Engine) -> None:
        self._engine = engine
        self._last_rt = row.get("rt_ms")
        if self._live is not None:
            self._refresh()
            return
        if self.quiet:
            return
        st = engine.state
        done = len(st.done_trials) + len(engine.skip)
        acc = f"{100 * st.correct / st.answered:.0f}%" if st.answered else "-"
        unsure = f"{100 * st.unsure / max(1, len(st.done_trials)):.0f}%"
        rt = "-" if row.get("rt_ms") is None else f"{row['rt_ms'] / 1000:.2f} s"
        rec = {True: "recorder on", False: "NO RECORDER", None: "recorder ?"}[st.recorder_connected]
        late = engine.presenter.late_flips
        left = format_duration(remaining_estimate(st.trial_seconds, engine.total_trials - done))
        self.out.print(
            f"trial {row['trial']:>3}/{engine.total_trials}  {row['part']:<8} {row['block']:<10} "
            f"{row['outcome']:<10} rt {rt:>8}   correct {acc:>4}  unsure {unsure:>4}  {rec}"
            f"  late flips {late}  left ~{left}",
            markup=False,
            highlight=False,
        )
