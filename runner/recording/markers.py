"""Which marker stream of a recording is the session's, and how its markers match the journal.

The presenter sends one LSL marker stream per session and journals every marker it sent as
(payload, LSL timestamp). :func:`find_marker_streams` picks the session's stream (there can be
several after restarts); :func:`match_markers` pairs journaled and recorded markers and measures
the clock offset, residuals and drift between presenter and recorder.
"""

from __future__ import annotations

import json
from collections import defaultdict
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from runner.errors import RecordingError
from runner.recording.clock import ClockModel, fit_clock
from runner.recording.xdf import RecordedStream, Recording

# A candidate marker stream "covers" the session when at least this fraction of the session
# span lies between its first and last marker (a tolerance for float rounding, not a policy).
COVER_FRACTION = 0.999
# In repeated payloads, leaving one journaled and one recorded marker unpaired costs this much
# each, so two copies are paired when they are less than 2 * GAP_COST_S apart.
GAP_COST_S = 1.0
PERCENTILE_HIGH = 99.0
MS_PER_S = 1000.0
PPM = 1e6
MIN_POINTS_FOR_DRIFT = 3


@dataclass(frozen=True)
class MarkerStreamChoice:
    """The marker stream(s) taken as the session's, and why.

    ``combined`` is true when several streams with the same source_id were joined because a
    restart split the session between them. ``markers`` are their samples in time order.
    """

    stream_ids: list[int]
    candidates: list[int]
    combined: bool
    coverage: float | None
    note: str
    markers: list[tuple[str, float]]

    def as_dict(self) -> dict[str, Any]:
        return {
            "stream_ids": list(self.stream_ids),
            "candidates": list(self.candidates),
            "combined": self.combined,
            "coverage": self.coverage,
            "note": self.note,
            "marker_count": len(self.markers),
        }


def _source_interval(rec: Recording, s: RecordedStream) -> tuple[float, float] | None:
    if s.first_timestamp is None or s.last_timestamp is None:
        return None
    return (s.first_timestamp - s.clock_offset_s, s.last_timestamp - s.clock_offset_s)


def _union_length(intervals: list[tuple[float, float]], span: tuple[float, float]) -> float:
    clipped = sorted(
        (max(a, span[0]), min(b, span[1]))
        for a, b in intervals
        if min(b, span[1]) >= max(a, span[0])
    )
    total = 0.0
    cur: tuple[float, float] | None = None
    for a, b in clipped:
        if cur is None or a > cur[1]:
            if cur is not None:
                total += cur[1] - cur[0]
            cur = (a, b)
        else:
            cur = (cur[0], max(cur[1], b))
    if cur is not None:
        total += cur[1] - cur[0]
    return total


def _overlap(intervals: list[tuple[float, float]], span: tuple[float, float]) -> float:
    """Fraction of ``span`` inside the union of ``intervals`` (a point span: 1.0 or 0.0)."""
    width = span[1] - span[0]
    if width <= 0:
        return float(any(a <= span[0] <= b for a, b in intervals))
    return _union_length(intervals, span) / width


def _describe_other(s: RecordedStream, cover: float | None) -> str:
    base = f"stream {s.stream_id} (created_at {s.created_at}, {s.sample_count} markers)"
    if cover is None:
        return base
    if cover <= 0:
        return f"{base} lies outside the session"
    return f"{base} covers {cover:.0%} of it"


