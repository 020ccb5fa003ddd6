"""**Contract.** Everything trialdeck writes to disk or sends on the wire, in one place.

Standard library only (no pygame, pylsl, numpy or pandas), so every layer can import it:

* :mod:`runner.contract.layout`: the session folder and the names of the files in it;
* :mod:`runner.contract.columns`: the one registry of column names (trials.csv, the pooled
  export table, BIDS events) and the names a trial table may therefore not use;
* :mod:`runner.contract.events`: journal event names and the marker payload format;
* :mod:`runner.contract.line`: the journal line format (encode, hash, split).

Change these only on purpose, and record the change in CHANGELOG.md and docs/.
"""
