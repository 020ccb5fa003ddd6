"""Photodiode edges: when light actually left the screen, measured on a recorded analog channel.

A light sensor taped over trialdeck's photodiode patch (a small square that turns white with
each stimulus onset) and wired to an auxiliary input of the recorder gives, per onset, the time
the screen really changed. Matched with the journaled onset flips (mapped onto the recorder's
clock), the difference is the display latency: what the marker cannot know (the display's own
processing and pixel response).

Edges are found with a threshold from the signal's own levels (halfway between a low and a high
percentile, so the sensor's gain and offset do not matter), with hysteresis and a dead time
against noise and flicker (debouncing).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from runner.errors import RecordingError
from runner.recording.scan import Select
from runner.recording.xdf import RecordedStream, Recording

LOW_PERCENTILE = 5.0
HIGH_PERCENTILE = 99.5  # the patch may be lit for a small share of the time
HYSTERESIS = 0.1  # share of the level range either side of the threshold
DEAD_TIME_S = 0.05  # shorter than any screen in a trial (several frames), longer than flicker
MAX_LATENCY_S = 0.2  # an edge more than this after an onset belongs to no onset
# Level range over the sample-to-sample noise below which no edge is trusted. Noise is judged
# from first differences (robust to the rare edges): white noise alone gives a ratio near 3.3.
MIN_LEVEL_RATIO = 8.0
MAD_TO_SD = 1.4826


@dataclass(frozen=True)
class Edges:
    """Rising (light on) edges of a photodiode channel."""

    times: np.ndarray  # recorder times of the edges, interpolated between samples
    low: float
    high: float
    threshold: float


def find_edges(values: np.ndarray, times: np.ndarray) -> Edges:
    """Rising edges (dark to light) of one photodiode channel.

    Parameters
    ----------
    values : array
        The channel's samples (any unit; larger means brighter).
    times : array
        Each sample's time on the recorder's clock (dejittered for a regular stream).

    Returns
    -------
    Edges
        Empty when the signal never changes level (no sensor, or sensor not on the patch).
    """
    v = np.asarray(values, dtype=float)
    t = np.asarray(times, dtype=float)
    if len(v) < 2:
        return Edges(np.array([]), 0.0, 0.0, 0.0)
    low, high = (float(x) for x in np.percentile(v, [LOW_PERCENTILE, HIGH_PERCENTILE]))
    threshold = (low + high) / 2
    steps = np.diff(v)
    noise = MAD_TO_SD * float(np.median(np.abs(steps - np.median(steps)))) / np.sqrt(2)
    if high - low <= 0 or (noise > 0 and (high - low) / noise < MIN_LEVEL_RATIO):
        return Edges(np.array([]), low, high, threshold)
    on = threshold + HYSTERESIS * (high - low)
    off = threshold - HYSTERESIS * (high - low)
    out: list[float] = []
    light = v[0] > on
    last = -np.inf
    for i in range(1, len(v)):
        if light:
            if v[i] < off:
                light = False
        elif v[i] > on:
            light = True
            # The crossing of the middle threshold, interpolated between the samples around it.
            j = i
            while j > 0 and v[j - 1] > threshold:
                j -= 1
            if j == 0:
                continue
            a, b = v[j - 1], v[j]
            frac = (threshold - a) / (b - a) if b != a else 0.0
            edge = t[j - 1] + frac * (t[j] - t[j - 1])
            if edge - last >= DEAD_TIME_S:
                out.append(edge)
                last = edge
    return Edges(np.asarray(out), low, high, threshold)


@dataclass(frozen=True)
class Latency:
    """Display latency per onset: ``latency_s[i]`` belongs to ``onsets[i]`` (NaN when missed)."""

    onsets: np.ndarray  # onset flips on the recorder's clock
    latency_s: np.ndarray
    extra_edges: np.ndarray  # edges that belong to no onset

    @property
    def missed(self) -> int:
        return int(np.isnan(self.latency_s).sum())

    def summary(self) -> dict[str, float | int | None]:
        found = self.latency_s[~np.isnan(self.latency_s)] * 1000
        if not len(found):
            return {"matched": 0, "missed": self.missed, "extra": len(self.extra_edges)}
        return {
            "matched": len(found),
            "missed": self.missed,
            "extra": len(self.extra_edges),
            "median_ms": float(np.median(found)),
            "iqr_ms": float(np.subtract(*np.percentile(found, [75, 25]))),
            "worst_ms": float(np.max(found)),
        }


def pair_edges(onsets: Sequence[float], edges: np.ndarray) -> Latency:
    """Pair each onset with the first edge at or after it, within :data:`MAX_LATENCY_S`.

    An edge can serve one onset only; onsets and edges are on the recorder's clock.
    """
    on = np.sort(np.asarray(onsets, dtype=float))
    e = np.sort(np.asarray(edges, dtype=float))
    lat = np.full(len(on), np.nan)
    used = np.zeros(len(e), dtype=bool)
    j = 0
    for i, t in enumerate(on):
        # A small negative tolerance: clock-model error can put an edge a fraction of a ms early.
        while j < len(e) and e[j] < t - 0.001:
            j += 1
        if j < len(e) and e[j] - t <= MAX_LATENCY_S:
            lat[i] = e[j] - t
            used[j] = True
            j += 1
    return Latency(on, lat, e[~used])


def light_onsets(flips: Sequence[tuple[float, bool]]) -> list[float]:
    """Times of the flips that turned the patch on (it was off on the frame before)."""
    out = []
    lit = False
    for t, on in flips:
        if on and not lit:
            out.append(t)
        lit = on
    return out


def recording_values(spec: str | None) -> Select:
    """What the audit and export read of a recording's samples: the marker strings, and the
    photodiode channel ``spec`` names (``STREAM[:CHANNEL]``) when given."""
    if not spec:
        return Select()
    name, channel = parse_spec(spec)
    return Select(channels={name: [channel]})


def find_photodiode_stream(recording: Recording, spec: str) -> tuple[RecordedStream, int]:
    """The stream and 0-based channel ``STREAM[:CHANNEL]`` names (by name, source_id or type,
    case-insensitive; marker streams are never photodiode streams).

    Raises
    ------
    ValueError
        The spec's channel is not a whole number from 1.
    RecordingError
        No such stream, or it has fewer channels (audit and export say the same sentence).
    """
    name, channel = parse_spec(spec)
    wanted = name.strip().lower()
    found = [
        s
        for s in recording.streams
        if wanted in (s.name.lower(), s.source_id.lower(), s.type.lower()) and not s.is_markers
    ]
    if not found or found[0].channel_count <= channel:
        names = ", ".join(f"{s.name!r} ({s.type}, {s.channel_count} ch)" for s in recording.streams)
        raise RecordingError(
            f"no photodiode stream {spec!r} in the recording (name, source_id or type, then "
            f":CHANNEL from 1); its streams: {names}."
        )
    return found[0], channel


def onset_edges(
    times: np.ndarray, values: np.ndarray, onsets_recorder: Sequence[float]
) -> tuple[np.ndarray, Latency]:
    """The light edge of each onset, in the onsets' order (NaN where none was found), and the
    pairing behind it (:func:`find_edges`, :func:`pair_edges`)."""
    on = np.asarray(onsets_recorder, dtype=float)
    order = np.argsort(on, kind="stable")
    lat = pair_edges(on.tolist(), find_edges(values, times).times)
    edges = np.full(len(on), np.nan)
    edges[order] = lat.onsets + lat.latency_s
    return edges, lat


def parse_spec(spec: str) -> tuple[str, int]:
    """``STREAM[:CHANNEL]`` (channel 1-based, default 1) as (stream, 0-based channel)."""
    name, _, channel = spec.rpartition(":") if ":" in spec else (spec, "", "")
    if not channel:
        return spec, 0
    if not channel.isdigit() or int(channel) < 1:
        raise ValueError(f"the photodiode channel in {spec!r} must be a whole number from 1")
    return name, int(channel) - 1


@dataclass(frozen=True)
class PhotodiodeReport:
    """Display latency measured on a recorded photodiode channel."""

    stream: str
    channel: int  # 0-based
    latency: Latency
    edges: Edges

    def as_dict(self) -> dict[str, object]:
        return {"stream": self.stream, "channel": self.channel + 1, **self.latency.summary()}

    def describe(self) -> str:
        s = self.latency.summary()
        if not s["matched"]:
            return (
                f"photodiode {self.stream}:{self.channel + 1}: no light edge matched an onset "
                f"({len(self.edges.times)} edges found); check the sensor sits on the patch."
            )
        return (
            f"photodiode {self.stream}:{self.channel + 1}: display latency median "
            f"{s['median_ms']:.1f} ms (IQR {s['iqr_ms']:.1f} ms, worst {s['worst_ms']:.1f} ms) "
            f"over {s['matched']} onsets; {s['missed']} missed, {s['extra']} extra edges"
        )


def measure_latency(
    times: np.ndarray,
    values: np.ndarray,
    onsets_recorder: Sequence[float],
    *,
    stream: str,
    channel: int,
) -> PhotodiodeReport:
    """Find the edges of one channel and pair them with onsets on the recorder's clock."""
    edges = find_edges(values, times)
    return PhotodiodeReport(stream, channel, pair_edges(onsets_recorder, edges.times), edges)
