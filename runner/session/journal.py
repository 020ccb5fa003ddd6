"""Where the session layer finds the journal (re-exported from :mod:`runner.journal`).

The writer is :mod:`runner.journal.writer`, the reader :mod:`runner.journal.read`, and the line
format :mod:`runner.contract.line`; this module keeps the session layer's import path.
"""

from __future__ import annotations

from runner.contract.layout import JOURNAL_NAME
from runner.contract.line import GENESIS, HASH_CHARS, JOURNAL_FORMAT, line_hash, split_hash
from runner.journal.read import JournalRead, read_journal
from runner.journal.writer import Journal

__all__ = [
    "GENESIS",
    "HASH_CHARS",
    "JOURNAL_FORMAT",
    "JOURNAL_NAME",
    "Journal",
    "JournalRead",
    "line_hash",
    "read_journal",
    "split_hash",
]
