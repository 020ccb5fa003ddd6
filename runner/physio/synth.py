"""A simulated XDF recording around a finished pilot session, for the demo and for tests.

**Invented data, demo only.** Every effect below is made up to show the path from a protocol to
per-trial physiology; none of it is a claim about real participants. The recording holds:

* trialdeck's marker stream with the journaled markers (the exact payloads and times the session
  sent, on the presenter's clock, with ClockOffset chunks that carry a constant offset plus a
  small drift, as a recorder on another computer would write them);
* EEG (10-20 channel names, microvolts): a coloured-noise background with parietal alpha; while a
  stimulus is up, frontal theta grows and parietal alpha shrinks with the trial's difficulty;
* pupil size (mm) with blinks (samples at 0): during a trial the pupil dilates by an amount that
  grows with difficulty;
* ECG (millivolts) from a simple sum-of-waves beat model: the heart rate rises with difficulty
  while a stimulus is up, with a breathing rhythm on top;
* a photodiode channel: 1 while a stimulus is on screen (8 ms after its marker), else 0.

A trial's difficulty is its rank on the protocol's first numeric factor (else its ``expected``
answer), scaled to 0..1 over the session. A pilot run faster than real time has its slow
physiology (pupil time constant, blinks, EEG effect length) shortened by the same speed; the heart
keeps beating in real time. The XDF writer follows the XDF 1.0 specification (chunks: FileHeader,
StreamHeader, Samples, ClockOffset, StreamFooter).
"""

from __future__ import annotations

import struct
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Any
from xml.sax.saxutils import escape

import numpy as np

from runner.contract.layout import JOURNAL_NAME
from runner.data.sessions import ExportSession, load_session
from runner.errors import StorageError
from runner.physio.windows import time_scale

__all__ = [
    "DEMO_EEG_CHANNELS",
    "SynthSettings",
    "SynthTruth",
    "XdfWriter",
    "eeg_channel_names",
    "simulate_recording",
]

#: Standard 10-20 names of the demo's EEG channels (frontal, central, parietal, occipital).
DEMO_EEG_CHANNELS = ("Fz", "F3", "F4", "FCz", "Cz", "C3", "C4", "Pz", "P3", "P4", "POz", "Oz")
#: Further 10-20 / 10-10 names used when more channels are asked for (the benchmark's 64).
MORE_CHANNELS = (
    "Fp1", "Fp2", "AF3", "AF4", "F7", "F8", "F1", "F2", "F5", "F6", "FC1", "FC2", "FC3", "FC4",
    "FC5", "FC6", "FT7", "FT8", "T7", "T8", "C1", "C2", "C5", "C6", "CP1", "CP2", "CP3", "CP4",
    "CP5", "CP6", "CPz", "TP7", "TP8", "P1", "P2", "P5", "P6", "P7", "P8", "PO3", "PO4", "PO7",
    "PO8", "O1", "O2", "AFz", "Iz", "FT9", "FT10", "TP9", "TP10", "Fpz",
)  # fmt: skip
FRONTAL = frozenset({"Fz", "F3", "F4", "FCz", "F1", "F2", "AFz"})
PARIETAL = frozenset({"Pz", "P3", "P4", "POz", "P1", "P2", "Oz", "O1", "O2", "PO3", "PO4"})

MAGIC = b"XDF:"
TAG_FILE_HEADER, TAG_STREAM_HEADER, TAG_SAMPLES, TAG_CLOCK_OFFSET, TAG_FOOTER = 1, 2, 3, 4, 6
TIMESTAMP_PRESENT = 8  # a sample's timestamp byte: 8 bytes of timestamp follow
CHUNK_SECONDS = 1.0  # samples per Samples chunk: one second's worth
BLOCK_SECONDS = 20.0  # signals are made and written this many seconds at a time
OFFSET_EVERY_S = 5.0  # a recorder measures clock offsets every few seconds


def eeg_channel_names(n: int) -> list[str]:
    """``n`` distinct 10-20 / 10-10 channel names, the demo's first."""
    names = list(DEMO_EEG_CHANNELS) + [c for c in MORE_CHANNELS if c not in DEMO_EEG_CHANNELS]
    if n > len(names):
        names += [f"E{i}" for i in range(len(names) + 1, n + 1)]
    return names[:n]


# The XDF writer


