"""Tests for balanced Latin squares and block orders."""

from __future__ import annotations

import random
from collections import Counter

import pytest

from runner.protocol.latin import block_order, order_usage, williams_rows

# Published squares, written 1-based as in the sources.
PUBLISHED_4 = [[1, 2, 4, 3], [2, 3, 1, 4], [3, 4, 2, 1], [4, 1, 3, 2]]
PUBLISHED_6 = [
    [1, 2, 6, 3, 5, 4],
    [2, 3, 1, 4, 6, 5],
    [3, 4, 2, 5, 1, 6],
    [4, 5, 3, 6, 2, 1],
    [5, 6, 4, 1, 3, 2],
    [6, 1, 5, 2, 4, 3],
]


def _adjacent_pairs(rows: list[list[int]]) -> Counter[tuple[int, int]]:
    return Counter((row[i], row[i + 1]) for row in rows for i in range(len(row) - 1))


@pytest.mark.parametrize(("n", "published"), [(4, PUBLISHED_4), (6, PUBLISHED_6)])
def test_matches_published_square(n: int, published: list[list[int]]) -> None:
    """The square for n = 4 and n = 6 equals the published balanced Latin square.

    Source: Williams (1949) design, construction 1, 2, n, 3, n-1, ... as given by Bradley (1958).
    """
    assert [[v + 1 for v in row] for row in williams_rows(n)] == published


@pytest.mark.parametrize("n", [1, 2, 3, 4, 5, 6, 7, 8, 9, 12])
def test_rows_and_columns_are_permutations(n: int) -> None:
    """Every row and every column of the square holds each condition exactly once.

    Source: definition of a Latin square (Williams 1949).
    """
    rows = williams_rows(n)
    assert len(rows) == (n if n % 2 == 0 or n == 1 else 2 * n)
    square = rows[:n]
    for row in square:
        assert sorted(row) == list(range(n))
    for col in range(n):
        assert sorted(row[col] for row in square) == list(range(n))


@pytest.mark.parametrize("n", [2, 4, 6, 8, 10])
def test_even_square_has_each_ordered_pair_once(n: int) -> None:
    """For even n every ordered pair of distinct conditions is adjacent exactly once.

    Source: Williams (1949), first-order carry-over balance of the even-n square.
    """
    pairs = _adjacent_pairs(williams_rows(n))
    expected = {(a, b): 1 for a in range(n) for b in range(n) if a != b}
    assert dict(pairs) == expected


@pytest.mark.parametrize("n", [3, 5, 7])
def test_odd_double_square_has_each_ordered_pair_twice(n: int) -> None:
    """For odd n the square plus its row-reversed copy has each ordered pair adjacent twice.

    Source: Williams (1949), odd-n design with 2n sequences.
    """
    rows = williams_rows(n)
    assert len(rows) == 2 * n
    pairs = _adjacent_pairs(rows)
    expected = {(a, b): 2 for a in range(n) for b in range(n) if a != b}
    assert dict(pairs) == expected


@pytest.mark.parametrize("bad", [0, -3, 2.0, True, "4"])
def test_williams_rows_rejects_bad_counts(bad: object) -> None:
    """Non-positive or non-integer condition counts are refused with a ValueError."""
    with pytest.raises(ValueError, match="positive whole number"):
        williams_rows(bad)  # type: ignore[arg-type]


def test_block_order_balanced_latin_cycles_rows() -> None:
    """Participant k gets row k mod 4 of the n = 4 square, mapped to the level names.

    Source: Williams (1949) / Bradley (1958) square for n = 4 (rows 1 2 4 3 / 2 3 1 4 / ...).
    """
    levels = ["sparse", "medium", "dense", "tangled"]
    got = [block_order(levels, k, method="balanced-latin") for k in range(8)]
    expected_rows = PUBLISHED_4 + PUBLISHED_4
    assert got == [[levels[v - 1] for v in row] for row in expected_rows]


def test_block_order_fixed_keeps_written_order() -> None:
    """The fixed method returns the levels as written, for every participant."""
    levels = ["b", "a", "c"]
    assert block_order(levels, 0, method="fixed") == levels
    assert block_order(levels, 5, method="fixed") == levels


def test_block_order_random_follows_seed() -> None:
    """The random method equals random.Random(seed).shuffle and is repeatable.

    Source: Python standard library random.Random.shuffle as the reference.
    """
    levels = [f"L{i}" for i in range(8)]
    expected = list(levels)
    random.Random(17).shuffle(expected)
    assert block_order(levels, 3, method="random", seed=17) == expected
    assert block_order(levels, 3, method="random", seed=17) == expected
    others = {tuple(block_order(levels, 0, method="random", seed=s)) for s in range(20)}
    assert len(others) > 1


@pytest.mark.parametrize(
    ("levels", "index", "kwargs", "fragment"),
    [
        ([], 0, {"method": "fixed"}, "no block levels"),
        (["a", "a"], 0, {"method": "fixed"}, "repeated: a"),
        (["a", "b"], -1, {"method": "fixed"}, "0 or more"),
        (["a", "b"], 0, {"method": "random"}, "needs a seed"),
        (["a", "b"], 0, {"method": "shuffled"}, "Unknown block order 'shuffled'"),
    ],
)
def test_block_order_rejects(levels: list[str], index: int, kwargs: dict, fragment: str) -> None:
    """Bad block-order requests raise ValueError with a message naming the problem."""
    with pytest.raises(ValueError, match=fragment):
        block_order(levels, index, **kwargs)


@pytest.mark.parametrize(
    ("n_levels", "n_participants", "rows", "balanced", "fewer", "more"),
    [
        (4, 8, 4, True, 8, 8),
        (4, 10, 4, False, 8, 12),
        (3, 6, 6, True, 6, 6),
        (3, 4, 6, False, 0, 6),
        (5, 0, 10, True, 0, 0),
    ],
)
def test_order_usage(
    n_levels: int, n_participants: int, rows: int, balanced: bool, fewer: int, more: int
) -> None:
    """order_usage reports rows, per-row use and the nearest balanced participant counts.

    Source: common practice (no published source): a counterbalanced design uses every order
    equally often.
    """
    usage = order_usage(n_levels, n_participants)
    assert usage["rows"] == rows
    assert usage["balanced"] is balanced
    assert usage["fewer"] == fewer
    assert usage["more"] == more
    assert sum(usage["uses"]) == n_participants
    assert max(usage["uses"]) - min(usage["uses"]) <= 1
    # Cross-check against actually assigning participants with block_order.
    levels = [f"c{i}" for i in range(n_levels)]
    seen = Counter(
        tuple(block_order(levels, k, method="balanced-latin")) for k in range(n_participants)
    )
    assert sorted(seen.values(), reverse=True) == sorted(
        [u for u in usage["uses"] if u], reverse=True
    )
