"""BIDS continuous data of one session: the EEG as BrainVision, eye tracking and ECG as physio.

``trialdeck export --recording FILE.xdf --with-data`` writes, next to a session's events files
(datatype ``eeg``):

* the EEG stream as BrainVision (``_eeg.vhdr/.vmrk/.eeg``) with the ``_eeg.json`` and
  ``_channels.tsv`` that mne-bids writes (:func:`write_eeg`);
* each eye-tracking stream as ``_recording-eye<n>_physio.tsv.gz`` and ECG stream as
  ``_recording-ecg_physio.tsv.gz``, each with its ``_physio.json`` sidecar (:func:`write_physio`).

Time zero of every file is time zero of the events: the first EEG sample after pyxdf's clock
synchronisation and dejittering (:func:`runner.data.origins.recording_origin`). Samples are read
in one place, :func:`stream_signal`, so the reader behind it can change without touching the
writers. mne-bids writes no events file here (the raw data carry no annotations); trialdeck's
own ``_events.tsv`` with its fixed ``value`` codes is written after the data.
"""

from __future__ import annotations

import gzip
import json
import re
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from runner.contract.layout import PARTICIPANT_PREFIX, SESSION_PREFIX
from runner.contract.outputs import ensure_folder, replace_file
from runner.data.origins import Origin
from runner.errors import RecordingError, StorageError, UsageError
from runner.recording.dejitter import dejitter, segments

if TYPE_CHECKING:
    from runner.recording.xdf import RecordedStream, Recording

__all__ = [
    "DATA_DATATYPE",
    "EYES",
    "ContinuousResult",
    "DataOptions",
    "SessionLabels",
    "Signal",
    "eye_columns",
    "find_streams",
    "stream_signal",
    "write_continuous",
    "write_eeg",
    "write_physio",
]

#: The datatype folder of a session exported with its data.
DATA_DATATYPE = "eeg"
#: BIDS version of a dataset with data: eye-tracking physio files came with BIDS 1.11.0.
DATA_BIDS_VERSION = "1.11.0"
#: Stream types (compared case-insensitively) read as eye tracking and as ECG.
EYE_TYPES = frozenset({"gaze", "eyetracker", "eyetracking", "eye", "pupil"})
ECG_TYPES = frozenset({"ecg"})
#: RecordedEye values of the BIDS eye-tracking convention.
EYES = ("left", "right", "cyclopean")
#: Recording labels of the physio files: eye1/eye2 as in the BIDS eye-tracking examples.
ECG_LABEL = "ecg"
EYE_LABEL = "eye"
PUPIL_LABEL = "pupil"
#: Eye-tracking columns in the order of the BIDS rule (after ``timestamp``).
EYE_COLUMNS = ("x_coordinate", "y_coordinate", "pupil_size")
# Units of voltage channels as XDF stream headers write them, in volts. The XDF meta-data
# convention for EEG streams gives "microvolts"; a header without units is read as that.
VOLT_SCALES = {
    "v": 1.0,
    "volt": 1.0,
    "volts": 1.0,
    "mv": 1e-3,
    "millivolt": 1e-3,
    "millivolts": 1e-3,
    "uv": 1e-6,
    "µv": 1e-6,
    "μv": 1e-6,
    "microvolt": 1e-6,
    "microvolts": 1e-6,
    "nv": 1e-9,
    "nanovolt": 1e-9,
    "nanovolts": 1e-9,
}
DEFAULT_EEG_UNIT = "microvolts"
# Channel types of an XDF header mapped onto MNE's; anything else is "misc".
MNE_TYPES = {"eeg": "eeg", "eog": "eog", "ecg": "ecg", "emg": "emg", "misc": "misc", "stim": "stim"}
VOLTAGE_TYPES = frozenset({"eeg", "eog", "ecg", "emg"})
# BrainVision as mne-bids writes it: float32 microvolts at a 0.1 resolution (exact for values
# from 1e-7 microvolts on); samples are scaled and written in blocks of this many.
BV_UNIT = "µV"
BV_RESOLUTION = 0.1
BV_BLOCK_SAMPLES = 100_000
# mne-bids warns that the raw data carry no events: by design, trialdeck writes the events.
NO_EVENTS_WARNING = "No events found or provided"
# Physio samples are written as the shortest text that reads back to the same value (float32 as
# float32); timestamps to the nanosecond. gzip level 6 (zlib's default) is about three times
# faster than gzip's 9 for a file a few percent larger.
TIMESTAMP_DECIMALS = 9
GZIP_LEVEL = 6
NA = "n/a"
_X = re.compile(r"(^|[^a-z])(x|gaze_?x|pos(ition)?_?x|screen_?x)($|[^a-z])")
_Y = re.compile(r"(^|[^a-z])(y|gaze_?y|pos(ition)?_?y|screen_?y)($|[^a-z])")