def _varlen(n: int) -> bytes:
    if n <= 0xFF:
        return b"\x01" + struct.pack("<B", n)
    if n <= 0xFFFFFFFF:
        return b"\x04" + struct.pack("<I", n)
    return b"\x08" + struct.pack("<Q", n)


def _chunk_head(tag: int, content_len: int) -> bytes:
    return _varlen(content_len + 2) + struct.pack("<H", tag)


class XdfWriter:
    """Write an XDF 1.0 file stream by stream (numbers as float32, markers as strings)."""

    def __init__(self, path: Path):
        self.path = path
        try:
            self._f: IO[bytes] = path.open("wb")
        except OSError as exc:
            raise StorageError(f"cannot write the recording {path}: {exc.strerror}.") from None
        self._f.write(MAGIC)
        self._chunk(TAG_FILE_HEADER, b'<?xml version="1.0"?><info><version>1.0</version></info>')
        self._formats: dict[int, tuple[str, int]] = {}
        self._counts: dict[int, list[float]] = {}

    def _chunk(self, tag: int, content: bytes) -> None:
        self._f.write(_chunk_head(tag, len(content)) + content)

    def header(
        self,
        sid: int,
        *,
        name: str,
        type: str,
        channel_format: str,
        srate: float,
        labels: Sequence[str],
        units: Sequence[str] = (),
        source_id: str = "",
        created_at: float = 0.0,
        desc_xml: str = "",
    ) -> None:
        """A StreamHeader chunk; channel labels and units go into ``desc/channels``."""
        chans = "".join(
            f"<channel><label>{escape(lab)}</label><unit>{escape(units[i] if i < len(units) else '')}"
            "</unit></channel>"
            for i, lab in enumerate(labels)
        )
        fields = [
            ("name", name),
            ("type", type),
            ("channel_count", str(len(labels))),
            ("nominal_srate", repr(float(srate))),
            ("channel_format", channel_format),
            ("source_id", source_id),
            ("created_at", repr(float(created_at))),
        ]
        body = "".join(f"<{k}>{escape(v)}</{k}>" for k, v in fields)
        xml = (
            f'<?xml version="1.0"?><info>{body}<desc><channels>{chans}</channels>{desc_xml}'
            "</desc></info>"
        )
        self._chunk(TAG_STREAM_HEADER, struct.pack("<I", sid) + xml.encode("utf-8"))
        self._formats[sid] = (channel_format, len(labels))
        self._counts[sid] = [0, float("nan"), float("nan")]

    def _seen(self, sid: int, ts: np.ndarray) -> None:
        c = self._counts[sid]
        if len(ts):
            if c[0] == 0:
                c[1] = float(ts[0])
            c[2] = float(ts[-1])
            c[0] += len(ts)

    def samples(self, sid: int, timestamps: np.ndarray, values: np.ndarray, chunk: int) -> None:
        """Samples chunks of a float32 stream, ``chunk`` samples each, every timestamp written."""
        fmt, nch = self._formats[sid]
        if fmt != "float32":
            raise ValueError("numeric samples need a float32 stream")
        rec = np.dtype([("flag", "u1"), ("t", "<f8"), ("v", "<f4", (nch,))])
        ts = np.asarray(timestamps, dtype=np.float64)
        vals = np.asarray(values, dtype=np.float32).reshape(len(ts), nch)
        for start in range(0, len(ts), chunk):
            stop = min(start + chunk, len(ts))
            arr = np.empty(stop - start, dtype=rec)
            arr["flag"] = TIMESTAMP_PRESENT
            arr["t"] = ts[start:stop]
            arr["v"] = vals[start:stop]
            head = struct.pack("<I", sid) + _varlen(stop - start)
            body = arr.tobytes()
            self._f.write(_chunk_head(TAG_SAMPLES, len(head) + len(body)) + head)
            self._f.write(body)
        self._seen(sid, ts)

    def strings(self, sid: int, timestamps: Sequence[float], payloads: Sequence[str]) -> None:
        """One Samples chunk per marker (as a recorder writes an irregular stream)."""
        for t, text in zip(timestamps, payloads, strict=True):
            raw = text.encode("utf-8")
            content = (
                struct.pack("<I", sid)
                + _varlen(1)
                + bytes([TIMESTAMP_PRESENT])
                + struct.pack("<d", float(t))
                + _varlen(len(raw))
                + raw
            )
            self._chunk(TAG_SAMPLES, content)
        self._seen(sid, np.asarray(timestamps, dtype=np.float64))

    def clock_offsets(self, sid: int, pairs: Sequence[tuple[float, float]]) -> None:
        """ClockOffset chunks: (collection time on the recorder, offset = recorder - source)."""
        for when, offset in pairs:
            self._chunk(TAG_CLOCK_OFFSET, struct.pack("<Idd", sid, when, offset))

    def close(self) -> None:
        """Write each stream's footer and close the file."""
        for sid, (count, first, last) in self._counts.items():
            xml = (
                '<?xml version="1.0"?><info>'
                f"<first_timestamp>{first!r}</first_timestamp>"
                f"<last_timestamp>{last!r}</last_timestamp>"
                f"<sample_count>{int(count)}</sample_count></info>"
            )
            self._chunk(TAG_FOOTER, struct.pack("<I", sid) + xml.encode("utf-8"))
        self._f.close()


