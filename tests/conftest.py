"""Shared test fixtures."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest

REPO = Path(__file__).resolve().parents[1]
#: Open measured datasets kept beside the repository (never copied into it).
DATASETS = Path(os.environ.get("RIGFIT_DATASETS", REPO.parent / "shared" / "datasets"))


@pytest.fixture
def rng() -> np.random.Generator:
    return np.random.default_rng(20261201)


@pytest.fixture
def shared_dataset():
    """Return a function giving the path of a shared dataset, skipping when absent."""

    def _get(name: str) -> Path:
        path = DATASETS / name
        if not path.is_file():
            pytest.skip(f"shared dataset {name} not found in {DATASETS}; to run this test, set "
                        "RIGFIT_DATASETS to the folder holding the open datasets (default: "
                        "../shared/datasets beside the repository)")
        return path

    return _get


@pytest.fixture
def run_cli():
    """Invoke the rigfit CLI in-process; returns click's Result (exit_code, stdout, stderr)."""
    from click.testing import CliRunner

    from ident.cli import cli

    def _run(*args: str, input: str | None = None):
        runner = CliRunner()
        return runner.invoke(cli, [str(a) for a in args], input=input, catch_exceptions=True)

    return _run
