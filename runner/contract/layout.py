"""**Contract.** The session folder and the files trialdeck writes into it.

``<out>/<study>/sub-<participant>/ses-<session>/`` holds ``journal.jsonl``, the frozen copies
``protocol.yaml`` and ``trial_table.csv``, ``trials.csv`` (written at the end, also after an
abort) and ``session.lock`` (the lock of the process writing the session). Participant and session labels follow BIDS label rules: letters and digits only.
"""

from __future__ import annotations

import os
import re
from pathlib import Path

JOURNAL_NAME = "journal.jsonl"
FROZEN_PROTOCOL = "protocol.yaml"
FROZEN_TABLE = "trial_table.csv"
TRIALS_NAME = "trials.csv"
# Held (flock) by the one process writing the session; names that process (pid, start time).
LOCK_NAME = "session.lock"
# A torn journal set aside before a resume: journal.jsonl.torn1, .torn2, ...
TORN_SUFFIX = ".torn"
TMP_SUFFIX = ".tmp"
PARTICIPANT_PREFIX = "sub-"
SESSION_PREFIX = "ses-"
LABEL_RE = re.compile(r"^[A-Za-z0-9]+$")


def session_folder(out: Path, study: str, participant: str, session: str) -> Path:
    """**Contract.** ``<out>/<study>/sub-<participant>/ses-<session>/``."""
    return out / study / f"{PARTICIPANT_PREFIX}{participant}" / f"{SESSION_PREFIX}{session}"


def is_label(text: str) -> bool:
    """Whether ``text`` is a BIDS label: letters and digits only, at least one."""
    return bool(LABEL_RE.fullmatch(text))


def display_path(path: Path) -> str:
    """A path as problem lines show it: relative to the working folder when inside it."""
    try:
        rel = os.path.relpath(path)
    except ValueError:
        return str(path)
    return str(path) if rel.startswith("..") else rel
