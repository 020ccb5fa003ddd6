"""Per-session physiology: one session and its recording in, per-trial and per-period rows out.

:func:`process_session` is the unit of work: it reads one session's journal, lines its recording
up with it (:mod:`runner.physio.windows`), reads the chosen streams (:mod:`runner.physio.signals`),
computes the measures (:mod:`runner.physio.pupil`, :mod:`runner.physio.cardiac`,
:mod:`runner.physio.eeg`), draws the session's QA figures and returns plain rows, so it can run in
a worker process or on a Dask worker and only the rows travel back. :func:`run_sessions` runs it
for every session: here, in ``jobs`` worker processes, or on an existing Dask cluster.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from runner.errors import RecordingError, UsageError
from runner.physio.config import PhysioConfig
from runner.physio.signals import (
    ECG_LABEL_HINTS,
    PHOTODIODE_LABEL_HINTS,
    PUPIL_LABEL_HINTS,
    RR_LABEL_HINTS,
    Signal,
    StreamHeader,
    channel_index,
    choose_stream,
    read_chosen,
    signals_from,
    stream_headers,
)
from runner.physio.windows import SessionTimes, TrialTimes, session_times, window_bounds

__all__ = [
    "SessionJob",
    "SessionResult",
    "check_distinct",
    "check_pairs",
    "process_session",
    "run_sessions",
]

MARKER_TYPE = "Markers"
LABEL_KEYS = ("study", "participant", "session")
#: Command-line options that choose a stream by name, per kind (for error messages).
STREAM_OPTIONS = {
    "eeg": "--eeg-stream",
    "pupil": "--pupil-stream",
    "ecg": "--ecg-stream",
    "rr": "--rr-stream",
    "photodiode": "--photodiode-stream",
}
#: Pupil units written into column names: the stream's channel unit, when it is millimetres.
MM_UNITS = frozenset({"mm", "millimeters", "millimetres"})
EEG_UNITS = {
    "uv": "uV",
    "µv": "uV",
    "microvolts": "uV",
    "microvolt": "uV",
    "mv": "mV",
    "millivolts": "mV",
    "v": "V",
    "volts": "V",
}
#: Points of the pupil traces drawn in the QA figure, per trial.
TRACE_POINTS = 100


@dataclass(frozen=True)
class SessionJob:
    """One session and its recording (picklable: sent to worker processes and Dask workers)."""

    folder: Path
    recording: Path
    config: PhysioConfig | None = None  # None: the protocol's physio section, else defaults
    figures: Path | None = None  # folder for the QA PNGs, None for none
    allow_truncated: bool = False
    stream_names: tuple[tuple[str, str], ...] = ()  # (kind, stream name) chosen on the command line


@dataclass
class SessionResult:
    """What one session gives: rows, column facts, notes, figures written."""

    participant: str
    session: str
    folder: Path
    trials: list[dict[str, Any]]
    periods: list[dict[str, Any]]
    table_columns: list[str]
    pupil_unit: str = "au"
    streams: dict[str, str] = field(default_factory=dict)  # kind -> stream label
    notes: list[str] = field(default_factory=list)
    figures: list[Path] = field(default_factory=list)
    eeg_columns: list[str] = field(default_factory=list)
    origin: dict[str, Any] = field(default_factory=dict)


def effective_config(job: SessionJob, protocol_config: PhysioConfig | None) -> PhysioConfig:
    """The job's config, else the protocol's ``physio:`` section, else the defaults."""
    config = job.config or protocol_config or PhysioConfig()
    if job.stream_names:
        named = {
            kind: getattr(config.streams, kind).model_copy(update={"name": name})
            for kind, name in job.stream_names
        }
        config = config.model_copy(update={"streams": config.streams.model_copy(update=named)})
    return config


def _choose(headers: list[StreamHeader], config: PhysioConfig) -> dict[str, StreamHeader]:
    chosen: dict[str, StreamHeader] = {}
    streams = config.streams
    wanted = {
        "eeg": (streams.eeg, config.eeg.enabled),
        "pupil": (streams.pupil, config.pupil.enabled),
        "ecg": (streams.ecg, config.cardiac.enabled),
        "rr": (streams.rr, config.cardiac.enabled),
        "photodiode": (streams.photodiode, True),
    }
    for kind, (choice, enabled) in wanted.items():
        if not enabled:
            continue
        header = choose_stream(headers, choice, kind, option=STREAM_OPTIONS[kind])
        if header is not None:
            chosen[kind] = header
    if "ecg" in chosen:
        chosen.pop("rr", None)  # R-peaks from the ECG itself are preferred to a device's RR
    return chosen


def process_session(job: SessionJob) -> SessionResult:
    """Compute one session's physiology (see the module docstring).

    Raises
    ------
    JournalError, RecordingError
        The session or its recording cannot be read or do not line up.
    """
    from runner.data.sessions import load_session

    session = load_session(job.folder)
    config = effective_config(job, session.protocol.physio)
    headers = stream_headers(job.recording)
    chosen = _choose(headers, config)
    zero = chosen.get("eeg") or next(iter(chosen.values()), None)
    if zero is None:
        raise RecordingError(f"{job.recording} has no signal stream to count time from.")
    wanted: dict[str, tuple[StreamHeader, list[int] | None]] = {}
    hints = {
        "pupil": (config.streams.pupil, PUPIL_LABEL_HINTS),
        "ecg": (config.streams.ecg, ECG_LABEL_HINTS),
        "rr": (config.streams.rr, RR_LABEL_HINTS),
        "photodiode": (config.streams.photodiode, PHOTODIODE_LABEL_HINTS),
    }
    for kind, header in chosen.items():
        if kind == "eeg":
            wanted[kind] = (header, None)
        else:
            choice, hint = hints[kind]
            wanted[kind] = (header, [channel_index(header, choice, hint)])
    # The one reader reads the file once: the marker streams (for the clock model) and the
    # chosen channels; export's recording_origin fits the clock model and time zero to it.
    markers = {h.stream_id for h in headers if h.type == MARKER_TYPE}
    rec = read_chosen(job.recording, wanted, markers, allow_truncated=job.allow_truncated)
    times = session_times(
        session,
        job.recording,
        allow_truncated=job.allow_truncated,
        rec=rec,
        zero_stream=zero.stream_id,
        sample=True,
    )
    zero_times = times.origin.sample_times
    signals = signals_from(
        rec, wanted, None if zero_times is None else {zero.stream_id: zero_times}
    )
    times.origin = times.origin.without_samples()
    del rec
    result = SessionResult(
        participant=session.participant,
        session=session.session,
        folder=job.folder,
        trials=[_base_row(session.participant, session.session, t) for t in times.trials],
        periods=[],
        table_columns=session.table_columns,
        streams={k: h.label() for k, h in chosen.items()},
        origin={
            k: times.origin.details.get(k)
            for k in ("clock_offset_s", "clock_drift_ppm", "markers_matched", "markers_journaled")
        },
    )
    for kind in ("eeg", "pupil"):
        if kind not in signals and getattr(config, kind).enabled:
            result.notes.append(f"no {kind} stream was found, so its measures are left empty.")
    if "ecg" not in signals and "rr" not in signals and config.cardiac.enabled:
        result.notes.append(
            "no ECG or RR stream was found, so the cardiac measures are left empty."
        )
    qa: dict[str, Any] = {"factor": _condition_factor(session)}
    if "pupil" in signals and config.pupil.enabled:
        qa["pupil"] = _pupil(result, times, signals["pupil"], config, qa["factor"] or "block")
    beats: np.ndarray | None = None
    if config.cardiac.enabled and ("ecg" in signals or "rr" in signals):
        beats, qa["ecg"] = _beats(signals)
        _cardiac(result, times, beats, config)
    if "eeg" in signals and config.eeg.enabled:
        qa["eeg"] = _eeg(result, times, signals["eeg"], config)
    if "photodiode" in signals:
        _photodiode(result, times, signals["photodiode"])
    _mark_valid(result)
    if job.figures is not None:
        from runner.physio.figures import session_figures

        result.figures = session_figures(result, qa, job.figures)
    return result


def _base_row(participant: str, session: str, t: TrialTimes) -> dict[str, Any]:
    row: dict[str, Any] = {"participant": participant, "session": session, "trial": t.trial}
    for key, value in t.record.items():
        if key == "values" and isinstance(value, dict):
            for col, v in value.items():
                row.setdefault(col, v)
        elif key not in row:
            row[key] = value
    return row


def _mark_valid(result: SessionResult) -> None:
    """``valid`` per trial: every per-trial measure computed gave its value without a flag.

    Pupil counts when ``pupil_flags`` is empty, heart rate when ``hr_flags`` is empty, EEG when
    ``eeg_kept`` is 1; a trial with none of them computed is not valid.
    """
    for row in result.trials:
        checks = []
        if "pupil_flags" in row:
            checks.append(not row["pupil_flags"])
        if "hr_flags" in row:
            checks.append(not row["hr_flags"])
        if "eeg_kept" in row:
            checks.append(row["eeg_kept"] == 1)
        row["valid"] = int(bool(checks) and all(checks))


def _condition_factor(session: Any) -> str | None:
    factors = list(session.factors)
    return factors[0] if factors else None


def _flags(flags: Sequence[str]) -> str:
    return ";".join(flags)


# Pupil


def _pupil(
    result: SessionResult, times: SessionTimes, signal: Signal, config: PhysioConfig, factor: str
) -> dict[str, Any]:
    from runner.physio.pupil import PupilSettings, baseline_value, clean_pupil, trial_pupil

    unit = (signal.units[0] if signal.units else "").strip().lower()
    result.pupil_unit = "mm" if unit in MM_UNITS else "au"
    u = result.pupil_unit
    pc = config.pupil
    base = PupilSettings()
    settings = dataclasses.replace(
        base,
        max_interpolated_share=pc.max_interpolated_share,
        max_gap_s=pc.max_gap_s * times.scale,
        baseline_z=pc.baseline_z,
        baseline_s=(pc.baseline.duration_s or base.baseline_s) * times.scale,
        margin_before_s=base.margin_before_s * times.scale,
        margin_after_s=base.margin_after_s * times.scale,
        size_range=base.size_range if u == "mm" else None,
    )
    clean = clean_pupil(signal.times, signal.data[:, 0].astype(np.float64), settings)
    bounds = [
        (
            window_bounds(pc.baseline, t.events, times.scale),
            window_bounds(pc.window, t.events, times.scale),
        )
        for t in times.trials
    ]
    found = [baseline_value(clean, b) for b, _ in bounds if b is not None]
    session_baselines = np.asarray([v for v in found if v is not None], dtype=float)
    traces: list[tuple[Any, np.ndarray]] = []
    span = (pc.window.max_s or 10.0) * times.scale
    grid = np.linspace(0.0, span, TRACE_POINTS)
    for row, _t, (b, w) in zip(result.trials, times.trials, bounds, strict=True):
        if b is None or w is None:
            row.update(_pupil_empty(u, "no_window"))
            continue
        m = trial_pupil(clean, b, w, settings, session_baselines=session_baselines)
        row.update(
            {
                f"pupil_baseline_{u}": m.baseline,
                f"pupil_mean_change_{u}": m.mean_change,
                f"pupil_peak_change_{u}": m.peak_change,
                "pupil_peak_latency_ms": None
                if m.peak_latency_s is None
                else m.peak_latency_s * 1000.0,
                "pupil_window_ms": (w[1] - w[0]) * 1000.0,
                "pupil_valid_share": m.valid_share,
                "pupil_interpolated_share": m.interpolated_share,
                "pupil_flags": _flags(m.flags),
            }
        )
        if m.baseline is not None:
            at = np.interp(w[0] + grid, clean.times, clean.size, left=np.nan, right=np.nan)
            at[grid > (w[1] - w[0])] = np.nan
            traces.append((row.get(factor), at - m.baseline))
    return {"grid_s": grid, "traces": traces, "unit": u}


def _pupil_empty(u: str, flag: str) -> dict[str, Any]:
    return {
        f"pupil_baseline_{u}": None,
        f"pupil_mean_change_{u}": None,
        f"pupil_peak_change_{u}": None,
        "pupil_peak_latency_ms": None,
        "pupil_window_ms": None,
        "pupil_valid_share": None,
        "pupil_interpolated_share": None,
        "pupil_flags": flag,
    }


# Cardiac


def _beats(signals: dict[str, Signal]) -> tuple[np.ndarray, dict[str, Any]]:
    from runner.physio.cardiac import beats_from_rr, r_peaks

    if "ecg" in signals:
        ecg = signals["ecg"]
        trace = ecg.data[:, 0].astype(np.float64)
        idx = np.asarray(r_peaks(trace, ecg.srate), dtype=int)
        beats = ecg.times[idx]
        return beats, {"times": ecg.times, "ecg": trace, "peaks": idx, "unit": ecg.units[0]}
    rr = signals["rr"]
    beats = np.asarray(beats_from_rr(rr.data[:, 0].astype(np.float64), rr.times))
    return beats, {"times": None, "beats": beats}


def _cardiac(
    result: SessionResult, times: SessionTimes, beats: np.ndarray, config: PhysioConfig
) -> None:
    from runner.physio.cardiac import heart_rate, hrv

    for row, t in zip(result.trials, times.trials, strict=True):
        w = window_bounds(config.cardiac.window, t.events, times.scale)
        if w is None:
            row.update(
                {"hr_bpm": None, "hr_window_ms": None, "hr_beats": 0, "hr_flags": "no_window"}
            )
            continue
        hr = heart_rate(beats, w[0], w[1])
        row.update(
            {
                "hr_bpm": hr.bpm,
                "hr_window_ms": (w[1] - w[0]) * 1000.0,
                "hr_beats": hr.beats,
                "hr_flags": _flags(hr.flags),
            }
        )
    for p in times.periods:
        if p.kind not in config.cardiac.periods:
            continue
        hr = heart_rate(beats, p.start, p.end)
        v = hrv(beats, p.start, p.end)
        result.periods.append(
            {
                "participant": result.participant,
                "session": result.session,
                "period": p.kind,
                "block": p.label,
                "start_s": p.start - times.origin.zero,
                "end_s": p.end - times.origin.zero,
                "window_s": v.window_s,
                "beats": v.beats,
                "hr_bpm": hr.bpm,
                "hrv_rmssd_ms": v.rmssd_ms,
                "hrv_sdnn_ms": v.sdnn_ms,
                "hrv_hf_ms2": v.hf_ms2,
                "hrv_lf_ms2": v.lf_ms2,
                "hrv_flags": _flags(
                    tuple(hr.flags) + tuple(f for f in v.flags if f not in hr.flags)
                ),
            }
        )


# EEG


def _eeg(
    result: SessionResult, times: SessionTimes, signal: Signal, config: PhysioConfig
) -> dict[str, Any]:
    from runner.physio.eeg import EEGSettings, band_power, group_log_power, make_epochs

    ec = config.eeg
    names = signal.labels
    unit = EEG_UNITS.get((signal.units[0] if signal.units else "").strip().lower(), "uV")
    settings = EEGSettings(
        reference=ec.reference if isinstance(ec.reference, str) else list(ec.reference),
        reject_peak_to_peak_uv=ec.reject_peak_to_peak_uv,
        flat_uv=ec.flat_uv,
        bad_channel_z=ec.bad_channel_z,
        l_freq=ec.l_freq,
        h_freq=ec.h_freq,
    )
    onsets = []
    index = []
    for i, t in enumerate(times.trials):
        w = window_bounds(ec.epoch, t.events, times.scale)
        if w is not None:
            onsets.append(w[0])
            index.append(i)
    order = sorted(range(len(onsets)), key=lambda k: onsets[k])  # make_epochs wants time order
    onsets = [onsets[k] for k in order]
    index = [index[k] for k in order]
    duration = (ec.epoch.duration_s or 2.0) * times.scale
    columns = [f"eeg_{b}_{g}_log10_uv2_per_hz" for b in ec.bands for g in ec.groups]
    result.eeg_columns = columns
    for row in result.trials:
        row.update({c: None for c in columns})
        row["eeg_kept"] = 0
        row["eeg_flags"] = "no_window"
    summary: dict[str, Any] = {"requested": len(onsets), "kept": 0, "reasons": {}, "bad": []}
    if not onsets:
        return summary
    got = make_epochs(
        signal.data.T,
        names,
        signal.srate,
        float(signal.times[0]),
        np.asarray(onsets),
        0.0,
        duration,
        settings,
        units=unit,
    )
    data = got.epochs.get_data(copy=False) if _has_copy_arg() else got.epochs.get_data()
    power = band_power(data, float(got.epochs.info["sfreq"]), dict(ec.bands))
    groups = {g: chans for g, chans in ec.groups.items()}
    logp = group_log_power(power, list(got.epochs.ch_names), groups, dict(ec.bands))
    k = 0
    reasons: dict[str, int] = {}
    for j, i in enumerate(index):
        row = result.trials[i]
        kept = bool(got.kept[j])
        why = tuple(got.drop_reasons[j]) if j < len(got.drop_reasons) else ()
        row["eeg_kept"] = int(kept)
        row["eeg_flags"] = _flags(why)
        for r in why:
            reasons[r] = reasons.get(r, 0) + 1
        if kept:
            for band in ec.bands:
                for g in ec.groups:
                    key = f"{band}_{g}"
                    if key in logp:
                        value = float(logp[key][k])
                        row[f"eeg_{band}_{g}_log10_uv2_per_hz"] = (
                            value if np.isfinite(value) else None
                        )
            k += 1
    summary.update(
        {
            "kept": int(np.sum(got.kept)),
            "reasons": reasons,
            "bad": list(got.bad_channels),
            "channels": len(names),
        }
    )
    for row in result.trials:
        row["eeg_bad_channels"] = len(got.bad_channels)
    return summary


def _has_copy_arg() -> bool:
    import inspect

    import mne

    return "copy" in inspect.signature(mne.Epochs.get_data).parameters


# Photodiode


def _photodiode(result: SessionResult, times: SessionTimes, signal: Signal) -> None:
    """Lag from each stimulus_onset marker to the photodiode's next rise (half of its range)."""
    x = signal.data[:, 0].astype(np.float64)
    if not len(x):
        return
    lo, hi = np.nanpercentile(x, 1), np.nanpercentile(x, 99)
    if not hi > lo:
        return
    above = x > (lo + hi) / 2
    rises = signal.times[1:][above[1:] & ~above[:-1]]
    limit = 0.5 * times.scale if times.scale < 1 else 0.5
    for row, t in zip(result.trials, times.trials, strict=True):
        on = t.events.get("stimulus_onset")
        row["photodiode_lag_ms"] = None
        if on is None or not len(rises):
            continue
        j = int(np.searchsorted(rises, on - 0.05 * limit))
        if j < len(rises) and rises[j] - on <= limit:
            row["photodiode_lag_ms"] = float(rises[j] - on) * 1000.0


