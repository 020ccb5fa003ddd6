"""User-facing error types.

Library code raises these; only :mod:`runner.cli` turns them into printed lines and exit codes.
Each error knows its exit code (0 success, 1 problems found or run refused, 2 usage error) and
how to show itself as one or more plain lines without a traceback.

Every :class:`Problem` carries a stable ``code`` from :data:`PROBLEM_CODES` (documented in
docs/problem-codes.md): scripts and tests match on the code, never on the English message.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

EXIT_OK = 0
EXIT_PROBLEMS = 1
EXIT_USAGE = 2

#: **contract**: every problem code and what it means (docs/problem-codes.md lists the same).
#: Codes are lower-case words joined by hyphens; a code is never reused for another meaning.
PROBLEM_CODES: dict[str, str] = {
    # The file itself and its YAML.
    "missing-file": "a file named by the protocol (or on the command line) does not exist",
    "unreadable-file": "a file exists but cannot be read, or is not text of the expected kind",
    "file-too-large": "a file is larger than trialdeck reads",
    "empty-file": "a file holds nothing to read",
    "not-a-file": "a path names a folder, FIFO, device or socket where a file is needed",
    "not-utf8": "a file is not UTF-8 text",
    "bad-character": "a file contains a character that YAML does not allow",
    "yaml-syntax": "the text is not valid YAML",
    "yaml-tab": "a tab is used where YAML allows only spaces",
    "yaml-alias": "a YAML alias (*name) is used; values must be written out",
    "yaml-anchor": "a YAML anchor (&name) is used; values must be written out",
    "yaml-merge-key": "a YAML merge key (<<) is used; settings must be written out",
    "yaml-tag": "a YAML tag (!!type) is used, or a tagged value does not fit its tag",
    "too-deep": "settings are nested deeper than any protocol needs",
    "not-a-mapping": "a place that needs 'key: value' settings holds something else",
    "bad-key": "a key is not a plain, non-empty name",
    "duplicate-key": "the same key appears twice in one mapping",
    # Settings against the schema.
    "unknown-field": "a setting that does not exist here (often a typo; a suggestion follows)",
    "missing-field": "a required setting is absent",
    "bad-type": "a value has the wrong type (text where a number is needed, ...)",
    "bad-choice": "a value is not one of the allowed words",
    "out-of-range": "a number lies outside its allowed range",
    "bad-length": "a list or text is too short or too long",
    "bad-pattern": "a text does not have the required form",
    "unknown-kind": "a list item names a kind of step or item that does not exist",
    "bad-value": "a value breaks a rule of its setting or contradicts another setting",
    "unknown-key": "a key name that no key on a keyboard has, or one kept for trialdeck (Escape)",
    "key-clash": "a key already used on the same screen for something else",
    # Settings against the trial table and the files they name.
    "outside-folder": "a file named by the protocol lies outside the protocol's folder",
    "unknown-column": "a setting names a column the trial table does not have",
    "no-matching-rows": "a 'where' selection matches no row of the trial table",
    "bad-levels": "block levels are missing or do not list each level of the factor once",
    "answer-above-max": "a row's expected count is above answer.max",
    "control-character": "a file or stimulus path contains a control character",
    "impossible-order": "no trial order meets the ordering constraints",
    "unknown-event": "a trigger code is given for a name that is not a marker event",
    "unsupported-image": "a stimulus is not a PNG, JPEG, BMP or GIF image (SVG, text, ...)",
    "image-too-large": "a stimulus has more pixels than trialdeck shows (50 megapixels)",
    "empty-factor-cell": "a row used by blocks has no value in the blocking factor (blocks.by)",
    "answer-covers-stimulus": "the answer box shown over the stimulus has no room beside it",
    "non-numeric-column": "a setting weighs a trial-table column that holds text, not numbers",
    # The trial table.
    "bad-csv": "the trial table is not valid CSV",
    "stray-quote": "a quoted field runs over several lines (a stray quote swallows rows)",
    "wrong-delimiter": "the trial table separates its fields with semicolons or tabs, not commas",
    "unnamed-column": "a header column has no name",
    "duplicate-column": "a header names a column twice",
    "reserved-column": "a header uses a column name that trialdeck writes itself",
    "missing-column": "the header lacks a required column (stimulus, expected)",
    "row-length": "a row has a different number of fields than the header",
    "empty-stimulus": "a row's stimulus field is empty",
    "bad-expected": "a row's expected count is not a whole number of 0 or more",
    "too-many-rows": "the trial table has more rows than trialdeck reads",
    "no-rows": "the trial table has a header but no rows",
    # What `trialdeck check` finds beyond loading.
    "no-expected": "a row used by the session has no expected count, so it goes unscored",
    "screen-too-small": "the requested stimulus size does not fit on the screen",
    "undecodable-stimulus": "a stimulus file cannot be decoded as an image",
    "upscaled-stimulus": "a stimulus is enlarged beyond checks.max_upscale",
    "shrunk-stimulus": "a stimulus is shown below the requested size",
    "long-stretch": "trials run longer without a break than checks.max_minutes_without_break",
    "luminance-spread": "stimulus luminance spreads more than checks.luminance_tolerance",
    "flashing": "the screen sequence can break the WCAG 2.3.1 three-flash rule",
    "unbalanced-orders": "the participants do not use each block order equally often",
    "unusable-font": "the font file named by screen.font is missing or is not a font",
    "missing-glyph": "a text the participant sees has characters the font cannot draw",
    "unshowable-text": "a text holds control characters or nothing visible, so it cannot be shown",
    "low-contrast": "a text colour has less than 4.5:1 contrast with its background (WCAG 2.2)",
    # The stimulus kit.
    "no-target-pair": "no target pair of a stimulus meets its set's pairs rule",
    "unreadable-drawing": "no drawing of a stimulus meets the readability limits",
    # Sessions and recordings (`trialdeck audit` and the journal reader).
    # The session journal.
    "journal-empty": "the journal is empty; the session never started writing it",
    "journal-torn-line": (
        "the journal's last line is incomplete (the program stopped while writing it)"
    ),
    "journal-format": "the journal header names a format this trialdeck cannot read",
    "journal-no-header": "line 1 of the journal is not a journal header",
    "journal-bad-line": "a journal line is not a complete JSON line",
    "journal-no-integrity": "a journal line lacks its integrity fields (seq, prev, h)",
    "journal-line-changed": (
        "a journal line was changed after it was written (its hash does not match)"
    ),
    "journal-lines-swapped": "two neighbouring journal lines are in the wrong order",
    "journal-lines-missing": "journal lines were removed before this line",
    "journal-line-repeated": "a journal line repeats or moves an earlier entry",
    "journal-line-foreign": (
        "a journal line does not link to the line before it (put there from elsewhere)"
    ),
    # Completeness of a session.
    "no-schedule": "the journal header holds no trial schedule, so completeness cannot be checked",
    "trial-without-record": "a trial_end line holds no trial record",
    "unscheduled-trial": "a completed trial is not in the session's schedule",
    "trial-repeated": "a trial was completed more than once",
    "wrong-stimulus": "a trial showed another stimulus than the schedule planned",
    "session-not-started": "the session never started: no scheduled trial was run",
    "session-interrupted": (
        "the session stopped without its closing line (crash, power loss, killed program)"
    ),
    "session-aborted": "the experimenter aborted the session before every trial was run",
    "trials-missing": "the session says it completed, but scheduled trials have no result",
    "session-incomplete": (
        "the session ended with another status and scheduled trials were not completed"
    ),
    "no-session-end": "every trial was completed, but the closing session_end line is missing",
    "attempt-after-end": "an attempt completed, yet the journal continues with another attempt",
    "restart-without-resume": "the session starts again without a resume line",
    "trial-rerun": "an attempt ran trials that were already completed before it",
    # Files of a session.
    "frozen-copy-missing": (
        "a frozen copy (protocol or trial table) is missing from the session folder"
    ),
    "frozen-copy-changed": "a frozen copy was edited after the session",
    "stimulus-changed": "a stimulus file changed since the session",
    "stimulus-not-found": "a stimulus file cannot be found to check its hash",
    "trials-csv-missing": "trials.csv is missing from the session folder (it can be written again)",
    "trials-csv-stale": "trials.csv disagrees with the journal's completed trials",
    # Responses.
    "answer-missing": "a completed trial has no answer and is neither unsure nor timed out",
    "trial-timed-out": "trials timed out without an answer",
    "rating-missing": "trials have no difficulty rating (the rating screen timed out)",
    "record-mismatch": (
        "a trial record's answer, rating or score disagrees with the journal's key presses"
    ),
    "fast-response": "responses came faster than the anticipation floor after stimulus onset",
    # Timing.
    "no-refresh-interval": (
        "the journal header gives no refresh interval, so flip timing cannot be checked"
    ),
    "late-flips": "flips missed their frame",
    "fixation-off": "fixations lasted a frame or more longer or shorter than requested",
    "short-break": "a break lasted less than its minimum",
    "rest-off": "a rest lasted longer or shorter than its whole-frame request",
    # Against the recording.
    "unreadable-recording": "the XDF recording cannot be read or holds no usable marker stream",
    "recording-mismatch": (
        "the recording disagrees with the journal's markers (lost, repeated, extra or garbled markers, late start)"
    ),
    "recording-identity": (
        "the recording's marker stream names another session (participant, session, study or protocol)"
    ),
    "recording-sequence": (
        "the recorded markers do not line up with the journal's in time, even after offset and drift"
    ),
    "ambiguous-marker-stream": "several marker streams in the recording could be this session's",
    "anticipations": "key presses came before stimulus onset and were journaled as anticipations",
    "photodiode-missing": "the photodiode stream or channel named with --photodiode is not in the recording",
    "photodiode-edges": "the photodiode patch did not light for every onset, or lit without one",
    # The session audit (runner/qa/audit_checks.py).
    "markers-unrecorded": "markers were sent while no recorder was connected to the stream",
    "changed-stimuli-accepted": "a resume went on with changed stimuli (--accept-changed-stimuli)",
    "clock-restarted": "an attempt ran on a restarted clock; the wall clock placed its times",
    # Pooling sessions (`trialdeck export` and `summary`).
    "unlike-sessions": (
        "the sessions differ in speed, mode or protocol and are not pooled without --pool-unlike"
    ),
    # What the protocol's physio section asks for (check; docs/physio.md).
    "physio-baseline-too-long": "the pupil baseline window is longer than the shortest fixation",
    "physio-period-too-short": "a rest or break is shorter than an HRV measure's minimum window",
    "physio-few-epochs": "a condition has fewer trials than the EEG measures are configured to need",
}


@dataclass(frozen=True)
class Problem:
    """One finding about an input file, printed as ``FILE:LINE:COL: severity: message``.

    ``line`` and ``column`` are 1-based; 0 means "the file as a whole".
    ``path`` is the dotted field path inside a protocol (``timing.fixation_ms``) or ``""``.
    ``code`` is a stable identifier from :data:`PROBLEM_CODES` (``unknown-field``); the
    printed line does not show it, ``check --json`` does.
    """

    severity: str  # "error" or "warning"
    file: str
    line: int
    column: int
    message: str
    path: str = ""
    code: str = field(default="", kw_only=True)

    def __post_init__(self) -> None:
        if self.code and self.code not in PROBLEM_CODES:
            raise ValueError(f"unknown problem code {self.code!r}; add it to PROBLEM_CODES")

    def format(self) -> str:
        return f"{self.file}:{self.line}:{self.column}: {self.severity}: {self.message}"

    def as_dict(self) -> dict[str, object]:
        d = asdict(self)
        if not self.code:
            del d["code"]
        return d


class TrialdeckError(Exception):
    """Base of every error a user can act on. ``exit_code`` is what the CLI exits with."""

    exit_code: int = EXIT_PROBLEMS

    def lines(self) -> list[str]:
        return [f"error: {self}"]


class UsageError(TrialdeckError):
    """The command line itself is wrong (bad option value, bad label)."""

    exit_code = EXIT_USAGE


class ProtocolError(TrialdeckError):
    """A protocol or trial table has one or more problems; each is a :class:`Problem`."""

    def __init__(self, problems: list[Problem]):
        self.problems = [p for p in problems]
        first = self.problems[0].format() if self.problems else "invalid protocol"
        super().__init__(first)

    def lines(self) -> list[str]:
        return [p.format() for p in self.problems]


class SessionExistsError(TrialdeckError, FileExistsError):
    """The session folder already holds a journal; trialdeck never overwrites a session."""


class SessionBusyError(TrialdeckError):
    """Another process holds the session (or its marker source_id); only one may write it."""


class InputFileError(TrialdeckError):
    """A file named on the command line is missing, unreadable or not what was expected."""


class JournalError(TrialdeckError):
    """A journal cannot be read or written as required."""


class StorageError(TrialdeckError):
    """The output folder cannot be written (permissions, disk full, folder removed)."""


class RecorderError(TrialdeckError):
    """No recorder connected to the marker stream in time, or the stream cannot be opened."""


class DisplayError(TrialdeckError):
    """The display cannot be opened or does not behave as the protocol requires."""


class RecordingError(TrialdeckError):
    """An XDF recording cannot be read or does not hold the expected streams."""