def find_marker_streams(
    rec: Recording,
    *,
    source_id: str | None,
    name: str | None,
    session_span: tuple[float, float] | None = None,
    combine_restarts: bool = True,
) -> MarkerStreamChoice:
    """Pick the session's marker stream among the recording's ``Markers`` streams.

    Parameters
    ----------
    rec : Recording
    source_id, name : str or None
        Candidates must match each one given (both None: every marker stream is a candidate).
    session_span : (float, float) or None
        First and last journaled marker time, in the presenter's clock (the journal's clock).
        Each candidate's timestamps are mapped back to the sender's clock with its median clock
        offset before comparing. Without a span the latest ``created_at`` wins.
    combine_restarts : bool
        When no single candidate covers the span, join the candidates that share the best
        one's source_id and overlap the span, if together they cover more of it.

    Returns
    -------
    MarkerStreamChoice

    Raises
    ------
    RecordingError
        No marker stream matches.
    """
    markers = [s for s in rec.streams if s.is_markers]
    cands = [
        s
        for s in markers
        if (source_id is None or s.source_id == source_id) and (name is None or s.name == name)
    ]
    if not cands:
        wanted = " and ".join(
            part
            for part in (
                f"source_id {source_id!r}" if source_id is not None else "",
                f"name {name!r}" if name is not None else "",
            )
            if part
        )
        present = (
            "; ".join(f"{s.name!r} (source_id {s.source_id!r})" for s in markers)
            or "no marker streams at all"
        )
        raise RecordingError(
            f"The recording {rec.path} has no marker stream with {wanted or 'type Markers'}; it "
            f"holds {present}. Check the protocol's marker stream name and the recorder's stream "
            "list."
        )

    by_recency = sorted(cands, key=lambda s: (s.created_at_value, s.stream_id))
    covers: dict[int, float] = {}
    if session_span is None:
        best = by_recency[-1]
        chosen = [best]
        cover: float | None = None
    else:
        for s in cands:
            iv = _source_interval(rec, s)
            covers[s.stream_id] = _overlap([iv], session_span) if iv else 0.0
        # Best coverage first, then the most recent outlet.
        # max keeps the first of equals, so walk newest first: ties go to the latest outlet.
        best = max(reversed(by_recency), key=lambda s: covers[s.stream_id])
        chosen = [best]
        cover = covers[best.stream_id]
        if combine_restarts and cover < COVER_FRACTION:
            siblings = [
                s
                for s in cands
                if s.source_id == best.source_id and covers[s.stream_id] > 0 and s is not best
            ]
            if siblings:
                group = sorted([best, *siblings], key=lambda s: (s.created_at_value, s.stream_id))
                ivs = [iv for s in group if (iv := _source_interval(rec, s)) is not None]
                joint = _overlap(ivs, session_span)
                if joint > cover:
                    chosen, cover = group, joint

    ids = [s.stream_id for s in chosen]
    samples = sorted((m for sid in ids for m in rec.marker_samples(sid)), key=lambda m: m[1])
    note = _choice_note(cands, chosen, covers, session_span, source_id, name, cover)
    return MarkerStreamChoice(
        stream_ids=ids,
        candidates=[s.stream_id for s in cands],
        combined=len(chosen) > 1,
        coverage=cover,
        note=note,
        markers=samples,
    )


def _choice_note(
    cands: list[RecordedStream],
    chosen: list[RecordedStream],
    covers: dict[int, float],
    span: tuple[float, float] | None,
    source_id: str | None,
    name: str | None,
    cover: float | None,
) -> str:
    if len(cands) == 1:
        return ""
    if name is not None:
        what = f"{len(cands)} marker streams named {name!r}"
    elif source_id is not None:
        what = f"{len(cands)} marker streams with source_id {source_id!r}"
    else:
        what = f"{len(cands)} marker streams"
    chosen_ids = {s.stream_id for s in chosen}
    others = [s for s in cands if s.stream_id not in chosen_ids]
    if span is None:
        why = "the most recently created one, since no session span was given"
    elif cover is not None and cover >= COVER_FRACTION:
        why = "whose markers cover the session"
    else:
        why = f"whose markers cover {(cover or 0.0):.0%} of the session"
    if len(chosen) > 1:
        listed = [f"{s.stream_id} (created_at {s.created_at})" for s in chosen]
        parts = ", ".join(listed[:-1]) + " and " + listed[-1]
        head = (
            f"{what}; a restart split the session, so the check combined streams {parts}, "
            f"which share source_id {chosen[0].source_id!r} and together {why.removeprefix('whose markers ')}"
        )
    else:
        c = chosen[0]
        head = f"{what}; chose stream {c.stream_id} (created_at {c.created_at}), {why}"
    if not others:
        return head + "."
    tail = "; ".join(_describe_other(s, covers.get(s.stream_id)) for s in others)
    return f"{head}; the others: {tail}."


# --------------------------------------------------------------------------------------------
# Matching journaled and recorded markers


