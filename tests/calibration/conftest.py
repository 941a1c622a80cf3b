"""Calibration suite: quick forms run in CI; tests marked ``slow`` run only with ``-m slow``.

``pytest -m slow tests/calibration`` runs the full forms (see
docs/planning-and-calibration.md).  Without a ``-m`` expression that selects
them, the slow tests of this folder are skipped, so CI runs the quick forms.
"""

from __future__ import annotations

from pathlib import Path

import pytest

HERE = Path(__file__).resolve().parent


def pytest_collection_modifyitems(config, items):
    if "slow" in (config.getoption("-m") or ""):
        return
    skip = pytest.mark.skip(reason="full calibration form: run with -m slow")
    for item in items:
        if "slow" in item.keywords and HERE in Path(str(item.path)).resolve().parents:
            item.add_marker(skip)
