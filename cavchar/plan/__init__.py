"""Experiment planning: how much data a target precision needs (Cramér–Rao forecasts from
the Fisher information of the fits' likelihoods), confirmed by simulate-and-fit studies.

Public API (imported lazily, so ``import cavchar.plan`` stays light)::

    from cavchar.plan import plan_jumps, plan_probes, plan_ringdown, precision_curve
    table = plan_jumps(1.2e-3, 0.02, target_lifetime=0.03, target_n_thermal=0.2)
"""

from __future__ import annotations

from cavchar._lazy import lazy_exports

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

__all__, __getattr__, __dir__ = lazy_exports(__name__, _PUBLIC)