@dataclass(frozen=True)
class MarkerMatch:
    """How the recorded markers compare with the journaled ones.

    ``missing``: journaled, not recorded. ``extra``: recorded payloads never journaled.
    ``duplicated``: recorded copies of a journaled payload beyond the journaled count.
    ``garbage``: recorded samples that are not a JSON object string. ``clock`` is the clock model
    fitted to the pairs (offset plus drift per segment, :mod:`runner.recording.clock`); residuals
    are recorded times minus the model's, in milliseconds, over the pairs it kept (``outliers``
    pairs, delayed by more than its limit, are counted apart). ``offset_s`` is the median of
    (recorded - journaled); ``drift_ppm`` the model's drift (of its longest segment): a steady
    rate difference between the clocks is modelled, never mistaken for late markers.
    """

    matched: int
    missing: list[tuple[str, float]]
    extra: list[tuple[str, float]]
    duplicated: list[tuple[str, float]]
    garbage: list[tuple[str, float]]
    offset_s: float | None
    residual_median_abs_ms: float | None
    residual_p99_abs_ms: float | None
    residual_max_abs_ms: float | None
    drift_ppm: float | None
    worst: tuple[str, float] | None
    pairs: list[tuple[str, float, float]] = field(default_factory=list, repr=False)
    clock: ClockModel | None = field(default=None, repr=False)
    outliers: int = 0

    def recorded_times(self) -> dict[float, float]:
        """The recorded time of each matched marker, keyed by its journaled (flip) time."""
        return {t: r for _, t, r in self.pairs}

    def as_dict(self) -> dict[str, Any]:
        def items(xs: list[tuple[str, float]]) -> list[dict[str, Any]]:
            return [{"payload": p, "timestamp": t} for p, t in xs]

        return {
            "matched": self.matched,
            "missing": items(self.missing),
            "extra": items(self.extra),
            "duplicated": items(self.duplicated),
            "garbage": items(self.garbage),
            "offset_s": self.offset_s,
            "residual_median_abs_ms": self.residual_median_abs_ms,
            "residual_p99_abs_ms": self.residual_p99_abs_ms,
            "residual_max_abs_ms": self.residual_max_abs_ms,
            "drift_ppm": self.drift_ppm,
            "worst": None
            if self.worst is None
            else {"payload": self.worst[0], "residual_ms": self.worst[1]},
        }


def is_marker_payload(payload: str) -> bool:
    """True when ``payload`` is a JSON object string (what the presenter sends)."""
    try:
        return isinstance(json.loads(payload), dict)
    except (ValueError, TypeError):
        return False


def _align(j: list[float], r: list[float], offset: float) -> list[tuple[int, int]]:
    """Order-preserving pairing of two time lists that minimises total |residual|.

    Each unpaired item costs GAP_COST_S. Used only for a payload sent several times whose
    journaled and recorded counts differ, so the lists are short.
    """
    n, m = len(j), len(r)
    cost = np.zeros((n + 1, m + 1))
    cost[:, 0] = np.arange(n + 1) * GAP_COST_S
    cost[0, :] = np.arange(m + 1) * GAP_COST_S
    for a in range(1, n + 1):
        for b in range(1, m + 1):
            pair = cost[a - 1, b - 1] + abs(r[b - 1] - j[a - 1] - offset)
            cost[a, b] = min(pair, cost[a - 1, b] + GAP_COST_S, cost[a, b - 1] + GAP_COST_S)
    pairs: list[tuple[int, int]] = []
    a, b = n, m
    while a > 0 and b > 0:
        if cost[a, b] == cost[a - 1, b - 1] + abs(r[b - 1] - j[a - 1] - offset):
            pairs.append((a - 1, b - 1))
            a, b = a - 1, b - 1
        elif cost[a, b] == cost[a - 1, b] + GAP_COST_S:
            a -= 1
        else:
            b -= 1
    return pairs[::-1]


