"""The example scripts run and print what their committed ``*.expected.txt`` files show.

Each script is run as a user runs it (``python examples/NAME.py``, a fresh process);
its output must equal the expected file line for line: the same seeds and settings
give the same draws (the reproducibility promise of docs/inference.md), so any change
of a printed number is a change of behaviour that must be looked at (and the file
rewritten on purpose).
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
EXAMPLES = sorted(p.stem for p in (REPO / "examples").glob("*.py"))


def test_every_example_has_its_expected_output():
    assert {"fit_a_record", "compare_cooldowns"} <= set(EXAMPLES)
    for name in EXAMPLES:
        assert (REPO / "examples" / f"{name}.expected.txt").exists(), name


@pytest.mark.parametrize("name", EXAMPLES)
def test_example_prints_its_expected_output(name, tmp_path):
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(REPO), env.get("PYTHONPATH")]))
    env["MPLBACKEND"] = "Agg"
    env.pop("CAVCHAR_LOG", None)
    done = subprocess.run([sys.executable, str(REPO / "examples" / f"{name}.py")],
                          cwd=tmp_path, env=env, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr[-2000:]
    expected = (REPO / "examples" / f"{name}.expected.txt").read_text(encoding="utf-8")
    assert done.stdout.splitlines() == expected.splitlines()