# Running many sessions


def run_sessions(
    jobs: Sequence[SessionJob],
    *,
    workers: int = 1,
    scheduler: str | None = None,
    work: Callable[[SessionJob], SessionResult] = process_session,
) -> Iterator[SessionResult]:
    """Results of ``work`` for each job, in job order: here, in ``workers`` processes (one
    session per worker at a time), or on the Dask cluster at ``scheduler``.

    Raises
    ------
    UsageError
        ``scheduler`` is given but dask.distributed is not installed, or the cluster cannot be
        reached.
    """
    if scheduler is not None:
        yield from _on_dask(jobs, scheduler, work)
        return
    if workers <= 1 or len(jobs) <= 1:
        for job in jobs:
            yield work(job)
        return
    import multiprocessing

    method = "fork" if "fork" in multiprocessing.get_all_start_methods() else "spawn"
    pool = ProcessPoolExecutor(
        max_workers=min(workers, len(jobs)),
        mp_context=multiprocessing.get_context(method),
        max_tasks_per_child=1 if method != "fork" else None,
    )
    try:
        futures = [pool.submit(work, job) for job in jobs]
        for future in futures:
            yield future.result()
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


def _on_dask(
    jobs: Sequence[SessionJob], scheduler: str, work: Callable[[SessionJob], SessionResult]
) -> Iterator[SessionResult]:
    try:
        from dask.distributed import Client
    except ImportError:
        raise UsageError(
            "--scheduler needs dask.distributed, which is not installed; install the extra with "
            "`pip install 'trialdeck[dask]'`, or use --jobs N on this machine."
        ) from None
    try:
        client = Client(scheduler, timeout="10s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise UsageError(
            f"the Dask scheduler at {scheduler} could not be reached ({exc}); check the address "
            "(such as tcp://10.0.0.5:8786) and that the cluster is running."
        ) from None
    try:
        futures = client.map(work, list(jobs), pure=False)
        for future in futures:
            yield future.result()
    finally:
        client.close()


def check_distinct(sessions: Sequence[Path]) -> None:
    """Each session once: no folder twice, no two folders with the same study, participant and
    session (their rows and figures would collide).

    Raises
    ------
    UsageError
        A session is given twice.
    """
    from runner.contract.layout import JOURNAL_NAME
    from runner.journal.read import read_journal

    seen: dict[object, Path] = {}
    for folder in sessions:
        header = read_journal(Path(folder) / JOURNAL_NAME, decode=frozenset()).header or {}
        for key in (Path(folder).resolve(), tuple(header.get(k) for k in LABEL_KEYS)):
            if key in seen:
                raise UsageError(
                    f"{seen[key]} and {folder} are the same session (study, participant and "
                    "session); give each session once."
                )
            seen[key] = Path(folder)


def check_pairs(sessions: Sequence[Path], recordings: Sequence[Path]) -> None:
    """One recording per session, in the same order.

    Raises
    ------
    UsageError
        The counts differ.
    """
    if len(sessions) != len(recordings):
        raise UsageError(
            f"{len(recordings)} recording(s) were given for {len(sessions)} session(s); give one "
            "--recording per session folder, in the same order as the folders."
        )
