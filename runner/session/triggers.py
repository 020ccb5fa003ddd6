"""Optional hardware trigger codes: one byte per marked event, written to a serial port.

Some recorders take event codes on a parallel or TTL input rather than (or as well as) LSL
markers. A USB serial trigger interface turns each byte written to it into such a code. The
protocol's ``triggers.codes`` maps marker event names to codes 1-255; the engine writes the code
right after the event's LSL marker and journals it (field ``trigger``).

How long the code stays on the output lines, and whether the interface resets them to 0 by
itself, depends on the interface: follow its manual (docs/lab-setup.md). pyserial is imported
only when a port is opened, so sessions without triggers do not need it.
"""

from __future__ import annotations

from typing import Any

from runner.errors import ProtocolError, RecorderError
from runner.protocol.load import LoadedProtocol
from runner.protocol.report import problem_at
from runner.session.events import MARKED_EVENTS

WRITE_TIMEOUT_S = 0.05  # a stuck port must not stall the session for long


def trigger_map(loaded: LoadedProtocol) -> dict[str, int]:
    """The protocol's event-to-code map, checked against the marker event names.

    Raises
    ------
    ProtocolError
        A code is given for a name that is not a marker event (pointing at the setting).
    """
    section = loaded.model.triggers
    if section is None:
        return {}
    problems = []
    for name in section.codes:
        if name not in MARKED_EVENTS:
            problems.append(
                problem_at(
                    loaded.doc,
                    str(loaded.path),
                    ("triggers", "codes", name),
                    f"{name!r} is not a marker event; use one of {', '.join(sorted(MARKED_EVENTS))}",
                    code="unknown-event",
                )
            )
    if problems:
        raise ProtocolError(problems)
    return dict(section.codes)


class SerialTriggers:
    """Writes one byte per coded event to an open serial port."""

    def __init__(self, port: Any, codes: dict[str, int]):
        self._port = port
        self.codes = dict(codes)
        self.sent: list[tuple[str, int]] = []

    @classmethod
    def open(cls, port: str, codes: dict[str, int], *, baud: int = 115200) -> SerialTriggers:
        """Open ``port`` (a device path, COM name or pyserial URL) for writing codes."""
        try:
            import serial
        except ImportError:
            raise RecorderError(
                "trigger codes need the pyserial package; install it with `pip install pyserial`."
            ) from None
        try:
            handle = serial.serial_for_url(port, baudrate=baud, write_timeout=WRITE_TIMEOUT_S)
        except (serial.SerialException, OSError, ValueError) as exc:
            raise RecorderError(
                f"the trigger port {port} cannot be opened ({exc}); check the cable and the port"
                " name, or remove the triggers section to run without codes."
            ) from None
        return cls(handle, codes)

    def send(self, event: str) -> int | None:
        """Write the event's code, if it has one. Returns the code written, or None."""
        code = self.codes.get(event)
        if code is None:
            return None
        try:
            self._port.write(bytes((code,)))
        except OSError as exc:  # pyserial's SerialException (and its timeout) are OSErrors
            raise RecorderError(f"writing trigger code {code} failed ({exc}).") from exc
        self.sent.append((event, code))
        return code

    def close(self) -> None:
        try:
            self._port.flush()
        finally:
            self._port.close()
