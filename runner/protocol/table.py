"""The trial table: one CSV row per trial, with `stimulus`, `expected` and factor columns.

Problems name the table file, the CSV line and the column where the bad field starts, in the same
``FILE:LINE:COL: error: message`` form as protocol problems.
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass, field
from pathlib import Path

from runner.contract.columns import RESERVED_TABLE_COLUMNS, TABLE_REQUIRED
from runner.errors import Problem
from runner.protocol.files import FileProblem, read_regular, real_path

MAX_TABLE_BYTES = 20 * 1024 * 1024
MAX_TABLE_ROWS = 100_000
MAX_EXPECTED_DIGITS = 9  # a count of a billion or more is a typing slip
REQUIRED_COLUMNS = TABLE_REQUIRED
# Every name trialdeck writes itself into trials.csv, the pooled table or events.tsv: a table
# column of that name would be shadowed or lost (runner.contract.columns).
RESERVED_COLUMNS = RESERVED_TABLE_COLUMNS


@dataclass(frozen=True)
class TrialRow:
    """One row of the trial table. ``row`` is the 1-based data row, ``line`` its line in the file."""

    row: int
    line: int
    stimulus: str
    expected: int | None
    values: dict[str, str] = field(default_factory=dict)

    def value(self, column: str) -> str:
        if column == "stimulus":
            return self.stimulus
        if column == "expected":
            return "" if self.expected is None else str(self.expected)
        return self.values.get(column, "")


@dataclass(frozen=True)
class TrialTable:
    path: Path
    columns: list[str]
    rows: list[TrialRow]
    raw: bytes

    def stimulus_path(self, row: TrialRow) -> Path:
        """Absolute path of a row's stimulus (paths in the table are relative to the table)."""
        return real_path(self.path.parent / row.stimulus)


def _short(text: str, limit: int = 40) -> str:
    """``text`` quoted, shortened to ``limit`` characters for a problem line."""
    return (
        repr(text) if len(text) <= limit else repr(text[:limit]) + f"... ({len(text)} characters)"
    )


def _field_columns(line_text: str) -> list[int]:
    """1-based character column where each comma-separated field starts (quotes ignored)."""
    cols = [1]
    in_quotes = False
    for i, ch in enumerate(line_text):
        if ch == '"':
            in_quotes = not in_quotes
        elif ch == "," and not in_quotes:
            cols.append(i + 2)
    return cols


