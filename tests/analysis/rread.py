"""Reading CSV tables with R's read.csv through Rscript, for the table-convention tests (helper).

R comes from the system packages (Debian's r-base-core); tests that need it skip, saying why,
where ``Rscript`` is missing.
"""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pandas as pd
import pytest

needs_r = pytest.mark.skipif(
    shutil.which("Rscript") is None,
    reason="Rscript is not installed (Debian: apt-get install r-base-core), so R's read.csv "
    "cannot be checked here",
)


def r_classes(paths: list[Path], colclasses: str = "NA") -> dict[str, dict[str, str]]:
    """Per file and column, R's class and the first three values, tab-separated."""
    script = (
        "args <- commandArgs(trailingOnly = TRUE)\n"
        "for (f in args) {\n"
        f"  d <- read.csv(f, colClasses = {colclasses})\n"
        "  for (n in names(d)) {\n"
        "    cat(basename(f), n, class(d[[n]])[1],\n"
        "        paste(head(as.character(d[[n]]), 3), collapse = '|'), sep = '\\t')\n"
        "    cat('\\n')\n"
        "  }\n"
        "}\n"
    )
    done = subprocess.run(
        ["Rscript", "-e", script, *map(str, paths)],
        capture_output=True,
        text=True,
        check=True,
        timeout=120,
    )
    out: dict[str, dict[str, str]] = {}
    for line in done.stdout.splitlines():
        if line.strip():
            name, column, cls, head = [*line.split("\t"), ""][:4]
            out.setdefault(name, {})[column] = f"{cls}\t{head}"
    return out


def same_kinds(paths: list[Path]) -> None:
    """Assert that R's read.csv and pandas' read_csv (both with default settings) read every
    column of every table as the same kind: number, text or logical."""
    classes = r_classes(paths)
    for path in paths:
        table = pd.read_csv(path)
        for column in table.columns:
            if table[column].isna().all():
                continue  # an all-empty column is NA in both; R calls it logical
            r_class = classes[path.name][str(column).replace("-", ".")].split("\t")[0]
            if pd.api.types.is_bool_dtype(table[column]):
                assert r_class == "logical", (path.name, column)
            elif pd.api.types.is_numeric_dtype(table[column]):
                assert r_class in ("numeric", "integer"), (path.name, column, r_class)
            else:
                assert r_class == "character", (path.name, column, r_class)
