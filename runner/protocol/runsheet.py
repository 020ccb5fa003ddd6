"""The run sheet: one row per planned participant (label, block order, seed, expected length).

``trialdeck check PROTOCOL --participants N --run-sheet FILE.md`` writes it as a printable
Markdown table, and ``check --json`` carries the same rows. Participants are labelled
``P01`` ... (two digits, more when N > 99), the labels ``trialdeck check`` assumes for
counterbalancing.

How a label maps to a counterbalancing row (:func:`runner.protocol.schedule.participant_index`):
the *last group of digits* in the label, less one, is the 0-based participant index, and a
balanced Latin square with R rows gives that participant row ``index mod R`` + 1. So ``P1``,
``P01`` and ``S001`` all get row 1, ``P10`` row 10 (mod R). A label without digits (``anna``) gets an
index from a hash of the label: a fixed but arbitrary row, so counterbalancing is not under the
experimenter's control. The *seed* (trial shuffles, ``random`` block orders, fixation draws)
comes from the whole label text, so ``P1`` and ``P01`` share a row but not their trial orders.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

from runner.protocol.latin import williams_rows
from runner.protocol.load import LoadedProtocol
from runner.protocol.model import BlocksStep
from runner.protocol.schedule import build_schedule

LABEL_RULE = (
    "A label's last group of digits, less one, is its counterbalancing index: P1, P01 and"
    " S001 all use row 1; the seed for trial orders comes from the whole label, so P1 and P01"
    " get the same block order but different trial orders. A label without digits gets an"
    " arbitrary (hashed) row: use labels with numbers."
)


@dataclass(frozen=True)
class RunSheetRow:
    """One participant's plan: label, row per blocks step, block orders, seed, lengths (s)."""

    participant: str
    index: int
    rows: dict[int, str]
    block_orders: dict[int, list[str]]
    seed: int
    trials: int
    typical_s: float
    shortest_s: float
    longest_s: float | None

    def as_dict(self) -> dict[str, object]:
        out = asdict(self)
        out["rows"] = {str(k): v for k, v in self.rows.items()}
        out["block_orders"] = {str(k): v for k, v in self.block_orders.items()}
        return out


def labels(participants: int) -> list[str]:
    """P01, P02, ... (zero-padded to at least two digits)."""
    width = max(2, len(str(participants)))
    return [f"P{p:0{width}d}" for p in range(1, participants + 1)]


def run_sheet(loaded: LoadedProtocol, participants: int) -> list[RunSheetRow]:
    """The plan of participants P01..PNN, from the schedules the sessions will build.

    Raises
    ------
    ProtocolError
        When a participant's schedule cannot be built (ordering constraints).
    """
    from runner.protocol.length import estimate_length

    model = loaded.model
    out: list[RunSheetRow] = []
    for label in labels(participants):
        schedule = build_schedule(loaded, label, "1")
        orders: dict[int, list[str]] = {}
        for item in schedule.items:
            if item.kind == "block" and isinstance(model.sequence[item.step], BlocksStep):
                orders.setdefault(item.step, []).append(item.trials[0].block if item.trials else "")
        rows: dict[int, str] = {}
        for step, order in orders.items():
            spec = model.sequence[step].blocks  # type: ignore[union-attr]
            if spec.order == "balanced-latin":
                n_rows = len(williams_rows(len(order))) if len(order) > 1 else 1
                rows[step] = f"{schedule.participant_index % n_rows + 1} of {n_rows}"
            else:
                rows[step] = spec.order
        length = estimate_length(schedule, model)
        out.append(
            RunSheetRow(
                participant=label,
                index=schedule.participant_index,
                rows=rows,
                block_orders=orders,
                seed=schedule.seed,
                trials=len(schedule.trials),
                typical_s=round(length.typical, 1),
                shortest_s=round(length.shortest, 1),
                longest_s=None if length.longest is None else round(length.longest, 1),
            )
        )
    return out


def _minutes(seconds: float | None) -> str:
    return "no limit" if seconds is None else f"{seconds / 60:.1f} min"


def format_run_sheet(loaded: LoadedProtocol, sheet: list[RunSheetRow]) -> str:
    """The run sheet as printable Markdown: a table, a tick column, and the label rule."""
    model = loaded.model
    steps = sorted({s for r in sheet for s in r.block_orders})
    head = ["Participant", "Session"]
    for s in steps:
        head += [f"Row (sequence[{s}])", f"Block order (sequence[{s}])"]
    head += ["Trials", "Typical", "Shortest", "Longest", "Seed", "Done"]
    lines = [
        f"# Run sheet: {model.study}",
        "",
        f"Protocol: `{loaded.path.name}` (content hash `{loaded.content_hash[:12]}`)."
        f" {len(sheet)} participants, session 1.",
        "",
        "| " + " | ".join(head) + " |",
        "|" + "---|" * len(head),
    ]
    for r in sheet:
        cells = [r.participant, "1"]
        for s in steps:
            cells += [r.rows.get(s, ""), " → ".join(r.block_orders.get(s, []))]
        cells += [
            str(r.trials),
            _minutes(r.typical_s),
            _minutes(r.shortest_s),
            _minutes(r.longest_s),
            str(r.seed),
            "☐",
        ]
        lines.append("| " + " | ".join(cells) + " |")
    lines += [
        "",
        "## How participant labels map to counterbalancing",
        "",
        LABEL_RULE,
        "",
        "Start each session with the label exactly as written here, for example:",
        "",
        f"    trialdeck run {loaded.path.name} --participant {sheet[0].participant if sheet else 'P01'}"
        " --session 1",
        "",
    ]
    return "\n".join(lines)
