"""Shared fixtures for the analysis tests: one synthetic pilot summary written once per run."""

from __future__ import annotations

from pathlib import Path

import pytest
from synthetic import make_pool

from runner.data.summary import write_summary


@pytest.fixture(scope="session")
def pilot_summary(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, list[Path]]:
    """Write the summary of 3 synthetic participants x 30 main trials; return folder and files."""
    out = tmp_path_factory.mktemp("summary")
    trials, sessions = make_pool(3, 30)
    paths = write_summary(
        trials,
        sessions,
        out,
        factors=["nodes", "density"],
        level_order={"density": ["sparse", "medium", "dense"]},
    )
    return out, paths
