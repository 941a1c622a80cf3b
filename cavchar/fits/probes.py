"""Fit a raw probe record: lifetime, thermal photon number, response parameters, trajectory.

``fit_probes`` builds the hidden-Markov likelihood of the record
(:mod:`cavchar.models.probes.likelihood`), finds a starting point from a short pilot,
samples the posterior of ``(T_c, n_th, fitted response parameters)`` with the
common emcee driver and returns a :class:`cavchar.result.FitResult` with the
derived quantities, the Planck check, the truncation used and the
reconstructed trajectory (an excerpt in the result; the whole of it through
:func:`cavchar.fits.probe_trajectory.reconstruct_trajectory`) and a posterior
predictive check of the outcomes (:mod:`cavchar.fits.probe_check`, under
``checks["posterior_predictive"]``; a misfit warns).

A visibility or readout error the response does not state is fitted with its
default prior (:data:`cavchar.models.probes.response.DEFAULT_FIT_PRIORS`): a perfect
probe is never assumed unless stated.

Modes: ``"exact"`` (forward algorithm over every probe), ``"coarse"`` (blocks
of probes, :mod:`cavchar.models.probes.blocks`, with its bias measured against
the exact likelihood on posterior draws and reported under
``checks["coarse_bias"]``), ``"quantized"`` (irregular probe times only: each
interval mapped to one of ``QUANTIZE_BINS`` representatives,
:mod:`cavchar.models.probes.quantized`, with the same bias check reported under
``checks["quantize_bias"]``; while the bound is not below
``QUANTIZE_BIAS_LIMIT_SD`` posterior sd the representatives are doubled and the
posterior sampled again, at most ``QUANTIZE_REFINES`` times, then the exact
likelihood is sampled instead) and ``"auto"`` (coarse for records of more than
300,000 probes when blocks of at least 4 probes fit in 1% of the typical
dwell time and the exact likelihood would exceed its time budget; otherwise
quantized for irregular probe times and exact for the rest).
"""

from __future__ import annotations

import math
import os
import warnings
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from cavchar.errors import CavcharWarning, InputError, PriorDominatedWarning
from cavchar.fits.finish import FitContext, finish_fit, sampler_settings
from cavchar.fits.probe_budget import exact_cost
from cavchar.fits.probe_check import probe_predictive_check
from cavchar.fits.probe_trajectory import reconstruct_trajectory
from cavchar.inference import SamplerSettings
from cavchar.inference.importance import sample_posterior_auto
from cavchar.models.probes.blocks import (
    BIAS_LIMIT_SD,
    BlockedProbeLikelihood,
    bias_check,
    block_size,
)
from cavchar.models.probes.likelihood import (
    TRUNCATION_VISITS,
    ProbeLikelihood,
    choose_levels,
    group_settings,
    probe_steps,
    typical_dwell,
)
from cavchar.models.probes.quantized import QUANTIZE_BINS, QuantizedProbeLikelihood
from cavchar.models.probes.response import FringeResponse, TableResponse
from cavchar.parameters import ParameterSpec
from cavchar.priors import LogUniform, Prior
from cavchar.records import ProbeRecord

__all__ = ["fit_probes", "fit_probes_with_trajectory", "ProbePriors", "AUTO_COARSE_PROBES",
           "BLOCK_FRACTION", "QUANTIZE_BIAS_LIMIT_SD", "QUANTIZE_REFINES"]

#: records longer than this use the coarse mode under ``mode="auto"``
AUTO_COARSE_PROBES = 300_000
#: block duration as a fraction of the typical dwell time (coarse mode); when the measured
#: bias bound exceeds BIAS_LIMIT_SD the blocks are halved and the posterior sampled again
#: (at most twice)
BLOCK_FRACTION = 0.01
#: quantized mode: largest accepted bias bound (posterior sd) of the interval quantization
QUANTIZE_BIAS_LIMIT_SD = 0.1
#: quantized mode: doublings of the representatives before falling back to the exact route
QUANTIZE_REFINES = 2
#: probes used by the pilot that finds the starting point
PILOT_PROBES = 50_000
#: draws whose marginals are averaged into the posterior mean trajectory
TRAJECTORY_DRAWS = 8
#: probes of the trajectory kept in the result (for the figure)
EXCERPT_PROBES = 4000


