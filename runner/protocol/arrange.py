"""Shuffle the trials of a block under run-length and no-repeat constraints.

Two kinds of rule are supported:

* ``max_run``: for a factor (a column of the trial table), no more than K consecutive trials
  share one level.
* ``no_repeat``: no two consecutive trials share the value of one column (by default the
  stimulus); this is the same rule with K = 1.

For one factor on its own, a multiset of N trials whose levels occur c_1, c_2, ... times can be
ordered with no run longer than K exactly when every count c satisfies ``c <= K * (N - c + 1)``:
the c trials of a level must be split into runs of at most K, and the N - c other trials can
separate at most N - c + 1 runs. The function checks this first and names the factor and level
that make an order impossible. It then builds orders one position at a time, choosing at random
among the trials whose placement keeps every rule satisfiable for the rest of the block (the same
counting test, extended by the run that the order already ends with). For one rule this never
reaches a dead end; when several rules interact a dead end is possible, and the search restarts,
up to a fixed number of attempts, before giving up with :class:`ArrangementError`.
"""

from __future__ import annotations

import random
from collections.abc import Hashable, Mapping, Sequence
from dataclasses import dataclass

from runner.errors import TrialdeckError

__all__ = [
    "DEFAULT_ATTEMPTS",
    "ArrangementError",
    "RunViolation",
    "check_arrangement",
    "constrained_shuffle",
]

#: Number of randomised restarts before the search gives up. Each attempt costs at most
#: N * (distinct level combinations) counting tests, so the bound keeps a 500-trial block
#: with tangled rules well under a second.
DEFAULT_ATTEMPTS = 200

_NO_MAX_RUN: Mapping[str, int] = {}


class ArrangementError(TrialdeckError, ValueError):
    """The trials of a block cannot be ordered under the requested rules."""


@dataclass(frozen=True)
class RunViolation:
    """One run in an order that breaks a rule.

    Attributes
    ----------
    factor : str
        The column the rule is about.
    level : object
        The shared value of the run.
    start : int
        0-based position in the order where the run begins.
    length : int
        Number of consecutive trials in the run.
    limit : int
        The longest run the rule allows (1 for no-repeat).
    """

    factor: str
    level: object
    start: int
    length: int
    limit: int


def _rules(max_run: Mapping[str, int], no_repeat: str | None) -> dict[str, int]:
    """Merge both kinds of rule into {factor: longest allowed run}, validating the limits."""
    rules: dict[str, int] = {}
    for factor, limit in max_run.items():
        if isinstance(limit, bool) or not isinstance(limit, int) or limit < 1:
            raise ArrangementError(
                f"The longest run for {factor!r} must be a whole number of 1 or more, not {limit!r}."
            )
        rules[str(factor)] = limit
    if no_repeat is not None:
        rules[no_repeat] = 1
    return rules


def _level(item: Mapping[str, object], factor: str, position: int) -> Hashable:
    try:
        value = item[factor]
    except KeyError:
        raise ArrangementError(
            f"Trial {position + 1} of the block has no value for {factor!r}, which an ordering "
            "rule refers to; add the column to the trial table or remove the rule."
        ) from None
    try:
        hash(value)
    except TypeError:
        # Unhashable cells (lists from YAML) are compared by their text form.
        return repr(value)
    return value


def _limit_text(limit: int) -> str:
    return "no two in a row" if limit == 1 else f"at most {limit} in a row"


def _check_feasible(factor: str, limit: int, counts: Mapping[Hashable, int], total: int) -> None:
    """Raise ArrangementError when one rule alone cannot be met by these level counts."""
    for level, count in counts.items():
        room = limit * (total - count + 1)
        if count > room:
            others = total - count
            raise ArrangementError(
                f"The trials cannot be ordered with {_limit_text(limit)} for {factor!r}: "
                f"level {level!r} has {count} of the {total} trials, but the {others} other "
                f"trials can separate at most {room} of them ({limit} x ({others} + 1)). "
                f"Add trials of other levels, use fewer of {level!r}, or allow longer runs."
            )


def constrained_shuffle(
    items: Sequence[Mapping[str, object]],
    rng: random.Random,
    *,
    max_run: Mapping[str, int] = _NO_MAX_RUN,
    no_repeat: str | None = "stimulus",
    attempts: int = DEFAULT_ATTEMPTS,
) -> list[int]:
    """Return a random order of ``items`` that meets the run rules.

    Parameters
    ----------
    items : sequence of mapping
        The trials of one block (rows of the trial table).
    rng : random.Random
        Source of randomness; the result depends only on its state and the inputs.
    max_run : mapping of str to int, optional
        For each factor, the longest allowed run of trials at one level.
    no_repeat : str or None, optional
        Column whose value may not repeat on consecutive trials (``None`` for no such rule).
    attempts : int, optional
        Number of randomised restarts before giving up.

    Returns
    -------
    list of int
        A permutation of ``range(len(items))``: position ``i`` holds the index of the item shown
        ``i``-th.

    Raises
    ------
    ArrangementError
        If a rule alone cannot be met by the level counts (checked before any search, naming
        the factor, level and counts), if an item lacks a column a rule refers to, or if no
        order meeting all rules together was found in ``attempts`` restarts.
    """
    if isinstance(attempts, bool) or not isinstance(attempts, int) or attempts < 1:
        raise ArrangementError(f"The number of attempts must be 1 or more, not {attempts!r}.")
    rules = _rules(max_run, no_repeat)
    total = len(items)
    if not rules:
        return rng.sample(range(total), total)
    factors = list(rules)
    limits = [rules[f] for f in factors]
    signatures = [
        tuple(_level(item, factor, pos) for factor in factors) for pos, item in enumerate(items)
    ]
    # Items with equal levels on every constrained factor are interchangeable for the rules,
    # so the search works on groups ("signatures") and picks a member at random afterwards.
    groups: dict[tuple[Hashable, ...], list[int]] = {}
    for index, signature in enumerate(signatures):
        groups.setdefault(signature, []).append(index)
    full_counts: list[dict[Hashable, int]] = [{} for _ in factors]
    for signature in signatures:
        for k, level in enumerate(signature):
            full_counts[k][level] = full_counts[k].get(level, 0) + 1
    for k, factor in enumerate(factors):
        _check_feasible(factor, limits[k], full_counts[k], total)

    keys = list(groups)
    for _ in range(attempts):
        order = _one_attempt(rng, keys, groups, limits, full_counts, total)
        if order is not None:
            return order
    rule_text = "; ".join(f"{f!r}: {_limit_text(rules[f])}" for f in factors)
    raise ArrangementError(
        f"No order of the {total} trials meeting all rules together ({rule_text}) was found in "
        f"{attempts} attempts. Each rule can be met on its own, but not together with this mix "
        "of trials; loosen one rule or change the trials in the block."
    )


