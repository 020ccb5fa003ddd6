"""Test helper: copy a session folder, rewriting its journal line by line through the writer.

The copy's hash chain is intact (every line is appended again by
:class:`runner.journal.writer.Journal`), so readers treat it as a journal trialdeck wrote.
"""

from __future__ import annotations

import shutil
from collections.abc import Callable
from pathlib import Path
from typing import Any

from runner.contract.layout import JOURNAL_NAME
from runner.journal.read import read_journal
from runner.journal.writer import Journal

CHAIN_FIELDS = ("seq", "prev", "h")


def rewrite_session(
    src: Path, dest: Path, edit: Callable[[int, dict[str, Any]], dict[str, Any] | None]
) -> Path:
    """Copy session folder ``src`` to ``dest`` with ``edit(index, record)`` applied to each line.

    ``edit`` gets a copy of each record without its chain fields (index 0 is the header) and
    returns the record to write, or None to leave the line out.
    """
    records = read_journal(src / JOURNAL_NAME).records
    shutil.copytree(src, dest, ignore=shutil.ignore_patterns(JOURNAL_NAME, "session.lock"))
    journal: Journal | None = None
    for i, rec in enumerate(records):
        fields = {k: v for k, v in rec.items() if k not in CHAIN_FIELDS}
        fields = edit(i, fields)
        if fields is None:
            continue
        event = fields.pop("event")
        if journal is None:
            assert event == "header"
            fields.pop("format", None)
            journal = Journal.create(dest, fields)
        else:
            journal.append(event, **fields)
    assert journal is not None
    journal.close()
    return dest


def crash_after_onset(folder: Path, trial: int) -> None:
    """Cut a finished session's journal right after ``trial``'s stimulus onset, as a crash would.

    Interrupted sessions made this way need no abort (no confirmation keys), so the test does not
    depend on the simulated participant's timing of the abort.
    """
    path = folder / JOURNAL_NAME
    raw = path.read_bytes().split(b"\n")
    cut = next(
        i
        for i, x in enumerate(raw)
        if b'"stimulus_onset"' in x and f'"trial":{trial},'.encode() in x
    )
    path.write_bytes(b"\n".join(raw[: cut + 1]) + b"\n")
