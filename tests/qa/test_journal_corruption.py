"""A real pilot journal, corrupted in copies: each break is named at the line where it happened."""

from __future__ import annotations

import hashlib
import json
import shutil
from pathlib import Path

import pytest
from conftest import MINI_PROTOCOL, run_pilot

from runner.qa.audit import audit_session, verify_chain
from runner.session.journal import JOURNAL_NAME, read_journal


@pytest.fixture(scope="module")
def pilot(tmp_path_factory) -> Path:
    """The folder of one completed headless pilot of the mini protocol."""
    out = tmp_path_factory.mktemp("pilot")
    result = run_pilot(MINI_PROTOCOL, out, speed=20)
    assert result.status == "completed"
    return result.folder


def _copy(pilot: Path, tmp_path: Path) -> Path:
    dest = tmp_path / "ses-1"
    shutil.copytree(pilot, dest)
    return dest


def _lines(folder: Path) -> list[bytes]:
    return (folder / JOURNAL_NAME).read_bytes().split(b"\n")[:-1]


def _write(folder: Path, lines: list[bytes], *, newline_at_end: bool = True) -> None:
    data = b"\n".join(lines) + (b"\n" if newline_at_end else b"")
    (folder / JOURNAL_NAME).write_bytes(data)


def _line_of(lines: list[bytes], event: str, nth: int = 0) -> int:
    """1-based number of the nth line of an event."""
    hits = [i + 1 for i, raw in enumerate(lines) if json.loads(raw)["event"] == event]
    return hits[nth]


@pytest.mark.slow
def test_intact_journal_passes(pilot, tmp_path):
    """An untouched pilot journal has an intact chain and the audit finds no error.

    Source: FIPS 180-4 SHA-256 as implemented by Python's hashlib; every line's stored hash is
    recomputed here from the journal's documented rule (sha256 of previous hash + line text
    without its hash field, first 32 hex digits), independently of the project's code.
    """
    folder = _copy(pilot, tmp_path)
    lines = _lines(folder)
    prev = "0" * 32
    for raw in lines:
        obj = json.loads(raw)
        body = raw.decode("utf-8").rsplit(',"h":"', 1)[0] + "}"
        assert obj["prev"] == prev
        assert hashlib.sha256((prev + body).encode("utf-8")).hexdigest()[:32] == obj["h"]
        prev = obj["h"]
    chain = verify_chain(folder / JOURNAL_NAME)
    assert chain.problems == []
    assert chain.intact_lines == len(lines)
    audit = audit_session(folder)
    assert audit.ok, [p.format() for p in audit.errors]