# The simulated session


@dataclass(frozen=True)
class SynthSettings:
    """What to simulate (all numbers invented for the demo)."""

    eeg_channels: int = len(DEMO_EEG_CHANNELS)
    eeg_srate: float = 500.0
    pupil_srate: float = 250.0
    ecg_srate: float = 500.0
    photodiode_srate: float = 500.0
    clock_offset_s: float = 3.25  # recorder clock minus presenter clock
    drift_ppm: float = 15.0  # the presenter clock runs this much slower than the recorder's
    pad_s: float = 5.0  # recording before the session start and after its end
    min_duration_s: float = 0.0  # make the recording at least this long (the benchmark)
    seed: int = 12
    # Effects per unit of difficulty (0 = easiest trial of the session, 1 = hardest).
    pupil_base_mm: float = 4.0
    pupil_dilation_mm: tuple[float, float] = (0.1, 0.5)  # at difficulty 0 and 1
    pupil_tau_s: float = 0.15  # rise and fall time constant, real time
    blink_every_s: float = 4.0
    blink_s: float = 0.12
    hr_bpm: tuple[float, float] = (64.0, 80.0)  # while a stimulus is up, difficulty 0 and 1
    rest_hr_bpm: float = 62.0
    theta_uv: tuple[float, float] = (1.0, 6.0)  # frontal 6 Hz amplitude, difficulty 0 and 1
    alpha_uv: tuple[float, float] = (8.0, 3.0)  # parietal 10 Hz amplitude during a stimulus
    rest_alpha_uv: float = 8.0
    eeg_effect_s: float = 2.0  # how long after onset the EEG effect lasts (real time)
    eeg_noise_uv: float = 4.0  # standard deviation of the white noise behind the coloured noise
    photodiode_lag_s: float = 0.008


@dataclass
class SynthTruth:
    """What was put into the recording: per-trial difficulty and effects, and the beat times."""

    path: Path
    trials: list[int]
    difficulty: np.ndarray
    pupil_dilation_mm: np.ndarray
    hr_bpm: np.ndarray
    theta_uv: np.ndarray
    alpha_uv: np.ndarray
    beat_times: np.ndarray  # recorder clock, s
    to_recorder: tuple[float, float, float] = (0.0, 0.0, 0.0)  # offset, drift, reference time
    streams: dict[str, str] = field(default_factory=dict)  # kind -> stream name
    eeg_first_time: float = 0.0  # recorder time of the first EEG sample (the tables' time zero)

    def recorder_time(self, t: float | np.ndarray) -> Any:
        """The recorder time of presenter time ``t``."""
        offset, drift, ref = self.to_recorder
        return t + offset + drift * (np.asarray(t) - ref)


def _difficulty(session: ExportSession) -> tuple[list[int], np.ndarray]:
    trials = [int(r["trial"]) for r in session.trials]
    raw: list[float] = []
    for factor in session.factors:
        try:
            raw = [float(r.get("values", {}).get(factor)) for r in session.trials]
            break
        except (TypeError, ValueError):
            raw = []
    if not raw:
        raw = [float(r.get("expected") or 0) for r in session.trials]
    x = np.asarray(raw, dtype=float)
    if len(x) == 0:
        return trials, x
    ranks = np.argsort(np.argsort(x, kind="stable"), kind="stable").astype(float)
    # ties share their mean rank, so equal levels get equal difficulty
    for value in np.unique(x):
        same = x == value
        ranks[same] = ranks[same].mean()
    span = ranks.max() - ranks.min()
    return trials, (ranks - ranks.min()) / span if span > 0 else np.zeros_like(x)


