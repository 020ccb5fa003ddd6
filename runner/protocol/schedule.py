"""The session schedule: a pure function of (protocol content, participant, session).

The seed is derived from the protocol's content hash and the two labels, so a resumed or replayed
session re-derives exactly the same order, fixation durations and breaks. Nothing here draws
from global randomness.
"""

from __future__ import annotations

import hashlib
import random
import re
from dataclasses import asdict, dataclass, field
from typing import Literal

from runner.contract.columns import level_key
from runner.errors import ProtocolError, UsageError
from runner.protocol.arrange import ArrangementError, constrained_shuffle
from runner.protocol.latin import block_order
from runner.protocol.load import LoadedProtocol, display_name, select_rows
from runner.protocol.model import (
    BlocksSpec,
    BlocksStep,
    PageStep,
    PracticeStep,
    RestStep,
    TrialsSpec,
    TrialsStep,
)
from runner.protocol.table import TrialRow

LABEL_RE = re.compile(r"^[A-Za-z0-9]{1,64}$")
SCHEDULE_VERSION = 1


def check_label(value: str, what: str) -> str:
    """Refuse participant and session labels that are not letters and digits (BIDS label rule)."""
    if not LABEL_RE.fullmatch(value or ""):
        raise UsageError(
            f"the {what} label {value!r} must be 1 to 64 letters and digits only (no spaces, dashes"
            f" or underscores), because it becomes the BIDS label {'sub' if what == 'participant' else 'ses'}-<label>."
        )
    return value


def participant_index(label: str) -> int:
    """0-based counterbalancing index: the number in the label less one ('P07' -> 6), else a hash.

    Numbered labels let an experimenter predict the block order from the participant list:
    participant 1 gets the first row of the Latin square, participant 2 the second, and so on.
    """
    digits = re.findall(r"\d+", label)
    if digits:
        return max(0, int(digits[-1]) - 1)
    return int(hashlib.sha256(label.encode()).hexdigest()[:8], 16)


def derive_seed(content_hash: str, participant: str, session: str) -> int:
    """The schedule seed: 64 bits of sha256 over the content hash and both labels."""
    text = f"trialdeck-schedule/{SCHEDULE_VERSION}:{content_hash}:{participant}:{session}"
    return int(hashlib.sha256(text.encode()).hexdigest()[:16], 16)


@dataclass(frozen=True)
class ScheduledTrial:
    """One trial as it will be run. ``trial`` is the 1-based position in the session."""

    trial: int
    part: Literal["practice", "main"]
    block: str
    block_index: int
    row: int
    stimulus: str
    expected: int | None
    fixation_ms: float
    feedback: bool
    values: dict[str, str] = field(default_factory=dict)


@dataclass(frozen=True)
class Item:
    """One step of the schedule: a page, rest, block of trials or break."""

    kind: Literal["page", "rest", "block", "break"]
    index: int
    step: int = -1
    text: str = ""
    key: str = "space"
    seconds: float = 0.0
    label: str = ""
    show: str = "fixation"
    part: str = ""
    trials: tuple[ScheduledTrial, ...] = ()


@dataclass(frozen=True)
class Schedule:
    participant: str
    session: str
    seed: int
    participant_index: int
    items: tuple[Item, ...]

    @property
    def trials(self) -> list[ScheduledTrial]:
        return [t for it in self.items if it.kind == "block" for t in it.trials]

    def as_dict(self) -> dict[str, object]:
        return {
            "participant": self.participant,
            "session": self.session,
            "seed": self.seed,
            "participant_index": self.participant_index,
            "items": [
                {k: v for k, v in asdict(it).items() if k != "trials"}
                | {"trials": [asdict(t) for t in it.trials]}
                for it in self.items
            ],
        }


def _order(
    rows: list[TrialRow],
    rng: random.Random,
    *,
    shuffle: bool,
    max_run: dict[str, int],
    no_repeat: bool,
    loc: tuple[str | int, ...],
    loaded: LoadedProtocol,
) -> list[TrialRow]:
    if not shuffle:
        return list(rows)
    items = [{"stimulus": r.stimulus, **r.values, "expected": r.value("expected")} for r in rows]
    try:
        perm = constrained_shuffle(
            items, rng, max_run=max_run, no_repeat="stimulus" if no_repeat else None
        )
    except ArrangementError as exc:
        from runner.protocol.report import problem_at

        raise ProtocolError(
            [
                problem_at(
                    loaded.doc, display_name(loaded.path), loc, str(exc), code="impossible-order"
                )
            ]
        ) from None
    return [rows[i] for i in perm]


