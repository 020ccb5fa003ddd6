"""The one reader of journal lines: a fast verified read, and the diagnostic chain walk.

Every reader of a journal comes here (trials.csv, resume, export, summary, audit, replay), so the
line format (:mod:`runner.contract.line`) is parsed in this module only.

* :func:`read_journal` reads the intact lines up to the first break. Intact journals (the common
  case) take one tight loop that checks each line's hash against the previous one and decodes the
  wanted lines in one JSON call; anything else is read line by line, which says what is wrong.
* :func:`verify_chain` checks every line and names every break by its line number (the audit).
"""

from __future__ import annotations

import hashlib
import json
import re
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Protocol

from runner.contract.layout import display_path
from runner.contract.line import (
    EVENT_FIELD_B,
    GENESIS,
    HASH_CHARS,
    HASH_FIELD_B,
    HASH_TAIL,
    JOURNAL_FORMAT,
    line_hash,
    split_hash,
    stored_hash,
)
from runner.contract.line import as_int as _int
from runner.errors import JournalError, Problem

__all__ = ["ChainCheck", "JournalRead", "read_journal", "verify_chain"]

GENESIS_B = GENESIS.encode("ascii")
HEADER_EVENT = "header"
# The lead fields after the event name (runner.contract.line.LEAD_FIELDS): a number ``t`` and an
# integer ``trial``; a line whose t is not a plain number keeps it undecoded.
LEAD_RE = re.compile(rb',"t":(-?[0-9][0-9.eE+-]*)(?:,"trial":([0-9]+))?[,}]')


@dataclass
class JournalRead:
    """What :func:`read_journal` found. ``records`` are the intact lines up to the first break.

    Lines whose event was not asked for (``decode``) are records ``{"seq", "event", "t",
    "trial"}`` only (``t`` and ``trial`` where the line has them).
    """

    path: Path
    header: dict[str, Any] | None
    records: list[dict[str, Any]] = field(default_factory=list)
    chain_errors: list[str] = field(default_factory=list)
    torn_tail: bool = False
    good_bytes: int = 0

    def events(self, *names: str) -> Iterator[dict[str, Any]]:
        for r in self.records:
            if not names or r.get("event") in names:
                yield r


def _read_bytes(path: Path, missing: str) -> bytes:
    try:
        return path.read_bytes()
    except FileNotFoundError:
        raise JournalError(missing) from None
    except OSError as exc:
        raise JournalError(f"the journal {path} cannot be read: {exc.strerror}.") from None


def _fast(raws: list[bytes], want: frozenset[bytes] | None) -> list[dict[str, Any]] | None:
    """The records of an intact run of lines, or None at the first line that needs a closer look.

    A line's stored hash is sha256 over the previous line's hash and its own text, so a match
    proves the line is unchanged and in its place (its ``seq`` and ``prev`` fields included).
    Only the header and lines whose event is in ``want`` (all when None) are decoded, together in
    one JSON call; the others become ``{"seq", "event", "t", "trial"}`` from the line's lead
    fields.
    """
    sha = hashlib.sha256
    prev = GENESIS_B
    tail = HASH_TAIL
    cut = -HASH_CHARS - 2
    field_b = HASH_FIELD_B
    event_b = EVENT_FIELD_B
    skip = len(event_b)
    lead = LEAD_RE.match
    records: list[dict[str, Any] | None] = []
    names: dict[bytes, str] = {}
    wanted: list[bytes] = []
    where: list[int] = []
    for n, raw in enumerate(raws):
        h = raw[cut:-2]
        if (
            raw[-tail:cut] != field_b
            or sha(prev + raw[:-tail] + b"}").hexdigest()[:HASH_CHARS].encode("ascii") != h
        ):
            return None
        prev = h
        if want is None or n == 0:
            wanted.append(raw)
            where.append(n)
            records.append(None)
            continue
        start = raw.find(event_b) + skip
        stop = raw.find(b'"', start)
        event = raw[start:stop]
        if event in want:
            wanted.append(raw)
            where.append(n)
            records.append(None)
            continue
        name = names.get(event)
        if name is None:
            name = names[event] = event.decode("utf-8", errors="replace")
        found = lead(raw, stop + 1)
        if found is None:
            records.append({"seq": n, "event": name})
            continue
        t, trial = found.groups()
        if trial is None:
            records.append({"seq": n, "event": name, "t": float(t)})
        else:
            records.append({"seq": n, "event": name, "t": float(t), "trial": int(trial)})
    if not wanted:
        return []
    try:
        objs = json.loads(b"[" + b",".join(wanted) + b"]")
    except ValueError:
        return None
    if not isinstance(objs, list) or len(objs) != len(wanted):
        return None
    for n, obj in zip(where, objs, strict=True):
        if not isinstance(obj, dict) or obj.get("seq") != n:
            return None
        records[n] = obj
    return records  # type: ignore[return-value]  # the loop above filled every None slot


