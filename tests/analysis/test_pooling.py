"""Refusing to pool unlike sessions: speed, mode and protocol must agree unless asked."""

from __future__ import annotations

import pytest

from runner.data.pooling import UnlikeSessionsError, check_alike, pooling_key
from runner.errors import EXIT_PROBLEMS, PROBLEM_CODES

BASE = {"speed": 1.0, "mode": "live", "study": "mini-test", "protocol_hash": "a" * 64}


def test_alike_sessions_pass():
    """Sessions with the same speed, mode and protocol are pooled without a word."""
    check_alike([BASE, dict(BASE), {**BASE, "participant": "P02"}])


def test_a_live_session_without_speed_counts_as_real_time():
    """A header without speed (a live session of an earlier version) counts as 1x."""
    assert pooling_key({"mode": "live"})["speed"] == "1x"
    check_alike([BASE, {k: v for k, v in BASE.items() if k != "speed"}])


@pytest.mark.parametrize(
    "change, field",
    [
        ({"speed": 10.0, "mode": "pilot"}, "speed"),
        ({"mode": "pilot"}, "mode"),
        ({"protocol_hash": "b" * 64}, "protocol"),
        ({"study": "other-study"}, "protocol"),
    ],
)
def test_unlike_sessions_are_refused_naming_what_differs(change, field):
    """A difference in speed, mode or protocol raises UnlikeSessionsError (code unlike-sessions,
    exit 1) whose one-line message and differences name the field and its values."""
    other = {**BASE, **change}
    with pytest.raises(UnlikeSessionsError) as info:
        check_alike([BASE, BASE, other], verb="summarise")
    err = info.value
    assert err.code == "unlike-sessions" and err.code in PROBLEM_CODES
    assert err.exit_code == EXIT_PROBLEMS
    assert field in err.differences
    assert sorted(err.differences[field].values()) == [1, 2]
    line = str(err)
    assert "\n" not in line and "--pool-unlike" in line
    for value in err.differences[field]:
        assert value in line
