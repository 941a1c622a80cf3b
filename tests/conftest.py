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


@pytest.fixture
def modules_loaded_by():
    """Function ``(modules, watched) -> list``: which of the ``watched`` module names a fresh
    interpreter holds after ``import <modules>`` (a comma-separated import list)."""
    import subprocess
    import sys

    def loaded(modules: str, watched: tuple[str, ...]) -> list[str]:
        code = (f"import sys, {modules}; "
                f"print(','.join(m for m in {watched!r} if m in sys.modules))")
        proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
        assert proc.returncode == 0, proc.stdout + proc.stderr
        return [m for m in proc.stdout.strip().split(",") if m]

    return loaded
