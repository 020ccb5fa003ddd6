"""The experimenter's console: plain progress lines in the terminal beside the participant's screen."""

from __future__ import annotations

from typing import Any

from rich.console import Console as RichConsole

SAFETY_REMINDER = (
    "Before you start: the participant has given informed consent under your ethics approval, "
    "knows they may stop at any time (tell them how), and has been asked about photosensitive "
    "epilepsy. Recorders are set up as their manufacturers instruct. Press Escape, then Y, to end "
    "the session."
)


class Console:
    """Progress and warnings for the experimenter. ``quiet`` keeps only warnings."""

    def __init__(self, *, quiet: bool = False, rich_console: RichConsole | None = None):
        self.quiet = quiet
        self.out = rich_console or RichConsole(highlight=False, soft_wrap=True)

    def info(self, text: str) -> None:
        if not self.quiet:
            self.out.print(text, markup=False)

    def warn(self, text: str) -> None:
        self.out.print(f"[bold yellow]warning:[/] {text}", soft_wrap=True)

    # engine observer hooks
    def on_view(self, kind: str, t: float, trial: Any, view: Any) -> None:
        return None

    def on_trial_end(self, row: dict[str, Any], engine: Any) -> None:
        if self.quiet:
            return
        st = engine.state
        done = len(st.done_trials) + len(engine.skip)
        acc = f"{100 * st.correct / st.answered:.0f}%" if st.answered else "-"
        unsure = f"{100 * st.unsure / max(1, done):.0f}%"
        rt = "-" if row.get("rt_ms") is None else f"{row['rt_ms'] / 1000:.2f} s"
        rec = {True: "recorder on", False: "NO RECORDER", None: "recorder ?"}[st.recorder_connected]
        late = getattr(engine.view, "late_flips", 0)
        self.out.print(
            f"trial {row['trial']:>3}/{engine.total_trials}  {row['part']:<8} {row['block']:<10} "
            f"{row['outcome']:<10} rt {rt:>8}   correct {acc:>4}  unsure {unsure:>4}  {rec}  late flips {late}",
            markup=False,
            highlight=False,
        )