def _strict(data: bytes, out: JournalRead) -> None:
    """Line by line up to the first break, saying what is wrong there (fills ``out``)."""
    prev = GENESIS
    offset = 0
    lines = data.split(b"\n")
    for n, raw in enumerate(lines, start=1):
        is_last = n == len(lines)
        if is_last and raw == b"":
            break
        end = offset + len(raw) + (0 if is_last else 1)
        try:
            text = raw.decode("utf-8")
            parts = split_hash(text)
            obj = json.loads(text)
        except (UnicodeDecodeError, json.JSONDecodeError):
            if is_last:
                out.torn_tail = True
            else:
                out.chain_errors.append(f"line {n} is not a complete JSON line")
            break
        if parts is None or not isinstance(obj, dict):
            out.chain_errors.append(f"line {n} has no integrity hash")
            break
        body, h = parts
        if obj.get("seq") != n - 1:
            out.chain_errors.append(
                f"line {n} has sequence number {obj.get('seq')!r}, expected {n - 1}"
                " (a line was removed, added or moved)"
            )
            break
        if obj.get("prev") != prev:
            out.chain_errors.append(
                f"line {n} does not follow line {n - 1} (a line was removed, added or moved)"
            )
            break
        if line_hash(prev, body) != h:
            out.chain_errors.append(
                f"line {n} was changed after it was written (its hash does not match)"
            )
            break
        if is_last:
            # A complete-looking line without its newline: written, but the newline was lost.
            out.torn_tail = True
            break
        out.records.append(obj)
        prev = h
        offset = end
        out.good_bytes = offset


def read_journal(path: Path, *, decode: frozenset[str] | None = None) -> JournalRead:
    """Read a journal and verify its chain.

    A last line without a newline that does not parse is a torn write (crash) and is reported in
    ``torn_tail`` rather than as corruption; every other break is listed in ``chain_errors`` with
    its line number, and reading stops there.

    Parameters
    ----------
    path : Path
        The ``journal.jsonl`` file.
    decode : frozenset of str, optional
        Events to decode from JSON (the header always is); default all. The others become
        ``{"seq", "event", "t", "trial"}`` records; their hash chain is verified all the same.

    Raises
    ------
    JournalError
        The file does not exist or cannot be read.
    """
    data = _read_bytes(path, f"there is no journal at {path}.")
    out = JournalRead(path=path, header=None)
    records = None
    if data.endswith(b"\n"):
        want = None if decode is None else frozenset(e.encode("utf-8") for e in decode)
        records = _fast(data[:-1].split(b"\n"), want)
    if records is not None:
        out.records = records
        out.good_bytes = len(data)
    else:
        _strict(data, out)
        if decode is not None:
            out.records = [
                r if i == 0 or r.get("event") in decode else _lead(r)
                for i, r in enumerate(out.records)
            ]
    if out.records and out.records[0].get("event") == HEADER_EVENT:
        out.header = out.records[0]
    elif out.records:
        out.chain_errors.insert(0, "line 1 is not a journal header")
    return out


def _lead(rec: dict[str, Any]) -> dict[str, Any]:
    """What the fast path keeps of an undecoded line: seq, event, and a numeric t and trial."""
    out = {"seq": rec.get("seq"), "event": rec.get("event")}
    t = rec.get("t")
    if isinstance(t, (int, float)) and not isinstance(t, bool):
        out["t"] = float(t)
        trial = rec.get("trial")
        if isinstance(trial, int) and not isinstance(trial, bool) and trial >= 0:
            out["trial"] = trial
    return out


