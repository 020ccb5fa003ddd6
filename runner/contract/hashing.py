"""**Contract.** The digest the journal header stores for each stimulus file: sha256 of its bytes."""

from __future__ import annotations

import hashlib
from pathlib import Path

HASH_CHUNK = 1 << 20


def file_sha256(path: Path) -> str:
    """sha256 of a file's bytes, as hex (the digest the session header stores)."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        while chunk := fh.read(HASH_CHUNK):
            digest.update(chunk)
    return digest.hexdigest()


class HashCache:
    """sha256 of files, remembered by (path, size, modification time) for one run.

    Sessions of one study share their stimuli, so auditing many sessions hashes each file once.
    """

    def __init__(self) -> None:
        self._known: dict[tuple[str, int, int], str] = {}

    def sha256(self, path: Path) -> str:
        st = path.stat()
        key = (str(path), st.st_size, st.st_mtime_ns)
        found = self._known.get(key)
        if found is None:
            found = self._known[key] = file_sha256(path)
        return found