@dataclass(frozen=True)
class SessionLabels:
    """The BIDS labels of one session's files."""

    participant: str
    session: str
    task: str

    def stem(self) -> str:
        return f"{PARTICIPANT_PREFIX}{self.participant}_{SESSION_PREFIX}{self.session}_task-{self.task}"

    def folder(self, out: Path) -> Path:
        sub = f"{PARTICIPANT_PREFIX}{self.participant}"
        return out / sub / f"{SESSION_PREFIX}{self.session}" / DATA_DATATYPE


@dataclass(frozen=True)
class Signal:
    """The samples of one regularly sampled stream on its dejittered timestamps.

    ``times`` are on the recorder's clock (pyxdf's clock synchronisation, then one least-squares
    line over the sample index); ``data`` has shape (samples, channels) as stored in the file.
    """

    stream: RecordedStream
    times: np.ndarray
    data: np.ndarray

    @property
    def sfreq(self) -> float:
        """Samples per second on the recorder's clock (the slope of the dejittered line)."""
        return float((len(self.times) - 1) / (self.times[-1] - self.times[0]))

    def labels(self, default: str) -> list[str]:
        """Channel labels from the stream header, else ``default`` plus the channel number."""
        n = self.data.shape[1]
        given = [c.get("label", "").strip() for c in self.stream.channels]
        if len(given) != n or not all(given) or len(set(given)) != n:
            return [f"{default}{i + 1}" for i in range(n)]
        return given

    def channel_field(self, name: str) -> list[str]:
        """One text field of every channel of the header (``""`` where absent)."""
        n = self.data.shape[1]
        given = [c.get(name, "").strip() for c in self.stream.channels]
        return given if len(given) == n else [""] * n


def stream_signal(rec: Recording, stream_id: int) -> Signal:
    """Samples and dejittered timestamps of one regularly sampled stream of ``rec``.

    The only place the continuous writers read samples; the stream is read once per export.

    Raises
    ------
    RecordingError
        The stream is irregular or holds text, has fewer than two samples, or has breaks
        (BrainVision and physio files need one uninterrupted stretch at a fixed rate).
    """
    stream = rec.stream(stream_id)
    if stream.nominal_srate <= 0 or stream.channel_format == "string":
        raise RecordingError(
            f"{stream.label()} in {rec.path} is not regularly sampled numbers, so it cannot be "
            "written as continuous data."
        )
    raw_times = rec.timestamps(stream_id)
    if len(raw_times) < 2:
        raise RecordingError(f"{stream.label()} in {rec.path} has fewer than two samples.")
    parts = segments(raw_times, stream.nominal_srate)
    if len(parts) > 1:
        first_gap = parts[0][1]
        gap = float(raw_times[first_gap + 1] - raw_times[first_gap])
        raise RecordingError(
            f"{stream.label()} in {rec.path} has {len(parts) - 1} break(s) in its samples (the "
            f"first, {gap:.3f} s, after sample {first_gap + 1}); BrainVision and physio files "
            "need one uninterrupted stretch, so it cannot be exported with --with-data. Export "
            "without --with-data, or check the recording (trialdeck audit --recording)."
        )
    data = np.asarray(rec.values(stream_id))
    if data.ndim == 1:
        data = data[:, None]
    return Signal(stream=stream, times=dejitter(raw_times, stream.nominal_srate), data=data)


