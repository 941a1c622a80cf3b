"""Experiment planning: how much data a target precision needs (Cramér–Rao forecasts from
the Fisher information of the fits' likelihoods), confirmed by simulate-and-fit studies.

Public API (imported lazily, so ``import cavchar.plan`` stays light)::

    from cavchar.plan import plan_jumps, plan_probes, plan_ringdown, precision_curve
    table = plan_jumps(1.2e-3, 0.02, target_lifetime=0.03, target_n_thermal=0.2)
"""

from __future__ import annotations

import importlib

_PUBLIC = {
    "plan_jumps": "cavchar.plan.forecast",
    "plan_probes": "cavchar.plan.forecast",
    "plan_ringdown": "cavchar.plan.forecast",
    "precision_curve": "cavchar.plan.forecast",
    "Forecast": "cavchar.plan.forecast",
    "StudyDisagreementWarning": "cavchar.plan.forecast",
    "Information": "cavchar.plan.fisher",
    "StudyResult": "cavchar.plan.study",
}

__all__ = sorted(_PUBLIC)


def __getattr__(name: str):
    if name in _PUBLIC:
        return getattr(importlib.import_module(_PUBLIC[name]), name)
    raise AttributeError(f"module 'cavchar.plan' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(__all__)