def _lerp(pair: tuple[float, float], d: np.ndarray) -> np.ndarray:
    return pair[0] + (pair[1] - pair[0]) * d


def _trial_events(session: ExportSession) -> dict[int, dict[str, float]]:
    out: dict[int, dict[str, float]] = {}
    for r in session.read.records:
        if "trial" in r and "t" in r and isinstance(r.get("event"), str):
            if r["event"] == "trial_start":
                out[int(r["trial"])] = {}
            else:
                out.setdefault(int(r["trial"]), {}).setdefault(r["event"], float(r["t"]))
    return out


def simulate_recording(
    session_folder: str | Path, out: str | Path, settings: SynthSettings = SynthSettings()
) -> SynthTruth:
    """Write a simulated XDF recording of the pilot session in ``session_folder`` to ``out``.

    Returns
    -------
    SynthTruth
        The invented per-trial effects and beat times, for checks.

    Raises
    ------
    JournalError
        The session cannot be read.
    StorageError
        The file cannot be written.
    """
    session = load_session(session_folder)
    out = Path(out)
    if (out.parent / JOURNAL_NAME).exists():
        raise StorageError(f"{out} would be written inside a session folder; choose another place.")
    rng = np.random.default_rng(settings.seed)
    scale = time_scale(session)
    markers = session.markers()
    t_first = markers[0][1] if markers else session.start_t
    t_last = markers[-1][1] if markers else session.start_t
    drift = settings.drift_ppm * 1e-6

    def to_rec(t: Any) -> Any:
        return t + settings.clock_offset_s + drift * (np.asarray(t) - t_first)

    rec_start = float(to_rec(t_first)) - settings.pad_s
    rec_end = max(float(to_rec(t_last)) + settings.pad_s, rec_start + settings.min_duration_s)
    trials, diff = _difficulty(session)
    events = _trial_events(session)
    on = np.array([to_rec(events[n].get("stimulus_onset", np.nan)) for n in trials], dtype=float)
    dec = np.array(
        [
            to_rec(events[n].get("decision", events[n].get("stimulus_offset", np.nan)))
            for n in trials
        ]
    )
    off = np.array([to_rec(events[n].get("stimulus_offset", np.nan)) for n in trials])
    ans = np.array([to_rec(events[n].get("answer", np.nan)) for n in trials])
    ans = np.where(np.isnan(ans), off, ans)
    truth = SynthTruth(
        path=out,
        trials=trials,
        difficulty=diff,
        pupil_dilation_mm=_lerp(settings.pupil_dilation_mm, diff),
        hr_bpm=_lerp(settings.hr_bpm, diff),
        theta_uv=_lerp(settings.theta_uv, diff),
        alpha_uv=_lerp(settings.alpha_uv, diff),
        beat_times=np.zeros(0),
        to_recorder=(settings.clock_offset_s, drift, t_first),
        eeg_first_time=rec_start,
    )
    info = session.header.get("markers") or {}
    name = str(info.get("name") or f"{session.study}-markers")
    truth.streams = {
        "markers": name,
        "eeg": "sim-eeg",
        "pupil": "sim-eyes",
        "ecg": "sim-ecg",
        "photodiode": "sim-photodiode",
    }
    identity = "".join(
        f"<{k}>{escape(str(session.header[k]))}</{k}>"
        for k in ("study", "participant", "session", "protocol_hash", "mode")
        if k in session.header
    )
    w = XdfWriter(out)
    try:
        # 1: the marker stream, on the presenter clock
        w.header(
            1,
            name=name,
            type="Markers",
            channel_format="string",
            srate=0.0,
            labels=["marker"],
            source_id=str(info.get("source_id") or ""),
            desc_xml=f"<software>trialdeck</software><session>{identity}</session>",
        )
        w.strings(1, [t for _, t in markers], [p for p, _ in markers])
        # ClockOffset chunks: collection time on the source clock, offset = recorder - source.
        src = np.arange(t_first - settings.pad_s, t_last + settings.pad_s, OFFSET_EVERY_S)
        w.clock_offsets(1, [(float(c), float(to_rec(c) - c)) for c in src])
        when = np.arange(rec_start, rec_end + OFFSET_EVERY_S, OFFSET_EVERY_S)
        zero_offsets = [(float(c), 0.0) for c in when]
        # 2: EEG
        names = eeg_channel_names(settings.eeg_channels)
        w.header(
            2,
            name="sim-eeg",
            type="EEG",
            channel_format="float32",
            srate=settings.eeg_srate,
            labels=names,
            units=["microvolts"] * len(names),
            source_id="sim-eeg-1",
        )
        for ts, block in _eeg_blocks(
            names, settings, rec_start, rec_end, on, dec, truth, scale, rng
        ):
            w.samples(2, ts, block, chunk=int(settings.eeg_srate * CHUNK_SECONDS))
        w.clock_offsets(2, zero_offsets)
        # 3: pupil
        ts = _grid(rec_start, rec_end, settings.pupil_srate)
        pupil = _pupil(ts, settings, on, ans, truth, scale, rng)
        w.header(
            3,
            name="sim-eyes",
            type="Pupil",
            channel_format="float32",
            srate=settings.pupil_srate,
            labels=["pupil_left_mm"],
            units=["mm"],
            source_id="sim-eyes-1",
        )
        w.samples(3, ts, pupil, chunk=int(settings.pupil_srate * CHUNK_SECONDS))
        w.clock_offsets(3, zero_offsets)
        # 4: ECG
        ts = _grid(rec_start, rec_end, settings.ecg_srate)
        beats = _beats(rec_start, rec_end, settings, on, dec, truth, rng)
        truth.beat_times = beats
        w.header(
            4,
            name="sim-ecg",
            type="ECG",
            channel_format="float32",
            srate=settings.ecg_srate,
            labels=["ECG"],
            units=["millivolts"],
            source_id="sim-ecg-1",
        )
        w.samples(
            4, ts, _ecg(ts, beats, settings, rng), chunk=int(settings.ecg_srate * CHUNK_SECONDS)
        )
        w.clock_offsets(4, zero_offsets)
        # 5: photodiode
        ts = _grid(rec_start, rec_end, settings.photodiode_srate)
        light = np.zeros(len(ts), dtype=np.float32)
        for a, b in zip(on, off, strict=True):
            if np.isfinite(a) and np.isfinite(b):
                lag = settings.photodiode_lag_s
                light[np.searchsorted(ts, a + lag) : np.searchsorted(ts, b + lag)] = 1.0
        w.header(
            5,
            name="sim-photodiode",
            type="Photodiode",
            channel_format="float32",
            srate=settings.photodiode_srate,
            labels=["photodiode"],
            units=["au"],
            source_id="sim-photodiode-1",
        )
        w.samples(5, ts, light, chunk=int(settings.photodiode_srate * CHUNK_SECONDS))
        w.clock_offsets(5, zero_offsets)
    finally:
        w.close()
    return truth


