"""``trialdeck export SESSION_DIR... --out DIR``: pooled trials table and BIDS events files."""

from __future__ import annotations

import argparse
from pathlib import Path

from runner.cli.args import (
    add_allow_truncated,
    add_photodiode,
    add_pooling,
    check_photodiode,
    exclusion_lines,
    positive_float,
    read_physio,
)
from runner.data.continuous import EYES
from runner.data.export import DATATYPES, DEFAULT_DATATYPE, DataOptions, export_sessions
from runner.errors import EXIT_OK, UsageError

MAX_LISTED = 10  # events files named one by one; more are counted


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``trialdeck export``."""
    parser.add_argument(
        "sessions",
        nargs="+",
        metavar="SESSION_DIR",
        help="session folders (holding journal.jsonl), or folders above them",
    )
    parser.add_argument(
        "--out", required=True, metavar="DIR", type=Path, help="export folder (a BIDS root)"
    )
    parser.add_argument(
        "--recording",
        action="append",
        metavar="FILE.xdf",
        type=Path,
        help="XDF recording of a session: onsets then count from the first sample of its EEG "
        "stream; give one per session, in session order",
    )
    add_allow_truncated(parser)
    parser.add_argument(
        "--sample",
        action="store_true",
        help="with --recording: add a sample column, the index of the EEG sample nearest to "
        "each onset",
    )
    add_photodiode(
        parser,
        "add a photodiode_onset column, the light edge of each onset that lit the photodiode "
        "patch, from a light sensor on the patch",
    )
    parser.add_argument(
        "--datatype",
        choices=DATATYPES,
        default=None,
        help=f"BIDS datatype folder of the events files (default {DEFAULT_DATATYPE}; eeg with "
        "--with-data)",
    )
    parser.add_argument(
        "--with-data",
        action="store_true",
        help="with --recording: also write the EEG stream as BrainVision and the eye-tracking "
        "and ECG streams as physio files, on the events' time axis",
    )
    parser.add_argument(
        "--line-freq",
        type=positive_float,
        metavar="HZ",
        help="with --with-data: the mains frequency where the EEG was recorded (50 or 60), for "
        "the EEG sidecar's PowerLineFrequency (default n/a: not known)",
    )
    parser.add_argument(
        "--eye-stream",
        metavar="STREAM",
        help="with --with-data: the eye-tracking stream (name, source_id or type) when several "
        "streams of an eye-tracking type are recorded",
    )
    parser.add_argument(
        "--ecg-stream",
        metavar="STREAM",
        help="with --with-data: the ECG stream (name, source_id or type) when several are recorded",
    )
    parser.add_argument(
        "--recorded-eye",
        choices=EYES,
        help="with --with-data: the eye the eye tracker's channels record when their labels "
        "do not say",
    )
    parser.add_argument(
        "--copy-stimuli",
        action="store_true",
        help="copy the sessions' stimuli into the dataset's stimuli/ folder (checked against the "
        "hashes journaled at each session's start)",
    )
    parser.add_argument(
        "--stimuli-dir",
        metavar="DIR",
        type=Path,
        help="with --copy-stimuli: where the stimuli are now, if they moved since the sessions",
    )
    parser.add_argument(
        "--force",
        action="store_true",
        help="write into an existing folder that is not empty and not an earlier export's "
        "(never into or above a session folder)",
    )
    parser.add_argument(
        "--task",
        metavar="LABEL",
        help="BIDS task label, letters and digits (default: the study id without other characters)",
    )
    add_pooling(parser)


def run(args: argparse.Namespace) -> int:
    """Export, then print what was written; exit 0."""
    from runner.data.summary_report import count

    check_photodiode(args.photodiode, args.recording)
    if args.sample and not args.recording:
        raise UsageError(
            "--sample needs --recording FILE.xdf (the EEG stream is in the recording)."
        )
    data = None
    if args.with_data:
        data = DataOptions(
            line_freq=args.line_freq,
            eye_stream=args.eye_stream,
            ecg_stream=args.ecg_stream,
            recorded_eye=args.recorded_eye,
        )
    else:
        given = [
            o
            for o, v in (
                ("--line-freq", args.line_freq),
                ("--eye-stream", args.eye_stream),
                ("--ecg-stream", args.ecg_stream),
                ("--recorded-eye", args.recorded_eye),
            )
            if v is not None
        ]
        if given:
            raise UsageError(f"{', '.join(given)} only apply with --with-data.")
    result = export_sessions(
        args.sessions,
        args.out,
        task=args.task,
        datatype=args.datatype,
        recordings=args.recording,
        allow_truncated=args.allow_truncated,
        force=args.force,
        sample=args.sample,
        photodiode=args.photodiode,
        pool_unlike=args.pool_unlike,
        physio=read_physio(args.physio),
        with_data=data,
    )
    print(
        f"Exported {count(len(result.sessions), 'session')}, "
        f"{count(result.n_trials, 'completed trial')}."
    )
    if args.copy_stimuli:
        from runner.data.bids import copy_stimuli

        copied = copy_stimuli(result.sessions, Path(args.out), stimuli_dir=args.stimuli_dir)
        print(f"Copied {count(len(copied), 'stimulus file')} into {Path(args.out) / 'stimuli'}.")
    print(f"Pooled trials table: {result.pooled}")
    for line in exclusion_lines(result.excluded):
        print(line)
    if result.exclusions is not None:
        print(f"Exclusions table: {result.exclusions}")
    listed = 0
    for (tsv, _side), origin, s in zip(result.events, result.origins, result.sessions, strict=True):
        where = "session start" if origin.kind == "session_start" else "first EEG sample"
        if listed < MAX_LISTED or s.status != "completed":
            print(f"Events (onsets from the {where}): {tsv}")
            listed += 1
        if s.status != "completed":
            print(f"  note: this session ended as {s.status!r}; its last rows may lack a duration.")
    if len(result.events) > listed:
        print(f"... and {len(result.events) - listed} more events files under {args.out}.")
    for i, written in enumerate(result.data):
        if i < MAX_LISTED:
            for path in written.eeg:
                if path.suffix == ".vhdr":
                    print(f"EEG (BrainVision): {path}")
            for tsv, _side in written.physio:
                print(f"Physio: {tsv}")
        for note in written.notes:
            print(f"  note: {note}")
    if len(result.data) > MAX_LISTED:
        print(
            f"... and the data of {len(result.data) - MAX_LISTED} more session(s) under {args.out}."
        )
    return EXIT_OK
