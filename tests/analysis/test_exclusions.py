"""Pre-declared exclusions: each session judged by its protocol's rules, in one function."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
from export_pilots import MINI_PROTOCOL

from runner.data.exclusions import (
    EXCLUSION_COLUMNS,
    judge_sessions,
    physio_validity,
    session_measures,
)
from runner.data.sessions import ExportSession
from runner.errors import InputFileError
from runner.journal.read import JournalRead
from runner.protocol.load import load_protocol
from runner.protocol.model import Exclusions


def _records(outcomes: str, *, part: str = "main", timed_out: str = "") -> list[dict[str, Any]]:
    """Trial records from letters: c correct, w wrong, u unsure, a unanswered, s unscored."""
    names = {"c": "correct", "w": "wrong", "u": "unsure", "a": "unanswered", "s": "unscored"}
    out = []
    for i, letter in enumerate(outcomes):
        out.append(
            {
                "part": part,
                "outcome": names[letter],
                "timed_out": int(i < len(timed_out) and timed_out[i] == "t"),
            }
        )
    return out


def _session(participant: str, records: list[dict[str, Any]], rules: Exclusions | None):
    model = load_protocol(MINI_PROTOCOL).model.model_copy(update={"exclusions": rules})
    header = {"participant": participant, "session": "1", "study": "mini-test"}
    return ExportSession(
        folder=Path(participant),
        read=JournalRead(path=Path(participant), header=header, records=[header]),
        header=header,
        protocol=model,
        trials=records,
        status="completed",
        duration_s=1.0,
    )


def test_measures_agree_with_pandas_counts():
    """Practice accuracy, timed-out share and unsure share equal the same shares counted by
    pandas on the records.
    Source: pandas DataFrame.groupby/mean over the same records, by the documented definitions.
    """
    records = _records("cwcu", part="practice") + _records("cwuuasca", timed_out="....t..t")
    frame = pd.DataFrame(records)
    practice = frame[(frame.part == "practice") & (frame.outcome != "unscored")]
    main = frame[frame.part == "main"]
    scored = main[main.outcome != "unscored"]
    measures = session_measures(records)
    assert measures["practice_accuracy_below"][0] == pytest.approx(
        (practice.outcome == "correct").mean()
    )
    assert measures["timed_out_share_above"][0] == pytest.approx(main.timed_out.mean())
    assert measures["unsure_share_above"][0] == pytest.approx((scored.outcome == "unsure").mean())


def test_judge_lists_every_declared_rule_and_excludes_past_thresholds():
    """A session past a threshold is excluded; one at the threshold is kept; rules not declared
    are not listed; a session without rules is not judged."""
    rules = Exclusions(practice_accuracy_below=0.5, unsure_share_above=0.5)
    kept = _session("P01", _records("cw", part="practice") + _records("cu"), rules)
    out = _session("P02", _records("ww", part="practice") + _records("uuc"), rules)
    free = _session("P03", _records("uuu"), None)
    judged = judge_sessions([kept, out, free])
    assert list(judged.table.columns) == list(EXCLUSION_COLUMNS)
    assert judged.excluded == [("P02", "1")]
    assert judged.keeps(kept) and judged.keeps(free) and not judged.keeps(out)
    assert judged.reasons() == {("P02", "1"): ["practice_accuracy_below", "unsure_share_above"]}
    table = judged.table.set_index(["participant", "rule"])
    assert table.loc[("P01", "practice_accuracy_below"), "value"] == 0.5
    assert table.loc[("P01", "practice_accuracy_below"), "excluded"] == 0
    assert set(judged.table["participant"]) == {"P01", "P02"}
    assert set(judged.table["rule"]) == {"practice_accuracy_below", "unsure_share_above"}


def test_rules_that_cannot_be_judged_say_why_and_do_not_exclude():
    """Without scored practice or a physiology table, the value is missing, a note says why,
    and the session stays in."""
    rules = Exclusions(practice_accuracy_below=0.9, physio_valid_share_below=0.8)
    session = _session("P01", _records("ss", part="practice") + _records("c"), rules)
    judged = judge_sessions([session])
    assert judged.excluded == []
    notes = dict(zip(judged.table["rule"], judged.table["note"], strict=True))
    assert notes == {
        "practice_accuracy_below": "no scored practice trial",
        "physio_valid_share_below": "no physiology table given",
    }
    assert judged.table["value"].isna().all()


def test_physiology_validity_share_excludes_with_a_table():
    """With a per-trial physiology table, the share of valid trials is judged per session.
    Source: the share counted by hand from the table below (2 of 4 valid for P01, 3 of 3 P02).
    """
    physio = pd.DataFrame(
        {
            "participant": ["P01"] * 4 + ["P02"] * 3,
            "session": ["1"] * 7,
            "pupil_valid": [1, 0, 1, 0, 1, 1, 1],
            "ecg_valid": ["true", "true", "true", "false", "yes", "1", "TRUE"],
        }
    )
    assert physio_validity(physio) == {("P01", "1"): 0.5, ("P02", "1"): 1.0}
    rules = Exclusions(physio_valid_share_below=0.75)
    sessions = [_session(p, _records("c"), rules) for p in ("P01", "P02", "P03")]
    judged = judge_sessions(sessions, physio=physio)
    assert judged.excluded == [("P01", "1")]
    p03 = judged.table[judged.table["participant"] == "P03"].iloc[0]
    assert math.isnan(p03["value"]) and p03["note"] == "no rows in the physiology table"


def test_physiology_table_without_validity_is_refused():
    """A physiology table without a validity column raises InputFileError."""
    with pytest.raises(InputFileError):
        physio_validity(pd.DataFrame({"participant": ["P01"], "session": ["1"], "hr": [60]}))
