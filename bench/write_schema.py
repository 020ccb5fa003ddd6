"""Write docs/protocol.schema.json from the protocol model (run after changing the model).

Usage: ``python bench/write_schema.py`` from the repository folder. The test
tests/protocol/test_schema.py fails while the file is out of date.
"""

from __future__ import annotations

import json
from pathlib import Path

from runner.protocol.model import Protocol

SCHEMA_PATH = Path(__file__).resolve().parent.parent / "docs" / "protocol.schema.json"


def schema_text() -> str:
    """The schema exactly as `trialdeck schema` prints it, with a final newline."""
    return json.dumps(Protocol.model_json_schema(), indent=2) + "\n"


if __name__ == "__main__":
    SCHEMA_PATH.write_text(schema_text(), encoding="utf-8")
    print(f"wrote {SCHEMA_PATH} ({len(schema_text())} characters)")
