"""The frozen protocol a session ran with, read from its journal header (cached).

The header holds the protocol text the session ran with (``protocol_text``); the session folder
holds the same text as ``protocol.yaml``. Sessions of one study share that text, so parsing and
validating it once per text saves most of the per-session set-up time of export and audit.
Models are frozen, so sharing them is safe.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from pydantic import ValidationError

from runner.contract.layout import FROZEN_PROTOCOL
from runner.errors import JournalError
from runner.protocol.model import Protocol
from runner.protocol.yamlsafe import read_yaml_text

__all__ = ["frozen_protocol", "frozen_text", "protocol_from_header"]

PROTOCOL_CACHE_SIZE = 64


_CACHE: dict[str, Protocol] = {}


def frozen_protocol(text: str, filename: str = "<frozen protocol>") -> Protocol:
    """Parse and validate a frozen protocol text, once per distinct text.

    ``filename`` names the text in YAML error messages.

    Raises
    ------
    ProtocolError
        The text is not valid YAML.
    pydantic.ValidationError
        The text no longer passes this trialdeck's validation.
    """
    found = _CACHE.get(text)
    if found is None:
        found = Protocol.model_validate(read_yaml_text(text, filename=filename).data)
        if len(_CACHE) >= PROTOCOL_CACHE_SIZE:
            _CACHE.clear()
        _CACHE[text] = found
    return found


def frozen_text(header: dict[str, Any]) -> str | None:
    """The protocol text in a journal header, or None when it holds none."""
    text = header.get("protocol_text")
    return text if isinstance(text, str) else None


def frozen_file_text(folder: Path) -> str | None:
    """The text of the session folder's frozen ``protocol.yaml``, or None when it is absent."""
    path = folder / FROZEN_PROTOCOL
    if not path.is_file():
        return None
    return path.read_bytes().decode("utf-8-sig", errors="replace")


def protocol_from_header(header: dict[str, Any], path: Path) -> Protocol:
    """The validated protocol of a journal header (``path``: the journal, for messages).

    Raises
    ------
    JournalError
        The header holds no protocol text, or the text no longer passes validation.
    """
    text = frozen_text(header)
    if text is None:
        raise JournalError(
            f"the header of {path} holds no protocol text, so the session cannot be exported; "
            "was it written by trialdeck?"
        )
    try:
        return frozen_protocol(text, f"{path} (frozen protocol)")
    except ValidationError as exc:
        raise JournalError(
            f"the frozen protocol in {path} no longer passes validation "
            f"({exc.errors()[0].get('msg', 'invalid')}); export it with the trialdeck version "
            f"that ran it ({header.get('version', 'unknown')})."
        ) from None