def _matches(stream: RecordedStream, choice: str) -> bool:
    return choice in (stream.name, stream.source_id) or choice.lower() == stream.type.lower()


def find_streams(rec: Recording, types: frozenset[str], choice: str | None, what: str) -> list[int]:
    """Ids of the streams of one kind: those named by ``choice`` (name, source_id or type), else
    every numeric stream with samples whose type is in ``types``.

    Raises
    ------
    RecordingError
        ``choice`` names no stream of the recording.
    """
    candidates = [s for s in sorted(rec.streams, key=lambda x: x.stream_id) if s.sample_count]
    if choice is not None:
        chosen = [s.stream_id for s in candidates if _matches(s, choice)]
        if not chosen:
            names = ", ".join(repr(s.name) for s in rec.streams) or "none"
            raise RecordingError(
                f"no stream with samples in {rec.path} has the name, source_id or type "
                f"{choice!r} given as the {what} stream (streams: {names})."
            )
        return chosen
    return [
        s.stream_id
        for s in candidates
        if s.type.strip().lower() in types and s.channel_format != "string"
    ]


# EEG


def _eeg_channels(signal: Signal) -> tuple[list[str], list[str], np.ndarray]:
    """Names, MNE channel types and scale to SI units of each EEG stream channel."""
    names = signal.labels("EEG")
    types = []
    scales = []
    default_unit = DEFAULT_EEG_UNIT
    for kind, unit in zip(signal.channel_field("type"), signal.channel_field("unit"), strict=True):
        ch_type = MNE_TYPES.get(kind.lower(), "misc") if kind else "eeg"
        types.append(ch_type)
        if ch_type in VOLTAGE_TYPES:
            scale = VOLT_SCALES.get((unit or default_unit).lower())
            if scale is None:
                raise RecordingError(
                    f"{signal.stream.label()}: the unit {unit!r} of a {ch_type.upper()} channel "
                    f"is not a voltage unit trialdeck knows ({', '.join(sorted(VOLT_SCALES))})."
                )
            scales.append(scale)
        else:
            scales.append(1.0)
    return names, types, np.asarray(scales, dtype=float)