def _grid(start: float, end: float, srate: float) -> np.ndarray:
    return start + np.arange(int((end - start) * srate) + 1) / srate


def _pupil(
    ts: np.ndarray,
    s: SynthSettings,
    on: np.ndarray,
    ans: np.ndarray,
    truth: SynthTruth,
    scale: float,
    rng: np.random.Generator,
) -> np.ndarray:
    tau = s.pupil_tau_s * scale
    size = s.pupil_base_mm + 0.15 * np.sin(2 * np.pi * (ts - ts[0]) / 90.0)
    size += rng.normal(0.0, 0.01, len(ts))
    for a, b, amp in zip(on, ans, truth.pupil_dilation_mm, strict=True):
        if not (np.isfinite(a) and np.isfinite(b)):
            continue
        i0, i1 = np.searchsorted(ts, a), np.searchsorted(ts, b)
        i2 = np.searchsorted(ts, b + 10 * tau)
        rise = amp * (1 - np.exp(-(ts[i0:i1] - a) / tau))
        size[i0:i1] += rise
        top = rise[-1] if len(rise) else 0.0
        size[i1:i2] += top * np.exp(-(ts[i1:i2] - b) / tau)
    # blinks: the tracker loses the pupil and reports 0
    every = s.blink_every_s * scale
    t = ts[0] + rng.exponential(every)
    while t < ts[-1]:
        length = s.blink_s * scale
        size[np.searchsorted(ts, t) : np.searchsorted(ts, t + length)] = 0.0
        t += length + rng.exponential(every)
    return size.astype(np.float32)


def _rate_at(t: float, s: SynthSettings, on: np.ndarray, dec: np.ndarray, hr: np.ndarray) -> float:
    i = int(np.searchsorted(on, t, side="right")) - 1
    base = s.rest_hr_bpm
    if 0 <= i < len(on) and np.isfinite(dec[i]) and t <= dec[i]:
        base = float(hr[i])
    return base + 3.0 * np.sin(2 * np.pi * 0.25 * t)  # breathing rhythm (sinus arrhythmia)


