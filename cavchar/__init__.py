"""cavchar: energy lifetime, thermal photon number and effective temperature of
high-Q superconducting microwave cavities, with credible intervals.

The public API is imported lazily, so ``import cavchar`` stays light (no
matplotlib, corner or numba until a fit or plot needs them)::

    import cavchar
    result = cavchar.fit_jumps("record.csv", freq_hz=6.8e9, stage_temp_k=0.02)
    print(result.summary())
"""

from __future__ import annotations

from cavchar._lazy import lazy_exports

__version__ = "0.1.0"

#: public name -> module that defines it
_PUBLIC = {
    "fit_jumps": "cavchar.fits.jumps",
    "fit_probes": "cavchar.fits.probes",
    "fit_ringdown": "cavchar.fits.ringdown",
    "FitResult": "cavchar.result",
    "FitKind": "cavchar.result_types",
    "Provenance": "cavchar.result_types",
    "SamplerDiagnostics": "cavchar.result_types",
    "PlanckCheck": "cavchar.result_types",
    "planck_occupation": "cavchar.thermal",
    "effective_temperature": "cavchar.thermal",
    "two_bath_occupation": "cavchar.thermal",
    "parse_quantity": "cavchar.units",
    "format_quantity": "cavchar.units",
    "plan_jumps": "cavchar.plan",
    "plan_probes": "cavchar.plan",
    "plan_ringdown": "cavchar.plan",
    "fit_many": "cavchar.batch.runner",
    "thermal_budget": "cavchar.fits.budget",
    "SamplerSettings": "cavchar.inference.sampler",
    "simulate_jump_record": "cavchar.simulate",
    "simulate_sampled_record": "cavchar.simulate",
    "simulate_probe_record": "cavchar.simulate",
    "simulate_ringdown": "cavchar.simulate",
    "write_jump_record": "cavchar.io",
    "open_log": "cavchar.tracking.store",
    "log_fit_result": "cavchar.tracking.store",
    "cooldown_trend": "cavchar.tracking.trend",
    "probability_text": "cavchar.report.text",
    "DEMO_SCENARIO": ("cavchar.demo.scenario", "SCENARIO"),
}

__all__, __getattr__, __dir__ = lazy_exports(__name__, _PUBLIC, "__version__")
