"""Per-session QA figures of ``trialdeck physio`` (matplotlib, Agg canvas, PNG).

* ``<participant>_<session>_pupil.png``: baseline-corrected pupil traces from the window start,
  mean per level of the protocol's first factor, with each trial faintly behind;
* ``<participant>_<session>_ecg.png``: a 10-second ECG strip with the detected R-peaks marked,
  and the beat-to-beat heart rate over the whole session;
* ``<participant>_<session>_eeg.png``: EEG epochs kept and dropped (by reason) and the bad
  channels.
"""

from __future__ import annotations

from collections import defaultdict
from pathlib import Path
from typing import Any

import matplotlib as mpl
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from runner.contract.columns import level_key
from runner.contract.outputs import ensure_folder
from runner.data.plots import ACCENT, DPI, GRID, INK, MUTED_INK, STYLE, save_png
from runner.physio.pipeline import SessionResult

__all__ = ["session_figures"]

STRIP_S = 10.0  # length of the ECG check strip
FIG_SIZE_IN = (7.2, 4.3)
LEVEL_COLOURS = ("#2E6B9E", "#C8651B", "#5B8C3A", "#8E5BA8", "#B8860B", "#3F8F8F", "#A23B3B")


def _figure(rows: int = 1, size: tuple[float, float] = FIG_SIZE_IN) -> tuple[Figure, Any]:
    fig = Figure(figsize=size, dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(rows, 1, squeeze=False)[:, 0]
    for ax in axes:
        ax.set_axisbelow(True)
        ax.grid(True, color=GRID, linewidth=0.8)
    return fig, axes


def session_figures(result: SessionResult, qa: dict[str, Any], folder: Path) -> list[Path]:
    """Draw the session's QA figures into ``folder`` (created when missing); return the files."""
    folder = ensure_folder(folder, [])
    stem = f"sub-{result.participant}_ses-{result.session}"
    out: list[Path] = []
    with mpl.rc_context(STYLE):
        if "pupil" in qa:
            out.append(
                save_png(
                    _pupil(result, qa["pupil"], qa.get("factor")), folder / f"{stem}_pupil.png"
                )
            )
        if "ecg" in qa and qa["ecg"].get("times") is not None:
            out.append(save_png(_ecg(result, qa["ecg"]), folder / f"{stem}_ecg.png"))
        if "eeg" in qa:
            out.append(
                save_png(_eeg(result, qa["eeg"], qa.get("factor")), folder / f"{stem}_eeg.png")
            )
    return out


def _who(result: SessionResult) -> str:
    return f"participant {result.participant}, session {result.session}"


def _pupil(result: SessionResult, pupil: dict[str, Any], factor: str | None) -> Figure:
    fig, (ax,) = _figure()
    grid = np.asarray(pupil["grid_s"])
    by_level: dict[str, list[np.ndarray]] = defaultdict(list)
    for level, trace in pupil["traces"]:
        by_level[str(level)].append(np.asarray(trace))
    levels = sorted(by_level, key=level_key)
    for i, level in enumerate(levels):
        colour = LEVEL_COLOURS[i % len(LEVEL_COLOURS)]
        stack = np.vstack(by_level[level])
        for trace in stack:
            ax.plot(grid, trace, color=colour, alpha=0.18, linewidth=0.7)
        with np.errstate(all="ignore"):
            import warnings

            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                mean = np.nanmean(stack, axis=0)
        ax.plot(grid, mean, color=colour, linewidth=2.2, label=f"{level} (n={len(stack)})")
    ax.axhline(0.0, color=MUTED_INK, linewidth=0.8)
    unit = pupil.get("unit", "au")
    ax.set_xlabel("seconds after the window start (recorder clock)")
    ax.set_ylabel(f"pupil change from baseline ({unit})")
    what = f"by {factor}" if factor else "by block"
    ax.set_title(f"Pupil response {what}: {_who(result)}")
    if levels:
        ax.legend(
            title=factor or "block",
            loc="upper left",
            bbox_to_anchor=(1.01, 1.0),
            fontsize=8.5,
            title_fontsize=9,
        )
    else:
        ax.text(
            0.5,
            0.5,
            "no trial had a usable pupil baseline",
            transform=ax.transAxes,
            ha="center",
            color=MUTED_INK,
        )
    return fig


def _ecg(result: SessionResult, ecg: dict[str, Any]) -> Figure:
    fig, (top, bottom) = _figure(2, (7.2, 5.2))
    times = np.asarray(ecg["times"])
    trace = np.asarray(ecg["ecg"])
    peaks = np.asarray(ecg["peaks"], dtype=int)
    t0 = float(times[0])
    mid = t0 + (float(times[-1]) - t0) / 2 - STRIP_S / 2
    start = max(t0, mid)
    lo, hi = np.searchsorted(times, start), np.searchsorted(times, start + STRIP_S)
    top.plot(times[lo:hi] - t0, trace[lo:hi], color=INK, linewidth=0.8)
    inside = peaks[(peaks >= lo) & (peaks < hi)]
    top.plot(times[inside] - t0, trace[inside], "o", color="#C8651B", markersize=5, label="R-peak")
    top.set_xlabel("seconds from the first ECG sample")
    top.set_ylabel(f"ECG ({ecg.get('unit') or 'as recorded'})")
    top.set_title(f"R-peak check ({STRIP_S:g} s from the middle; dots: detected R-peaks)")
    fig.suptitle(f"ECG: {_who(result)}", x=0.01, ha="left", fontweight="bold", fontsize=11)
    if len(peaks) > 1:
        beat_t = times[peaks]
        rate = 60.0 / np.diff(beat_t)
        bottom.plot(beat_t[1:] - t0, rate, color=ACCENT, linewidth=0.6)
        bottom.set_ylabel("heart rate (bpm)")
    bottom.set_xlabel("seconds from the first ECG sample")
    bottom.set_title(f"Beat-to-beat heart rate ({len(peaks)} beats)")
    return fig


def _eeg(result: SessionResult, eeg: dict[str, Any], factor: str | None) -> Figure:
    fig = Figure(figsize=(8.4, 3.8), dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    left, right = fig.subplots(1, 2, width_ratios=[1.0, 1.3])
    reasons: dict[str, int] = dict(eeg.get("reasons") or {})
    kept = int(eeg.get("kept", 0))
    requested = int(eeg.get("requested", 0))
    labels = ["kept", *sorted(reasons)]
    values = [kept, *(reasons[r] for r in sorted(reasons))]
    colours = [ACCENT] + ["#C8651B"] * len(reasons)
    y = np.arange(len(labels))[::-1]
    left.barh(y, values, color=colours, height=0.5)
    left.set_yticks(y, [lab.replace("_", " ") for lab in labels])
    for yi, v in zip(y, values, strict=True):
        left.text(v, yi, f" {v}", va="center", color=INK)
    left.set_xlabel("epochs (one may have several reasons)")
    left.set_xlim(0, max([*values, 1]) * 1.25)
    left.set_ylim(-0.8, len(labels) - 0.2)
    bad = eeg.get("bad") or []
    chans = eeg.get("channels")
    left.set_title(f"Epochs kept: {kept} of {requested}")
    bad_text = ", ".join(bad) if bad else "none"
    left.text(
        0.0,
        -0.3,
        f"bad channels ({len(bad)} of {chans}): {bad_text}",
        transform=left.transAxes,
        color=MUTED_INK,
        fontsize=8.5,
    )
    # Per-trial band power of the first two measures, by level of the first factor.
    key = factor or "block"
    shown = result.eeg_columns[:1] + [c for c in result.eeg_columns if "alpha_parietal" in c][:1]
    if len(shown) < 2:
        shown = result.eeg_columns[:2]
    levels = sorted({str(r.get(key)) for r in result.trials}, key=level_key)
    width = 0.35
    for k, col in enumerate(shown):
        colour = LEVEL_COLOURS[k % len(LEVEL_COLOURS)]
        for i, level in enumerate(levels):
            vals = [
                r[col] for r in result.trials if str(r.get(key)) == level and r.get(col) is not None
            ]
            x = np.full(len(vals), i + (k - 0.5) * width)
            right.plot(
                x,
                vals,
                "o",
                color=colour,
                alpha=0.75,
                markersize=4.5,
                label=_band_label(col) if i == 0 else None,
            )
            if vals:
                right.plot(
                    [x[0] - 0.12, x[0] + 0.12], [np.mean(vals)] * 2, color=colour, linewidth=2.2
                )
    right.set_xticks(range(len(levels)), levels)
    right.set_xlabel(key)
    right.set_ylabel("log10 power (uV^2/Hz)")
    right.set_title("Band power per kept trial")
    right.grid(True, color=GRID, linewidth=0.8)
    right.set_axisbelow(True)
    if shown:
        right.legend(loc="best", fontsize=8.5)
    fig.suptitle(f"EEG: {_who(result)}", x=0.01, ha="left", fontweight="bold", fontsize=11)
    return fig


def _band_label(col: str) -> str:
    parts = col.split("_")
    return f"{parts[1]}, {parts[2]}" if len(parts) > 2 else col
