"""Pre-declared exclusions: the protocol's ``exclusions`` rules, judged per session.

One function, :func:`judge_sessions`, serves export and summary alike, so both leave out the
same sessions. Each session is judged by the rules of its own (frozen) protocol; a session
meeting any rule is *excluded*: left out of pooled tables and analyses, but listed, with every
rule's value, in ``exclusions.csv`` (:data:`EXCLUSION_COLUMNS`).

The measures (docs/analysis.md, "Exclusions"):

* ``practice_accuracy_below``: correct practice answers over scored practice trials (correct,
  wrong, unsure, unanswered); not judged when the session scored no practice trial.
* ``timed_out_share_above``: timed-out main trials over completed main trials.
* ``unsure_share_above``: "unsure" answers over scored main trials.
* ``physio_valid_share_below``: trials with valid physiology over the session's rows of the
  physiology table given (column ``valid``, or every column ending in ``_valid`` true); not
  judged without such a table.

A value equal to its threshold does not exclude (the rules say *below* and *above*).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import pandas as pd

from runner.data.sessions import ExportSession
from runner.errors import InputFileError
from runner.protocol.model import Exclusions

__all__ = [
    "EXCLUSIONS_NAME",
    "EXCLUSION_COLUMNS",
    "RULES",
    "Judged",
    "judge_sessions",
    "physio_validity",
]

EXCLUSIONS_NAME = "exclusions.csv"
#: **contract**: the columns of exclusions.csv.
EXCLUSION_COLUMNS = ("participant", "session", "rule", "value", "threshold", "excluded", "note")
#: Every rule, in the order the table lists them; True where the rule excludes values above.
RULES: dict[str, bool] = {
    "practice_accuracy_below": False,
    "timed_out_share_above": True,
    "unsure_share_above": True,
    "physio_valid_share_below": False,
}
SCORED = ("correct", "wrong", "unsure", "unanswered")
VALUE_DIGITS = 4  # shares are written to 4 decimals


@dataclass
class Judged:
    """The exclusions table and the excluded sessions' ``(participant, session)`` labels."""

    table: pd.DataFrame
    excluded: list[tuple[str, str]]

    def keeps(self, session: ExportSession) -> bool:
        """Whether ``session`` stays in pooled analyses."""
        return (session.participant, session.session) not in set(self.excluded)

    def reasons(self) -> dict[tuple[str, str], list[str]]:
        """Per excluded session, the rules it met, in rule order."""
        out: dict[tuple[str, str], list[str]] = {}
        for row in self.table.itertuples(index=False):
            if int(row.excluded):
                out.setdefault((str(row.participant), str(row.session)), []).append(str(row.rule))
        return out


def _share(numerator: int, denominator: int) -> float:
    return numerator / denominator if denominator else math.nan


def session_measures(trials: Sequence[dict[str, Any]]) -> dict[str, tuple[float, str]]:
    """The measures of one session's completed trial records: value and a note when none."""
    practice = [r for r in trials if r.get("part") == "practice"]
    main = [r for r in trials if r.get("part") != "practice"]
    scored_practice = [r for r in practice if r.get("outcome") in SCORED]
    scored_main = [r for r in main if r.get("outcome") in SCORED]
    correct = sum(r.get("outcome") == "correct" for r in scored_practice)
    timed_out = sum(bool(r.get("timed_out")) for r in main)
    unsure = sum(r.get("outcome") == "unsure" for r in scored_main)
    return {
        "practice_accuracy_below": (
            _share(correct, len(scored_practice)),
            "" if scored_practice else "no scored practice trial",
        ),
        "timed_out_share_above": (
            _share(timed_out, len(main)),
            "" if main else "no main-part trial",
        ),
        "unsure_share_above": (
            _share(unsure, len(scored_main)),
            "" if scored_main else "no scored main-part trial",
        ),
    }


def physio_validity(physio: pd.DataFrame) -> dict[tuple[str, str], float]:
    """Share of valid trials per ``(participant, session)`` of a per-trial physiology table.

    A trial is valid when its ``valid`` column is true, or, without such a column, when every
    column ending in ``_valid`` is true (1, true, yes). Labels are compared as text.

    Raises
    ------
    InputFileError
        The table lacks participant, session or any validity column.
    """
    flags = (
        ["valid"]
        if "valid" in physio.columns
        else [c for c in physio.columns if str(c).endswith("_valid")]
    )
    missing = [c for c in ("participant", "session") if c not in physio.columns]
    if missing or not flags:
        raise InputFileError(
            "the physiology table needs participant, session and a validity column (valid, or "
            "columns ending in _valid) to judge exclusions.physio_valid_share_below."
        )
    truthy = {"1", "1.0", "true", "yes"}
    valid = pd.concat(
        [physio[c].astype(str).str.strip().str.lower().isin(truthy) for c in flags], axis=1
    ).all(axis=1)
    frame = pd.DataFrame(
        {
            "participant": physio["participant"].astype(str),
            "session": physio["session"].astype(str),
            "valid": valid.astype(float),
        }
    )
    shares = frame.groupby(["participant", "session"], sort=True)["valid"].mean()
    out: dict[tuple[str, str], float] = {}
    for (participant, session), share in shares.items():
        out[(str(participant), str(session))] = float(share)
    return out


def _excludes(rule: str, value: float, threshold: float) -> bool:
    if not math.isfinite(value):
        return False
    return value > threshold if RULES[rule] else value < threshold


def judge_sessions(
    sessions: Sequence[ExportSession], *, physio: pd.DataFrame | None = None
) -> Judged:
    """Judge each session by its protocol's exclusion rules.

    Parameters
    ----------
    sessions : sequence of ExportSession
        The sessions, as read by export or summary.
    physio : pd.DataFrame, optional
        A per-trial physiology table (see :func:`physio_validity`) for
        ``physio_valid_share_below``.

    Returns
    -------
    Judged
        One table row per session and declared rule (:data:`EXCLUSION_COLUMNS`; ``value`` NaN
        and ``note`` saying why when a rule could not be judged), and the excluded sessions.
    """
    validity = physio_validity(physio) if physio is not None else None
    rows: list[dict[str, Any]] = []
    excluded: list[tuple[str, str]] = []
    for s in sessions:
        rules: Exclusions | None = s.protocol.exclusions
        if rules is None:
            continue
        measures = session_measures(s.trials)
        key = (s.participant, s.session)
        if validity is None:
            measures["physio_valid_share_below"] = (math.nan, "no physiology table given")
        elif key in validity:
            measures["physio_valid_share_below"] = (validity[key], "")
        else:
            measures["physio_valid_share_below"] = (math.nan, "no rows in the physiology table")
        out = False
        for rule in RULES:
            threshold = getattr(rules, rule)
            if threshold is None:
                continue
            value, note = measures[rule]
            hit = _excludes(rule, value, float(threshold))
            out = out or hit
            rows.append(
                {
                    "participant": s.participant,
                    "session": s.session,
                    "rule": rule,
                    "value": round(value, VALUE_DIGITS) if math.isfinite(value) else math.nan,
                    "threshold": float(threshold),
                    "excluded": int(hit),
                    "note": note,
                }
            )
        if out:
            excluded.append(key)
    table = pd.DataFrame(rows, columns=list(EXCLUSION_COLUMNS))
    for c in ("participant", "session", "rule", "note"):
        table[c] = table[c].astype("string")
    table["excluded"] = table["excluded"].astype(int)
    return Judged(table=table, excluded=excluded)
