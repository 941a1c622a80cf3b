"""Fit ring-down traces: energy lifetime (and, where the data carry it, n_th).

:func:`fit_ringdown` reads and validates the traces
(:mod:`cavchar.fits.ringdown_data`), checks that they decay, builds the
likelihood of the signal kind (:mod:`cavchar.models.ringdown`; linear
amplitudes, floors and unknown noise marginalized analytically where exact),
starts from the least-squares fit (variable projection, no user guess),
samples the posterior with the common emcee driver, adds exact conditional
draws of the marginalized parameters and the derived quantities (Q,
linewidth, amplitude decay time 2 T_c, effective temperature and the Planck
check where n_th is fitted), and runs the residual diagnostics
(:mod:`cavchar.fits.ringdown_checks`).  A power fit is also compared with a
two-exponential model (BIC).
"""

from __future__ import annotations

import dataclasses
import os
import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from cavchar.errors import CavcharWarning, InputError, ModelMisfitWarning
from cavchar.fits.finish import FitContext, finish_fit
from cavchar.fits.ringdown_checks import posterior_curves, residual_diagnostics
from cavchar.fits.ringdown_data import RingdownData, decay_check, prepare
from cavchar.inference import SamplerSettings
from cavchar.inference.importance import sample_posterior_auto
from cavchar.parameters import ParameterSpec
from cavchar.priors import Prior
from cavchar.records import RingdownTrace

__all__ = ["fit_ringdown", "ringdown_settings", "build_ringdown_model", "DEFAULT_SETTINGS"]

#: sampler defaults of ring-down fits: >= 2000 effective draws, frequent convergence checks
DEFAULT_SETTINGS = SamplerSettings.for_fit("ringdown")
#: BIC difference above which a power fit warns that two exponentials describe it better
TWO_EXPONENTIAL_WARNING = 10.0


def ringdown_settings(settings: SamplerSettings | None, seed: int | None) -> SamplerSettings:
    """The given settings (ring-down defaults if None), with ``seed`` applied when given."""
    settings = settings or DEFAULT_SETTINGS
    if seed is not None:
        settings = dataclasses.replace(settings, seed=int(seed))
    return settings


def _initial_distribution(initial, counts: np.ndarray) -> tuple[np.ndarray, str]:
    if initial is None:
        k = int(np.argmax(counts[0]))
        warnings.warn(f"no initial state given: assuming the Fock state |{k}> (the most "
                      "frequent photon number at the earliest delay)", CavcharWarning,
                      stacklevel=4)
        initial = k
    if np.ndim(initial) == 0:
        k = int(initial)
        if k != initial or k < 0:
            raise InputError(f"the initial Fock number must be a whole number >= 0, not "
                             f"{initial!r}")
        p0 = np.zeros(k + 1)
        p0[k] = 1.0
        return p0, f"Fock state |{k}>"
    p0 = np.asarray(initial, dtype=float)
    if p0.ndim != 1 or np.any(p0 < 0) or not np.isclose(p0.sum(), 1.0, atol=1e-9):
        raise InputError("the initial distribution must be probabilities summing to 1")
    return p0, "distribution " + ", ".join(f"{x:.3g}" for x in p0)


def build_ringdown_model(data: RingdownData, *, initial=None, n0: float | None = None,
                         fits=None):
    """The likelihood model for prepared data; returns (model, description of the state).

    ``fits``: the least-squares fits of :func:`decay_check`, reused as the start
    of a single power trace.
    """
    from cavchar.models import ringdown as rd

    signal = data.signal
    if signal == "populations":
        p0, state = _initial_distribution(initial, data.counts)
        return rd.PopulationDecay(data.series[0].tau, data.counts, p0), state
    if signal == "mean-n":
        return rd.MeanPhotonDecay(list(data.series), n0=n0), None
    if signal == "power" and len(data.series) == 1 and fits:
        return rd.PowerDecay(list(data.series), start=fits[0]), None
    if signal not in ("power", "mean-n") and len(data.series) > 1:
        raise InputError(f"a {signal} fit takes one trace, got {len(data.series)}",
                         path=data.source, hint="several traces sharing T_c: signals power "
                         "and mean-n; or fit the traces one by one")
    return rd.build_model(signal, list(data.series)), None


def _unit_of(name: str, units: Mapping[str, str]) -> str | None:
    """The data unit of a column (``amplitude_2`` -> the unit of ``amplitude``)."""
    root, _, tail = name.rpartition("_")
    return units.get(name, units.get(root) if tail.isdigit() else None)


