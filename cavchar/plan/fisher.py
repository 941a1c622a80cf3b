"""Fisher information of the likelihoods the fits use, one function per data shape.

The Cramér–Rao bound ``cov >= I^{-1}`` (e.g. Casella & Berger, *Statistical
Inference*, ch. 7) turns each information matrix into the smallest standard
deviations an unbiased estimate can reach; maximum-likelihood estimates and
posterior widths reach it for large records.  Every function returns a
:class:`Information` for the parameters of interest per unit of data (one
second of a jump record, one probe, one ring-down trace); information adds
over independent data, so ``amount`` units carry ``amount`` times as much.

* exact jump records: the closed form of
  :func:`cavchar.models.jumps.exact_fisher_information`;
* sampled jump records: the expected information per transition of the
  stationary chain, ``I = sum_ij pi_i P_ij grad log P_ij grad log P_ij^T`` with
  ``P = expm(Q dt)`` and ``grad P`` in closed form from the symmetric
  eigen-decomposition of the generator (Daleckii–Krein formula for the
  derivative of a matrix function; Higham, *Functions of Matrices*, 2008, ch. 3);
* probe records: no closed form exists for a hidden Markov model, so the
  information per probe is estimated from the observed information
  ``-d2 log L`` (central differences of the forward-algorithm log-likelihood)
  at the true parameters of long simulated records.  At the truth its
  expectation is the Fisher information exactly; its Monte Carlo error comes
  from the spread between independent records.  The sampled-record
  information at the probe interval is an upper bound (the outcomes are a
  noisy function of the photon numbers at the probe times: data-processing
  inequality) and is returned with it;
* ring-downs: ``J^T Sigma^{-1} J`` for Gaussian noise (power, dB, mean photon
  number, IQ), the Rice information for magnitudes, the multinomial
  information for Fock populations.  The nuisance parameters (amplitude,
  floor, initial photon number, detuning, offset, noise of a magnitude) are
  profiled out by the Schur complement ``I_aa - I_ab I_bb^{-1} I_ba``: the
  inverse of the parameter-of-interest block of ``I^{-1}``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

from cavchar.decay import (
    RINGDOWN_NUISANCES,
    RingdownCurve,
    initial_distribution,
    ringdown_signal,
)
from cavchar.dynamics import stationary_distribution, truncation_levels
from cavchar.errors import InputError
from cavchar.inference.derivatives import numerical_hessian

__all__ = [
    "Information",
    "exact_jump_information",
    "sampled_jump_information",
    "probe_information",
    "probe_table",
    "ringdown_information",
    "rice_information",
    "schur_complement",
]

#: tail of the stationary law neglected by the truncations used here
TAIL = 1e-12


@dataclass(frozen=True)
class Information:
    """Fisher information per unit of data for the parameters of interest.

    Attributes
    ----------
    names : tuple of str
        Parameters of interest (``"lifetime"`` in s, ``"n_thermal"``).
    values : ndarray (p,)
        The assumed (true) values.
    matrix : ndarray (p, p)
        Information per unit of data (nuisances profiled out).
    unit : str
        What one unit of data is (``"s"`` of record, ``"probe"``, ``"trace"``).
    rel_error : ndarray (p,)
        Relative Monte Carlo error of ``sqrt(diag(matrix^-1))`` (0 for exact forms).
    bound : ndarray (p, p) or None
        An upper bound on ``matrix`` (probe records: perfect readout).
    extra : dict
        Method and settings used.
    """

    names: tuple[str, ...]
    values: np.ndarray
    matrix: np.ndarray
    unit: str
    rel_error: np.ndarray
    bound: np.ndarray | None = None
    extra: dict = field(default_factory=dict)

    def sd(self, amount: ArrayLike = 1.0) -> np.ndarray:
        """Cramér–Rao standard deviations for ``amount`` units, shape ``amount.shape + (p,)``."""
        var = np.diag(_inverse(self.matrix, self.names))
        return np.sqrt(var / np.asarray(amount, dtype=float)[..., None])


def _inverse(matrix: np.ndarray, names) -> np.ndarray:
    w = np.linalg.eigvalsh(matrix)
    if not (np.all(np.isfinite(w)) and w.min() > 1e-12 * max(abs(w.max()), 1e-300)):
        raise InputError(f"the data carry no information on some combination of {names}",
                         hint="add a longer span, more points or fix a nuisance parameter")
    return np.linalg.inv(matrix)


def schur_complement(matrix: ArrayLike, keep: ArrayLike) -> np.ndarray:
    """Information on the parameters ``keep`` with the others profiled out.

    ``I_aa - I_ab I_bb^{-1} I_ba`` (a = kept indices, b = the rest), which is the
    inverse of the ``a`` block of ``I^{-1}``.
    """
    m = np.asarray(matrix, dtype=float)
    keep = np.asarray(keep, dtype=int)
    rest = np.setdiff1d(np.arange(m.shape[0]), keep)
    if rest.size == 0:
        return m[np.ix_(keep, keep)].copy()
    a, b, c = m[np.ix_(keep, keep)], m[np.ix_(keep, rest)], m[np.ix_(rest, rest)]
    return a - b @ np.linalg.solve(c, b.T)


def _check(lifetime: float, n_thermal: float, need_n: bool = True) -> None:
    if not (math.isfinite(lifetime) and lifetime > 0):
        raise InputError(f"the lifetime must be a positive time, not {lifetime} s")
    if need_n and not (math.isfinite(n_thermal) and n_thermal > 0):
        raise InputError(f"planning needs a thermal photon number > 0, not {n_thermal}",
                         hint="a cold mode still has some n_th, e.g. 1e-3")


# --------------------------------------------------------------------------- jump records


def exact_jump_information(lifetime: float, n_thermal: float) -> Information:
    """Information per second of an exact stationary jump record (closed form, see
    :func:`cavchar.models.jumps.exact_fisher_information`)."""
    from cavchar.models.jumps import exact_fisher_information

    _check(lifetime, n_thermal)
    matrix = exact_fisher_information(lifetime, n_thermal, 1.0)
    return Information(("lifetime", "n_thermal"), np.array([lifetime, n_thermal]), matrix,
                       "s", np.zeros(2), extra={"method": "closed form"})


def _transition_derivatives(lifetime: float, n_thermal: float, intervals: ArrayLike,
                            n_levels: int) -> tuple[np.ndarray, np.ndarray]:
    """``P(dt)`` (m, N, N) and ``dP/d(T_c, n_th)`` (2, m, N, N), analytically.

    With ``S = D^{1/2} Q D^{-1/2} = V diag(lam) V^T`` (``D = diag(pi)``, see
    :mod:`cavchar.dynamics`) ``P = D^{-1/2} exp(S dt) D^{1/2}``, so

        dP_ij = (g_j - g_i) P_ij + [D^{-1/2} V (F o (V^T dS V)) V^T D^{1/2}]_ij

    with ``g_n = d ln sqrt(pi_n) = (n/2) d ln r`` (``r = n_th/(1+n_th)``) and the
    Daleckii–Krein divided differences ``F_kl = (e^{lam_k dt} - e^{lam_l dt}) /
    (lam_k - lam_l)`` (``dt e^{lam_k dt}`` on the diagonal), evaluated as
    ``e^{max dt} dt (1 - e^{-|lam_k - lam_l| dt}) / (|lam_k - lam_l| dt)``.  One
    symmetric eigen-decomposition serves every interval.  The rounding error of
    row ``i`` is amplified by ``sqrt(pi_j/pi_i)``; every use here weights row
    ``i`` by its population, which cancels it.
    """
    kappa = 1.0 / lifetime
    a, b = kappa * n_thermal, kappa * (1.0 + n_thermal)
    n = np.arange(n_levels, dtype=float)

    def sym(da: float, db: float, dab: float) -> np.ndarray:
        out = np.diag(-(da * (n + 1) * (n < n_levels - 1) + db * n))
        out += np.diag(dab * n[1:], 1) + np.diag(dab * n[1:], -1)
        return out

    root = math.sqrt(a * b)
    s_mat = sym(a, b, root)
    # d/dT_c: a, b scale with kappa = 1/T_c; d/dn_th: da = db = kappa
    d_sym = [-s_mat / lifetime, sym(kappa, kappa, kappa * (a + b) / (2 * root))]
    g = [np.zeros(n_levels), 0.5 * n / (n_thermal * (1.0 + n_thermal))]
    lam, vecs = np.linalg.eigh(s_mat)
    lam = np.minimum(lam, 0.0)
    half = 0.5 * n * math.log(n_thermal / (1.0 + n_thermal))  # ln sqrt(pi_n) + const
    scale = np.exp(half[None, :] - half[:, None])  # sqrt(pi_j / pi_i)
    dts = np.atleast_1d(np.asarray(intervals, dtype=float))
    decay = np.exp(lam[None, :] * dts[:, None])  # (m, N)
    p = (vecs[None] * decay[:, None, :]) @ vecs.T[None] * scale
    top = np.maximum(lam[:, None], lam[None, :])
    gap = np.abs(lam[:, None] - lam[None, :])
    x = gap[None] * dts[:, None, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(x > 1e-12, -np.expm1(-x) / np.where(x > 0, x, 1.0), 1.0)
    div = np.exp(top[None] * dts[:, None, None]) * dts[:, None, None] * ratio  # (m, N, N)
    grads = []
    for d_s, g_n in zip(d_sym, g, strict=True):
        inner = vecs.T @ d_s @ vecs
        df = vecs[None] @ (div * inner[None]) @ vecs.T[None] * scale
        grads.append((g_n[None, None, :] - g_n[None, :, None]) * p + df)
    return np.clip(p, 0.0, 1.0), np.stack(grads)


def sampled_jump_information(lifetime: float, n_thermal: float, interval: float,
                             n_levels: int | None = None) -> Information:
    """Expected information per transition of a stationary record sampled every ``interval`` s.

    ``I = sum_ij pi_i grad P_ij grad P_ij^T / P_ij`` (the information of one
    step of a Markov chain started in its stationary law; the first state's
    O(1) information is neglected, as the fits' conditional likelihood does).
    Entries with ``P_ij < 1e-12`` are left out: their share is below
    ``1e-12 |grad log P|^2`` while their rounding error would not be.
    """
    _check(lifetime, n_thermal)
    if not (math.isfinite(interval) and interval > 0):
        raise InputError(f"the sampling interval must be a positive time, not {interval} s")
    n_levels = n_levels or truncation_levels(n_thermal, 2, TAIL)
    p, grad = _transition_derivatives(lifetime, n_thermal, [interval], n_levels)
    p, grad = p[0], grad[:, 0]
    pi = stationary_distribution(n_thermal, n_levels)
    use = p > 1e-12
    w = np.where(use, pi[:, None] / np.where(use, p, 1.0), 0.0)
    matrix = np.einsum("ij,aij,bij->ab", w, grad, grad)
    return Information(("lifetime", "n_thermal"), np.array([lifetime, n_thermal]), matrix,
                       "transition", np.zeros(2),
                       extra={"method": "expected information, analytic derivative of P(dt)",
                              "interval_s": interval, "levels": n_levels})


# --------------------------------------------------------------------------- probe records


def probe_table(response, n_levels: int, settings: ArrayLike | None = None) -> np.ndarray:
    """``P(1 | n, setting)`` of a fixed response as an array (S, N).

    ``response`` is a :class:`cavchar.models.probes.response.FringeResponse` or
    ``TableResponse`` with fixed values (anything with ``prob_one``), or a
    callable ``response(photons, setting) -> P(1)`` such as
    a plain function of the photon numbers and settings.
    """
    s = np.zeros(1) if settings is None else np.atleast_1d(np.asarray(settings, dtype=float))
    if hasattr(response, "prob_one"):
        if getattr(response, "free_names", ()):
            raise InputError("planning needs a response with fixed (calibrated) values, not "
                             f"fitted ones ({', '.join(response.free_names)})")
        p_one, _valid = response.prob_one(None, n_levels, s)
        table = np.asarray(p_one, dtype=float)[0]
    elif callable(response):
        n = np.arange(n_levels)
        table = np.asarray(response(n[None, :], s[:, None]), dtype=float)
        table = np.broadcast_to(table, (s.size, n_levels)).copy()
    else:
        raise InputError("the probe response must be a response model or a callable")
    if not np.all((table >= 0) & (table <= 1)):
        raise InputError("the probe response must give probabilities in [0, 1]")
    return table


def _probe_loglik(outcome, setting_index, n_settings, table, interval, n_levels):
    """Batched forward log-likelihood of one probe record over (T_c, n_th) sets."""
    from cavchar.dynamics import transition_matrices_batch
    from cavchar.models.probes.hmm_kernels import ProbeSequence, Transitions, emission_table
    from cavchar.models.probes.hmm_kernels import forward_loglik as forward

    sequence = ProbeSequence.from_outcomes(outcome, setting_index, n_settings)
    emission = emission_table(table[None])[0]

    def loglik(theta: np.ndarray) -> np.ndarray:
        theta = np.atleast_2d(theta)
        out = np.full(theta.shape[0], -np.inf)
        ok = np.all(theta > 0, axis=1)
        if ok.any():
            t, n = theta[ok, 0], theta[ok, 1]
            # eigen route (n_max=0): its rounding error eps sqrt(pi_j/pi_i) on row i is
            # weighted by the forward variable of i (~ pi_i), so it stays ~ eps sqrt(pi_i pi_j)
            mats = transition_matrices_batch(1.0 / t, n, n_levels, [interval], n_max=0)[:, 0]
            p0 = np.stack([stationary_distribution(x, n_levels) for x in n])
            out[ok] = forward(Transitions.regular(mats), p0, emission, sequence)
        return out

    return loglik


def probe_information(
    lifetime: float,
    n_thermal: float,
    interval: float,
    response,
    *,
    settings: ArrayLike | None = None,
    loss: float = 0.0,
    n_records: int = 4,
    probes_per_record: int | None = None,
    max_probes: int = 2_000_000,
    seed: int | np.random.Generator | None = 0,
) -> Information:
    """Information per probe of a probe record, estimated on simulated records.

    Parameters
    ----------
    lifetime, n_thermal
        Assumed T_c (s) and n_th.
    interval
        Time between probes in s (regular clock).
    response
        Fixed probe response (see :func:`probe_table`).
    settings
        Probe settings in rad, used in turn (interleaved); None: one setting 0.
    loss
        Probability that a probe is lost.
    n_records, probes_per_record, max_probes
        ``n_records`` independent records of ``probes_per_record`` probes each
        (default: enough for about 1000 up-jumps per record, at most
        ``max_probes / n_records`` and at least 20000).
    seed
        Seed of the simulations.

    Returns
    -------
    Information
        ``matrix``: the pooled observed information ``-d2 log L`` at the truth per
        probe; ``rel_error``: relative standard error of the Cramér–Rao sds from
        the spread between records; ``bound``: the sampled-record information per
        transition at ``interval`` (perfect readout).
    """
    from cavchar.simulate import simulate_probe_record

    _check(lifetime, n_thermal)
    if not (math.isfinite(interval) and interval > 0):
        raise InputError(f"the probe interval must be a positive time, not {interval} s")
    if n_records < 2:
        raise InputError("the information estimate needs at least 2 simulated records")
    n_levels = truncation_levels(n_thermal, 0, TAIL)
    s = None if settings is None else np.atleast_1d(np.asarray(settings, dtype=float))
    n_settings = 1 if s is None else s.size
    table = probe_table(response, n_levels, s)
    if probes_per_record is None:
        up_rate = n_thermal * (1.0 + n_thermal) / lifetime
        probes_per_record = int(np.clip(1000.0 / (up_rate * interval), 20_000,
                                        max(max_probes // n_records, 20_000)))
    rng = np.random.default_rng(seed)
    theta0 = np.array([lifetime, n_thermal])
    steps = 1e-3 * theta0
    infos, counts = [], []
    for _ in range(int(n_records)):
        times = interval * np.arange(probes_per_record)
        record, _truth = simulate_probe_record(lifetime, n_thermal, times, response,
                                               settings=s, loss=loss, seed=rng)
        index = None if s is None else np.arange(probes_per_record) % n_settings
        loglik = _probe_loglik(record.outcome, index, n_settings, table, interval, n_levels)
        _g, hess, _f = numerical_hessian(loglik, theta0, steps)
        infos.append(-hess)
        counts.append(probes_per_record)
    infos = np.array(infos)
    per_probe = infos.sum(axis=0) / float(np.sum(counts))
    sds = []
    for info, count in zip(infos, counts, strict=True):
        try:
            sds.append(np.sqrt(np.diag(np.linalg.inv(info / count))))
        except np.linalg.LinAlgError:
            sds.append(np.full(2, np.nan))
    sds = np.array(sds)
    pooled_sd = np.sqrt(np.diag(_inverse(per_probe, ("lifetime", "n_thermal"))))
    rel_error = np.std(sds, axis=0, ddof=1) / np.sqrt(len(sds)) / pooled_sd
    bound = sampled_jump_information(lifetime, n_thermal, interval).matrix
    return Information(("lifetime", "n_thermal"), theta0, per_probe, "probe", rel_error,
                       bound=bound,
                       extra={"method": "observed information on simulated records",
                              "records": int(n_records), "probes_per_record": probes_per_record,
                              "levels": n_levels, "interval_s": interval})


# --------------------------------------------------------------------------- ring-downs

#: nuisance parameters of each ring-down signal kind, in order (after the parameters of
#: interest); each can be fitted or fixed
_INTEREST = {"power": ("lifetime",), "db": ("lifetime",), "amplitude": ("lifetime",),
             "iq": ("lifetime",), "mean_n": ("lifetime", "n_thermal"),
             "populations": ("lifetime", "n_thermal")}


def _signal(signal: str) -> str:
    return ringdown_signal(signal)


def rice_information(location: ArrayLike, noise: float, n_grid: int = 2001) -> np.ndarray:
    """Fisher information of one Rice observation for (location nu, noise sigma), (m, 2, 2).

    Density ``p(x) = x/s^2 exp(-(x^2 + nu^2)/(2 s^2)) I0(x nu / s^2)``; with
    ``y = x/s``, ``z = nu/s`` and ``R = I1/I0`` the scores times ``s`` are
    ``-z + y R(y z)`` and ``-2 + y^2 + z^2 - 2 y z R(y z)``; their expected
    products (trapezoid rule on ``y`` in ``[max(0, z - 12), z + 12]``,
    exponentially scaled Bessel functions) divided by ``s^2`` are returned.
    Limits: 0 information on ``nu`` at ``nu = 0``; the Gaussian ``1/s^2``,
    ``2/s^2`` for ``nu >> s``.
    """
    z = np.atleast_1d(np.asarray(location, dtype=float)) / noise
    lo = np.maximum(z - 12.0, 0.0)
    y = lo[:, None] + (z + 12.0 - lo)[:, None] * np.linspace(0.0, 1.0, n_grid)[None, :]
    arg = y * z[:, None]
    i0 = special.ive(0, arg)
    dens = y * np.exp(-0.5 * (y - z[:, None]) ** 2) * i0  # e^{-(y^2+z^2)/2} I0 = e^{-(y-z)^2/2} ive
    ratio = special.ive(1, arg) / i0
    s_nu = -z[:, None] + y * ratio
    s_sig = -2.0 + y**2 + z[:, None] ** 2 - 2.0 * arg * ratio
    norm = np.trapezoid(dens, dx=1.0, axis=1)
    out = np.empty((z.size, 2, 2))
    for a, b, sa, sb in ((0, 0, s_nu, s_nu), (0, 1, s_nu, s_sig), (1, 1, s_sig, s_sig)):
        out[:, a, b] = out[:, b, a] = np.trapezoid(dens * sa * sb, dx=1.0, axis=1) / norm
    return out / noise**2


def _population_information(times, lifetime, n_thermal, initial, shots, t0):
    """Multinomial information ``shots sum_n grad p_n grad p_n^T / p_n`` summed over delays."""
    p0 = initial_distribution(initial)
    n_max = int(np.flatnonzero(p0 > 0).max())
    n_levels = max(truncation_levels(n_thermal, n_max, TAIL), p0.size)
    p0 = np.pad(p0, (0, n_levels - p0.size))
    tau = np.asarray(times, dtype=float) - t0
    if np.any(tau < 0):
        raise InputError("populations are measured after the preparation: times >= t0")
    p, grad = _transition_derivatives(lifetime, n_thermal, tau, n_levels)
    pop, dpop = p0 @ p, np.einsum("i,amij->amj", p0, grad)  # (m, N), (2, m, N)
    use = pop > 1e-12
    weight = np.where(use, 1 / np.where(use, pop, 1.0), 0.0)
    return shots * np.einsum("mj,amj,bmj->ab", weight, dpop, dpop)


def ringdown_information(
    signal: str,
    times: ArrayLike,
    lifetime: float,
    *,
    noise: float = 0.0,
    shots: int = 1000,
    fixed: tuple[str, ...] = (),
    **assumed: Any,
) -> Information:
    """Information per ring-down trace for the lifetime (and n_th where it enters).

    Parameters
    ----------
    signal
        ``power``, ``db``, ``amplitude``, ``iq``, ``mean_n`` or ``populations``
        (the models of :func:`cavchar.simulate.simulate_ringdown`).
    times : array (m,)
        Sample times in s.
    lifetime
        Energy lifetime T_c in s (an amplitude decays with 2 T_c).
    noise
        Noise standard deviation per point (value units; dB for db; per
        quadrature for iq and amplitude).  Not used for populations.
    shots
        Shots per delay (populations).
    fixed
        Nuisance names (:data:`RINGDOWN_NUISANCES`) that the fit holds fixed;
        the others are profiled out.
    **assumed
        The assumed curve: ``amplitude``, ``floor``, ``t0``, ``n_thermal``,
        ``initial``, ``detuning``, ``phase``, ``offset``, the fields (units and
        defaults) of :class:`cavchar.decay.RingdownCurve`.  ``initial`` is the
        prepared Fock number or distribution; its mean is the initial mean photon
        number of mean_n.

    Returns
    -------
    Information
        Per trace, for ``("lifetime",)`` or ``("lifetime", "n_thermal")``.
    """
    signal = _signal(signal)
    times = np.asarray(times, dtype=float)
    curve = RingdownCurve(lifetime, **assumed)
    _check(lifetime, curve.n_thermal, need_n=signal == "populations")
    if times.ndim != 1 or times.size < 2:
        raise InputError("a ring-down needs at least two sample times")
    interest = _INTEREST[signal]
    unknown = set(fixed) - set(RINGDOWN_NUISANCES[signal])
    if unknown:
        raise InputError(f"{signal} ring-downs have no nuisance {sorted(unknown)}",
                         hint=f"nuisances: {', '.join(RINGDOWN_NUISANCES[signal]) or 'none'}")
    if signal == "populations":
        matrix = _population_information(times, lifetime, curve.n_thermal, curve.initial, shots,
                                         curve.t0)
        return Information(interest, np.array([lifetime, curve.n_thermal]), matrix, "trace",
                           np.zeros(2), extra={"method": "multinomial information",
                                               "shots": int(shots),
                                               "full_names": list(interest), "full_sd":
                                               np.sqrt(np.diag(np.linalg.inv(matrix))).tolist()})
    if not noise > 0:
        raise InputError("planning a ring-down needs the noise level (> 0) per point")
    values = curve.parameters(signal, noise)
    names = tuple(values)
    theta = np.array(list(values.values()))
    mean, jac = curve.mean(signal, times, noise)
    if signal == "amplitude":
        rice = rice_information(mean, noise)  # (m, 2, 2) in (nu, sigma)
        full_jac = np.zeros((times.size, 2, len(names)))
        full_jac[:, 0, :] = jac
        full_jac[:, 1, names.index("noise")] = 1.0
        full = np.einsum("mai,mab,mbj->ij", full_jac, rice, full_jac)
    else:
        full = (jac.conj().T @ jac).real / noise**2
    free = [i for i, n in enumerate(names) if n not in fixed]
    full = full[np.ix_(free, free)]
    keep = np.arange(len(interest))
    w = np.linalg.eigvalsh(full)
    if not w.min() > 1e-12 * w.max():
        raise InputError(f"the {signal} ring-down cannot separate the lifetime from the "
                         f"nuisances {[names[i] for i in free[len(interest):]]}",
                         hint="sample a longer span (several lifetimes) or fix a nuisance")
    matrix = schur_complement(full, keep)
    return Information(interest, theta[keep], matrix, "trace", np.zeros(len(interest)),
                       extra={"full_names": [names[i] for i in free],
                              "full_sd": np.sqrt(np.diag(np.linalg.inv(full))).tolist(),
                              "method": "Rice information" if signal == "amplitude" else
                              "Gaussian J^T J / sigma^2", "nuisances":
                              [names[i] for i in free[len(interest):]]})
