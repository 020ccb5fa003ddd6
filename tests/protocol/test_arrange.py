"""Tests for shuffling trials within a block under run rules."""

from __future__ import annotations

import itertools
import random
import time

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.errors import TrialdeckError
from runner.protocol.arrange import (
    ArrangementError,
    RunViolation,
    check_arrangement,
    constrained_shuffle,
)


def _brute_force_exists(items: list[dict], max_run: dict[str, int], no_repeat: str | None) -> bool:
    """Whether any permutation meets the rules (by trying them all; small inputs only)."""
    for perm in itertools.permutations(range(len(items))):
        if not check_arrangement(items, perm, max_run=max_run, no_repeat=no_repeat):
            return True
    return False


def _runs_ok(levels: list[object], limit: int) -> bool:
    """Independent run-length check written with itertools.groupby."""
    return all(len(list(group)) <= limit for _, group in itertools.groupby(levels))


level_lists = st.lists(st.integers(min_value=0, max_value=3), min_size=0, max_size=40)


@settings(max_examples=150, deadline=None)
@given(levels=level_lists, limit=st.integers(min_value=1, max_value=4), seed=st.integers(0, 2**32))
def test_single_rule_feasible_iff_counting_bound(levels: list[int], limit: int, seed: int) -> None:
    """With one max-run rule, one attempt succeeds exactly when c <= K (N - c + 1) for all levels.

    Source: common practice (no published source); the bound is re-derived here by counting
    (c trials in runs of at most K, separated by the N - c others).
    """
    items = [{"nodes": v} for v in levels]
    n = len(levels)
    feasible = all(levels.count(v) <= limit * (n - levels.count(v) + 1) for v in set(levels))
    rng = random.Random(seed)
    if feasible:
        order = constrained_shuffle(
            items, rng, max_run={"nodes": limit}, no_repeat=None, attempts=1
        )
        assert sorted(order) == list(range(n))
        assert _runs_ok([levels[i] for i in order], limit)
    else:
        with pytest.raises(ArrangementError, match="'nodes'"):
            constrained_shuffle(items, rng, max_run={"nodes": limit}, no_repeat=None)


@settings(max_examples=150, deadline=None)
@given(
    nodes=st.lists(st.integers(0, 2), min_size=1, max_size=30),
    stim_pool=st.integers(min_value=1, max_value=8),
    limit=st.integers(min_value=1, max_value=3),
    seed=st.integers(0, 2**32),
)
def test_two_rules_results_always_satisfy(
    nodes: list[int], stim_pool: int, limit: int, seed: int
) -> None:
    """Whenever a shuffle is returned under two rules, both hold; otherwise ArrangementError.

    Source: common practice (no published source); checked with an independent groupby count.
    """
    items = [{"nodes": v, "stimulus": f"s{(i * 7 + v) % stim_pool}"} for i, v in enumerate(nodes)]
    try:
        order = constrained_shuffle(items, random.Random(seed), max_run={"nodes": limit})
    except ArrangementError:
        return
    assert sorted(order) == list(range(len(items)))
    assert _runs_ok([items[i]["nodes"] for i in order], limit)
    assert _runs_ok([items[i]["stimulus"] for i in order], 1)


@settings(max_examples=60, deadline=None)
@given(
    nodes=st.lists(st.integers(0, 2), min_size=1, max_size=7),
    stims=st.lists(st.integers(0, 2), min_size=7, max_size=7),
    limit=st.integers(min_value=1, max_value=2),
)
def test_joint_rules_agree_with_brute_force(nodes: list[int], stims: list[int], limit: int) -> None:
    """For small blocks a shuffle is found exactly when some permutation meets both rules.

    Source: exhaustive search over all permutations (itertools.permutations) as the reference.
    """
    items = [{"nodes": v, "stimulus": stims[i]} for i, v in enumerate(nodes)]
    rules = {"nodes": limit}
    exists = _brute_force_exists(items, rules, "stimulus")
    if exists:
        order = constrained_shuffle(items, random.Random(1), max_run=rules)
        assert not check_arrangement(items, order, max_run=rules)
    else:
        with pytest.raises(ArrangementError):
            constrained_shuffle(items, random.Random(1), max_run=rules)


@settings(max_examples=50, deadline=None)
@given(levels=level_lists, seed=st.integers(0, 2**32))
def test_same_seed_same_order(levels: list[int], seed: int) -> None:
    """Two generators with the same seed give the same order."""
    items = [{"density": v, "stimulus": f"g{i}"} for i, v in enumerate(levels)]
    try:
        first = constrained_shuffle(items, random.Random(seed), max_run={"density": 2})
    except ArrangementError:
        return
    assert constrained_shuffle(items, random.Random(seed), max_run={"density": 2}) == first


def test_different_seeds_give_different_orders() -> None:
    """The shuffle is actually random: 20 seeds give more than one order of 12 trials."""
    items = [{"nodes": i % 3, "stimulus": f"g{i}"} for i in range(12)]
    orders = {
        tuple(constrained_shuffle(items, random.Random(s), max_run={"nodes": 2})) for s in range(20)
    }
    assert len(orders) > 10


def test_every_valid_order_is_reachable_for_a_small_block() -> None:
    """All valid orders of a small block appear over many seeds (no order is excluded).

    Source: exhaustive enumeration with itertools.permutations as the reference set.
    """
    items = [{"nodes": v, "stimulus": f"g{i}"} for i, v in enumerate([0, 0, 1, 1, 2])]
    valid = {
        perm
        for perm in itertools.permutations(range(5))
        if not check_arrangement(items, perm, max_run={"nodes": 1})
    }
    seen = {
        tuple(constrained_shuffle(items, random.Random(s), max_run={"nodes": 1}))
        for s in range(2000)
    }
    assert seen == valid