def _truncate_mid_line(lines: list[bytes]) -> tuple[list[bytes], bool, int]:
    k = _line_of(lines, "stimulus_onset", 2)
    cut = lines[: k - 1] + [lines[k - 1][: len(lines[k - 1]) // 2]]
    return cut, False, k


def _edit_line(lines: list[bytes]) -> tuple[list[bytes], bool, int]:
    k = _line_of(lines, "trial_end", 1)
    obj_text = lines[k - 1].decode("utf-8")
    edited = obj_text.replace(',"t":', ',"t":1', 1)  # a time of 1055.9 becomes 11055.9
    assert edited != obj_text
    return lines[: k - 1] + [edited.encode("utf-8")] + lines[k:], True, k


def _remove_line(lines: list[bytes]) -> tuple[list[bytes], bool, int]:
    k = _line_of(lines, "answer", 2)
    # The line after the removed one now sits at number k and is where the chain breaks.
    return lines[: k - 1] + lines[k:], True, k


def _swap_lines(lines: list[bytes]) -> tuple[list[bytes], bool, int]:
    k = _line_of(lines, "rating_onset", 3)
    swapped = list(lines)
    swapped[k - 1], swapped[k] = swapped[k], swapped[k - 1]
    return swapped, True, k


CORRUPTIONS = [
    # (make the copy, severity at that line, problem code, also fails in read_journal)
    (_truncate_mid_line, "warning", "journal-torn-line", False),
    (_edit_line, "error", "journal-line-changed", True),
    (_remove_line, "error", "journal-lines-missing", True),
    (_swap_lines, "error", "journal-lines-swapped", True),
]


@pytest.mark.parametrize(
    ("corrupt", "severity", "code", "is_chain_error"),
    CORRUPTIONS,
    ids=["truncated-mid-line", "one-line-edited", "one-line-removed", "two-lines-swapped"],
)
@pytest.mark.slow
def test_corruption_is_named_at_its_line(pilot, tmp_path, corrupt, severity, code, is_chain_error):
    """Each corruption is reported once, at the line where it happened, with a plain sentence.

    Source: common practice (no published source): hash-chained append-only logs are the usual
    tamper evidence; the expected line numbers are derived from how each copy was corrupted.
    """
    folder = _copy(pilot, tmp_path)
    lines, newline_at_end, line = corrupt(_lines(folder))
    _write(folder, lines, newline_at_end=newline_at_end)
    chain = verify_chain(folder / JOURNAL_NAME)
    assert len(chain.problems) == 1, [p.format() for p in chain.problems]
    problem = chain.problems[0]
    assert (problem.severity, problem.line) == (severity, line)
    assert problem.code == code
    assert problem.format().startswith(f"{folder / JOURNAL_NAME}:{line}:0: {severity}: ")
    # The project's own reader agrees on where the first break is.
    read = read_journal(folder / JOURNAL_NAME)
    if is_chain_error:
        assert read.chain_errors and read.chain_errors[0].startswith(f"line {line} ")
    else:
        assert read.torn_tail and not read.chain_errors


@pytest.mark.slow
def test_swapped_lines_names_both(pilot, tmp_path):
    """A swap names both exchanged lines, and the lines after them are not blamed."""
    folder = _copy(pilot, tmp_path)
    lines, _, k = _swap_lines(_lines(folder))
    _write(folder, lines)
    (problem,) = verify_chain(folder / JOURNAL_NAME).problems
    assert f"lines {k} and {k + 1}" in problem.message


@pytest.mark.slow
def test_corrupt_journal_fails_the_audit(pilot, tmp_path):
    """An edited line makes the whole audit fail (exit 1), with the line in the problem list."""
    folder = _copy(pilot, tmp_path)
    lines, _, k = _edit_line(_lines(folder))
    _write(folder, lines)
    audit = audit_session(folder)
    assert not audit.ok
    assert any(p.line == k and p.code == "journal-line-changed" for p in audit.errors)


@pytest.mark.slow
def test_torn_tail_is_a_warning_but_the_unfinished_session_is_an_error(pilot, tmp_path):
    """A crash mid-write is a warning on the chain; the missing trials are the audit's error."""
    folder = _copy(pilot, tmp_path)
    lines, _, k = _truncate_mid_line(_lines(folder))
    _write(folder, lines, newline_at_end=False)
    audit = audit_session(folder)
    torn = [p for p in audit.problems if p.code == "journal-torn-line"]
    assert [p.severity for p in torn] == ["warning"]
    assert torn[0].line == k
    stopped = [p for p in audit.errors if p.code == "session-interrupted"]
    assert len(stopped) == 1
    assert stopped[0].line == k - 1


@pytest.mark.slow
def test_appended_foreign_line_is_named(pilot, tmp_path):
    """A line added at the end without a valid chain link is named by its line number."""
    folder = _copy(pilot, tmp_path)
    lines = _lines(folder)
    last = json.loads(lines[-1])
    fake = json.dumps(
        {"seq": last["seq"] + 1, "prev": "f" * 32, "event": "note", "h": "0" * 32},
        separators=(",", ":"),
    )
    _write(folder, lines + [fake.encode()])
    problems = verify_chain(folder / JOURNAL_NAME).problems
    assert [p.line for p in problems] == [len(lines) + 1, len(lines) + 1]
    assert [p.code for p in problems] == ["journal-line-changed", "journal-line-foreign"]
