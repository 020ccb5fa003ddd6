"""User-facing error types.

Library code raises these; only :mod:`runner.cli` turns them into printed lines and exit codes.
Each error knows its exit code (0 success, 1 problems found or run refused, 2 usage error) and
how to show itself as one or more plain lines without a traceback.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

EXIT_OK = 0
EXIT_PROBLEMS = 1
EXIT_USAGE = 2


@dataclass(frozen=True)
class Problem:
    """One finding about an input file, printed as ``FILE:LINE:COL: severity: message``.

    ``line`` and ``column`` are 1-based; 0 means "the file as a whole".
    ``path`` is the dotted field path inside a protocol (``timing.fixation_ms``) or ``""``.
    """

    severity: str  # "error" or "warning"
    file: str
    line: int
    column: int
    message: str
    path: str = ""

    def format(self) -> str:
        return f"{self.file}:{self.line}:{self.column}: {self.severity}: {self.message}"

    def as_dict(self) -> dict[str, object]:
        return asdict(self)


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