def _beats(
    start: float,
    end: float,
    s: SynthSettings,
    on: np.ndarray,
    dec: np.ndarray,
    truth: SynthTruth,
    rng: np.random.Generator,
) -> np.ndarray:
    order = np.argsort(np.where(np.isfinite(on), on, np.inf))
    on_s, dec_s, hr_s = on[order], dec[order], truth.hr_bpm[order]
    beats = []
    t = start + rng.uniform(0.2, 0.8)
    while t < end:
        beats.append(t)
        t += 60.0 / _rate_at(t, s, on_s, dec_s, hr_s) + rng.normal(0.0, 0.004)
    return np.asarray(beats)


def _ecg(
    ts: np.ndarray, beats: np.ndarray, s: SynthSettings, rng: np.random.Generator
) -> np.ndarray:
    # P, Q, R, S and T waves: (delay s, amplitude mV, width s) of Gaussian bumps; invented shape.
    waves = (
        (-0.2, 0.12, 0.025),
        (-0.03, -0.12, 0.01),
        (0.0, 1.2, 0.01),
        (0.03, -0.25, 0.01),
        (0.25, 0.3, 0.05),
    )
    half = 0.45
    n = int(half * s.ecg_srate)
    rel = np.arange(-n, n + 1) / s.ecg_srate
    template = np.zeros(len(rel))
    for d, a, w in waves:
        template += a * np.exp(-0.5 * ((rel - d) / w) ** 2)
    ecg = 0.05 * np.sin(2 * np.pi * 0.2 * ts) + rng.normal(0.0, 0.02, len(ts))
    for b in beats:
        c = int(round((b - ts[0]) * s.ecg_srate))
        lo, hi = max(c - n, 0), min(c + n + 1, len(ts))
        if lo < hi:
            ecg[lo:hi] += template[lo - (c - n) : hi - (c - n)]
    return ecg.astype(np.float32)


def _eeg_blocks(
    names: list[str],
    s: SynthSettings,
    start: float,
    end: float,
    on: np.ndarray,
    dec: np.ndarray,
    truth: SynthTruth,
    scale: float,
    rng: np.random.Generator,
) -> Iterator[tuple[np.ndarray, np.ndarray]]:
    from scipy.signal import lfilter

    nch = len(names)
    frontal = np.array([n in FRONTAL for n in names])
    parietal = np.array([n in PARIETAL for n in names])
    phase = rng.uniform(0, 2 * np.pi, nch)
    zi = np.zeros((1, nch))
    total = int((end - start) * s.eeg_srate) + 1
    per = int(BLOCK_SECONDS * s.eeg_srate)
    effect_end = np.fmax(on + s.eeg_effect_s * scale, np.where(np.isfinite(dec), dec, on))
    for first in range(0, total, per):
        count = min(per, total - first)
        ts = start + (first + np.arange(count)) / s.eeg_srate
        white = rng.standard_normal((count, nch)).astype(np.float32) * s.eeg_noise_uv
        noise, zi = lfilter([1.0], [1.0, -0.9], white, axis=0, zi=zi)
        data = noise.astype(np.float32)
        alpha_amp = np.full(count, s.rest_alpha_uv, dtype=np.float32)
        theta_amp = np.zeros(count, dtype=np.float32)
        lo, hi = np.searchsorted(effect_end, ts[0]), np.searchsorted(on, ts[-1], side="right")
        for i in range(max(lo - 1, 0), min(hi + 1, len(on))):
            if not np.isfinite(on[i]):
                continue
            a, b = np.searchsorted(ts, on[i]), np.searchsorted(ts, effect_end[i])
            alpha_amp[a:b] = truth.alpha_uv[i]
            theta_amp[a:b] = truth.theta_uv[i]
        alpha = np.sin(2 * np.pi * 10.0 * ts[:, None] + phase[None, :]) * alpha_amp[:, None]
        theta = np.sin(2 * np.pi * 6.0 * ts[:, None] + phase[None, :]) * theta_amp[:, None]
        data[:, parietal] += alpha[:, parietal].astype(np.float32)
        data[:, ~parietal] += 0.3 * alpha[:, ~parietal].astype(np.float32)
        data[:, frontal] += theta[:, frontal].astype(np.float32)
        yield ts, data
