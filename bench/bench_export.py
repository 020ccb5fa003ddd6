"""Time export plus summary of 200 synthetic sessions of 200 main trials, read from journals.

Run: .venv/bin/python bench/bench_export.py [N_SESSIONS N_TRIALS]

The journals are written with runner's Journal class and follow the engine's event structure
(each trial: trial_start, fixation, stimulus, decision, answer screen with two typed digits,
answer, rating, gap, trial_end, with a flip line for every screen change), in the invented
parcel-courier scenario. Writing them is not timed. Then, timed:

1. in one run, as a script or notebook would: :func:`runner.data.export.export_sessions` (pooled
   trials.csv and BIDS events for every session), then
   :func:`runner.data.summary.summarize_sessions` on the sessions the export read (tables, plots,
   report.html), without reading the journals again. Target: under 10 s together.
2. for reference, ``trialdeck export`` and ``trialdeck summary`` through their command functions
   as the CLI calls them, each reading the journals itself.

Wall time and this process's CPU time are printed (the machine may be shared).
"""

from __future__ import annotations

import argparse
import contextlib
import io
import math
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from runner.cli.export import add_arguments as add_export_arguments  # noqa: E402
from runner.cli.export import run as run_export  # noqa: E402
from runner.cli.summary import add_arguments as add_summary_arguments  # noqa: E402
from runner.cli.summary import run as run_summary  # noqa: E402
from runner.data.export import export_sessions  # noqa: E402
from runner.data.summarize import summarize_sessions  # noqa: E402
from runner.journal.writer import Journal  # noqa: E402

N_SESSIONS = 200
N_TRIALS = 200
TARGET_S = 10.0
FRAME_S = 1 / 60
NODES = (20, 50, 80, 110, 140)
DENSITIES = ("sparse", "medium", "dense")
STUDY = "courier-hops"
PROTOCOL_TEXT = """study: courier-hops
screen: {resolution: [1920, 1080], refresh_hz: 60, width_cm: 52.7, distance_cm: 60}
stimulus_size: {width_deg: 24}
markers: {stream: courier-hops-markers}
trials: {table: manifest.csv, factors: [nodes, density]}
answer: {prompt: "How many stops lie on the shortest route?", max: 60, unsure_key: u}
rating: {points: 9, question: "How hard was that?", low: effortless, high: extremely hard}
timing: {fixation_ms: [700, 1300], stimulus_limit_s: 40, answer_limit_s: 20, gap_ms: 800}
sequence:
  - page: {text: "Welcome, dispatcher."}
  - rest: {seconds: 60, label: baseline}
  - blocks: {by: density, order: balanced-latin, levels: [sparse, medium, dense]}
breaks: {every_trials: 50, min_s: 15}
"""


