"""Audit a finished session from its journal (and, optionally, the lab's XDF recording).

The journal is the single source of truth of a session, so the audit reads only it, the frozen
protocol and trial table next to it, the stimulus files it names, and (when given) the recording.
It answers, for a lab assistant after each participant:

* **Integrity.** Does every journal line chain to the one before it? A truncated, edited,
  removed, added or reordered line is named by its line number. A torn last line (a crash while
  writing) is a warning when the lines before it chain correctly.
* **Completeness.** Was every scheduled trial completed exactly once, or is the rest journaled as
  aborted? Several attempts (resumes) are followed: a trial interrupted in one attempt and
  completed in a later one is fine.
* **Stimuli.** Are the stimulus files, the frozen protocol and the frozen trial table unchanged
  since the session (content hashes)?
* **Timing.** Requested against actual durations, late flips, fixation jitter and the
  response-time distribution.
* **Responses.** Answers and ratings complete and consistent with the journaled key presses.
* **Recording.** With an XDF file, the marker check of :mod:`runner.recording`.

Errors make the audit fail (exit 1); warnings are facts to note in the analysis. Nothing here
imports pygame or pylsl. The parts: the chain walk is :func:`runner.journal.read.verify_chain`,
attempts :mod:`runner.journal.trials`, the checks :mod:`runner.qa.audit_checks` and
:mod:`runner.qa.audit_timing`, the result
:mod:`runner.qa.audit_facts`, the text :mod:`runner.qa.audit_text`.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from runner.contract.events import KNOWN_EVENTS
from runner.contract.hashing import HashCache, file_sha256
from runner.contract.layout import FROZEN_PROTOCOL, FROZEN_TABLE, JOURNAL_NAME, display_path
from runner.errors import InputFileError
from runner.journal.read import ChainCheck, verify_chain
from runner.journal.trials import ATTEMPT_EVENTS, Attempt
from runner.journal.trials import attempts as find_attempts
from runner.qa.audit_checks import (
    check_accepted_stimuli,
    check_against_recording,
    check_completion,
    check_files,
    check_photodiode,
    check_responses,
    check_timeline,
    check_trials_csv,
    check_unrecorded_markers,
    journaled_markers,
)
from runner.qa.audit_facts import AUDIT_FORMAT, EventIndex, Findings, SessionAudit
from runner.qa.audit_text import detail_lines, format_audits
from runner.qa.audit_timing import check_timing
from runner.recording import (
    DEFAULT_MAX_GAP_S,
    DEFAULT_RESIDUAL_LIMIT_MS,
    Recording,
    RecordingReport,
)

__all__ = [
    "AUDIT_FORMAT",
    "FROZEN_PROTOCOL",
    "FROZEN_TABLE",
    "Attempt",
    "ChainCheck",
    "HashCache",
    "SessionAudit",
    "audit_session",
    "audit_sessions",
    "detail_lines",
    "file_sha256",
    "format_audits",
    "journaled_markers",
    "verify_chain",
]


def _journal_path(folder: Path) -> Path:
    folder = Path(folder)
    if folder.is_file() and folder.name == JOURNAL_NAME:
        return folder
    path = folder / JOURNAL_NAME
    if not folder.is_dir():
        raise InputFileError(
            f"{folder} is not a folder; give the session folder (…/sub-<participant>/"
            "ses-<session>/) that holds journal.jsonl."
        )
    if not path.is_file():
        raise InputFileError(
            f"{folder} holds no journal.jsonl, so it is not a session folder; give the folder "
            "…/sub-<participant>/ses-<session>/ that trialdeck wrote."
        )
    return path


def audit_session(
    folder: str | Path,
    *,
    recording: Recording | None = None,
    max_gap_s: float = DEFAULT_MAX_GAP_S,
    residual_limit_ms: float = DEFAULT_RESIDUAL_LIMIT_MS,
    hashes: HashCache | None = None,
    photodiode: str | None = None,
) -> SessionAudit:
    """Audit one session folder (see the module docstring for what is checked).

    Parameters
    ----------
    folder : str or Path
        The session folder ``<out>/<study>/sub-<participant>/ses-<session>/`` (or its
        ``journal.jsonl``).
    recording : Recording, optional
        A recording read with :func:`runner.recording.read_recording`; the session's marker
        stream is chosen in it by the journal header's source_id and stream name.
    max_gap_s, residual_limit_ms : float
        Passed to :func:`runner.recording.check_recording`.
    hashes : HashCache, optional
        Shared between sessions so each stimulus file is hashed once.
    photodiode : str, optional
        ``STREAM[:CHANNEL]``: a recorded analog stream (name, source_id or type) whose channel
        (1-based, default 1) carries a light sensor on the photodiode patch; the display latency
        per onset is measured (:mod:`runner.recording.photodiode`).

    Returns
    -------
    SessionAudit

    Raises
    ------
    InputFileError
        ``folder`` is not a session folder.
    JournalError
        The journal cannot be read at all.
    """
    path = _journal_path(Path(folder))
    folder = path.parent
    chain = verify_chain(path)
    out = Findings(display_path(path))
    out.items.extend(chain.problems)
    records = chain.records
    header = chain.header
    facts: dict[str, Any] = {
        "journal": {
            "lines": chain.line_count,
            "intact_lines": chain.intact_lines,
            "chain_ok": not chain.broken,
            "torn_line": chain.torn_line,
        }
    }
    if chain.broken:
        facts["journal"]["note"] = (
            "the checks below also read the lines after the break, which cannot be trusted"
        )
    events = [(n, r) for n, r in records if r is not header]
    ix = EventIndex(events)
    unknown = Counter({k: len(v) for k, v in ix.by.items() if k not in KNOWN_EVENTS})
    if unknown:
        facts["journal"]["unknown_events"] = dict(sorted(unknown.items()))

    attempts = find_attempts(ix.of(*ATTEMPT_EVENTS))
    facts["attempts"] = [a.as_dict() for a in attempts]
    completed = check_completion(header, ix, attempts, out, facts)
    check_timeline(records, out, facts)
    check_files(header, folder, out, facts, hashes or HashCache(), ix)
    check_accepted_stimuli(ix, out, facts)
    check_timing(header, ix, out, facts)
    check_responses(header, ix, completed, out, facts)
    check_trials_csv(folder, completed, out, facts)

    report: RecordingReport | None = None
    if recording is None:
        check_unrecorded_markers(events, out, facts)
    else:
        report = check_against_recording(
            header, events, recording, out, facts, max_gap_s, residual_limit_ms
        )
        if report is not None and photodiode:
            check_photodiode(events, recording, report, photodiode, out, facts)
    order = {"error": 0, "warning": 1}
    problems = sorted(
        out.items, key=lambda p: (order.get(p.severity, 2), p.file != out.file, p.line)
    )
    return SessionAudit(
        folder=folder,
        journal=path,
        study=str(header.get("study", "?")),
        participant=str(header.get("participant", "?")),
        session=str(header.get("session", "?")),
        mode=str(header.get("mode", "?")),
        problems=problems,
        facts=facts,
        recording=report,
    )


def audit_sessions(
    folders: Sequence[str | Path],
    *,
    recording: Recording | None = None,
    max_gap_s: float = DEFAULT_MAX_GAP_S,
    residual_limit_ms: float = DEFAULT_RESIDUAL_LIMIT_MS,
    photodiode: str | None = None,
) -> list[SessionAudit]:
    """Audit several session folders, hashing shared stimulus files once.

    Parameters
    ----------
    folders : sequence of str or Path
    recording : Recording, optional
        One recording checked against every session (each finds its own marker stream).
    max_gap_s, residual_limit_ms : float
        See :func:`audit_session`.

    Returns
    -------
    list of SessionAudit
        In the order of ``folders``.
    """
    cache = HashCache()
    return [
        audit_session(
            f,
            recording=recording,
            photodiode=photodiode,
            max_gap_s=max_gap_s,
            residual_limit_ms=residual_limit_ms,
            hashes=cache,
        )
        for f in folders
    ]