def write_eeg(
    signal: Signal,
    out: Path,
    labels: SessionLabels,
    *,
    line_freq: float | None,
    notes: list[str],
) -> list[Path]:
    """Write the EEG stream as BrainVision into the dataset with mne-bids (``write_raw_bids``).

    The samples are written once, in blocks, as a BrainVision file set in a temporary folder
    (float32 microvolts at a 0.1 resolution, pybv's and mne-bids' defaults; the header by pybv);
    mne-bids then reads its header (``mne.io.read_raw_brainvision``, no samples loaded) and
    copies it into the dataset with the ``_eeg.json``, ``_channels.tsv`` and scans entries.
    Handing mne-bids the samples in memory instead would convert them to float64 three times
    (about 8 GB for an hour of 64 channels at 1 kHz). Its first sample is time zero of the
    events and its rate is the stream's dejittered rate, so sample ``i`` lies at
    ``i / SamplingFrequency`` seconds on the events' time axis. Voltages are converted from the
    header's units (microvolts when it gives none). The raw data carry no annotations, so
    mne-bids writes no events file. Its warnings, and pybv's, are added to ``notes``.

    Returns
    -------
    list of Path
        Every file mne-bids wrote or updated.
    """
    import shutil

    import mne
    from mne_bids import BIDSPath, write_raw_bids
    from pybv import write_brainvision

    names, types, scales = _eeg_channels(signal)
    voltage = np.asarray([ch in VOLTAGE_TYPES for ch in types])
    # Per channel: stored value -> the number written (microvolts / resolution, or as is).
    factors = np.where(voltage, scales * 1e6, 1.0) / BV_RESOLUTION
    units = [BV_UNIT if v else NA for v in voltage]
    path = BIDSPath(
        subject=labels.participant,
        session=labels.session,
        task=labels.task,
        datatype=DATA_DATATYPE,
        suffix=DATA_DATATYPE,
        root=out,
    )
    temp = out / f".trialdeck-eeg-{labels.participant}-{labels.session}"
    before = _files(out, labels)
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            shutil.rmtree(temp, ignore_errors=True)
            temp.mkdir(parents=True)
            # pybv writes the header files (and a one-sample .eeg, replaced next).
            write_brainvision(
                data=(signal.data[:1].astype(np.float64) * scales).T,
                sfreq=signal.sfreq,
                ch_names=names,
                fname_base=path.basename,
                folder_out=temp,
                resolution=BV_RESOLUTION,
                unit=units,
                fmt="binary_float32",
                meas_date=None,
                overwrite=True,
            )
            with open(temp / f"{path.basename}.eeg", "wb") as fh:
                for start in range(0, len(signal.data), BV_BLOCK_SAMPLES):
                    block = signal.data[start : start + BV_BLOCK_SAMPLES]
                    np.multiply(block, factors, dtype=np.float64).astype("<f4").tofile(fh)
            raw = mne.io.read_raw_brainvision(temp / f"{path.basename}.vhdr", verbose=False)
            raw.set_channel_types(dict(zip(names, types, strict=True)), verbose=False)
            raw.info["line_freq"] = line_freq
            write_raw_bids(raw, path, overwrite=True, readme=False, verbose=False)
    except OSError as exc:
        raise StorageError(
            f"cannot write the EEG data under {out}: {exc.strerror or exc}."
        ) from None
    finally:
        shutil.rmtree(temp, ignore_errors=True)
    notes.extend(
        f"mne-bids: {w.message}" for w in caught if not str(w.message).startswith(NO_EVENTS_WARNING)
    )
    # mne-bids names the maker of the file format's originator ("Brain Products" for
    # BrainVision), not of the amplifier, which the XDF header does not give here.
    sidecar = path.copy().update(suffix=DATA_DATATYPE, extension=".json").fpath
    try:
        meta = json.loads(Path(sidecar).read_text(encoding="utf-8"))
        meta["Manufacturer"] = NA
        with replace_file(Path(sidecar)) as fh:
            fh.write(json.dumps(meta, indent=4, ensure_ascii=False) + "\n")
    except OSError as exc:
        raise StorageError(f"cannot update {sidecar}: {exc.strerror or exc}.") from None
    return sorted(p for p, stamp in _files(out, labels).items() if before.get(p) != stamp)


def _files(out: Path, labels: SessionLabels) -> dict[Path, tuple[int, int]]:
    """Files where mne-bids writes for one session: the root's own files and the session folder."""
    found = [p for p in out.iterdir() if p.is_file()] if out.is_dir() else []
    ses = labels.folder(out).parent
    if ses.is_dir():
        found.extend(p for p in ses.rglob("*") if p.is_file())
    return {p: (p.stat().st_mtime_ns, p.stat().st_size) for p in found}


# Physio


@dataclass(frozen=True)
class PhysioColumn:
    """One column of a physio file: which stream channel, its name and sidecar entry."""

    channel: int
    name: str
    description: str
    units: str = ""