def _specs(model, priors: Mapping[str, Prior] | None,
           units: Mapping[str, str] | None = None) -> list[ParameterSpec]:
    priors = dict(priors or {})
    names = [s.name for s in model.specs]
    unknown = sorted(set(priors) - set(names))
    if unknown:
        raise InputError(f"no parameter {', '.join(unknown)} in this model",
                         hint=f"parameters: {', '.join(names)}")
    specs = []
    for default in model.specs:
        prior = priors.get(default.name, default.prior)
        log_scale = default.log_scale and prior.support[0] >= 0
        unit = default.unit or _unit_of(default.name, units or {}) or ""
        specs.append(ParameterSpec(default.name, unit, default.label, prior,
                                   log_scale=log_scale))
    return specs


def _inside(guess: np.ndarray, specs: Sequence[ParameterSpec]) -> np.ndarray:
    """The start moved just inside each prior's support."""
    out = np.array(guess, dtype=float)
    for i, spec in enumerate(specs):
        lo, hi = spec.prior.support
        if not lo < out[i] < hi:
            width = hi - lo if np.isfinite(hi - lo) else abs(out[i]) + 1.0
            out[i] = min(max(out[i], lo + 1e-6 * width), hi - 1e-6 * width)
    return out


def _compression_check(model, draws: np.ndarray) -> dict | None:
    """Largest |ln L(compressed) - ln L(brute force)| at five posterior quantile points."""
    sums = getattr(model, "sums", None)
    if sums is None:
        return None
    sums = sums if isinstance(sums, list) else [sums]
    if not any(s.compressed for s in sums):
        return {"compressed": False}
    order = np.argsort(draws[:, 0])
    pick = order[np.linspace(0, order.size - 1, 5).astype(int)]
    theta = draws[pick]
    diff = np.abs(model.log_likelihood(theta) - model.log_likelihood(theta, direct=True))
    return {"compressed": True, "bins": [int(s.n_bins) for s in sums],
            "max_abs_log_likelihood_difference": float(np.max(diff)),
            "bound_on_posterior_ratio": float(np.exp(2 * np.max(diff)) - 1),
            "points_checked": 5}


def _comparison(data: RingdownData, fits) -> dict | None:
    if data.signal not in ("power", "power2") or len(data.series) != 1:
        return None
    from cavchar.models.ringdown import compare_exponentials

    cmp = compare_exponentials(data.series[0], one=fits[0] if fits else None)
    out = {"bic_one": cmp.bic_one, "bic_two": cmp.bic_two, "aic_one": cmp.aic_one,
           "aic_two": cmp.aic_two, "delta_bic": cmp.delta_bic,
           "evidence_ratio_two_over_one": cmp.evidence_ratio, "preferred": cmp.preferred,
           "strength": cmp.strength, "statement": cmp.describe()}
    if cmp.two is not None:
        out["two_exponential_lifetimes_s"] = [float(x) for x in cmp.two.lifetimes[::-1]]
    if data.signal == "power" and cmp.delta_bic > TWO_EXPONENTIAL_WARNING:
        warnings.warn(f"two exponentials describe the trace better ({cmp.describe()}); "
                      "consider --signal power2", ModelMisfitWarning, stacklevel=3)
    return out


