"""The ``trialdeck stimuli SPEC.yaml --out DIR`` command: arguments and run.

This module is the command-line edge of the stimulus kit, so it may print a progress line and
a summary; everything it calls raises typed errors instead of printing.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from runner.errors import EXIT_OK, StorageError
from runner.graphs.build import GRAPHML_DIR, IMAGES_DIR, MANIFEST, build
from runner.graphs.spec import load_spec

# Files the kit writes; --force removes only these, so a spec kept in the folder survives.
OWN_PATTERNS = ((IMAGES_DIR, "*.png"), (IMAGES_DIR, "*.svg"), (GRAPHML_DIR, "*.graphml"))


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the ``stimuli`` command's arguments to ``parser``.

    Parameters
    ----------
    parser : argparse.ArgumentParser
        The sub-command parser.
    """
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
        help="replace the images, GraphML files and manifest a previous run left in DIR",
    )
    parser.add_argument(
        "--quiet", action="store_true", help="print only the summary line, not each stimulus"
    )


def _own_files(out: Path) -> list[Path]:
    found = [out / MANIFEST] if (out / MANIFEST).exists() else []
    for folder, pattern in OWN_PATTERNS:
        found += sorted((out / folder).glob(pattern))
    return found


def prepare_output(out: Path, spec_path: Path, *, force: bool) -> None:
    """Refuse a non-empty output folder unless ``force``; with it, remove earlier kit output.

    The spec file itself may live in the output folder (as the demo's does); it is never
    counted as existing output and never removed.

    Parameters
    ----------
    out : pathlib.Path
        Output folder.
    spec_path : pathlib.Path
        The spec being built.
    force : bool
        Whether earlier output may be replaced.
    """
    if not out.exists():
        return
    if not out.is_dir():
        raise StorageError(f"The output path {out} is a file, not a folder; choose a folder.")
    spec_resolved = spec_path.resolve()
    others = [p for p in out.iterdir() if p.resolve() != spec_resolved]
    if not others:
        return
    if not force:
        raise StorageError(
            f"The output folder {out} is not empty; choose a new folder, or add --force to "
            "replace the images, GraphML files and manifest made there before."
        )
    try:
        for p in _own_files(out):
            p.unlink()
    except OSError as exc:
        raise StorageError(f"Cannot remove the earlier output in {out}: {exc}.") from exc


def run(args: argparse.Namespace) -> int:
    """Build the stimuli of ``args.spec`` into ``args.out``.

    Parameters
    ----------
    args : argparse.Namespace
        With ``spec``, ``out``, ``force`` and ``quiet`` as added by :func:`add_arguments`.

    Returns
    -------
    int
        0 on success.

    Raises
    ------
    InputFileError
        The spec file is missing or unreadable.
    ProtocolError
        The spec has mistakes, or a set cannot be drawn readably.
    StorageError
        The output folder is not empty (without ``--force``) or cannot be written.
    """
    spec = load_spec(args.spec)
    out = Path(args.out)
    prepare_output(out, Path(args.spec), force=bool(getattr(args, "force", False)))

    def show(done: int, total: int, name: str) -> None:
        print(f"[{done}/{total}] {name}", file=sys.stdout, flush=True)

    rows = build(spec, out, progress=None if getattr(args, "quiet", False) else show)
    sets = sorted({str(r["set"]) for r in rows})
    print(f"Wrote {len(rows)} stimuli ({', '.join(sets)}) and {MANIFEST} to {out}.")
    return EXIT_OK