# --------------------------------------------------------------------------------------------
# The diagnostic walk (the audit)


@dataclass
class ChainCheck:
    """What :func:`verify_chain` found.

    ``records`` holds every line that parsed as a JSON object, with its 1-based line number,
    including lines after a break (the other checks still read them, and say so).
    ``intact_lines`` counts the lines before the first break.
    """

    path: Path
    line_count: int
    intact_lines: int
    records: list[tuple[int, dict[str, Any]]]
    problems: list[Problem] = field(default_factory=list)
    torn_line: int | None = None

    @property
    def broken(self) -> bool:
        return any(p.severity == "error" for p in self.problems)

    @property
    def header(self) -> dict[str, Any]:
        """The header line, or an empty dict when line 1 is not one."""
        if self.records and self.records[0][1].get("event") == HEADER_EVENT:
            return self.records[0][1]
        return {}


@dataclass
class _Line:
    n: int
    obj: dict[str, Any] | None  # None: not a JSON object
    seq: int | None
    prev: str | None
    h: str | None
    self_ok: bool


def _line_of(n: int, raw: bytes, obj: Any) -> _Line:
    if not isinstance(obj, dict):
        return _Line(n, None, None, None, None, False)
    prev = obj.get("prev") if isinstance(obj.get("prev"), str) else None
    h = stored_hash(raw) if prev is not None else None
    if h is None or prev is None:
        return _Line(n, obj, _int(obj.get("seq")), prev, None, False)
    digest = hashlib.sha256(prev.encode("utf-8") + raw[:-HASH_TAIL] + b"}").hexdigest()
    text = h.decode("ascii", errors="replace")
    return _Line(n, obj, _int(obj.get("seq")), prev, text, digest[:HASH_CHARS] == text)


def _parse_one(raw: bytes) -> Any:
    try:
        return json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError):
        return None


def _parse_lines(raws: list[bytes]) -> list[_Line]:
    """Every line on its own (a damaged file: speed no longer matters)."""
    return [_line_of(n, raw, _parse_one(raw)) for n, raw in enumerate(raws, start=1)]


def _plural(n: int, word: str, many: str | None = None) -> str:
    return f"{n} {word}" if n == 1 else f"{n} {many or word + 's'}"


def verify_chain(path: Path) -> ChainCheck:
    """Check every line of a journal and name each break in the hash chain by its line number.

    Each line carries ``seq`` (0, 1, 2, ...), ``prev`` (the previous line's hash) and ``h`` (its
    own hash over ``prev`` and its text). A line whose own hash does not match was changed after
    it was written. A line whose ``seq`` or ``prev`` does not follow the line before it marks a
    removed, added or moved line; two neighbouring lines that would chain if exchanged are named
    as swapped. A last line without its newline is a torn write (warning).

    Parameters
    ----------
    path : Path
        The ``journal.jsonl`` file.

    Returns
    -------
    ChainCheck

    Raises
    ------
    JournalError
        The file does not exist or cannot be read.
    """
    data = _read_bytes(
        path,
        f"there is no journal at {path}; check that the session folder is the one that holds "
        "journal.jsonl (…/sub-<participant>/ses-<session>/).",
    )
    name = display_path(path)
    raws = data.split(b"\n")
    torn_raw: bytes | None = None
    if raws and raws[-1] == b"":
        raws.pop()
    elif raws:
        torn_raw = raws.pop()
    problems: list[Problem] = []
    first_break: int | None = None

    def err(n: int, message: str, *, code: str) -> None:
        nonlocal first_break
        problems.append(Problem("error", name, n, 0, message, code=code))
        if first_break is None or n < first_break:
            first_break = n

    if not raws and torn_raw is None:
        err(0, "the journal is empty; the session never started writing it.", code="journal-empty")

    fast = _fast(raws, None) if raws else None
    if fast is not None:
        records = list(enumerate(fast, start=1))
    else:
        records = _walk(_parse_lines(raws), err)
    torn_line: int | None = None
    if torn_raw is not None:
        torn_line = len(raws) + 1
        problems.append(
            Problem(
                "warning",
                name,
                torn_line,
                0,
                f"line {torn_line}, the last one, is incomplete ({len(torn_raw)} bytes without "
                "an end of line): the program stopped while writing it (crash or power loss). "
                "The lines before it are kept; a resume cuts it off.",
                code="journal-torn-line",
            )
        )
    if records and records[0][0] == 1 and records[0][1].get("event") == HEADER_EVENT:
        fmt = records[0][1].get("format")
        if fmt != JOURNAL_FORMAT:
            err(
                1,
                f"line 1 is a header of format {fmt!r}, not {JOURNAL_FORMAT!r}; this "
                "trialdeck cannot audit it.",
                code="journal-format",
            )
    elif raws:
        err(
            1,
            "line 1 is not a journal header; this is not a trialdeck session journal.",
            code="journal-no-header",
        )
    problems.sort(key=lambda p: (p.line, p.severity != "error"))
    intact = len(raws) if first_break is None else first_break - 1
    return ChainCheck(
        path, len(raws) + (torn_raw is not None), intact, records, problems, torn_line
    )


