"""Shared test helpers."""

from __future__ import annotations

import os
from pathlib import Path

# one BLAS thread, as the command sets (cavchar.cli.main): small matrices, no oversubscription
for _variable in ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_variable, "1")

import pytest  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
REFERENCE_TABLES = REPO / "reference_tables"


@pytest.fixture
def run_cli(capsys):
    """Run ``cavchar`` in-process: returns (exit code, stdout, stderr)."""
    from cavchar.cli.main import main

    def run(*argv: str):
        code = main([str(a) for a in argv])
        out, err = capsys.readouterr()
        return code, out, err

    return run
