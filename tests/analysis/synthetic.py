"""Synthetic pooled trials tables for the summary tests and the benchmark (invented courier data).

Dispatchers count the stops on the shortest route between two marked depots; accuracy falls and
response time and rating rise with the number of nodes and the link density. Everything is drawn
from a seeded generator, so the same arguments give the same table.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

NODES = (20, 50, 80, 110, 140)
DENSITIES = ("sparse", "medium", "dense")
RATING_POINTS = 9
PRACTICE_TRIALS = 3


def make_pool(
    n_participants: int = 3,
    n_trials: int = 30,
    *,
    seed: int = 7,
    sessions_per_participant: int = 1,
    pilot: bool = True,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Return ``(trials, sessions)`` for a synthetic pilot; practice trials are added on top."""
    rng = np.random.default_rng(seed)
    stimuli = [
        (f"stimuli/courier_n{n}_{d}_{v}.png", n, d)
        for n in NODES
        for d in DENSITIES
        for v in ("a", "b")
    ]
    rows = []
    sessions = []
    for p in range(n_participants):
        participant = f"P{p + 1:03d}"
        skill = rng.normal(0.0, 0.4)
        for s in range(sessions_per_participant):
            session = f"S{s + 1}"
            onset = 100.0 + rng.uniform(0, 5)
            order = rng.permutation(len(stimuli))
            picks = [
                stimuli[i % len(stimuli)] for i in order.tolist() * (n_trials // len(stimuli) + 1)
            ]
            plan = [("practice", stimuli[k]) for k in range(PRACTICE_TRIALS)]
            plan += [("main", picks[k]) for k in range(n_trials)]
            for position, (part, (stim, nodes, density)) in enumerate(plan, start=1):
                hardness = (nodes - 20) / 120 * 2.2 + DENSITIES.index(density) * 0.8 - skill
                expected = int(3 + nodes // 20 + rng.integers(0, 3))
                p_correct = 1 / (1 + np.exp(hardness - 2.6))
                u = rng.uniform()
                if u < 0.03:
                    outcome = "unanswered"
                elif u < 0.03 + 0.05 * hardness:
                    outcome = "unsure"
                elif rng.uniform() < p_correct:
                    outcome = "correct"
                else:
                    outcome = "wrong"
                rt = float(np.exp(rng.normal(8.3 + 0.45 * hardness, 0.35)))
                answer: object = pd.NA
                if outcome == "correct":
                    answer = expected
                elif outcome == "wrong":
                    answer = expected + int(rng.choice([-2, -1, 1, 2]))
                rating: object = int(np.clip(round(2 + 1.4 * hardness + rng.normal(0, 1)), 1, 9))
                if rng.uniform() < 0.03:
                    rating = pd.NA
                rows.append(
                    {
                        "participant": participant,
                        "session": session,
                        "block": density,
                        "trial": position,
                        "stimulus": stim,
                        "expected": expected,
                        "answer": answer,
                        "unsure": int(outcome == "unsure"),
                        "correct": {"correct": 1, "wrong": 0}.get(outcome, pd.NA),
                        "rating": rating,
                        "rt_ms": np.nan if outcome == "unanswered" else rt,
                        "onset_lsl": round(onset, 6),
                        "part": part,
                        "outcome": outcome,
                        "rating_rt_ms": float(rng.uniform(600, 2500)),
                        "timed_out": int(outcome == "unanswered"),
                        "nodes": nodes,
                        "density": density,
                        "sim_rt_ms": np.nan
                        if outcome == "unanswered"
                        else rt - rng.uniform(0, 1.5),
                    }
                )
                onset += rt / 1000 + 6.0
            sessions.append(
                {
                    "participant": participant,
                    "session": session,
                    "started_wall": f"2031-03-{p % 28 + 1:02d}T09:{s % 60:02d}:00+00:00",
                    "duration_s": round(onset - 100.0 + 120.0, 1),
                    "n_trials": len(plan),
                    "aborted": False,
                    "pilot": pilot,
                }
            )
    trials = pd.DataFrame(rows)
    for col in ("expected", "answer", "correct", "rating"):
        trials[col] = trials[col].astype("Int64")
    return trials, pd.DataFrame(sessions)