@dataclass(frozen=True)
class ProbePriors:
    """Priors on the lifetime T_c (s) and the thermal photon number n_th.

    The default n_th range stops at 20 photons: the truncation of the hidden
    chain grows with n_th (about 25 levels per photon of n_th).
    """

    lifetime: Prior = LogUniform(1e-6, 1e3)
    n_thermal: Prior = LogUniform(1e-6, 20.0)


def _read(record) -> ProbeRecord:
    if isinstance(record, ProbeRecord):
        return record
    if not isinstance(record, (str, os.PathLike)):
        raise TypeError("record must be a ProbeRecord or a file path")
    from cavchar.io.readers import read_probe_record

    return read_probe_record(record)


def _response(response) -> FringeResponse | TableResponse:
    """The response the fit uses: unstated visibility and readout errors fitted."""
    if response is None:
        return FringeResponse().for_fit()
    if isinstance(response, (FringeResponse, TableResponse)):
        return response.for_fit()
    if isinstance(response, (str, os.PathLike)):
        return TableResponse.from_file(response)
    raise InputError("the probe response must be a fringe response or a response table file")


def _median_interval(record: ProbeRecord) -> float:
    dt = np.diff(record.time)
    inside = np.ones(dt.size, bool)
    inside[record.bounds[1:-1] - 1] = False
    dt = dt[inside]
    return float(np.median(dt)) if dt.size else 1.0


def _sub_record(record: ProbeRecord, n: int) -> ProbeRecord:
    if len(record) <= n:
        return record
    return ProbeRecord(record.time[:n], record.outcome[:n],
                       setting=None if record.setting is None else record.setting[:n],
                       segment=None if record.segment is None else record.segment[:n])