def _table() -> tuple[str, list[tuple[str, int, int, str]]]:
    rows = []
    for n in NODES:
        for d in DENSITIES:
            for v in range(4):
                rows.append((f"stimuli/courier_n{n}_{d}_{v}.png", 3 + n // 20 + v % 3, n, d))
    text = "stimulus,expected,nodes,density\n" + "".join(
        f"{s},{e},{n},{d}\n" for s, e, n, d in rows
    )
    return text, rows


def _marker(event: str, **fields: object) -> str:
    import json

    return json.dumps({"event": event, **fields}, separators=(",", ":"))


def write_session(root: Path, index: int, rng: np.random.Generator) -> Path:
    """Write one synthetic session journal; return its folder."""
    table_text, rows = _table()
    participant = f"P{index + 1:03d}"
    folder = root / STUDY / f"sub-{participant}" / "ses-1"
    header = {
        "software": "trialdeck",
        "version": "0.1.0",
        "mode": "pilot",
        "speed": 1.0,
        "study": STUDY,
        "participant": participant,
        "session": "1",
        "wall_clock_start": f"2031-04-{index % 28 + 1:02d}T09:00:00.000+00:00",
        "lsl_clock_at_start": 1000.0,
        "protocol_text": PROTOCOL_TEXT,
        "trial_table_text": table_text,
        "trial_table_columns": ["stimulus", "expected", "nodes", "density"],
        "screen": {"resolution": [1920, 1080], "refresh_hz": 60.0, "interval_s": FRAME_S},
        "markers": {"name": "courier-hops-markers", "source_id": "trialdeck:courier-hops:lab1"},
        "platform": {"python": "3.11", "system": "Linux"},
    }
    j = Journal.create(folder, header)
    t = 1000.0 + index * 5000.0
    skill = rng.normal(0, 0.4)

    def flip(kind: str, view: dict[str, object], trial: int | None = None) -> None:
        fields: dict[str, object] = {"t": t, "kind": kind, "view": view}
        if trial is not None:
            fields["trial"] = trial
        j.append("flip", **fields)

    j.append("session_start", t=t, participant=participant, session="1",
             marker=_marker("session_start"), push_us=80.0)  # fmt: skip
    t += FRAME_S
    flip("page", {"type": "PageView", "text": "Welcome, dispatcher."})
    j.append("page_onset", t=t, item=0, step=0, marker=_marker("page_onset"), push_us=60.0)
    t += 4.0
    j.append("page_end", t=t, item=0, key="space", marker=_marker("page_end", key="space"),
             push_us=90.0)  # fmt: skip
    flip("rest", {"type": "FixationView"})
    j.append("rest_start", t=t, label="baseline", requested_s=60.0, frames=3600,
             marker=_marker("rest_start", label="baseline"), push_us=70.0)  # fmt: skip
    t += 60.0
    flip("rest-end", {"type": "BlankView"})
    j.append("rest_end", t=t, label="baseline", actual_s=60.0,
             marker=_marker("rest_end", label="baseline"), push_us=70.0)  # fmt: skip
    order = rng.permutation(len(rows))
    for k in range(N_TRIALS_RUN):
        trial = k + 1
        stim, expected, nodes, density = rows[int(order[k % len(rows)])]
        block = density
        if k % 50 == 0:
            if k:
                j.append("block_end", t=t, block=block, part="main",
                         marker=_marker("block_end", block=block, part="main"), push_us=80.0)  # fmt: skip
                flip("break", {"type": "BreakView", "text": "Break", "seconds_left": 15})
                j.append("break_start", t=t, item=3, requested_s=15.0,
                         marker=_marker("break_start"), push_us=80.0)  # fmt: skip
                t += 20.0
                j.append("break_end", t=t, item=3, actual_s=20.0, marker=_marker("break_end"),
                         push_us=80.0)  # fmt: skip
            j.append("block_start", t=t, block=block, part="main", block_index=k // 50 + 1,
                     marker=_marker("block_start", block=block, part="main"), push_us=80.0)  # fmt: skip
        j.append("trial_start", t=t, trial=trial, block=block, part="main", stimulus=stim,
                 expected=expected, row=int(order[k % len(rows)]) + 1)  # fmt: skip
        t += 0.8
        t_fix = t
        flip("fixation", {"type": "FixationView"}, trial)
        j.append("fixation_onset", t=t, trial=trial, requested_ms=1000.0, frames=60,
                 marker=_marker("fixation_onset", trial=trial), push_us=80.0)  # fmt: skip
        t += 1.0
        t_on = t
        flip("stimulus", {"type": "StimulusView", "stimulus": stim}, trial)
        j.append("stimulus_onset", t=t, trial=trial, stimulus=stim, fixation_actual_ms=1000.0,
                 marker=_marker("stimulus_onset", trial=trial, stimulus=stim), push_us=80.0)  # fmt: skip
        hardness = (nodes - 20) / 120 * 2.2 + DENSITIES.index(density) * 0.8 - skill
        rt = float(math.exp(rng.normal(8.3 + 0.45 * hardness, 0.35))) / 1000.0
        unsure = rng.uniform() < 0.04 * max(hardness, 0)
        correct = rng.uniform() < 1 / (1 + math.exp(hardness - 2.6))
        answer = None if unsure else (expected if correct else expected + 1)
        t += rt
        key = "u" if unsure else "space"
        j.append("decision", t=t, trial=trial, key=key, rt_ms=round(rt * 1000, 3),
                 marker=_marker("decision", trial=trial, key=key), push_us=90.0)  # fmt: skip
        t_dec = t
        t += FRAME_S / 2
        flip("answer", {"type": "AnswerView", "prompt": "How many?", "typed": ""}, trial)
        j.append("stimulus_offset", t=t, trial=trial, viewing_ms=round((t - t_on) * 1000, 3),
                 timed_out=False, marker=_marker("stimulus_offset", trial=trial), push_us=80.0)  # fmt: skip
        if unsure:
            j.append("answer", t=t_dec, trial=trial, answer=None, unsure=True,
                     marker=_marker("answer", trial=trial, answer=None, unsure=True), push_us=90.0)  # fmt: skip
            t_conf = None
        else:
            j.append("answer_onset", t=t, trial=trial,
                     marker=_marker("answer_onset", trial=trial), push_us=80.0)  # fmt: skip
            for digit in str(answer):
                t += 0.25
                flip("answer-typing", {"type": "AnswerView", "typed": digit}, trial)
                j.append("typing", t=t, trial=trial, typed=digit, key=digit, key_t=t - 0.004)
            t += 0.3
            t_conf = t
            j.append("answer", t=t, trial=trial, answer=answer, unsure=False,
                     marker=_marker("answer", trial=trial, answer=answer, unsure=False),
                     push_us=90.0)  # fmt: skip
        t += FRAME_S
        t_r = t
        flip("rating", {"type": "RatingView", "points": 9}, trial)
        j.append("rating_onset", t=t, trial=trial, marker=_marker("rating_onset", trial=trial),
                 push_us=80.0)  # fmt: skip
        rating = int(np.clip(round(2 + 1.4 * hardness + rng.normal(0, 1)), 1, 9))
        t += float(rng.uniform(0.6, 2.5))
        j.append("rating", t=t, trial=trial, rating=rating, rt_ms=round((t - t_r) * 1000, 3),
                 marker=_marker("rating", trial=trial, rating=rating), push_us=90.0)  # fmt: skip
        t_rating = t
        flip("rating-chosen", {"type": "RatingView", "points": 9, "selected": rating}, trial)
        t += 0.15
        flip("gap", {"type": "BlankView"}, trial)
        j.append("gap_onset", t=t, trial=trial, marker=_marker("gap_onset", trial=trial),
                 push_us=80.0)  # fmt: skip
        outcome = "unsure" if unsure else ("correct" if correct else "wrong")
        record = {
            "participant": participant, "session": "1", "block": block, "trial": trial,
            "stimulus": stim, "expected": expected, "answer": answer, "unsure": int(unsure),
            "correct": None if unsure else int(correct), "rating": rating,
            "rt_ms": round((t_dec - t_on) * 1000, 3), "onset_lsl": t_on, "part": "main",
            "outcome": outcome, "block_index": k // 50 + 1,
            "typing_ms": None if t_conf is None else round((t_conf - t_dec) * 1000, 3),
            "rating_rt_ms": round((t_rating - t_r) * 1000, 3), "timed_out": 0,
            "fixation_ms": round((t_on - t_fix) * 1000, 3), "interrupted": 0,
            "values": {"nodes": str(nodes), "density": density},
            "sim_rt_ms": round(rt * 1000 - 0.4, 3),
        }  # fmt: skip
        j.append("trial_end", t=t, trial=trial, record=record)
    j.append("block_end", t=t, block=block, part="main",
             marker=_marker("block_end", block=block, part="main"), push_us=80.0)  # fmt: skip
    t += 0.8
    flip("end", {"type": "BlankView"})
    j.append("session_end", t=t, status="completed",
             marker=_marker("session_end", status="completed"), push_us=80.0)  # fmt: skip
    j.close()
    return folder


N_TRIALS_RUN = N_TRIALS


def main() -> None:
    global N_TRIALS_RUN
    n_sessions = int(sys.argv[1]) if len(sys.argv) > 1 else N_SESSIONS
    N_TRIALS_RUN = int(sys.argv[2]) if len(sys.argv) > 2 else N_TRIALS
    rng = np.random.default_rng(3)
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp) / "sessions"
        start = time.perf_counter()
        for i in range(n_sessions):
            write_session(root, i, rng)
        lines = sum(1 for p in root.rglob("journal.jsonl") for _ in open(p, "rb"))
        size = sum(p.stat().st_size for p in root.rglob("journal.jsonl"))
        print(
            f"journals: {n_sessions} sessions x {N_TRIALS_RUN} trials, {lines} lines, "
            f"{size / 1e6:.1f} MB, written in {time.perf_counter() - start:.1f} s (not timed)"
        )
        start, cpu = time.perf_counter(), time.process_time()
        result = export_sessions([root], Path(tmp) / "export-lib")
        t_export = time.perf_counter() - start
        summarize_sessions(None, Path(tmp) / "summary-lib", sessions=result.sessions)
        total = time.perf_counter() - start
        total_cpu = time.process_time() - cpu
        print(
            f"one run: export {t_export:.2f} s, summary from the export's sessions "
            f"{total - t_export:.2f} s, total {total:.2f} s wall ({total_cpu:.2f} s CPU)"
        )
        print(f"target under {TARGET_S:.0f} s: {'met' if total < TARGET_S else 'NOT met'}")

        p = argparse.ArgumentParser()
        add_export_arguments(p)
        args = p.parse_args([str(root), "--out", str(Path(tmp) / "export")])
        start = time.perf_counter()
        with contextlib.redirect_stdout(io.StringIO()):
            run_export(args)
        t_cli_export = time.perf_counter() - start
        p = argparse.ArgumentParser()
        add_summary_arguments(p)
        args = p.parse_args([str(root), "--out", str(Path(tmp) / "summary")])
        start = time.perf_counter()
        with contextlib.redirect_stdout(io.StringIO()):
            run_summary(args)
        t_cli_summary = time.perf_counter() - start
    print(
        f"commands: trialdeck export {t_cli_export:.2f} s, trialdeck summary (reads the journals "
        f"again) {t_cli_summary:.2f} s, total {t_cli_export + t_cli_summary:.2f} s"
    )


if __name__ == "__main__":
    main()