def eye_columns(
    signal: Signal, recorded_eye: str | None, notes: list[str] | None = None
) -> dict[str, list[PhysioColumn]]:
    """The physio columns of an eye-tracking stream per eye (``left``, ``right``, or the eye
    given for channels that name none), from the channel labels and types of its header.

    A channel is gaze x or y when its label or type says so (``x``, ``gaze_x``, ``screen_x``,
    ``position_x``, ...), pupil size when it says ``pupil``; other channels are left out. When
    several channels of one eye read as the same column, the first is used and the others are
    named in ``notes``.

    Raises
    ------
    RecordingError
        The header names no gaze or pupil channel, or channels name no eye and none was given.
    """
    labels = signal.labels("channel")
    kinds = signal.channel_field("type")
    units = signal.channel_field("unit")
    found: dict[str, list[PhysioColumn]] = {}
    for i, (label, kind, unit) in enumerate(zip(labels, kinds, units, strict=True)):
        text = f"{label} {kind}".lower()
        eye = "left" if "left" in text else "right" if "right" in text else None
        bare = text.replace("left", " ").replace("right", " ")
        if "pupil" in text:
            shape = "area" if "area" in text else "diameter" if "diam" in text else None
            what = (
                f"Pupil {shape} of the recorded eye"
                if shape
                else "Pupil size of the recorded eye, diameter or area as the eye tracker "
                "reports it (its stream header does not say which)"
            )
            column = PhysioColumn(i, "pupil_size", f"{what}; channel {label!r}.", unit)
        elif _X.search(bare):
            column = PhysioColumn(i, "x_coordinate", f"Gaze x-coordinate; channel {label!r}.", unit)
        elif _Y.search(bare):
            column = PhysioColumn(i, "y_coordinate", f"Gaze y-coordinate; channel {label!r}.", unit)
        else:
            continue
        if eye is None:
            if recorded_eye is None:
                raise RecordingError(
                    f"the channels of {signal.stream.label()} do not say which eye they "
                    "record (no 'left' or 'right' in their labels); give it with "
                    "--recorded-eye."
                )
            eye = recorded_eye
        same = [c for c in found.get(eye, []) if c.name == column.name]
        if same:
            if notes is not None:
                notes.append(
                    f"{signal.stream.label()}: channel {label!r} also reads as the {eye} eye's "
                    f"{column.name}; the first such channel, {labels[same[0].channel]!r}, is "
                    "written."
                )
            continue
        found.setdefault(eye, []).append(column)
    if not found:
        raise RecordingError(
            f"{signal.stream.label()} has no channel labelled as gaze x, gaze y or pupil in its "
            "header (desc/channels), so its columns cannot be named; choose another stream."
        )
    return found


def physio_paths(out: Path, labels: SessionLabels, recording: str) -> tuple[Path, Path]:
    """``(physio.tsv.gz, physio.json)`` of one recording label of a session."""
    stem = f"{labels.stem()}_recording-{recording}_physio"
    folder = labels.folder(out)
    return folder / f"{stem}.tsv.gz", folder / f"{stem}.json"


def write_physio(
    signal: Signal,
    out: Path,
    labels: SessionLabels,
    *,
    recording: str,
    columns: Sequence[PhysioColumn],
    zero: float,
    sidecar: dict[str, Any],
    timestamp: bool = False,
) -> tuple[Path, Path]:
    """Write one ``_physio.tsv.gz`` (no header line, ``n/a`` for missing) and its sidecar.

    ``StartTime`` is the stream's first dejittered timestamp minus ``zero`` (the recorder time
    of the first EEG sample, time zero of the events); ``SamplingFrequency`` is its dejittered
    rate. With ``timestamp``, the first column is each sample's time in seconds on that axis.
    """
    import pandas as pd

    tsv, side = physio_paths(out, labels, recording)
    times = signal.times - zero
    picked = signal.data[:, [c.channel for c in columns]]
    frame = pd.DataFrame(picked, columns=[c.name for c in columns], copy=False)
    if timestamp:
        frame.insert(0, "timestamp", np.round(times, TIMESTAMP_DECIMALS))
    names = (["timestamp"] if timestamp else []) + [c.name for c in columns]
    meta: dict[str, Any] = {
        "SamplingFrequency": signal.sfreq,
        "StartTime": round(float(times[0]), TIMESTAMP_DECIMALS),
        "Columns": names,
    }
    meta.update(sidecar)
    if timestamp:
        meta["timestamp"] = {
            "Description": "Time of the sample in seconds on the events' time axis (0 = first "
            "EEG sample), from the stream's dejittered timestamps.",
            "Units": "s",
        }
    for c in columns:
        entry: dict[str, Any] = {"Description": c.description}
        if c.units:
            entry["Units"] = c.units
        meta[c.name] = entry
    try:
        ensure_folder(out, tsv.parent.relative_to(out).parts)
        with (
            replace_file(tsv, binary=True) as fh,
            gzip.GzipFile(fileobj=fh, mode="wb", compresslevel=GZIP_LEVEL) as gz,
        ):
            # No float_format: numpy's shortest round-trip text of each value (float32 values
            # as float32), formatted in C; missing samples as n/a.
            frame.to_csv(
                gz,
                sep="\t",
                header=False,
                index=False,
                na_rep=NA,
                lineterminator="\n",
                encoding="utf-8",
            )
        with replace_file(side) as jf:
            jf.write(json.dumps(meta, indent=2, ensure_ascii=False) + "\n")
    except OSError as exc:
        raise StorageError(
            f"cannot write the physio files in {tsv.parent}: {exc.strerror or exc}."
        ) from None
    return tsv, side


