"""The audit as text: a short summary first, then each problem, then the details."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from runner.contract.layout import TRIALS_NAME, display_path
from runner.qa.audit_facts import SessionAudit, listing, plural, ranges
from runner.recording import RecordingReport

__all__ = ["detail_lines", "format_audits"]


def _fmt_stats(s: dict[str, Any] | None, unit: str = "ms", digits: int = 1) -> str:
    if not s:
        return "none"
    return (
        f"n {s['n']}, median {s['p50']:.{digits}f} {unit}, 5-95% {s['p5']:.{digits}f}-"
        f"{s['p95']:.{digits}f} {unit}, range {s['min']:.{digits}f}-{s['max']:.{digits}f} {unit}"
    )


def detail_lines(a: SessionAudit) -> list[str]:
    """The details section of one session's audit, as plain indented lines."""
    f = a.facts
    j = f.get("journal", {})
    lines = [f"{a.label()}  ({display_path(a.folder)})"]
    chain = "intact" if j.get("chain_ok") else f"broken after line {j.get('intact_lines')}"
    lines.append(
        f"  journal: {j.get('lines')} lines, hash chain {chain}"
        + (f", torn last line {j['torn_line']}" if j.get("torn_line") else "")
    )
    if j.get("unknown_events"):
        listed = ", ".join(f"{k} x{v}" for k, v in j["unknown_events"].items())
        lines.append(f"  events this audit does not know (ignored): {listed}")
    for att in f.get("attempts", []):
        end = att["status"] or "no closing line"
        extra = (
            f", interrupted trials {ranges(att['interrupted_trials'])}"
            if att["interrupted_trials"]
            else ""
        )
        lines.append(
            f"  attempt {att['index']} from line {att['start_line']} ({att['kind']}): "
            f"{att['trials_completed']} trials completed, ended: {end}{extra}"
        )
    tr = f.get("trials", {})
    lines.append(
        f"  trials: {tr.get('completed', 0)} of {tr.get('scheduled', 0)} completed"
        + (f"; not completed: {ranges(tr['missing'])}" if tr.get("missing") else "")
    )
    for r in tr.get("interrupted_then_completed", []):
        lines.append(
            f"    trial {r['trial']} was interrupted in attempt {r['interrupted_in']} "
            "and completed later (fine)"
        )
    files = f.get("files", {})
    stim = files.get("stimuli")
    if stim:
        lines.append(
            f"  stimuli: {stim['unchanged']} of {stim['checked']} unchanged in "
            f"{stim['folder']}"
            + (f", changed: {listing(stim['changed'])}" if stim["changed"] else "")
            + (f", not found: {len(stim['not_found'])}" if stim["not_found"] else "")
        )
    frozen = [f"{k} {v}" for k, v in files.items() if k != "stimuli"]
    if frozen:
        lines.append(f"  frozen copies: {', '.join(frozen)}")
    if "trials_csv" in f:
        lines.append(f"  {TRIALS_NAME}: {f['trials_csv']}")
    t = f.get("timing", {})
    if t.get("interval_ms"):
        lines.append(
            f"  timing: refresh {t['interval_ms']:.3f} ms, speed {t['speed']:g}; "
            f"{t.get('flips', 0)} flips, {t.get('timed_flips', 0)} timed, "
            f"{t.get('late_flips', 0)} late"
        )
        lines.append(f"    flip lateness: {_fmt_stats(t.get('flip_lateness_ms'), digits=2)}")
        fx = t.get("fixation", {})
        lines.append(
            f"    fixation requested: {_fmt_stats(fx.get('requested_ms'))}"
            + (f" (divided by speed {t['speed']:g})" if t["speed"] != 1 else "")
        )
        lines.append(f"    fixation shown:     {_fmt_stats(fx.get('actual_ms'))}")
        lines.append(
            f"    fixation minus whole frames: {_fmt_stats(fx.get('error_vs_frames_ms'), digits=2)}"
        )
        for r in t.get("rests", []):
            lines.append(
                f"    rest at line {r['line']}: {r['frames']} frames, shown {r['actual_s']:.3f} s"
            )
        lines.append(f"    marker push after flip: {_fmt_stats(t.get('marker_push_us'), 'us')}")
    resp = f.get("responses", {})
    if resp:
        lines.append(f"  response times: {_fmt_stats(resp.get('rt_ms'))}")
        oc = ", ".join(f"{k} {v}" for k, v in resp.get("outcomes", {}).items())
        lines.append(f"  outcomes: {oc or 'none'}")
    if a.recording is not None:
        lines.extend(_recording_lines(a.recording))
        if "photodiode" in f:
            lines.append(f"    {f['photodiode']['sentence']}")
    elif "recording" in f:
        lines.append(f"  recording: {f['recording'].get('error')}")
    return lines


def _recording_lines(r: RecordingReport) -> list[str]:
    m, ch = r.match, r.choice
    lines = [
        f"  recording {display_path(r.path)}: marker stream {', '.join(map(str, ch.stream_ids))}"
        f" of {plural(len(ch.candidates), 'candidate')}"
    ]
    if ch.note:
        lines.append(f"    {ch.note}")
    lines.append(
        f"    markers: {m.matched} matched, {len(m.missing)} missing, "
        f"{len(m.extra)} extra, {len(m.duplicated)} duplicated, "
        f"{len(m.garbage)} not JSON"
    )
    if m.offset_s is not None:
        drift = f", drift {m.drift_ppm:.2f} ppm" if m.drift_ppm is not None else ""
        lines.append(
            f"    clock offset {m.offset_s:.6f} s; residuals |median| "
            f"{m.residual_median_abs_ms:.3f} ms, p99 {m.residual_p99_abs_ms:.3f} ms, "
            f"max {m.residual_max_abs_ms:.3f} ms{drift}"
        )
    for c in r.coverage:
        rate = (
            f"{c.effective_srate:.2f} Hz measured" if c.effective_srate is not None else "no rate"
        )
        cover = "covers the session" if c.covers_span else "does NOT cover the session"
        gaps = (
            f", {plural(len(c.gaps), 'gap')} over {c.gap_threshold_s:g} s"
            if c.gaps
            else ", no gaps"
            if c.gap_threshold_s is not None
            else ""
        )
        lines.append(
            f"    stream {c.stream_id} {c.name!r} ({c.type}): nominal "
            f"{c.nominal_srate:g} Hz, {rate}, {c.sample_count} samples, {cover}{gaps}"
        )
    return lines


def format_audits(audits: Sequence[SessionAudit]) -> list[str]:
    """The audit as text: a short summary first, then each problem, then the details."""
    lines = ["Audit summary"]
    bad = sum(not a.ok for a in audits)
    lines.append(
        f"  {len(audits)} session{'s' if len(audits) != 1 else ''} checked: "
        f"{len(audits) - bad} sound, {bad} with problems"
    )
    lines.extend(f"  {a.summary_line()}" for a in audits)
    if any(a.problems for a in audits):
        lines.append("")
        lines.append("Problems")
        for a in audits:
            lines.extend(p.format() for p in a.problems)
    lines.append("")
    lines.append("Details")
    for a in audits:
        lines.extend(detail_lines(a))
    return lines
