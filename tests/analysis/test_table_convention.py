"""One table convention: empty cells for missing values, rounded numbers, labels as text.

The summary's tables are read back by pandas with default settings and by R's read.csv with
default settings (R from the system packages; skipped with the reason where Rscript is absent).
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from rread import needs_r, r_classes, same_kinds
from synthetic import make_pool

from runner.data.summary import write_summary
from runner.data.tables import NA, digits_for, read_table, round_facts, round_table, write_table

NUMBER = re.compile(r"(?<![\w.])-?\d+\.\d+(?:[eE][-+]?\d+)?")
MAX_DIGITS = 12  # 6 decimals of seconds up to 10^6 s; never the 16 or 17 of a raw float


def _digits(number: str) -> int:
    mantissa = re.split(r"[eE]", number.lstrip("-"))[0].replace(".", "")
    return len(mantissa.lstrip("0"))


@pytest.fixture(scope="module")
def labelled_summary(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A summary of three participants labelled 007, 010 and 011 (leading zeros)."""
    trials, sessions = make_pool(3, 30)
    labels = {"P001": "007", "P002": "010", "P003": "011"}
    trials["participant"] = trials["participant"].map(labels)
    sessions["participant"] = sessions["participant"].map(labels)
    # Missing values: no answered trial at 140 nodes (no response time), no rating from 011.
    hard = trials["nodes"] == 140
    trials.loc[hard, ["outcome", "unsure"]] = ["unsure", 1]
    trials.loc[hard, ["answer", "correct"]] = pd.NA
    trials.loc[trials["participant"] == "011", "rating"] = pd.NA
    out = tmp_path_factory.mktemp("labelled")
    write_summary(trials, sessions, out, factors=["nodes", "density"])
    return out


def test_rounding_follows_the_column_kind():
    """Times in ms keep 3 decimals, times in s 6, shares 4, other floats 6 significant digits.
    Source: Python's round() and the '.6g' format of the same values."""
    assert digits_for("rt_mean_ms") == ("decimals", 3)
    assert digits_for("duration_s") == ("decimals", 6)
    assert digits_for("onset_lsl") == ("decimals", 6)
    assert digits_for("share_correct") == ("decimals", 4)
    table = pd.DataFrame(
        {
            "rt_mean_ms": [1234.56789012345],
            "duration_s": [61.123456789],
            "share_correct": [2 / 3],
            "score": [math.pi * 1e-5],
            "n_trials": [3],
        }
    )
    got = round_table(table).iloc[0]
    assert got["rt_mean_ms"] == round(1234.56789012345, 3)
    assert got["duration_s"] == round(61.123456789, 6)
    assert got["share_correct"] == round(2 / 3, 4)
    assert got["score"] == float(f"{math.pi * 1e-5:.6g}")
    assert got["n_trials"] == 3
    facts = round_facts({"duration_s": {"median": 61.123456789}, "share_correct": 2 / 3})
    assert facts == {"duration_s": {"median": round(61.123456789, 6)}, "share_correct": 0.6667}


def test_missing_values_are_empty_cells(tmp_path):
    """A missing number is an empty cell, never 'n/a' (BIDS files keep n/a)."""
    path = tmp_path / "t.csv"
    write_table(pd.DataFrame({"a_ms": [1.5, np.nan], "label": ["x", None]}), path)
    assert NA == ""
    assert path.read_text(encoding="utf-8") == "a_ms,label\n1.5,x\n,\n"


def test_summary_tables_have_no_long_numbers(labelled_summary):
    """No CSV cell or facts.json number carries more than 12 significant digits."""
    for path in [*labelled_summary.glob("*.csv"), labelled_summary / "facts.json"]:
        text = path.read_text(encoding="utf-8")
        assert "n/a" not in text, path.name
        long = [n for n in NUMBER.findall(text) if _digits(n) > MAX_DIGITS]
        assert not long, (path.name, long[:3])
    facts = json.loads((labelled_summary / "facts.json").read_text(encoding="utf-8"))
    assert facts["duration_s"]["median"] == round(facts["duration_s"]["median"], 6)


def test_pandas_reads_numbers_as_numbers_and_labels_with_the_documented_dtype(labelled_summary):
    """With default settings every numeric summary column reads as numbers; with the documented
    dtype note the participant label 007 stays 007."""
    people = pd.read_csv(labelled_summary / "participants.csv")
    for column in people.columns:
        if column != "participant":
            assert pd.api.types.is_numeric_dtype(people[column]), column
    as_text = pd.read_csv(
        labelled_summary / "participants.csv", dtype={"participant": str, "session": str}
    )
    assert list(as_text["participant"]) == ["007", "010", "011"]
    assert people["rating_mean"].isna().sum() == 1
    assert list(read_table(labelled_summary / "participants.csv")["participant"]) == [
        "007",
        "010",
        "011",
    ]
    levels = pd.read_csv(labelled_summary / "levels_nodes.csv")
    assert all(pd.api.types.is_numeric_dtype(levels[c]) for c in levels.columns)
    assert levels["rt_mean_ms"].isna().sum() == 1


@needs_r
@pytest.mark.slow
def test_r_read_csv_agrees_with_pandas_on_every_column(labelled_summary):
    """R's read.csv with default settings reads every summary column as the same kind (number or
    text) as pandas does: empty cells are NA in numeric columns, not text.
    Source: R's utils::read.csv (R from the system packages), run with Rscript."""
    paths = sorted(labelled_summary.glob("*.csv"))
    assert len(paths) >= 4
    same_kinds(paths)


@needs_r
@pytest.mark.slow
def test_r_keeps_labels_as_text_with_the_documented_colclasses(labelled_summary):
    """With colClasses naming participant as character (docs/analysis.md), R keeps 007.
    Source: R's utils::read.csv, run with Rscript."""
    classes = r_classes([labelled_summary / "participants.csv"], 'c(participant = "character")')
    cls, head = classes["participants.csv"]["participant"].split("\t")
    assert cls == "character" and head == "007|010|011"