# One session


@dataclass
class ContinuousResult:
    """What :func:`write_continuous` wrote for one session."""

    eeg: list[Path] = field(default_factory=list)
    physio: list[tuple[Path, Path]] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    def files(self) -> list[Path]:
        return [*self.eeg, *(p for pair in self.physio for p in pair)]


@dataclass(frozen=True)
class DataOptions:
    """The ``--with-data`` options of an export (picklable)."""

    line_freq: float | None = None
    eye_stream: str | None = None
    ecg_stream: str | None = None
    recorded_eye: str | None = None


def write_continuous(
    rec: Recording,
    origin: Origin,
    out: Path,
    labels: SessionLabels,
    *,
    options: DataOptions,
    screen_known: bool,
) -> ContinuousResult:
    """Write the EEG, eye-tracking and ECG streams of one session's recording.

    ``origin`` is the session's recording origin (its ``zero`` is the recorder time of the
    first EEG sample). ``screen_known``: the events sidecar gives the screen's size and
    distance, so gaze can be declared ``gaze-on-screen`` (the BIDS check
    EyetrackingStimulusPresentation needs them); otherwise gaze is ``custom``.

    Raises
    ------
    RecordingError
        A stream cannot be read as continuous data, or its channels cannot be named.
    UsageError
        The recorded eye given is not one of :data:`EYES`.
    """
    if origin.kind != "recording":
        raise UsageError("--with-data needs --recording FILE.xdf for every session.")
    if options.recorded_eye is not None and options.recorded_eye not in EYES:
        raise UsageError(f"--recorded-eye must be one of {', '.join(EYES)}.")
    result = ContinuousResult()
    eeg = stream_signal(rec, int(origin.details["eeg_stream_id"]))
    result.eeg = write_eeg(eeg, out, labels, line_freq=options.line_freq, notes=result.notes)
    del eeg
    zero = origin.zero
    eye_ids = find_streams(rec, EYE_TYPES, options.eye_stream, "eye-tracking")
    if len(eye_ids) > 1:
        raise RecordingError(_several(rec, eye_ids, "eye-tracking", "--eye-stream"))
    for sid in eye_ids:
        signal = stream_signal(rec, sid)
        per_eye = eye_columns(signal, options.recorded_eye, result.notes)
        gaze_files = pupil_files = 0
        for eye in sorted(per_eye, key=EYES.index):
            columns = sorted(per_eye[eye], key=lambda c: EYE_COLUMNS.index(c.name))
            if {"x_coordinate", "y_coordinate"} <= {c.name for c in columns}:
                gaze_files += 1
                result.physio.append(
                    _write_gaze(signal, out, eye, gaze_files, columns, zero, screen_known, labels)
                )
                continue
            # Without both gaze coordinates it is not eye-tracking physio in BIDS terms (x and
            # y are required): a pupil channel is written as generic physio, lone x or y is not.
            pupil = [c for c in columns if c.name == "pupil_size"]
            if len(pupil) < len(columns):
                result.notes.append(
                    f"{signal.stream.label()}: the {eye} eye has only one gaze coordinate; it "
                    "is left out (BIDS eye-tracking files need both)."
                )
            if pupil:
                pupil_files += 1
                result.physio.append(
                    _write_pupil(signal, out, eye, pupil_files, pupil, zero, labels)
                )
    ecg_ids = find_streams(rec, ECG_TYPES, options.ecg_stream, "ECG")
    if len(ecg_ids) > 1:
        raise RecordingError(_several(rec, ecg_ids, "ECG", "--ecg-stream"))
    for sid in ecg_ids:
        signal = stream_signal(rec, sid)
        names = signal.labels("ecg")
        units = signal.channel_field("unit")
        columns = [
            PhysioColumn(
                i,
                "cardiac" if i == 0 else _column_name(names[i]),
                f"Electrocardiogram, channel {names[i]!r} of stream {signal.stream.name!r}"
                + (" (the cardiac signal)." if i == 0 else "."),
                units[i],
            )
            for i in range(signal.data.shape[1])
        ]
        sidecar = {
            "PhysioType": "generic",
            **_stream_note(signal),
        }
        result.physio.append(
            write_physio(
                signal, out, labels, recording=ECG_LABEL, columns=columns, zero=zero,
                sidecar=sidecar,
            )
        )  # fmt: skip
    return result


