"""The session journal: the writer, the one reader, attempts and winning trials.

* :mod:`runner.journal.writer`: :class:`Journal`, the append-only, hash-chained writer;
* :mod:`runner.journal.read`: the only module that parses journal lines (fast verified read
  and the diagnostic chain walk);
* :mod:`runner.journal.trials`: attempts, winning trial records, the session's span;
* :mod:`runner.journal.frozen`: the frozen protocol from the header, cached (imported on its
  own: it needs the protocol model).
"""

from __future__ import annotations

from runner.journal.read import ChainCheck, JournalRead, read_journal, verify_chain
from runner.journal.writer import Journal

__all__ = ["ChainCheck", "Journal", "JournalRead", "read_journal", "verify_chain"]