class _Report(Protocol):
    """How :func:`_walk` reports a break: ``err(line, message, code=...)``."""

    def __call__(self, n: int, message: str, *, code: str) -> None: ...


def _walk(lines: list[_Line], err: _Report) -> list[tuple[int, dict[str, Any]]]:
    """Follow the chain line by line, calling ``err(line, message, code=...)`` at each break."""
    last_seq, last_h = -1, GENESIS
    i = 0
    while i < len(lines):
        ln = lines[i]
        if ln.obj is None:
            err(
                ln.n,
                f"line {ln.n} is not a complete JSON line (it was cut short or edited).",
                code="journal-bad-line",
            )
            i += 1
            continue
        if ln.h is None or ln.seq is None:
            err(
                ln.n,
                f"line {ln.n} has no integrity fields (seq, prev, h); it was not written "
                "by trialdeck or was edited.",
                code="journal-no-integrity",
            )
            i += 1
            continue
        if not ln.self_ok:
            err(
                ln.n,
                f"line {ln.n} was changed after it was written (its hash does not match its text).",
                code="journal-line-changed",
            )
        expected = last_seq + 1
        if ln.seq == expected and ln.prev == last_h:
            last_seq, last_h = ln.seq, ln.h
            i += 1
            continue
        nxt = lines[i + 1] if i + 1 < len(lines) else None
        if (
            nxt is not None
            and nxt.h is not None
            and nxt.seq == expected
            and nxt.prev == last_h
            and ln.seq == expected + 1
            and ln.prev == nxt.h
        ):
            err(
                ln.n,
                f"lines {ln.n} and {nxt.n} are in the wrong order (they were swapped).",
                code="journal-lines-swapped",
            )
            if not nxt.self_ok:
                err(
                    nxt.n,
                    f"line {nxt.n} was changed after it was written (its hash does not "
                    "match its text).",
                    code="journal-line-changed",
                )
            last_seq, last_h = ln.seq, ln.h
            i += 2
            continue
        if ln.seq > expected:
            missing = ln.seq - expected
            err(
                ln.n,
                f"{_plural(missing, 'line is', 'lines are')} missing before line {ln.n} "
                f"(entry {expected}{'' if missing == 1 else f' to {ln.seq - 1}'} was removed).",
                code="journal-lines-missing",
            )
            last_seq, last_h = ln.seq, ln.h
        elif ln.seq < expected:
            # A repeated or moved-back line: report it and keep following the original chain.
            err(
                ln.n,
                f"line {ln.n} repeats or moves an earlier entry (number {ln.seq}, expected "
                f"{expected}); a line was added or moved here.",
                code="journal-line-repeated",
            )
        else:
            err(
                ln.n,
                f"line {ln.n} does not follow line {ln.n - 1} (its link to the previous "
                "line does not match); lines from elsewhere were put here.",
                code="journal-line-foreign",
            )
            last_seq, last_h = ln.seq, ln.h
        i += 1

    return [(ln.n, ln.obj) for ln in lines if ln.obj is not None]
