"""The JSON Schema kept in docs/ is the one the protocol model produces."""

from __future__ import annotations

import json
from pathlib import Path

from runner.cli import main
from runner.protocol.model import Protocol

SCHEMA_FILE = Path(__file__).resolve().parents[2] / "docs" / "protocol.schema.json"


def test_docs_schema_is_current() -> None:
    """docs/protocol.schema.json equals Protocol.model_json_schema()."""
    kept = json.loads(SCHEMA_FILE.read_text(encoding="utf-8"))
    assert kept == Protocol.model_json_schema(), "run `python bench/write_schema.py` to update it"


def test_schema_command_prints_the_same_schema(capsys) -> None:
    """`trialdeck schema` prints the schema kept in docs/."""
    assert main(["schema"]) == 0
    printed = json.loads(capsys.readouterr().out)
    assert printed == json.loads(SCHEMA_FILE.read_text(encoding="utf-8"))


def test_schema_forbids_unknown_keys_everywhere() -> None:
    """Every object in the schema sets additionalProperties false (typos are errors)."""
    schema = Protocol.model_json_schema()
    objects = [schema, *schema.get("$defs", {}).values()]
    models = [o for o in objects if o.get("type") == "object" and "properties" in o]
    assert models and all(o.get("additionalProperties") is False for o in models)