@pytest.mark.parametrize(
    ("levels", "rules", "no_repeat", "fragment"),
    [
        ([0] * 9 + [1] * 3, {"nodes": 2}, None, r"level 0 has 9 of the 12 trials.*at most 8"),
        ([0, 0, 0, 1], {"nodes": 1}, None, r"no two in a row for 'nodes'"),
        ([0, 1], {"nodes": 0}, None, r"1 or more"),
        ([0, 1], {"nodes": 1.5}, None, r"1 or more"),
    ],
)
def test_infeasible_rules_are_named(
    levels: list[int], rules: dict, no_repeat: str | None, fragment: str
) -> None:
    """Impossible or invalid rules raise ArrangementError naming factor, level and counts."""
    items = [{"nodes": v, "stimulus": f"g{i}"} for i, v in enumerate(levels)]
    with pytest.raises(ArrangementError, match=fragment):
        constrained_shuffle(items, random.Random(0), max_run=rules, no_repeat=no_repeat)


def test_no_repeat_bound_names_the_stimulus() -> None:
    """A stimulus used in more than (N + 1) // 2 trials cannot avoid repeats and is named."""
    items = [{"stimulus": "a.png"}] * 5 + [{"stimulus": "b.png"}] * 3
    with pytest.raises(ArrangementError, match=r"'a.png' has 5 of the 8 trials"):
        constrained_shuffle(items, random.Random(0))
    ok = [{"stimulus": "a.png"}] * 4 + [{"stimulus": "b.png"}] * 3
    order = constrained_shuffle(ok, random.Random(0))
    assert [ok[i]["stimulus"] for i in order] == ["a.png", "b.png"] * 3 + ["a.png"]


def test_arrangement_error_is_value_and_user_error() -> None:
    """ArrangementError is both a ValueError and a TrialdeckError with exit code 1."""
    assert issubclass(ArrangementError, ValueError)
    assert issubclass(ArrangementError, TrialdeckError)
    assert ArrangementError.exit_code == 1


def test_missing_column_is_reported() -> None:
    """A rule on a column a trial lacks raises ArrangementError naming the trial and column."""
    items = [{"stimulus": "a"}, {"nodes": 3, "stimulus": "b"}]
    with pytest.raises(ArrangementError, match=r"Trial 1 .* 'nodes'"):
        constrained_shuffle(items, random.Random(0), max_run={"nodes": 1})


def test_jointly_impossible_rules_give_up_within_bound() -> None:
    """Rules feasible alone but impossible together fail after the bounded attempts, quickly.

    Source: exhaustive search (itertools.permutations) confirms no order exists; by hand:
    nodes must run A B A B A, and wherever the y trial goes an x trial sits next to B(x).
    """
    items = [
        {"nodes": "A", "stimulus": "x"},
        {"nodes": "A", "stimulus": "x"},
        {"nodes": "A", "stimulus": "y"},
        {"nodes": "B", "stimulus": "x"},
        {"nodes": "B", "stimulus": "z"},
    ]
    rules = {"nodes": 1}
    assert not _brute_force_exists(items, rules, "stimulus")
    start = time.perf_counter()
    with pytest.raises(ArrangementError, match="in 50 attempts"):
        constrained_shuffle(items, random.Random(0), max_run=rules, attempts=50)
    assert time.perf_counter() - start < 1.0


def test_large_block_is_fast() -> None:
    """A 480-trial block with two rules is ordered in well under a second."""
    items = [{"nodes": i % 4, "density": i % 3, "stimulus": f"g{i % 160}"} for i in range(480)]
    start = time.perf_counter()
    order = constrained_shuffle(items, random.Random(5), max_run={"nodes": 2, "density": 2})
    assert time.perf_counter() - start < 1.0
    assert not check_arrangement(items, order, max_run={"nodes": 2, "density": 2})


def test_check_arrangement_lists_violations() -> None:
    """check_arrangement reports each over-long run with factor, level, start and length."""
    items = [{"nodes": v, "stimulus": s} for v, s in [(1, "a"), (1, "a"), (1, "b"), (2, "c")]]
    got = check_arrangement(items, [0, 1, 2, 3], max_run={"nodes": 2})
    assert got == [RunViolation("nodes", 1, 0, 3, 2), RunViolation("stimulus", "a", 0, 2, 1)]
    assert check_arrangement(items, [0, 3, 1, 2], max_run={"nodes": 2}, no_repeat=None) == []


@pytest.mark.parametrize("order", [[0, 1], [0, 1, 1], [0, 1, 3]])
def test_check_arrangement_rejects_non_permutations(order: list[int]) -> None:
    """An order that is not a permutation of the trial positions is refused."""
    items = [{"stimulus": "a"}, {"stimulus": "b"}, {"stimulus": "c"}]
    with pytest.raises(ArrangementError, match="exactly once"):
        check_arrangement(items, order)


def test_no_rules_is_plain_shuffle() -> None:
    """Without rules the result is random.Random.sample of all indices.

    Source: Python standard library random.Random.sample as the reference.
    """
    items = [{"stimulus": "same"}] * 6
    got = constrained_shuffle(items, random.Random(3), no_repeat=None)
    assert got == random.Random(3).sample(range(6), 6)
