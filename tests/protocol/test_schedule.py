"""The schedule is a pure function of (protocol content, participant, session)."""

from __future__ import annotations

import shutil

import pytest
from conftest import MINI_PROTOCOL

from runner.errors import UsageError
from runner.protocol.load import load_protocol
from runner.protocol.schedule import build_schedule, derive_seed, participant_index


def _order(schedule):
    return [(t.block, t.stimulus, t.fixation_ms) for t in schedule.trials]


def test_same_labels_same_schedule():
    """Two derivations for the same participant and session give the same order, seed and jitter."""
    loaded = load_protocol(MINI_PROTOCOL)
    a = build_schedule(loaded, "P03", "1")
    b = build_schedule(load_protocol(MINI_PROTOCOL), "P03", "1")
    assert a.seed == b.seed
    assert _order(a) == _order(b)
    assert a.as_dict() == b.as_dict()


def test_other_participant_or_session_other_schedule():
    """Another participant or another session gets another seed and (here) another order."""
    loaded = load_protocol(MINI_PROTOCOL)
    base = build_schedule(loaded, "P01", "1")
    assert build_schedule(loaded, "P02", "1").seed != base.seed
    assert build_schedule(loaded, "P01", "2").seed != base.seed
    others = [_order(build_schedule(loaded, f"P{i:02d}", "1")) for i in range(2, 8)]
    assert any(o != _order(base) for o in others)


def test_seed_follows_protocol_content(tmp_path):
    """Editing the protocol text changes the content hash and so the seed."""
    folder = tmp_path / "mini"
    shutil.copytree(MINI_PROTOCOL.parent, folder)
    a = load_protocol(folder / "mini.yaml")
    text = (folder / "mini.yaml").read_text()
    (folder / "mini.yaml").write_text(text.replace("gap_ms: 300", "gap_ms: 350"))
    b = load_protocol(folder / "mini.yaml")
    assert a.content_hash != b.content_hash
    assert derive_seed(a.content_hash, "P01", "1") != derive_seed(b.content_hash, "P01", "1")


def test_block_order_follows_latin_square_rows():
    """Participants 1, 2, 3, 4 get the rows AB, BA, AB, BA of the two-condition balanced Latin
    square, with the levels in sorted order (A = dense, B = sparse), and every trial of a block
    has that block's level.

    Source: Williams (1949) balanced Latin square for two conditions (rows AB and BA), from memory.
    """
    loaded = load_protocol(MINI_PROTOCOL)
    expected = {
        "P01": ["dense", "sparse"],
        "P02": ["sparse", "dense"],
        "P03": ["dense", "sparse"],
        "P04": ["sparse", "dense"],
    }
    for label, order in expected.items():
        main = [t for t in build_schedule(loaded, label, "1").trials if t.part == "main"]
        blocks = [t.block for t in main]
        seen = [b for i, b in enumerate(blocks) if i == 0 or blocks[i - 1] != b]
        assert seen == order
        assert all(t.values["density"] == t.block for t in main)
    assert participant_index("P01") == 0 and participant_index("P12") == 11


def test_fixation_jitter_within_range_and_breaks_inserted():
    """Fixation durations lie in the protocol's range; a break follows every 2 main trials."""
    loaded = load_protocol(MINI_PROTOCOL)
    s = build_schedule(loaded, "P01", "1")
    assert all(300 <= t.fixation_ms <= 500 for t in s.trials)
    kinds = [it.kind for it in s.items]
    assert kinds == ["page", "rest", "block", "block", "break", "block", "page"]
    assert [t.trial for t in s.trials] == [1, 2, 3, 4, 5]


@pytest.mark.parametrize("label", ["P-01", "p_1", "", "P 1", "Ä1", "x" * 65])
def test_bad_labels_are_refused(label):
    """Participant labels other than 1-64 letters and digits are refused (BIDS label rule)."""
    with pytest.raises(UsageError, match="letters and digits"):
        build_schedule(load_protocol(MINI_PROTOCOL), label, "1")


@pytest.mark.parametrize("label", ["P01\n", "P01 ", "\nP01", "P-01", ""])
def test_labels_with_a_trailing_newline_or_other_characters_are_refused(label):
    """A participant label ending in a newline is refused like any other non-alphanumeric label.

    Source: BIDS specification, "Entities": labels are alphanumeric; Python's re docs: ``$`` also
    matches before a final newline, so the whole string must match.
    """
    from runner.errors import UsageError
    from runner.protocol.schedule import check_label

    with pytest.raises(UsageError):
        check_label(label, "participant")
    assert check_label("P01", "participant") == "P01"
