"""What ``cavchar --help`` and a fit of a missing file load before they answer.

A structural check, not a timing: each command runs in a fresh interpreter and
reports ``sys.modules`` after it has answered.  The heavy libraries (scipy.stats,
matplotlib, numba; measured with ``python -X importtime`` at about 2.5 s of CPU
together with the fit modules) must not be among them, so both answers take a
fraction of a second (the times are in tests/benchmarks/bench_commands.py).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
HEAVY = ("scipy.stats", "matplotlib", "numba", "pandas", "emcee", "cavchar.fits",
         "cavchar.models")

PROBE = """
import json, sys
from cavchar.cli.main import main
code = main(sys.argv[1:])
print(json.dumps({"code": code, "modules": sorted(sys.modules)}))
"""


def _loaded(*argv: str, cwd: Path) -> tuple[int, set[str], str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(REPO), env.get("PYTHONPATH")]))
    result = subprocess.run([sys.executable, "-c", PROBE, *argv], cwd=cwd, env=env,
                            capture_output=True, text=True, timeout=120)
    data = json.loads(result.stdout.strip().splitlines()[-1])
    return data["code"], set(data["modules"]), result.stderr


def _heavy(modules: set[str]) -> list[str]:
    return sorted(m for m in modules if any(m == h or m.startswith(h + ".") for h in HEAVY))


@pytest.mark.parametrize("argv", [["--help"], ["fit", "--help"], ["fit", "jumps", "--help"]],
                         ids=" ".join)
def test_help_loads_no_heavy_library(argv, tmp_path):
    code, modules, _ = _loaded(*argv, cwd=tmp_path)
    assert code == 0
    assert not _heavy(modules), _heavy(modules)
    assert "numpy" not in modules  # the whole parser is built from the standard library


@pytest.mark.parametrize("kind", ["jumps", "probes", "ringdown"])
def test_fit_of_a_missing_file_answers_before_loading_the_fit(kind, tmp_path):
    code, modules, err = _loaded("fit", kind, "missing.csv", cwd=tmp_path)
    assert code == 2 and "missing.csv: file not found" in err
    assert not _heavy(modules), _heavy(modules)


def test_the_probe_sees_heavy_imports(tmp_path):
    # negative control: an existing (empty) file gets as far as the reader and the fit
    # modules, and the probe reports them
    (tmp_path / "empty.csv").write_text("")
    code, modules, _ = _loaded("fit", "jumps", "empty.csv", cwd=tmp_path)
    assert code == 2 and "cavchar.fits" in _heavy(modules)
