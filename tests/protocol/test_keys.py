"""Keys a protocol names: every one can be pressed and none clashes with a key a screen uses."""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml
from protofix import BASE_PROTOCOL, write_protocol

from runner.cli import main


def _with(**changes) -> dict:
    protocol = yaml.safe_load(yaml.safe_dump(BASE_PROTOCOL))
    for dotted, value in changes.items():
        section, key = dotted.split("__")
        if section == "page":
            protocol["sequence"][0]["page"][key] = value
        else:
            protocol.setdefault(section, {})[key] = value
    return protocol


CASES = [
    ("unsure is return", _with(answer__unsure_key="return"), "answer.unsure_key", "key-clash"),
    ("unsure is a digit", _with(answer__unsure_key="5"), "answer.unsure_key", "unknown-key"),
    ("unsure is escape", _with(answer__unsure_key="escape"), "answer.unsure_key", "unknown-key"),
    ("page key unknown", _with(page__key="xyz"), "sequence[0].page.key", "unknown-key"),
    ("page key escape", _with(page__key="escape"), "sequence[0].page.key", "unknown-key"),
    ("page key empty", _with(page__key=""), "sequence[0].page.key", "unknown-key"),
    ("break key empty", _with(breaks__key=""), "breaks.key", "unknown-key"),
    ("break key unknown", _with(breaks__key="enter"), "breaks.key", "unknown-key"),
]


@pytest.mark.parametrize(
    ("protocol", "path", "code"), [c[1:] for c in CASES], ids=[c[0] for c in CASES]
)
def test_unusable_or_clashing_keys_are_refused_and_nothing_is_created(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], protocol: dict, path: str, code: str
) -> None:
    """`check` refuses the key with one line naming the setting; `pilot` creates no folder."""
    file = write_protocol(tmp_path / "study", protocol)
    assert main(["check", str(file), "--json"]) == 1
    import json

    found = json.loads(capsys.readouterr().out)["problems"]
    assert any(p["path"] == path and p["code"] == code for p in found), found
    out = tmp_path / "sessions"
    status = main(["pilot", str(file), "--participant", "P01", "--out", str(out), "--speed", "50"])
    capsys.readouterr()
    assert status == 1 and not out.exists()


def test_distinct_usable_keys_pass_check(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """An unsure key, page key and break key that clash with nothing pass `check`."""
    protocol = _with(answer__unsure_key="n", page__key="return", breaks__key="b")
    protocol["breaks"]["every_trials"] = 2
    file = write_protocol(tmp_path / "study", protocol)
    code = main(["check", str(file)])
    text = "".join(capsys.readouterr())
    assert code == 0, text
