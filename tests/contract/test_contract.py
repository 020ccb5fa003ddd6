"""The contract package: standard library only, and the journal line format it defines."""

from __future__ import annotations

import hashlib
import json
import subprocess
import sys
from pathlib import Path

from runner.contract.line import (
    GENESIS,
    LEAD_FIELDS,
    encode_line,
    line_event,
    line_hash,
    split_hash,
    stored_hash,
)

REPO = Path(__file__).resolve().parents[2]
CONTRACT_MODULES = ("columns", "events", "hashing", "layout", "line", "outputs")
THIRD_PARTY = ("numpy", "pandas", "pygame", "pylsl", "pydantic", "yaml", "scipy", "matplotlib")


def test_contract_imports_only_the_standard_library():
    """Importing every contract module loads none of the project's third-party dependencies."""
    code = (
        "import sys\n"
        + "".join(f"import runner.contract.{m}\n" for m in CONTRACT_MODULES)
        + f"print(','.join(m for m in {THIRD_PARTY!r} if m in sys.modules))\n"
    )
    proc = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, cwd=REPO, timeout=120
    )
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == ""


def test_encoded_line_starts_with_its_lead_fields_and_ends_with_its_hash():
    """A line written with its fields in any order starts seq, prev, event, t, trial and ends
    with h, the sha256 of prev and the line without h.

    Source: Python's json module (key order of the parsed object) and hashlib.sha256 as the
    reference hash; the field order is the one docs/journal.md documents.
    """
    record = {"event": "flip", "kind": "gap", "view": {"type": "BlankView"}, "trial": 7, "t": 2.5}
    line, h = encode_line(record, 4, GENESIS)
    keys = list(json.loads(line))
    assert keys[:5] == ["seq", "prev", *LEAD_FIELDS] and keys[-1] == "h"
    assert set(keys) == {"seq", "prev", "h", *record}
    body, stored = split_hash(line)
    assert stored == h == hashlib.sha256((GENESIS + body).encode()).hexdigest()[:32]
    assert line_hash(GENESIS, body) == h
    raw = line.encode()
    assert stored_hash(raw) == h.encode() and line_event(raw) == b"flip"
    assert json.loads(body) == {"seq": 4, "prev": GENESIS, **record}


def test_labels_match_whole_text_only():
    """A label with a trailing newline is not a label (a final newline would make a second folder).

    Source: Python's re documentation: ``$`` also matches before a final newline, ``fullmatch``
    does not.
    """
    from runner.contract.layout import is_label

    assert is_label("P01") and not is_label("P01\n") and not is_label("") and not is_label("P 1")
