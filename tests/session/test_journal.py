"""The journal: append-only, hash-chained, fsynced; torn tails recognised."""

from __future__ import annotations

import json

import pytest

from runner.errors import SessionExistsError
from runner.session.journal import GENESIS, Journal, line_hash, read_journal, split_hash


def _journal(tmp_path, n=5):
    j = Journal.create(tmp_path / "s", {"study": "x"})
    for i in range(n):
        j.append("tick", t=float(i), trial=i + 1)
    j.close()
    return tmp_path / "s" / "journal.jsonl"


def test_chain_links_every_line(tmp_path):
    """Each line's hash is sha256(prev + body) and the next line's prev is that hash.

    Source: Python's hashlib.sha256 as the reference hash function.
    """
    import hashlib

    path = _journal(tmp_path)
    prev = GENESIS
    for n, line in enumerate(path.read_text().splitlines()):
        body, h = split_hash(line)
        assert json.loads(line)["prev"] == prev and json.loads(line)["seq"] == n
        assert h == hashlib.sha256((prev + body).encode()).hexdigest()[:32] == line_hash(prev, body)
        prev = h
    read = read_journal(path)
    assert not read.chain_errors and not read.torn_tail and len(read.records) == 6


def test_create_refuses_existing_journal(tmp_path):
    """A second create in the same folder refuses instead of overwriting."""
    path = _journal(tmp_path)
    before = path.read_bytes()
    with pytest.raises(SessionExistsError):
        Journal.create(tmp_path / "s", {"study": "x"})
    assert path.read_bytes() == before


@pytest.mark.parametrize(
    "damage, fragment",
    [
        ("edit", "line 3 was changed"),
        ("remove", "line 3 has sequence number 3, expected 2"),
        ("swap", "line 3 has sequence number 3, expected 2"),
    ],
)
def test_damage_is_named_by_line(tmp_path, damage, fragment):
    """An edited, removed or swapped line breaks the chain at a line the reader names."""
    path = _journal(tmp_path)
    lines = path.read_text().splitlines(keepends=True)
    if damage == "edit":
        lines[2] = lines[2].replace('"trial":2', '"trial":9')
    elif damage == "remove":
        del lines[2]
    else:
        lines[2], lines[3] = lines[3], lines[2]
    path.write_text("".join(lines))
    read = read_journal(path)
    assert read.chain_errors and fragment in read.chain_errors[0]


def test_torn_tail_is_not_corruption_and_reopen_cuts_it(tmp_path):
    """A half-written last line (crash mid-write) is a torn tail; reopening cuts it and continues."""
    path = _journal(tmp_path)
    with open(path, "a") as fh:
        fh.write('{"seq":6,"prev":"abc","event":"ti')
    read = read_journal(path)
    assert read.torn_tail and not read.chain_errors and len(read.records) == 6
    j = Journal.reopen(path)
    j.append("after", t=9.0)
    j.close()
    again = read_journal(path)
    assert not again.chain_errors and not again.torn_tail
    assert [r["event"] for r in again.records][-1] == "after"
