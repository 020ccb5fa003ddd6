"""The LSL marker outlet. This is the only module that imports pylsl.

One outlet per session: type ``Markers``, one ``string`` channel, irregular rate, an explicit
stable ``source_id`` (so a recorder reconnects after a restart), and the protocol's metadata in
``desc()``. Each sample is a JSON object string; its timestamp is passed explicitly (the flip
time), because an unstamped sample would carry the push time instead.
"""

from __future__ import annotations

import os
import re
import socket
import time
from dataclasses import dataclass
from pathlib import Path

import pylsl

from runner import __version__
from runner.errors import RecorderError

MARKER_TYPE = "Markers"
CONSUMER_POLL_S = 0.05
# liblsl logs INFO lines to stderr by default. Its ``[log] level`` follows its logging library's
# verbosity scale (0 info, -1 warning, -2 error, -3 fatal; from liblsl's sample lsl_api.cfg, from
# memory): -2 keeps only liblsl's errors, so trialdeck's own lines are what the experimenter reads.
QUIET_LOG_LEVEL = -2


def lsl_config_file() -> Path | None:
    """The configuration file liblsl would read, in liblsl's own search order, or None.

    liblsl looks at the file named by ``LSLAPICFG``, then ``lsl_api.cfg`` in the working folder,
    then ``~/lsl_api/lsl_api.cfg``, then ``/etc/lsl_api/lsl_api.cfg``.
    """
    named = os.environ.get("LSLAPICFG")
    candidates = [Path(named)] if named else []
    candidates += [
        Path("lsl_api.cfg"),
        Path.home() / "lsl_api" / "lsl_api.cfg",
        Path("/etc/lsl_api/lsl_api.cfg"),
    ]
    for path in candidates:
        if path.is_file():
            return path
    return None


def quiet_config(text: str) -> str:
    """``text`` (a liblsl configuration) with a quiet ``[log] level`` unless it sets one itself."""
    section = ""
    for raw in text.splitlines():
        line = raw.strip()
        if line.startswith("[") and line.endswith("]"):
            section = line[1:-1].strip().lower()
        elif section == "log" and line.split("=", 1)[0].strip().lower() == "level":
            return text
    joiner = "" if not text or text.endswith("\n") else "\n"
    return f"{text}{joiner}[log]\nlevel = {QUIET_LOG_LEVEL}\n"


def _quiet_liblsl() -> None:
    """Keep liblsl's INFO lines off the experimenter's terminal, keeping the lab's own settings.

    liblsl reads its configuration once, at first use: the lab's file (if any) is read here and
    passed on as content with a quiet log level added, so stream discovery settings still apply.
    """
    path = lsl_config_file()
    try:
        text = path.read_text(encoding="utf-8") if path else ""
    except (OSError, UnicodeDecodeError):
        return  # liblsl will read (and report on) the file itself
    pylsl.set_config_content(quiet_config(text))


_quiet_liblsl()


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


def source_id_candidates(
    study: str, station: str, participant: str, session: str, journaled: str | None = None
) -> list[str]:
    """The source_ids a session may send under, in order of preference.

    First the stable ``trialdeck:<study>:<station>``; when another session on this machine is
    sending under it, the same id suffixed with ``:sub-<participant>:ses-<session>``. On resume,
    the one of these two the session already used (``journaled``) comes first, so a recorder
    reconnects.
    """
    base = make_source_id(study, station)
    suffixed = f"{base}:sub-{participant}:ses-{session}"
    return [suffixed, base] if journaled == suffixed else [base, suffixed]


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
        self._outlet = None


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
