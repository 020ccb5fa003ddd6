"""``trialdeck stimuli SPEC --out DIR``: make node-link stimuli with known answers from a spec."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from runner.errors import EXIT_OK


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``trialdeck stimuli``."""
    parser.add_argument("spec", metavar="SPEC", type=Path, help="stimulus spec (YAML)")
    parser.add_argument(
        "--out",
        metavar="DIR",
        type=Path,
        required=True,
        help="folder for images, GraphML, manifest",
    )
    parser.add_argument(
        "--force",
        action="store_true",
        help="write into DIR although it is not empty and was not made by `trialdeck stimuli` "
        "(its images, GraphML files and manifest are replaced; never through a link)",
    )
    parser.add_argument(
        "--quiet", action="store_true", help="print only the summary line, not each stimulus"
    )


def run(args: argparse.Namespace) -> int:
    """Build the stimuli of ``args.spec`` into ``args.out``, printing progress; exit 0.

    Raises
    ------
    InputFileError
        The spec file is missing or unreadable.
    ProtocolError
        The spec has mistakes, or a set cannot be drawn readably.
    StorageError
        The output folder is not empty and not the kit's own (without ``--force``), is or holds
        a session folder, has a link where the kit writes, or cannot be written.
    """
    from runner.graphs.build import MANIFEST, build, output_files, prepare_output
    from runner.graphs.spec import load_spec

    spec = load_spec(args.spec)
    out = Path(args.out)
    target = prepare_output(out, Path(args.spec), force=bool(getattr(args, "force", False)))

    def show(done: int, total: int, name: str) -> None:
        print(f"[{done}/{total}] {name}", file=sys.stdout, flush=True)

    rows = build(spec, out, progress=None if getattr(args, "quiet", False) else show)
    target.finish(output_files(out, rows))
    sets = sorted({str(r["set"]) for r in rows})
    print(f"Wrote {len(rows)} stimuli ({', '.join(sets)}) and {MANIFEST} to {out}.")
    return EXIT_OK
