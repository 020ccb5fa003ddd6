"""Balanced Latin squares for counterbalancing block order.

The construction is the one described by Williams (1949) and written out as the sequence
``1, 2, n, 3, n-1, 4, n-2, ...`` by Bradley (1958): the first row follows that sequence and
each later row adds one to every entry (modulo n). For an even number of conditions the n rows
balance first-order carry-over: every ordered pair of conditions is adjacent exactly once. For an
odd number no single square can do that, so the square is followed by its row-reversed copy,
and in those 2n rows every ordered pair is adjacent exactly twice.
"""

from __future__ import annotations

import random
from collections.abc import Sequence
from typing import Literal

__all__ = ["ORDER_METHODS", "block_order", "order_usage", "williams_rows"]

#: The block-order methods :func:`block_order` understands.
ORDER_METHODS: tuple[str, ...] = ("balanced-latin", "fixed", "random")


def williams_rows(n: int) -> list[list[int]]:
    """Return the rows of a balanced Latin square (Williams design) for ``n`` conditions.

    Parameters
    ----------
    n : int
        Number of conditions, at least 1.

    Returns
    -------
    list of list of int
        0-based condition indices. ``n`` rows when ``n`` is even; ``2 * n`` rows when ``n`` is
        odd (the square followed by each of its rows reversed). ``n == 1`` gives ``[[0]]``.

    Raises
    ------
    ValueError
        If ``n`` is not a positive whole number.
    """
    if isinstance(n, bool) or not isinstance(n, int) or n < 1:
        raise ValueError(f"A Latin square needs a positive whole number of conditions, not {n!r}.")
    if n == 1:
        return [[0]]
    # First row 0, 1, n-1, 2, n-2, ...: alternate taking from the low and the high end.
    first: list[int] = [0]
    low, high = 1, n - 1
    take_low = True
    while len(first) < n:
        if take_low:
            first.append(low)
            low += 1
        else:
            first.append(high)
            high -= 1
        take_low = not take_low
    square = [[(value + shift) % n for value in first] for shift in range(n)]
    if n % 2 == 0:
        return square
    return square + [list(reversed(row)) for row in square]


def block_order(
    levels: Sequence[str],
    participant_index: int,
    *,
    method: Literal["balanced-latin", "fixed", "random"],
    seed: int | None = None,
) -> list[str]:
    """Return the order of block levels for one participant.

    Parameters
    ----------
    levels : sequence of str
        The block levels in their written order (distinct).
    participant_index : int
        0-based position of the participant in the study (0 for the first one).
    method : {"balanced-latin", "fixed", "random"}
        ``balanced-latin`` uses row ``participant_index mod len(williams_rows(n))`` of the
        Williams square; ``fixed`` keeps the written order; ``random`` shuffles with ``seed``.
    seed : int, optional
        Required for ``random``: the order is ``random.Random(seed).shuffle`` of the levels, so
        the caller passes a seed derived from the participant and session.

    Returns
    -------
    list of str
        The levels in the order the participant sees them.

    Raises
    ------
    ValueError
        If the levels are empty or repeated, the index is negative, the method is unknown, or
        ``random`` is asked for without a seed.
    """
    names = list(levels)
    if not names:
        raise ValueError("There are no block levels to put in order.")
    repeated = sorted({name for name in names if names.count(name) > 1})
    if repeated:
        raise ValueError(f"Each block level must be listed once; repeated: {', '.join(repeated)}.")
    if isinstance(participant_index, bool) or not isinstance(participant_index, int):
        raise ValueError(
            f"The participant index must be a whole number, not {participant_index!r}."
        )
    if participant_index < 0:
        raise ValueError(f"The participant index must be 0 or more, not {participant_index}.")
    if method == "fixed":
        return names
    if method == "balanced-latin":
        rows = williams_rows(len(names))
        return [names[i] for i in rows[participant_index % len(rows)]]
    if method == "random":
        if seed is None:
            raise ValueError("A random block order needs a seed so that it can be re-derived.")
        rng = random.Random(seed)
        rng.shuffle(names)
        return names
    raise ValueError(f"Unknown block order {method!r}; use one of {', '.join(ORDER_METHODS)}.")


def order_usage(n_levels: int, n_participants: int) -> dict[str, object]:
    """Tell how often each row of the balanced Latin square is used by ``n_participants``.

    Parameters
    ----------
    n_levels : int
        Number of block levels.
    n_participants : int
        Number of participants planned (0 or more).

    Returns
    -------
    dict
        ``rows`` (number of distinct orders), ``uses`` (list: participants per row, in row
        order), ``balanced`` (True when every row is used equally often), ``fewer`` and
        ``more`` (the nearest participant counts at or below / at or above ``n_participants``
        that are balanced; ``fewer`` is 0 when no smaller balanced count exists).

    Raises
    ------
    ValueError
        If ``n_levels`` is not positive or ``n_participants`` is negative.
    """
    if isinstance(n_participants, bool) or not isinstance(n_participants, int):
        raise ValueError(
            f"The number of participants must be a whole number, not {n_participants!r}."
        )
    if n_participants < 0:
        raise ValueError(f"The number of participants must be 0 or more, not {n_participants}.")
    rows = len(williams_rows(n_levels))
    base, extra = divmod(n_participants, rows)
    uses = [base + 1 if row < extra else base for row in range(rows)]
    return {
        "rows": rows,
        "uses": uses,
        "balanced": extra == 0,
        "fewer": base * rows,
        "more": (base + (1 if extra else 0)) * rows,
    }