def build_schedule(loaded: LoadedProtocol, participant: str, session: str = "1") -> Schedule:
    """Derive the full session schedule for one participant and session.

    Raises
    ------
    UsageError
        For labels that are not letters and digits.
    ProtocolError
        When ordering constraints cannot be met (pointing at the step that asks for them).
    """
    check_label(participant, "participant")
    check_label(session, "session")
    model = loaded.model
    seed = derive_seed(loaded.content_hash, participant, session)
    rng = random.Random(seed)
    p_index = participant_index(participant)
    low, high = model.timing.fixation_ms

    items: list[Item] = []
    counter = 0
    main_count = 0
    breaks = model.breaks
    block_index = 0

    def make_trials(
        rows: list[TrialRow], part: str, label: str, feedback: bool
    ) -> list[ScheduledTrial]:
        nonlocal counter
        out = []
        for r in rows:
            counter += 1
            out.append(
                ScheduledTrial(
                    trial=counter,
                    part=part,  # type: ignore[arg-type]  # callers pass 'practice' or 'main'
                    block=label,
                    block_index=block_index,
                    row=r.row,
                    stimulus=r.stimulus,
                    expected=r.expected,
                    fixation_ms=round(rng.uniform(low, high), 3),
                    feedback=feedback,
                    values=dict(r.values),
                )
            )
        return out

    def add_main_block(trials: list[ScheduledTrial], label: str, step_i: int) -> None:
        # Breaks every N main trials split a block; the split keeps one block label.
        nonlocal main_count
        chunk: list[ScheduledTrial] = []
        for t in trials:
            if (
                breaks
                and breaks.every_trials
                and main_count
                and main_count % breaks.every_trials == 0
            ):
                if chunk:
                    items.append(
                        Item(
                            "block",
                            len(items),
                            step_i,
                            part="main",
                            label=label,
                            trials=tuple(chunk),
                        )
                    )
                    chunk = []
                items.append(
                    Item(
                        "break",
                        len(items),
                        step_i,
                        text=breaks.text,
                        key=breaks.key,
                        seconds=breaks.min_s,
                    )
                )
            chunk.append(t)
            main_count += 1
        if chunk:
            items.append(
                Item("block", len(items), step_i, part="main", label=label, trials=tuple(chunk))
            )

    spec: TrialsSpec | BlocksSpec
    for i, step in enumerate(model.sequence):
        if isinstance(step, PageStep):
            items.append(
                Item(
                    "page",
                    len(items),
                    i,
                    text=loaded.pages.get(i, step.page.text or ""),
                    key=step.page.key,
                )
            )
        elif isinstance(step, RestStep):
            items.append(
                Item(
                    "rest",
                    len(items),
                    i,
                    seconds=step.rest.seconds,
                    label=step.rest.label,
                    show=step.rest.show,
                )
            )
        elif isinstance(step, PracticeStep):
            rows = select_rows(loaded.table, step.practice.where)
            rows = _order(
                rows,
                rng,
                shuffle=step.practice.shuffle,
                max_run={},
                no_repeat=True,
                loc=("sequence", i, "practice"),
                loaded=loaded,
            )
            block_index += 1
            trials = make_trials(rows, "practice", "practice", step.practice.feedback)
            items.append(
                Item(
                    "block", len(items), i, part="practice", label="practice", trials=tuple(trials)
                )
            )
        elif isinstance(step, TrialsStep):
            spec = step.trials
            rows = _order(
                select_rows(loaded.table, spec.where),
                rng,
                shuffle=spec.shuffle,
                max_run=dict(spec.max_run),
                no_repeat=spec.no_repeat,
                loc=("sequence", i, "trials"),
                loaded=loaded,
            )
            block_index += 1
            add_main_block(make_trials(rows, "main", "main", False), "main", i)
        elif isinstance(step, BlocksStep):
            spec = step.blocks
            rows = select_rows(loaded.table, spec.where)
            present = sorted({r.value(spec.by) for r in rows}, key=level_key)
            levels = [str(v) for v in spec.levels] if spec.levels else present
            order = block_order(levels, p_index, method=spec.order, seed=seed)
            for level in order:
                level_rows = [r for r in rows if r.value(spec.by) == level]
                level_rows = _order(
                    level_rows,
                    rng,
                    shuffle=spec.shuffle,
                    max_run=dict(spec.max_run),
                    no_repeat=spec.no_repeat,
                    loc=("sequence", i, "blocks"),
                    loaded=loaded,
                )
                block_index += 1
                add_main_block(make_trials(level_rows, "main", level, False), level, i)
    return Schedule(participant, session, seed, p_index, tuple(items))