def _one_attempt(
    rng: random.Random,
    keys: list[tuple[Hashable, ...]],
    groups: Mapping[tuple[Hashable, ...], list[int]],
    limits: list[int],
    full_counts: list[dict[Hashable, int]],
    total: int,
) -> list[int] | None:
    """Build one order greedily with look-ahead; None when it reaches a dead end."""
    pools = {key: list(members) for key, members in groups.items()}
    for members in pools.values():
        rng.shuffle(members)
    live = list(keys)
    counts = [dict(c) for c in full_counts]
    tails: list[Hashable] = [None] * len(limits)
    runs = [0] * len(limits)
    order: list[int] = []
    remaining = total
    while remaining:
        allowed = [
            _allowed_levels(limits[k], counts[k], remaining, tails[k], runs[k])
            for k in range(len(limits))
        ]
        choices: list[tuple[Hashable, ...]] = []
        weights: list[int] = []
        for key in live:
            if all(level in allowed[k] for k, level in enumerate(key)):
                choices.append(key)
                weights.append(len(pools[key]))
        if not choices:
            return None
        key = rng.choices(choices, weights=weights)[0]
        pool = pools[key]
        order.append(pool.pop())
        if not pool:
            live.remove(key)
        remaining -= 1
        for k, level in enumerate(key):
            counts[k][level] -= 1
            runs[k] = runs[k] + 1 if runs[k] and tails[k] == level else 1
            tails[k] = level
    return order


def _allowed_levels(
    limit: int, counts: Mapping[Hashable, int], remaining: int, tail: Hashable, tail_run: int
) -> set[Hashable]:
    """Levels of one factor that can come next and still leave a satisfiable remainder.

    After placing a trial of level ``v`` (so ``remaining - 1`` trials are left and the order
    ends with a run of ``v``), the remainder can be completed exactly when the count of ``v``
    still fits after that run, ``c_v - 1 <= limit * (others + 1) - run``, and every other level
    ``u`` fits the plain bound ``c_u <= limit * (remaining - 1 - c_u + 1)``. That bound grows
    with the count, so only the largest other count needs testing.
    """
    left = remaining - 1
    top_level: Hashable = None
    top = second = 0
    for level, count in counts.items():
        if count > top:
            top_level, top, second = level, count, top
        elif count > second:
            second = count
    allowed: set[Hashable] = set()
    for level, count in counts.items():
        if count == 0:
            continue
        run = tail_run + 1 if tail_run and tail == level else 1
        if run > limit:
            continue
        mine = count - 1
        if mine > limit * (left - mine + 1) - run:
            continue
        other = second if level == top_level else top
        if other and other > limit * (left - other + 1):
            continue
        allowed.add(level)
    return allowed


def check_arrangement(
    items: Sequence[Mapping[str, object]],
    order: Sequence[int],
    *,
    max_run: Mapping[str, int] = _NO_MAX_RUN,
    no_repeat: str | None = "stimulus",
) -> list[RunViolation]:
    """Return every run in ``order`` that breaks a rule (empty when the order is fine).

    Parameters
    ----------
    items : sequence of mapping
        The trials of one block.
    order : sequence of int
        A permutation of ``range(len(items))``.
    max_run, no_repeat
        The rules, as for :func:`constrained_shuffle`.

    Returns
    -------
    list of RunViolation
        One entry per maximal run longer than its rule allows, sorted by factor order then
        position.

    Raises
    ------
    ArrangementError
        If ``order`` is not a permutation of the item indices, a limit is invalid, or an item
        lacks a column a rule refers to.
    """
    if sorted(order) != list(range(len(items))):
        raise ArrangementError(
            f"The order must use each of the {len(items)} trial positions exactly once."
        )
    violations: list[RunViolation] = []
    for factor, limit in _rules(max_run, no_repeat).items():
        levels = [_level(items[index], factor, index) for index in order]
        start = 0
        for pos in range(1, len(levels) + 1):
            if pos == len(levels) or levels[pos] != levels[start]:
                length = pos - start
                if length > limit:
                    violations.append(RunViolation(factor, levels[start], start, length, limit))
                start = pos
    return violations