def read_trial_table(
    path: Path, *, display_name: str | None = None
) -> tuple[TrialTable | None, list[Problem]]:
    """Read and check a trial table. Returns the table (None when unusable) and its problems."""
    name = display_name or str(path)
    problems: list[Problem] = []

    def err(line: int, col: int, msg: str, *, code: str) -> None:
        problems.append(Problem("error", name, line, col, msg, code=code))

    try:
        raw = read_regular(path, "trial table", MAX_TABLE_BYTES)
    except FileProblem as exc:
        return None, [Problem("error", name, 0, 0, exc.message, code=exc.code)]
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        at = exc.start - (raw.rfind(b"\n", 0, exc.start) + 1) + 1
        return None, [
            Problem("error", name, line, at, "the trial table is not UTF-8 text", code="not-utf8")
        ]
    if not text.strip():
        return None, [Problem("error", name, 1, 1, "the trial table is empty", code="empty-file")]
    lines = text.splitlines()
    reader = csv.reader(io.StringIO(text))
    try:
        header = next(reader)
    except csv.Error as exc:
        return None, [
            Problem("error", name, 1, 1, f"the header row is not valid CSV ({exc})", code="bad-csv")
        ]
    header = [h.strip() for h in header]
    header_cols = _field_columns(lines[0])
    if TABLE_REQUIRED[0] not in header or TABLE_REQUIRED[1] not in header:
        for sep, called in ((";", "semicolons"), ("\t", "tabs")):
            if len(header) == 1 and sep in header[0]:
                return None, [
                    Problem(
                        "error",
                        name,
                        1,
                        header[0].index(sep) + 1,
                        f"the trial table separates its fields with {called}; trialdeck reads "
                        "comma-separated tables, so save it as CSV with commas (in a "
                        "spreadsheet: CSV, comma as the field separator)",
                        code="wrong-delimiter",
                    )
                ]
    seen: dict[str, int] = {}
    for i, col in enumerate(header):
        c = header_cols[i] if i < len(header_cols) else 1
        if not col:
            err(1, c, f"column {i + 1} of the header has no name", code="unnamed-column")
        elif col in seen:
            err(1, c, f"column {col!r} appears twice in the header", code="duplicate-column")
        elif col in RESERVED_COLUMNS:
            err(
                1,
                c,
                f"column {col!r} is a name trialdeck writes itself into trials.csv or the "
                "exports; rename it",
                code="reserved-column",
            )
        seen.setdefault(col, i)
    for req in REQUIRED_COLUMNS:
        if req not in seen:
            err(
                1,
                1,
                f"the header has no {req!r} column (columns: {', '.join(header)})",
                code="missing-column",
            )
    if problems:
        return None, problems

    rows: list[TrialRow] = []
    try:
        start = reader.line_num + 1
        for record in reader:
            line_no, opened, start = start, reader.line_num, reader.line_num + 1
            if not any(f.strip() for f in record):
                continue
            line_text = lines[line_no - 1] if line_no - 1 < len(lines) else ""
            cols = _field_columns(line_text)
            if opened != line_no:
                # A field holds line breaks: a quote that is never closed on its line swallows
                # the rows after it (no trial table needs a line break inside a field).
                i = next(k for k, f in enumerate(record) if "\n" in f or "\r" in f)
                quote = line_text.find('"')
                err(
                    line_no,
                    quote + 1 if quote >= 0 else (cols[i] if i < len(cols) else 1),
                    f"a quoted field opens here and runs to line {opened}, swallowing "
                    f"{opened - line_no} line(s) of rows; remove the stray quote (or close it "
                    "on this line)",
                    code="stray-quote",
                )
                continue
            if len(record) != len(header):
                err(
                    line_no,
                    1,
                    f"row has {len(record)} fields but the header has {len(header)}",
                    code="row-length",
                )
                continue
            values = {h: v.strip() for h, v in zip(header, record, strict=True)}
            stim = values.pop("stimulus")
            exp_text = values.pop("expected")
            if not stim:
                err(
                    line_no,
                    cols[seen["stimulus"]],
                    "the stimulus field is empty",
                    code="empty-stimulus",
                )
                continue
            expected: int | None = None
            if len(exp_text) > MAX_EXPECTED_DIGITS and exp_text.isdigit():
                err(
                    line_no,
                    cols[seen["expected"]],
                    f"expected has {len(exp_text)} digits; a count has at most "
                    f"{MAX_EXPECTED_DIGITS}",
                    code="bad-expected",
                )
                continue
            if exp_text:
                try:
                    expected = int(exp_text)
                except ValueError:
                    err(
                        line_no,
                        cols[seen["expected"]],
                        f"expected must be a whole number or empty, got {_short(exp_text)}",
                        code="bad-expected",
                    )
                    continue
                if expected < 0:
                    err(
                        line_no,
                        cols[seen["expected"]],
                        f"expected must not be negative, got {expected}",
                        code="bad-expected",
                    )
                    continue
            rows.append(
                TrialRow(
                    row=len(rows) + 1, line=line_no, stimulus=stim, expected=expected, values=values
                )
            )
            if len(rows) > MAX_TABLE_ROWS:
                err(
                    line_no,
                    1,
                    f"the trial table has more than {MAX_TABLE_ROWS} rows",
                    code="too-many-rows",
                )
                break
    except csv.Error as exc:
        err(reader.line_num, 1, f"not valid CSV ({exc})", code="bad-csv")
    if not rows and not problems:
        err(1, 1, "the trial table has a header but no rows", code="no-rows")
    if problems:
        return None, problems
    return TrialTable(path=path, columns=header, rows=rows, raw=raw), problems
