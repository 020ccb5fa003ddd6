"""``trialdeck demo``: pilot the demo protocol (configs/demo.yaml) into a new session."""

from __future__ import annotations

import argparse
import shlex
from pathlib import Path

from runner.cli.args import positive_float
from runner.cli.session import run_one_session
from runner.errors import UsageError

DEMO_PROTOCOL = Path("configs") / "demo.yaml"
DEMO_PARTICIPANT = "P01"
DEMO_SPEED = 10.0
#: The folder that holds ``runner/`` (and, in a source checkout, ``configs/``).
REPO_ROOT = Path(__file__).resolve().parent.parent.parent


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Options of ``trialdeck demo``."""
    p.add_argument(
        "--out",
        default="demo-sessions",
        metavar="DIR",
        help="where the session goes (default ./demo-sessions)",
    )
    p.add_argument("--speed", type=positive_float, default=DEMO_SPEED, metavar="X")
    p.add_argument(
        "--show", action="store_true", help="open a real window instead of running headless"
    )
    p.add_argument("--windowed", action="store_true")
    p.add_argument("--frames", metavar="DIR", help="write a PNG of every distinct screen into DIR")
    p.add_argument("--verbose", action="store_true", help="print a line per trial")
    p.add_argument(
        "--physio-out",
        default="demo-physio",
        metavar="DIR",
        help="where the per-trial physiology of the simulated recording goes (default ./demo-physio)",
    )
    p.add_argument(
        "--no-physio",
        action="store_true",
        help="stop after the pilot (no simulated recording, no physiology)",
    )


def demo_protocol() -> Path:
    """The demo protocol: in the working folder first, else beside the installed package.

    Raises
    ------
    UsageError
        Neither place has it.
    """
    here = Path.cwd() / DEMO_PROTOCOL
    if here.is_file():
        return here
    repo = REPO_ROOT / DEMO_PROTOCOL
    if repo.is_file():
        return repo
    raise UsageError(
        "the demo protocol configs/demo.yaml was not found; run `trialdeck demo` from the trialdeck"
        " folder (or install it with `pip install -e .`)."
    )


def run(args: argparse.Namespace) -> int:
    """Pilot the demo protocol as the next free session of participant P01."""
    from runner.protocol.load import load_protocol
    from runner.session.run import session_folder

    protocol = demo_protocol()
    study = load_protocol(protocol).model.study
    out = Path(args.out)
    n = 1
    while (session_folder(out, study, DEMO_PARTICIPANT, str(n)) / "journal.jsonl").exists():
        n += 1
    ns = argparse.Namespace(
        participant=DEMO_PARTICIPANT,
        session=str(n),
        out=str(out),
        windowed=args.windowed,
        wait_for_recorder=None,
        station=None,
        speed=args.speed,
        show=args.show,
        frames=args.frames,
        sim_abort_at=None,
    )
    print(
        f"Demo: a pilot of {protocol} with a simulated participant, {args.speed:g} times faster than real time."
    )
    exit_code = run_one_session(ns, mode="pilot", protocol=protocol, console_quiet=not args.verbose)
    if exit_code == 0:
        folder = session_folder(out, study, DEMO_PARTICIPANT, str(n))
        if not args.no_physio:
            demo_physio(folder, out, Path(args.physio_out))
        for line in next_steps(folder, out):
            print(line)
    return exit_code


def demo_recording(folder: Path, out: Path) -> Path:
    """Where the demo writes the simulated recording of the session in ``folder``."""
    return out / "recordings" / f"{folder.parent.name}_{folder.name}_simulated.xdf"


def demo_physio(folder: Path, out: Path, physio_out: Path) -> None:
    """Simulate a recording of the demo session (invented signals) and compute its physiology."""
    from runner.physio.outputs import FIGURES_FOLDER, prepare, write_tables
    from runner.physio.pipeline import SessionJob, process_session
    from runner.physio.synth import simulate_recording

    target = prepare(physio_out)
    recording = demo_recording(folder, out)
    recording.parent.mkdir(parents=True, exist_ok=True)
    simulate_recording(folder, recording)
    print(f"Simulated recording (invented EEG, pupil, ECG and photodiode; demo only): {recording}")
    result = process_session(
        SessionJob(folder=folder, recording=recording, figures=physio_out / FIGURES_FOLDER)
    )
    files = write_tables(target, [result])
    target.finish(files + result.figures)
    print(
        f"Per-trial physiology: {files[0]} ({len(result.trials)} trials); QA figures in "
        f"{physio_out / FIGURES_FOLDER}"
    )
    for note in result.notes:
        print(f"  note: {note}")


def next_steps(folder: Path, out: Path) -> list[str]:
    """What to try after the demo: audit, replay, summary, and a protocol of one's own."""
    f, o = shlex.quote(str(folder)), shlex.quote(str(out))
    return [
        "",
        "What next:",
        f"  trialdeck audit {f}          is the session complete and intact?",
        f"  trialdeck replay {f} --frames demo-frames   see every screen the participant saw",
        f"  trialdeck summary {o} --out demo-report     tables, plots and report.html",
        f"  trialdeck physio {f} --recording {shlex.quote(str(demo_recording(folder, out)))} "
        "--out my-physio   per-trial pupil, heart and EEG measures",
        "  trialdeck new my-study                       a starter protocol of your own to edit",
        "  (docs/protocol.md explains every setting; `trialdeck check` reviews a protocol.)",
    ]