def _write_gaze(
    signal: Signal,
    out: Path,
    eye: str,
    n: int,
    columns: list[PhysioColumn],
    zero: float,
    screen_known: bool,
    labels: SessionLabels,
) -> tuple[Path, Path]:
    """One eye's ``recording-eye<n>`` file: BIDS eye-tracking physio."""
    units = {c.units for c in columns if c.name != "pupil_size"} - {""}
    sidecar: dict[str, Any] = {
        "PhysioType": "eyetrack",
        "RecordedEye": eye,
        **_stream_note(signal),
    }
    if screen_known:
        sidecar["SampleCoordinateSystem"] = "gaze-on-screen"
    else:
        sidecar["SampleCoordinateSystem"] = "custom"
        sidecar["SampleCoordinateSystemDescription"] = (
            "Gaze coordinates as the eye tracker's stream gives them"
            + (f" (units: {', '.join(sorted(units))})" if units else "")
            + "; the protocol gives no screen size and distance, so they are not declared "
            "gaze-on-screen."
        )
    return write_physio(
        signal, out, labels, recording=f"{EYE_LABEL}{n}", columns=columns, zero=zero,
        sidecar=sidecar, timestamp=True,
    )  # fmt: skip


def _write_pupil(
    signal: Signal,
    out: Path,
    eye: str,
    n: int,
    columns: list[PhysioColumn],
    zero: float,
    labels: SessionLabels,
) -> tuple[Path, Path]:
    """One eye's pupil without gaze: ``recording-pupil`` (``pupil2``, ...), generic physio."""
    sidecar = {"PhysioType": "generic", **_stream_note(signal)}
    label = PUPIL_LABEL if n == 1 else f"{PUPIL_LABEL}{n}"
    columns = [replace(c, description=f"{c.description} Recorded eye: {eye}.") for c in columns]
    return write_physio(
        signal, out, labels, recording=label, columns=columns, zero=zero, sidecar=sidecar
    )


def _stream_note(signal: Signal) -> dict[str, Any]:
    s = signal.stream
    return {
        "Description": f"Stream {s.name!r} (type {s.type!r}, source_id {s.source_id!r}) of the "
        f"XDF recording, nominal rate {s.nominal_srate:g} Hz; SamplingFrequency is its rate on "
        "the recorder's clock after dejittering.",
    }


def _column_name(label: str) -> str:
    name = re.sub(r"[^A-Za-z0-9_]+", "_", label).strip("_").lower()
    return name or "channel"


def _several(rec: Recording, ids: list[int], what: str, option: str) -> str:
    names = ", ".join(rec.stream(i).label() for i in ids)
    return (
        f"{rec.path} has several {what} streams ({names}); choose one with {option} "
        "(its name or source_id)."
    )