def fit_ringdown(
    trace_or_paths: RingdownTrace | str | os.PathLike | Sequence[RingdownTrace | str],
    *,
    signal: str | None = None,
    freq_hz: float | None = None,
    stage_temp_k: float | None = None,
    start_time: float | None = None,
    time_unit: float | str | None = None,
    priors: Mapping[str, Prior] | None = None,
    settings: SamplerSettings | None = None,
    seed: int | None = None,
    initial: int | Sequence[float] | None = None,
    n0: float | None = None,
    allow_negative_power: bool = False,
    compare: bool = True,
    command_line: Sequence[str] | None = None,
    sampler: str = "importance",
):
    """Posterior of the energy lifetime (and n_th) from one or more ring-down traces.

    Parameters
    ----------
    trace_or_paths
        A :class:`~cavchar.records.RingdownTrace`, a file path (docs/data-formats.md)
        or a list of them; several traces (files or a ``trace`` column) share
        ``T_c`` (and ``n_th``) with their own amplitudes and floors (power and
        mean-n; other signals take one trace).
    signal
        ``power`` (linear), ``power2`` (two exponentials), ``db``, ``amplitude``
        (field magnitude), ``iq``, ``mean-n`` or ``populations``; default: from
        the file's columns.
    freq_hz, stage_temp_k
        Mode frequency (Hz) for Q and T_eff; stage temperature (K) for the Planck
        check (signals that fit n_th: mean-n, populations).
    start_time
        Time in s (after ``time_unit``) before which samples are dropped (the
        switch-off transient); also the reference time of the amplitudes.
    time_unit
        Unit of the time column: seconds per unit or text such as ``"ms"``.
    priors
        Priors by parameter name (e.g. ``{"lifetime": LogUniform(1e-4, 1)}``);
        the others default to log-uniform (uniform for signed or bounded
        parameters) on the ranges of each model's ``specs``
        (:func:`cavchar.models.ringdown.series.default_spec`).
    settings, seed
        Sampler settings (default :data:`DEFAULT_SETTINGS`); ``seed`` overrides theirs.
    initial
        Populations: the prepared Fock number or initial distribution (default:
        the most frequent photon number at the earliest delay, with a warning).
    n0
        Mean-n: fix the initial mean photon number instead of fitting it.
    allow_negative_power
        Accept negative values of a linear power trace (background-subtracted data).
    compare
        For a single power trace, compare with two exponentials (BIC) and store it.
    command_line, sampler
        As for :func:`cavchar.fits.jumps.fit_jumps`.

    Returns
    -------
    FitResult
        Kind ``"ringdown-<signal>"``; samples include the sampled parameters,
        the marginalized ones (exact conditional draws: amplitude, floor,
        noise sd, initial photon number, IQ phase and offset as applicable) and
        the derived quantities, with ``amplitude_decay_time`` = 2 T_c.
    """
    data = prepare(trace_or_paths, signal, start_time=start_time, time_unit=time_unit,
                   allow_negative_power=allow_negative_power)
    decay, fits = decay_check(data)
    model, state = build_ringdown_model(data, initial=initial, n0=n0, fits=fits)
    from cavchar.io.readers import VALUE_UNIT
    from cavchar.quantities import data_units

    value_units = {str(r.metadata.get(VALUE_UNIT)) for r in data.records
                   if r.metadata.get(VALUE_UNIT)}
    units = data_units(data.signal, value_units.pop() if len(value_units) == 1 else None)
    specs = _specs(model, priors, units)
    settings = ringdown_settings(settings, seed)
    run = sample_posterior_auto(model.log_likelihood, specs,
                                _inside(model.initial_guess(), specs), settings, sampler)
    seeds = np.random.SeedSequence(run.settings.seed).spawn(7)
    nuisance = model.draw_nuisance(run.draws, np.random.default_rng(seeds[4]))
    point = np.median(run.draws, axis=0)
    residuals = residual_diagnostics(model, data.signal, point, np.random.default_rng(seeds[6]))
    checks: dict[str, Any] = {"residuals": residuals, "decay": decay}
    compression = _compression_check(model, run.draws)
    if compression is not None:
        checks["compression"] = compression
    comparison = _comparison(data, fits) if compare else None
    if comparison is not None:
        checks["two_exponentials"] = comparison
    extras = {"signal": data.signal,
              "curves": posterior_curves(model, data.signal, run.draws, nuisance, point,
                                         np.random.default_rng(seeds[5])),
              "traces": [{"label": s.label, "points": s.n, "t0_s": s.t0, "span_s": s.span,
                          "noise": "known" if s.sigma is not None else "fitted"}
                         for s in data.series]}
    model_settings = {"signal": data.signal, "start_time_s": start_time,
                      "time_unit_s": data.time_factor, "n_traces": len(data.series),
                      "allow_negative_power": allow_negative_power,
                      "initial_state": state, "n0_fixed": n0}
    context = FitContext(record=list(data.records), freq_hz=freq_hz,
                         stage_temp_k=stage_temp_k, command_line=command_line)
    result = finish_fit(f"ringdown-{data.signal}", run, context, checks=checks, extras=extras,
                        model_settings=model_settings)
    if nuisance:
        from cavchar.parameters import UNIT_DIMENSIONS

        columns = {}
        for k in nuisance:
            unit = _unit_of(k, units) or ""
            columns[k] = {"unit": unit, "dimension": UNIT_DIMENSIONS.get(unit, "dimensionless"),
                          "label": k}
        result = dataclasses.replace(result, extras={**result.extras,
                                                     "nuisance_columns": columns})
        extra = pd.DataFrame({k: np.asarray(v, dtype=float) for k, v in nuisance.items()})
        samples = pd.concat([result.samples.reset_index(drop=True), extra], axis=1)
        result = dataclasses.replace(result, samples=samples)
    return result