def match_markers(
    journaled: Sequence[tuple[str, float]], recorded: Sequence[tuple[str, float]]
) -> MarkerMatch:
    """Pair journaled and recorded markers by payload and measure their timing.

    Payload strings must be identical. A payload sent once is paired with its first recorded
    copy; copies of a payload sent several times are paired in time order (when the counts
    differ, by an order-preserving alignment that tolerates a lost or doubled copy). The clock
    offset is the median of (recorded - journaled) over the pairs; residuals are reported as
    absolute values in milliseconds.

    Parameters
    ----------
    journaled : sequence of (str, float)
        (payload, LSL timestamp) as the session journal recorded them.
    recorded : sequence of (str, float)
        (payload, timestamp) from the recording's marker stream.

    Returns
    -------
    MarkerMatch
    """
    garbage = [(p, t) for p, t in recorded if not is_marker_payload(p)]
    j_by: dict[str, list[float]] = defaultdict(list)
    r_by: dict[str, list[float]] = defaultdict(list)
    for p, t in journaled:
        j_by[p].append(float(t))
    for p, t in recorded:
        if is_marker_payload(p):
            r_by[p].append(float(t))
    for d in (j_by, r_by):
        for times in d.values():
            times.sort()

    # First pass: payloads sent and recorded exactly once (nearly all of them, since they carry
    # a trial number) give a robust offset estimate that repeated payloads are then aligned
    # with. Only when there are none do in-order pairs of repeated payloads stand in, and then
    # a lost first copy cannot be told from a lost last one.
    first_diffs = [
        r_by[p][0] - jts[0]
        for p, jts in j_by.items()
        if len(jts) == 1 and len(r_by.get(p, [])) == 1
    ] or [rt - jt for p, jts in j_by.items() for jt, rt in zip(jts, r_by.get(p, []), strict=False)]
    offset0 = float(np.median(first_diffs)) if first_diffs else 0.0

    pairs: list[tuple[str, float, float]] = []
    missing: list[tuple[str, float]] = []
    duplicated: list[tuple[str, float]] = []
    extra: list[tuple[str, float]] = []
    for p, jts in j_by.items():
        rts = r_by.get(p, [])
        if len(jts) == len(rts) or len(jts) == 1 or not rts:
            idx = list(zip(range(len(jts)), range(len(rts)), strict=False))
            if len(jts) == 1 and len(rts) > 1:
                # One journaled copy: pair it with the recorded copy nearest in time.
                best = int(np.argmin([abs(rt - jts[0] - offset0) for rt in rts]))
                idx = [(0, best)]
        else:
            idx = _align(jts, rts, offset0)
        used_j = {a for a, _ in idx}
        used_r = {b for _, b in idx}
        pairs.extend((p, jts[a], rts[b]) for a, b in idx)
        missing.extend((p, t) for a, t in enumerate(jts) if a not in used_j)
        duplicated.extend((p, t) for b, t in enumerate(rts) if b not in used_r)
    for p, rts in r_by.items():
        if p not in j_by:
            extra.extend((p, t) for t in rts)

    missing.sort(key=lambda x: x[1])
    duplicated.sort(key=lambda x: x[1])
    extra.sort(key=lambda x: x[1])
    # Recorder order is the true order even when the presenter clock restarted (a reboot
    # between attempts), which the clock model then sees as a reset.
    pairs.sort(key=lambda x: x[2])

    if not pairs:
        return MarkerMatch(
            0, missing, extra, duplicated, garbage, None, None, None, None, None, None, []
        )
    jt = np.array([q[1] for q in pairs])
    rt = np.array([q[2] for q in pairs])
    diffs = rt - jt
    offset = float(np.median(diffs))
    # Pairs in journal order for the clock model, so a presenter clock reset splits segments.
    clock = fit_clock(jt, rt)
    modelled = np.array([clock.fitted(i, t) for i, t in enumerate(jt)])
    res_all = np.abs(rt - modelled) * MS_PER_S
    kept = np.ones(len(pairs), dtype=bool)
    kept[list(clock.outliers)] = False
    res = res_all[kept] if kept.any() else res_all
    worst_i = int(np.argmax(np.where(kept, res_all, -1.0)))
    main = clock.main
    drift: float | None = (
        main.drift_ppm if main.n_pairs >= MIN_POINTS_FOR_DRIFT and main.end > main.start else None
    )
    return MarkerMatch(
        matched=len(pairs),
        missing=missing,
        extra=extra,
        duplicated=duplicated,
        garbage=garbage,
        offset_s=offset,
        residual_median_abs_ms=float(np.median(res)),
        residual_p99_abs_ms=float(np.percentile(res, PERCENTILE_HIGH)),
        residual_max_abs_ms=float(res_all[worst_i]),
        drift_ppm=drift,
        worst=(pairs[worst_i][0], float(res_all[worst_i])),
        pairs=pairs,
        clock=clock,
        outliers=len(clock.outliers),
    )
