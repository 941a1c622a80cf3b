"""Shared test helpers."""

from __future__ import annotations

from pathlib import Path

import pytest

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