def _pilot(record: ProbeRecord, response, priors: ProbePriors, initial) -> np.ndarray:
    """Starting point: grid maximum of the exact likelihood on the first probes.

    Response parameters start at their prior medians.  The lifetime grid spans
    three probe intervals to the pilot's duration at n_th = 0.1; n_th is then
    refined on a grid (1e-3 .. 0.5, extended to 5 when the best value is at the
    edge) at the best lifetime, then each fitted response parameter on the
    5%, 15%, ..., 95% points of its prior; twice.  Grid points are clipped to the
    priors' supports.
    """
    specs = response.parameter_specs()
    free0 = [float(s.prior.ppf(0.5)) for s in specs]
    sub = _sub_record(record, PILOT_PROBES)
    dt = _median_interval(sub)
    span = float(sub.time[-1] - sub.time[0]) or dt
    lo_t, hi_t = priors.lifetime.support
    lo_n, hi_n = priors.n_thermal.support

    def clip(x, lo, hi):
        return np.clip(x, max(lo, 1e-300), hi)

    def best(tcs, nths, free=None):
        free = [np.full(tcs.size, v) for v in free0] if free is None else free
        theta = np.column_stack([tcs, nths] + list(free))
        ll = model(theta)
        return int(np.argmax(ll)) if np.isfinite(ll).any() else None

    model = ProbeLikelihood(sub, response, initial=initial,
                            max_levels=choose_levels(5.0, _n0(initial), 1.0) + 1)
    tcs = clip(np.geomspace(3 * dt, max(span, 4 * dt), 16), lo_t, hi_t)
    best_n = float(clip(0.1, lo_n, hi_n))
    best_t = float(tcs[len(tcs) // 2])
    for _ in range(2):
        i = best(tcs, np.full(tcs.size, best_n))
        best_t = best_t if i is None else float(tcs[i])
        nths = clip(np.geomspace(1e-3, 0.5, 12), lo_n, hi_n)
        i = best(np.full(nths.size, best_t), nths)
        if i == nths.size - 1:
            nths = clip(np.geomspace(0.5, 5.0, 8), lo_n, hi_n)
            i = best(np.full(nths.size, best_t), nths)
        best_n = best_n if i is None else float(nths[i])
        for j, spec in enumerate(specs):
            grid = np.asarray(spec.prior.ppf(np.linspace(0.05, 0.95, 10)), dtype=float)
            free = [grid if k == j else np.full(grid.size, v) for k, v in enumerate(free0)]
            i = best(np.full(grid.size, best_t), np.full(grid.size, best_n), free)
            free0[j] = free0[j] if i is None else float(grid[i])
    return np.array([best_t, best_n] + free0)


def _duration(record: ProbeRecord) -> float:
    b, t = record.bounds, record.time
    return float(np.sum(t[b[1:] - 1] - t[b[:-1]])) or _median_interval(record)


def _n0(initial) -> int:
    return 0 if isinstance(initial, str) else int(initial)


def fit_probes(
    record: ProbeRecord | str | os.PathLike,
    *,
    response: FringeResponse | TableResponse | str | os.PathLike | None = None,
    freq_hz: float | None = None,
    stage_temp_k: float | None = None,
    priors: ProbePriors | None = None,
    settings: SamplerSettings | None = None,
    seed: int | None = None,
    mode: str = "auto",
    block_probes: int | None = None,
    initial: str | int = "stationary",
    n_levels: int | None = None,
    command_line: Sequence[str] | None = None,
    sampler: str = "importance",
):
    """Posterior of the lifetime, thermal photon number (and fitted response
    parameters) from a raw probe record.

    Parameters
    ----------
    record
        A :class:`~cavchar.records.ProbeRecord` or the path of a probe-record file
        (columns ``time`` [s], ``outcome`` [0/1, empty = lost], optional
        ``setting`` [rad], ``segment``; docs/probe-records.md).
    response
        :class:`~cavchar.models.probes.response.FringeResponse` (each parameter fixed or
        with a prior) or :class:`~cavchar.models.probes.response.TableResponse`, or the
        path of a response table.  A visibility or readout error the fringe does
        not state is fitted with its default prior
        (:data:`~cavchar.models.probes.response.DEFAULT_FIT_PRIORS`); None: a parity
        fringe (``phi0 = pi``, ``phi_r = 0``) with V, e0 and e1 all fitted.  The
        role of each parameter is stored under ``settings["fit"]["response"]["roles"]``.
    freq_hz, stage_temp_k
        Mode frequency (Hz) and stage temperature (K) for Q, T_eff and the Planck check.
    priors
        :class:`ProbePriors`.
    settings, seed
        Sampler settings; ``seed`` overrides ``settings.seed``.
    mode
        ``"exact"``, ``"coarse"``, ``"quantized"`` or ``"auto"`` (module docstring).
    block_probes
        Probes per block in the coarse mode (default from the pilot estimate: 1% of
        the typical dwell time).
    initial
        ``"stationary"`` (each segment starts in thermal equilibrium) or a Fock
        state (photon number) the segments start in.
    n_levels
        Fixed truncation (default: automatic, checked against the posterior).
    command_line, sampler
        As for :func:`cavchar.fits.jumps.fit_jumps`.

    Returns
    -------
    FitResult
        Kind ``"probes-exact"``, ``"probes-coarse"`` or ``"probes-quantized"``.
    """
    return fit_probes_with_trajectory(
        record, response=response, freq_hz=freq_hz, stage_temp_k=stage_temp_k, priors=priors,
        settings=settings, seed=seed, mode=mode, block_probes=block_probes, initial=initial,
        n_levels=n_levels, command_line=command_line, sampler=sampler)[0]


def fit_probes_with_trajectory(record, **options):
    """As :func:`fit_probes` (same options), returning ``(FitResult, ProbeTrajectory)``:
    the result and the whole reconstructed trajectory
    (:class:`cavchar.fits.probe_trajectory.ProbeTrajectory`)."""
    return _fit(record, **options)


def _fit(record, *, response=None, freq_hz=None, stage_temp_k=None, priors=None, settings=None,
         seed=None, mode="auto", block_probes=None, initial="stationary", n_levels=None,
         command_line=None, sampler="importance"):
    record = _read(record)
    response = _response(response)
    priors = priors or ProbePriors()
    if mode not in ("auto", "exact", "coarse", "quantized"):
        raise InputError(f"unknown mode {mode!r}", hint="use auto, exact, coarse or quantized")
    settings = sampler_settings(settings, seed)
    specs = (ParameterSpec("lifetime", "s", "T_c", priors.lifetime, log_scale=True),
             ParameterSpec("n_thermal", "", "n_th", priors.n_thermal, log_scale=True),
             *response.parameter_specs())
    context = FitContext(record=record, freq_hz=freq_hz, stage_temp_k=stage_temp_k,
                         command_line=command_line)
    if np.all(np.isnan(record.outcome)):
        raise InputError("every probe of the record is lost", path=record.source)
    guess = _pilot(record, response, priors, initial)
    dt = _median_interval(record)
    blocks = block_probes or block_size(typical_dwell(guess[0], guess[1]), dt, BLOCK_FRACTION)
    use_coarse = mode == "coarse" or (mode == "auto" and len(record) > AUTO_COARSE_PROBES
                                      and blocks >= 4)
    if mode == "coarse" and blocks < 2:
        warnings.warn(f"blocks of {blocks} probe(s) only: the coarse mode gains nothing here",
                      CavcharWarning, stacklevel=2)
    cap = None
    if isinstance(response, TableResponse) and n_levels is None:
        need = choose_levels(guess[1], _n0(initial), _duration(record) / guess[0])
        settings_used = group_settings(record.setting, len(record))[0]
        response.check_coverage(need, settings_used)  # names the missing photon numbers
    else:
        cap = choose_levels(max(5.0 * guess[1], 0.5), _n0(initial), _duration(record) / guess[0])
    budget = None
    irregular = probe_steps(record.time, record.bounds).kind == "irregular"
    if mode == "auto" and use_coarse:  # long record: exact unless a measurement says too slow
        timed = ProbeLikelihood(record, response, n_levels, initial=initial, max_levels=cap)
        if irregular:  # the route auto would take instead of the coarse mode
            timed = QuantizedProbeLikelihood(timed, QUANTIZE_BINS)
        budget = exact_cost(timed, guess, sampler)
        budget["route_timed"] = "quantized intervals" if irregular else "exact"
        use_coarse = not budget["affordable"]
    use_quant = irregular and not use_coarse and mode in ("auto", "quantized")
    bins = QUANTIZE_BINS
    for _attempt in range(2):
        exact = ProbeLikelihood(record, response, n_levels, initial=initial, max_levels=cap)
        if use_coarse:
            model = BlockedProbeLikelihood(exact, max(1, blocks))
        elif use_quant:
            model = QuantizedProbeLikelihood(exact, bins)
        else:
            model = exact
        run = sample_posterior_auto(model, specs, guess, settings, sampler)
        needed = exact.levels_for(run.draws[:, 0], run.draws[:, 1], cap=False)
        top = int(np.quantile(needed, 0.999, method="higher"))
        if n_levels is not None or top <= exact.max_levels:
            break
        if isinstance(response, TableResponse):
            response.check_coverage(top, exact.settings)  # raises: names the missing numbers
        cap = 2 * top  # walkers needed more levels than allowed: widen and sample again
        guess = np.median(run.draws, axis=0)
    checks, extras = {}, {}
    if budget is not None:
        checks["exact_budget"] = budget
    n_top = float(np.quantile(run.draws[:, 1], 0.999))
    checks["truncation"] = {
        "levels_at_median": int(np.median(needed)), "levels_99.9%": top,
        "largest_allowed": int(exact.max_levels), "n_thermal_99.9%": n_top,
        "rule": "per parameter set, the smallest even number of levels for which the "
                "expected number of visits above the top level during the record stays below "
                f"{TRUNCATION_VISITS:g} (at most {exact.max_levels})",
    }
    while use_coarse:
        check = bias_check(model, run.draws)
        checks["coarse_bias"] = check
        if check["bias_bound_sd"] < BIAS_LIMIT_SD or blocks < 4 or block_probes or \
                len(checks.setdefault("coarse_refits", [])) >= 2:
            break
        checks["coarse_refits"].append({"block_probes": int(blocks),
                                        "bias_bound_sd": check["bias_bound_sd"]})
        blocks //= 2
        model = BlockedProbeLikelihood(exact, blocks)
        run = sample_posterior_auto(model, specs, np.median(run.draws, axis=0), settings,
                                      sampler)
    while use_quant:
        check = bias_check(model, run.draws, limit_sd=QUANTIZE_BIAS_LIMIT_SD)
        checks["quantize_bias"] = check
        if check["bias_bound_sd"] < QUANTIZE_BIAS_LIMIT_SD:
            break
        refits = checks.setdefault("quantize_refits", [])
        refits.append({"bins": int(bins), "bias_bound_sd": check["bias_bound_sd"]})
        median = np.median(run.draws, axis=0)
        if len(refits) > QUANTIZE_REFINES or check["quantization_exact"]:
            checks["quantize_fallback"] = (
                f"bias bound {check['bias_bound_sd']:.3g} sd not below "
                f"{QUANTIZE_BIAS_LIMIT_SD} with {bins} representative intervals: the exact "
                "likelihood was sampled instead")
            use_quant = False
            model = exact
            run = sample_posterior_auto(exact, specs, median, settings, sampler)
            break
        bins *= 2
        model = QuantizedProbeLikelihood(exact, bins)
        run = sample_posterior_auto(model, specs, median, settings, sampler)
    if use_coarse:
        if not check["bias_bound_sd"] < BIAS_LIMIT_SD:
            warnings.warn(f"coarse mode: the bias bound {check['bias_bound_sd']:.2f} posterior "
                          f"sd exceeds {BIAS_LIMIT_SD}; refit with mode='exact' (--exact) or "
                          "smaller blocks", CavcharWarning, stacklevel=2)
    _warn_prior_dominated(run, specs)
    rng = np.random.default_rng(np.random.SeedSequence(run.settings.seed).spawn(6)[5])
    try:
        checks["posterior_predictive"] = probe_predictive_check(record, response, run.draws,
                                                                rng, initial=initial)
    except InputError as exc:  # a record too short for the check: the fit still stands
        checks["posterior_predictive"] = {"skipped": exc.message, "misfit": None}
    traj = reconstruct_trajectory(exact, run.draws, TRAJECTORY_DRAWS)
    n = min(EXCERPT_PROBES, traj.time.size)
    extras["trajectory_excerpt"] = {
        "time": traj.time[:n].tolist(),
        "outcome": [None if math.isnan(x) else int(x) for x in traj.outcome[:n]],
        "mean_photons": traj.mean[:n].tolist(), "sd_photons": traj.sd[:n].tolist(),
        "viterbi_photons": traj.path[:n].astype(int).tolist(),
        "draws_used": traj.draws_used,
    }
    extras["record"] = {"probes": len(record), "lost": record.n_lost,
                        "segments": record.n_segments, "median_interval_s": dt,
                        "fraction_of_ones": float(np.nanmean(record.outcome)),
                        "spacing": exact.steps.kind}
    extras["pilot_guess"] = dict(zip(exact.names, guess.tolist(), strict=True))
    median = np.median(run.draws, axis=0)
    intervals = exact.interval_route(median)
    if use_quant:
        check = checks["quantize_bias"]
        intervals = {**model.describe(), "exact_route": intervals,
                     "bias_bound_sd": check["bias_bound_sd"],
                     "bias_limit_sd": QUANTIZE_BIAS_LIMIT_SD,
                     "draws_checked": check["n_checked"],
                     "bound": f"bias bound {check['bias_bound_sd']:.3g} posterior sd on every "
                              f"posterior mean (importance check on {check['n_checked']} "
                              f"draws; accepted below {QUANTIZE_BIAS_LIMIT_SD})"}
    elif "quantize_fallback" in checks:
        intervals["quantized_fallback"] = checks["quantize_fallback"]
    mode_used = "coarse" if use_coarse else "quantized" if use_quant else "exact"
    model_settings = {"mode": mode_used,
                      "block_probes": int(blocks) if use_coarse else 1,
                      "levels_99.9%": top, "initial_state": initial, "sampler": sampler,
                      "response": response.describe(), "intervals": intervals}
    if use_quant:
        model_settings["quantized_bins"] = int(bins)
    kind = f"probes-{mode_used}"
    result = finish_fit(kind, run, context, checks=checks, extras=extras,
                        model_settings=model_settings)
    return result, traj


def _warn_prior_dominated(run, specs) -> None:
    """Warn when a parameter's posterior spans most of its prior (little information)."""
    for i, spec in enumerate(specs):
        lo, hi = spec.prior.support
        if not (math.isfinite(lo) and math.isfinite(hi)):
            continue
        x = run.draws[:, i]
        if spec.log_scale and lo > 0:
            width = (np.log(np.quantile(x, 0.975)) - np.log(np.quantile(x, 0.025)))
            full = math.log(hi / lo)
        else:
            width = np.quantile(x, 0.975) - np.quantile(x, 0.025)
            full = hi - lo
        if full > 0 and width > 0.5 * full:
            warnings.warn(f"{spec.name}: the 95% interval spans {100 * width / full:.0f}% of "
                          "the prior range; the record carries little information on it",
                          PriorDominatedWarning, stacklevel=3)
