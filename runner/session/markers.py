"""The LSL marker outlet. This is the only module that imports pylsl.

One outlet per session: type ``Markers``, one ``string`` channel, irregular rate, an explicit
stable ``source_id`` (so a recorder reconnects after a restart), and the protocol's metadata in
``desc()``. Each sample is a JSON object string; its timestamp is passed explicitly (the flip
time), because an unstamped sample would carry the push time instead.
"""

from __future__ import annotations

import re
import socket
import time
from dataclasses import dataclass

import pylsl

from runner import __version__
from runner.errors import RecorderError

MARKER_TYPE = "Markers"
CONSUMER_POLL_S = 0.05


def local_clock() -> float:
    """The one clock of trialdeck: LSL's monotonic steady clock, in seconds."""
    return pylsl.local_clock()


def station_name(explicit: str | None = None) -> str:
    """A stable name for this presenter machine (letters, digits, dot, dash, underscore)."""
    name = explicit or socket.gethostname() or "station"
    return re.sub(r"[^A-Za-z0-9._-]", "-", name)[:64]


def make_source_id(study: str, station: str) -> str:
    """The stable source_id: the same study on the same station always gets the same id."""
    return f"trialdeck:{study}:{station}"


@dataclass(frozen=True)
class StreamDetails:
    name: str
    type: str
    source_id: str
    channel_format: str
    uid: str
    hostname: str

    def as_dict(self) -> dict[str, str]:
        return dict(self.__dict__)


class MarkerOutlet:
    """An LSL outlet that sends trialdeck's event markers."""

    def __init__(self, stream: str, source_id: str, *, metadata: dict[str, str]):
        info = pylsl.StreamInfo(
            stream, MARKER_TYPE, 1, pylsl.IRREGULAR_RATE, pylsl.cf_string, source_id
        )
        desc = info.desc()
        desc.append_child_value("software", "trialdeck")
        desc.append_child_value("software_version", __version__)
        meta = desc.append_child("session")
        for key, value in metadata.items():
            meta.append_child_value(key, str(value))
        try:
            self._outlet = pylsl.StreamOutlet(info, chunk_size=1, max_buffered=360)
        except Exception as exc:  # liblsl raises plain RuntimeError-like errors
            raise RecorderError(f"the LSL marker stream could not be opened: {exc}.") from exc
        self.info = self._outlet.get_info()
        self.details = StreamDetails(
            name=stream,
            type=MARKER_TYPE,
            source_id=source_id,
            channel_format="string",
            uid=self.info.uid(),
            hostname=self.info.hostname(),
        )

    def push(self, payload: str, timestamp: float) -> float:
        """Send one marker stamped ``timestamp``; returns local_clock() right after the push."""
        self._outlet.push_sample([payload], timestamp)
        return pylsl.local_clock()

    def have_consumers(self) -> bool:
        return bool(self._outlet.have_consumers())

    def wait_for_consumers(self, timeout: float) -> bool:
        """Wait up to ``timeout`` seconds for a recorder to connect. True when one did."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if self._outlet.have_consumers():
                return True
            time.sleep(CONSUMER_POLL_S)
        return bool(self._outlet.have_consumers())

    def close(self) -> None:
        # Dropping the outlet closes the stream; keep the object alive until the journal is done.
        self._outlet = None  # type: ignore[assignment]


def loopback_latency(outlet: MarkerOutlet, samples: int, *, timeout: float = 5.0) -> list[float]:
    """Delivery latency of markers to an inlet on this machine, in seconds, one per sample.

    Opens an inlet on ``outlet``'s own stream (resolved by its source_id), corrects its clock
    first (a correction during delivery would delay the pulls), then pushes ``samples`` markers
    stamped at the push and times each until it is pulled.
    """
    found = pylsl.resolve_byprop("source_id", outlet.details.source_id, timeout=timeout)
    if not found:
        raise RecorderError("the self-test could not see its own marker stream on this machine.")
    inlet = pylsl.StreamInlet(found[0], max_buflen=10)
    try:
        inlet.open_stream(timeout=timeout)
        inlet.time_correction(timeout=timeout)
        deadline = time.monotonic() + timeout
        while not outlet.have_consumers() and time.monotonic() < deadline:
            time.sleep(CONSUMER_POLL_S)
        out = []
        for i in range(samples):
            sent = pylsl.local_clock()
            outlet.push(f'{{"event":"selftest","n":{i}}}', sent)
            sample, _ = inlet.pull_sample(timeout=timeout)
            if sample is None:
                raise RecorderError("a self-test marker did not arrive within the time limit.")
            out.append(pylsl.local_clock() - sent)
        return out
    finally:
        inlet.close_stream()
