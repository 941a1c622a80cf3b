"""Simulate-and-fit studies that confirm a precision forecast.

At the planned amount of data, ``n_records`` independent records are
simulated with :mod:`cavchar.simulate` at the assumed true values and fitted
by maximum likelihood with the same likelihood the fits use
(:mod:`cavchar.models.jumps`, the hidden-Markov forward algorithm of
:mod:`cavchar.models.probes.hmm_kernels`, the ring-down noise models).  The study
reports, per parameter,

* the spread (sample sd) of the estimates over the records, with its Monte
  Carlo standard error ``sd / sqrt(2 (M - 1))`` (normal theory; M records);
* the median per-record standard error from the observed information at the
  estimate (the Laplace width, which a posterior sd matches for large records);

to be compared with the Cramér–Rao forecast.  For large records both agree
with it; for small ones (few jumps) they exceed it, which is what the study
is there to show.

The maximizer is Newton's method in coordinates scaled by the forecast sd
(central-difference gradient and Hessian of the batched log-likelihood in
one call per iteration, with step halving), started at the truth; a record
whose estimate fails (no finite maximum, e.g. no jump at all) is counted and
left out.

Ring-downs: every simulated trace of a study shares its amplitude and floor,
so the N traces are averaged (Gaussian kinds: noise ``sigma / sqrt(N)``),
summed (population counts) or fitted jointly (Rice magnitudes); the
information is ``N`` times that of one trace in each case, and also when each
trace has nuisances of its own (the profiled information of identical traces
adds up).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from cavchar.decay import RingdownCurve, rice_logpdf, ringdown_mean
from cavchar.dynamics import truncation_levels
from cavchar.errors import InputError
from cavchar.inference.derivatives import numerical_hessian
from cavchar.plan.fisher import (
    TAIL,
    _probe_loglik,
    probe_table,
    ringdown_information,
)

__all__ = ["StudyResult", "maximize", "study_jumps", "study_probes", "study_ringdown"]

LogLik = Callable[[np.ndarray], np.ndarray]


@dataclass(frozen=True)
class StudyResult:
    """Outcome of a simulate-and-fit study.

    Attributes
    ----------
    estimates : DataFrame
        One row per record: ``<name>`` (estimate), ``<name>_sd`` (Laplace sd), ``ok``.
    names : tuple of str
        Parameters of interest.
    truth : ndarray
        True values.
    """

    estimates: pd.DataFrame
    names: tuple[str, ...]
    truth: np.ndarray

    def summary(self) -> pd.DataFrame:
        """Per parameter: records used, failed, spread, its MC error, median Laplace sd, bias."""
        ok = self.estimates[self.estimates["ok"]]
        m = len(ok)
        rows = []
        for name, true in zip(self.names, self.truth, strict=True):
            est = ok[name].to_numpy()
            spread = float(np.std(est, ddof=1)) if m > 1 else math.nan
            rows.append({"quantity": name, "records": m,
                         "failed": int((~self.estimates["ok"]).sum()),
                         "simulated_sd": spread,
                         "simulated_sd_error": spread / math.sqrt(2 * (m - 1)) if m > 1
                         else math.nan,
                         "fit_sd": float(np.median(ok[f"{name}_sd"])) if m else math.nan,
                         "bias": float(np.mean(est) - true) if m else math.nan})
        return pd.DataFrame(rows)


def maximize(loglik: LogLik, x0: ArrayLike, scale: ArrayLike, *, max_iter: int = 50,
             tol: float = 1e-3) -> tuple[np.ndarray, np.ndarray, bool]:
    """Maximum of a batched log-likelihood by Newton steps in units of ``scale``.

    Stops when the Newton step is below ``tol`` scale units (1e-3 of a standard
    deviation: far below the spread a study measures) at a point with a
    negative-definite Hessian.  Returns the maximizer, the covariance
    ``-H^{-1}`` there (observed information) and whether it succeeded.
    """
    x0 = np.asarray(x0, dtype=float)
    scale = np.asarray(scale, dtype=float)
    failed = (x0, np.full((x0.size,) * 2, np.nan), False)

    def f(z):
        return loglik(x0 + np.atleast_2d(z) * scale)

    z = np.zeros_like(x0)
    h = np.full(x0.size, 1e-2)
    with np.errstate(invalid="ignore", over="ignore"):
        for _ in range(max_iter):
            g, hess, f0 = numerical_hessian(f, z, h)
            if not (np.isfinite(f0) and np.all(np.isfinite(hess)) and np.all(np.isfinite(g))):
                return failed
            w, v = np.linalg.eigh(hess)
            concave = w.max() < 0
            if concave:
                step = -np.linalg.solve(hess, g)
                if np.linalg.norm(step) < tol:
                    cov = -np.linalg.inv(hess) * np.outer(scale, scale)
                    return x0 + (z + step) * scale, cov, True
            else:  # not concave here: ascend along the gradient, curvature-limited
                step = v @ ((v.T @ g) / np.maximum(np.abs(w), 1.0))
            norm = np.linalg.norm(step)
            if norm > 3.0:
                step *= 3.0 / norm
            for _half in range(40):
                if f(z + step)[0] >= f0 - 1e-9 * abs(f0):
                    break
                step /= 2
            z = z + step
    return failed


def _run(n_records: int, seed, names, truth, scale, make_loglik, start=None) -> StudyResult:
    """Simulate-and-maximize loop: ``make_loglik(rng) -> (loglik, x0)``; interest first."""
    if int(n_records) < 2:
        raise InputError("a study needs at least 2 simulated records")
    rng = np.random.default_rng(seed)
    rows = []
    p = len(names)
    for _ in range(int(n_records)):
        loglik, x0 = make_loglik(rng)
        x, cov, ok = maximize(loglik, x0, scale)
        row = {n: float(x[i]) for i, n in enumerate(names)}
        row.update({f"{n}_sd": float(np.sqrt(cov[i, i])) if ok else math.nan
                    for i, n in enumerate(names)})
        row["ok"] = ok and bool(x[0] > 0)
        rows.append(row)
    return StudyResult(pd.DataFrame(rows), tuple(names), np.asarray(truth[:p], dtype=float))


# --------------------------------------------------------------------------- jump records


def study_jumps(lifetime: float, n_thermal: float, record_length: float, scale: ArrayLike, *,
                sample_interval: float | None = None, n_records: int = 40,
                seed: int | np.random.Generator | None = 0) -> StudyResult:
    """Study of exact (or, with ``sample_interval``, sampled) jump records of
    ``record_length`` s; ``scale`` (2,) is the forecast sd of (T_c, n_th)."""
    from cavchar.models.jumps import (
        exact_log_likelihood,
        jump_statistics,
        sampled_log_likelihood,
        sampled_transitions,
    )
    from cavchar.simulate import probe_times, simulate_jump_record, simulate_sampled_record

    truth = np.array([lifetime, n_thermal])

    def make(rng):
        if sample_interval is None:
            rec = simulate_jump_record(lifetime, n_thermal, record_length, seed=rng)
            stats = jump_statistics(rec.time, rec.photons, rec.end_time, rec.segment)
            return (lambda th: exact_log_likelihood(stats, th[:, 0], th[:, 1])), truth
        times, seg = probe_times(record_length, sample_interval)
        rec = simulate_sampled_record(lifetime, n_thermal, times, segment=seg, seed=rng)
        trans = sampled_transitions(rec.time, rec.photons, rec.segment)
        levels = truncation_levels(2 * n_thermal, trans.n_max, TAIL)
        return (lambda th: sampled_log_likelihood(trans, th[:, 0], th[:, 1], levels)), truth

    return _run(n_records, seed, ("lifetime", "n_thermal"), truth, np.asarray(scale), make)


# --------------------------------------------------------------------------- probe records


def study_probes(lifetime: float, n_thermal: float, probe_interval: float, response,
                 n_probes: int, scale: ArrayLike, *, settings: ArrayLike | None = None,
                 loss: float = 0.0, n_records: int = 20,
                 seed: int | np.random.Generator | None = 0) -> StudyResult:
    """Study of probe records of ``n_probes`` probes every ``probe_interval`` s."""
    from cavchar.simulate import simulate_probe_record

    truth = np.array([lifetime, n_thermal])
    n_levels = truncation_levels(n_thermal, 0, TAIL)
    s = None if settings is None else np.atleast_1d(np.asarray(settings, dtype=float))
    n_settings = 1 if s is None else s.size
    table = probe_table(response, n_levels, s)
    times = probe_interval * np.arange(int(n_probes))
    index = None if s is None else np.arange(int(n_probes)) % n_settings

    def make(rng):
        record, _ = simulate_probe_record(lifetime, n_thermal, times, response, settings=s,
                                          loss=loss, seed=rng)
        base = _probe_loglik(record.outcome, index, n_settings, table, probe_interval, n_levels)
        return base, truth

    return _run(n_records, seed, ("lifetime", "n_thermal"), truth, np.asarray(scale), make)


# --------------------------------------------------------------------------- ring-downs


def study_ringdown(signal: str, times: ArrayLike, lifetime: float, n_traces: int,
                   scale: ArrayLike | None = None, *, noise: float = 0.0, shots: int = 1000,
                   fixed: tuple[str, ...] = (), n_records: int = 40,
                   seed: int | np.random.Generator | None = 0, **assumed: Any) -> StudyResult:
    """Study of ``n_traces`` ring-down traces per record (arguments as
    :func:`cavchar.plan.fisher.ringdown_information`; ``assumed``: the fields of
    :class:`cavchar.decay.RingdownCurve`); ``scale``: the forecast sds of every fitted
    parameter (default: computed from the Fisher information)."""
    from cavchar.dynamics import transition_matrices_batch
    from cavchar.simulate import simulate_ringdown

    signal = signal.lower().replace("-", "_")
    times = np.asarray(times, dtype=float)
    m = times.size
    curve = RingdownCurve(lifetime, **assumed)
    t0 = curve.t0
    kw = dict(amplitude=curve.amplitude, floor=curve.floor, t0=t0, noise=noise,
              detuning=curve.detuning, phase=curve.phase, offset=curve.offset,
              n_th=curve.n_thermal, initial=curve.initial, shots=shots, traces=int(n_traces))
    p0 = np.atleast_1d(np.asarray(curve.initial, dtype=float))
    values = curve.parameters(signal, noise)
    full_names = tuple(values)
    interest = full_names[:2] if "n_thermal" in values else full_names[:1]  # never fixed
    names = interest + tuple(n for n in full_names[len(interest):] if n not in fixed)
    truth = np.array([values[n] for n in names])
    full_truth = np.array(list(values.values()))
    free_idx = [full_names.index(n) for n in names]
    if scale is None or np.size(scale) != len(names):  # forecast sds of every fitted parameter
        info = ringdown_information(signal, times, lifetime, noise=noise, shots=shots,
                                    fixed=fixed, **assumed)
        scale = np.asarray(info.extra["full_sd"]) / math.sqrt(int(n_traces))

    def full(theta):
        out = np.tile(full_truth, (theta.shape[0], 1))
        out[:, free_idx] = theta
        return out

    def make(rng):
        trace = simulate_ringdown(signal, times, lifetime, seed=rng, **kw)
        if signal == "populations":
            counts = np.asarray(trace.value).reshape(int(n_traces), m, -1).sum(axis=0)
            levels = counts.shape[1]
            p_init = p0 if p0.size > 1 else np.eye(int(p0[0]) + 1)[int(p0[0])]

            start = np.pad(p_init, (0, levels - p_init.size))

            def loglik(theta):
                out = np.full(theta.shape[0], -np.inf)
                ok = np.all(theta > 0, axis=1)
                if ok.any():  # one batched eigen-decomposition for every set and delay
                    mats = transition_matrices_batch(1 / theta[ok, 0], theta[ok, 1], levels,
                                                     times - t0, n_max=p_init.size - 1)
                    pop = np.einsum("i,kmij->kmj", start, mats)
                    out[ok] = np.einsum("mj,kmj->k", counts,
                                        np.log(np.clip(pop, 1e-300, None)))
                return out

            return loglik, truth
        value = np.asarray(trace.value).reshape(int(n_traces), m)
        if signal == "amplitude":

            def loglik(theta):
                th = full(theta)
                out = np.full(theta.shape[0], -np.inf)
                for k, row in enumerate(th):
                    if row[0] > 0 and row[1] > 0 and row[2] > 0:
                        nu, _ = ringdown_mean(signal, times, row, t0)
                        out[k] = np.sum(rice_logpdf(value, nu[None, :], row[2]))
                return out

            return loglik, truth
        mean_value = value.mean(axis=0)
        sigma2 = noise**2 / int(n_traces)

        def loglik(theta):
            th = full(theta)
            out = np.full(theta.shape[0], -np.inf)
            for k, row in enumerate(th):
                if row[0] > 0:
                    try:
                        mu, _ = ringdown_mean(signal, times, row, t0)
                    except InputError:
                        continue
                    out[k] = -0.5 * np.sum(np.abs(mean_value - mu) ** 2) / sigma2
            return out

        return loglik, truth

    return _run(n_records, seed, names, truth, scale, make)
