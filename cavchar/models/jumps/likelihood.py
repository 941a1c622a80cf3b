"""Likelihoods of photon-number jump records of a thermally damped mode.

Exact records (change points)
-----------------------------
With ``a = kappa n_th`` (up-rate coefficient) and ``b = kappa (1 + n_th)``
(down-rate coefficient) the continuous-time Markov chain of the photon number
jumps up from ``n`` at rate ``a (n+1)`` and down at rate ``b n``.  The density
of a path observed on ``[t_start, t_end]`` given its first state is
(e.g. Guttorp, *Stochastic Modeling of Scientific Data*, ch. 3; any text on
Markov-chain likelihoods)::

    log L = U log a + D log b + C - a A_1 - b A_0

with the four sufficient statistics ``U`` (up jumps), ``D`` (down jumps),
``A_1 = int (n + 1) dt`` and ``A_0 = int n dt`` and the parameter-free
``C = sum_up log(n+1) + sum_down log n``.  The first dwell is left-censored and
the last one right-censored; by memorylessness both enter only through the
integrals, so censoring needs no special case.  Independent segments add up.

Optionally the first state of each segment is scored with the stationary
(Bose–Einstein) law, for records that start in thermal equilibrium.

Sampled records
---------------
The photon number observed at probe times ``t_0 < t_1 < ...``: the
likelihood is ``sum_i log P(t_{i+1} - t_i)[n_i, n_{i+1}]`` with the
transition matrices of the truncated generator (:mod:`cavchar.dynamics`).
Transitions are grouped by (from, to, step): for a regular probe clock the
per-parameter cost is a handful of distinct triples, whatever the record
length.  One batched symmetric eigen-decomposition per parameter set serves
every step.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from cavchar.dynamics import bose_einstein, symmetric_eigen_batch
from cavchar.parameters import ParameterSpec

__all__ = [
    "JumpStatistics",
    "jump_statistics",
    "exact_log_likelihood",
    "exact_log_likelihood_rates",
    "SampledTransitions",
    "sampled_transitions",
    "sampled_log_likelihood",
    "dwell_times",
    "exact_fisher_information",
    "ExactJumpModel",
    "SampledJumpModel",
]


@dataclass(frozen=True)
class JumpStatistics:
    """Sufficient statistics of an exact jump record (all segments summed).

    Attributes
    ----------
    up, down : int
        Numbers of up and down jumps.
    time_n_plus_1, time_n : float
        ``int (n + 1) dt`` and ``int n dt`` in seconds.
    constant : float
        ``sum_up log(n+1) + sum_down log n`` (parameter free).
    duration : float
        Total observed time in seconds.
    initial_states : ndarray of int
        First photon number of each segment.
    n_max : int
        Largest photon number in the record.
    """

    up: int
    down: int
    time_n_plus_1: float
    time_n: float
    constant: float
    duration: float
    initial_states: np.ndarray
    n_max: int

    def to_dict(self) -> dict:
        """Plain-JSON form.

        Jump counts, the integrals of n and n + 1 over time (s), duration (s), segments."""
        return {
            "up_jumps": self.up,
            "down_jumps": self.down,
            "integral_n_plus_1_s": self.time_n_plus_1,
            "integral_n_s": self.time_n,
            "duration_s": self.duration,
            "segments": int(self.initial_states.size),
            "largest_photon_number": self.n_max,
        }


def _dwells(times, photons, segment_ends, segments):
    """Arrays, segment start/end row indices and the dwell of each row (s): until the
    next change point of its segment, or the segment's end time."""
    times = np.asarray(times, dtype=float)
    photons = np.asarray(photons, dtype=np.int64)
    if segments is None:
        segments = np.zeros(times.size, dtype=np.int64)
    segments = np.asarray(segments)
    starts = np.flatnonzero(np.r_[True, segments[1:] != segments[:-1]])
    ends_idx = np.r_[starts[1:], times.size]
    segment_ends = np.asarray(segment_ends, dtype=float).reshape(-1)
    if segment_ends.size != starts.size:
        raise ValueError("one end time per segment is needed")
    next_time = np.empty_like(times)
    next_time[:-1] = times[1:]
    next_time[ends_idx - 1] = segment_ends
    return times, photons, starts, ends_idx, next_time - times


def jump_statistics(
    times: ArrayLike, photons: ArrayLike, segment_ends: ArrayLike, segments: ArrayLike | None = None
) -> JumpStatistics:
    """Sufficient statistics from change points.

    Parameters
    ----------
    times : (m,) array
        Change-point times in s, increasing within each segment; ``photons[i]``
        holds from ``times[i]`` until the next change point of its segment.
    photons : (m,) int array
        Photon number from each change point on.  Consecutive values differ by
        exactly one (validated by the record reader).
    segment_ends : (s,) array
        End time of each segment in s, in the order segments first appear.
    segments : (m,) array, optional
        Segment label of each row (rows of a segment contiguous); one segment if None.
    """
    times, photons, starts, ends_idx, dwell = _dwells(times, photons, segment_ends, segments)
    if np.any(dwell < 0):
        raise ValueError("segment end time before its last change point")
    steps = np.diff(photons)
    within = np.ones(max(times.size - 1, 0), dtype=bool)
    within[ends_idx[:-1] - 1] = False  # no jump across a segment boundary
    steps = steps[within]
    from_state = photons[:-1][within]
    up_mask = steps == 1
    down_mask = steps == -1
    constant = float(
        np.sum(np.log(from_state[up_mask] + 1.0)) + np.sum(np.log(from_state[down_mask]))
    )
    time_n = float(np.dot(photons, dwell))
    duration = float(dwell.sum())
    return JumpStatistics(
        up=int(up_mask.sum()),
        down=int(down_mask.sum()),
        time_n_plus_1=time_n + duration,
        time_n=time_n,
        constant=constant,
        duration=duration,
        initial_states=photons[starts].copy(),
        n_max=int(photons.max(initial=0)),
    )


def exact_log_likelihood_rates(stats: JumpStatistics, a: ArrayLike, b: ArrayLike) -> np.ndarray:
    """``U log a + D log b + C - a A_1 - b A_0`` for rate coefficients a, b (1/s), batched.

    Returns -inf where a or b is not positive (unless no jump needs it).
    """
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_a = np.where(stats.up > 0, stats.up * np.log(a), 0.0)
        log_b = np.where(stats.down > 0, stats.down * np.log(b), 0.0)
        out = log_a + log_b + stats.constant - a * stats.time_n_plus_1 - b * stats.time_n
    bad = (a < 0) | (b <= 0) | ~np.isfinite(out)
    return np.where(bad, -np.inf, out)


def exact_log_likelihood(
    stats: JumpStatistics,
    lifetime: ArrayLike,
    n_thermal: ArrayLike,
    initial: str = "conditional",
) -> np.ndarray:
    """Exact-record log-likelihood for lifetimes ``T_c`` (s) and ``n_th``, batched.

    ``initial="stationary"`` adds ``sum_segments log P_BE(n_first | n_th)``.
    """
    lifetime = np.asarray(lifetime, dtype=float)
    n_thermal = np.asarray(n_thermal, dtype=float)
    with np.errstate(divide="ignore"):
        kappa = 1.0 / lifetime
    out = exact_log_likelihood_rates(stats, kappa * n_thermal, kappa * (1.0 + n_thermal))
    if initial == "stationary":
        n0 = stats.initial_states.astype(float)
        with np.errstate(divide="ignore", invalid="ignore"):
            first = np.sum(n0) * np.log(n_thermal) - np.sum(n0 + 1) * np.log1p(n_thermal)
        out = out + np.where(np.sum(n0) == 0, -n0.size * np.log1p(n_thermal), first)
    elif initial != "conditional":
        raise ValueError("initial must be 'conditional' or 'stationary'")
    bad = (lifetime <= 0) | (n_thermal < 0)
    return np.where(bad | np.isnan(out), -np.inf, out)


@dataclass(frozen=True)
class SampledTransitions:
    """Observed transitions of a sampled record, grouped by (from, to, step).

    Attributes
    ----------
    from_state, to_state : (g,) int arrays
    step_index : (g,) int array into ``steps``
    count : (g,) int array
    steps : (u,) array of distinct time steps in s
    initial_states : (s,) first photon number of each segment
    n_max : int
    """

    from_state: np.ndarray
    to_state: np.ndarray
    step_index: np.ndarray
    count: np.ndarray
    steps: np.ndarray
    initial_states: np.ndarray
    n_max: int

    @property
    def n_transitions(self) -> int:
        """Number of observed transitions between successive samples (all pairs of levels)."""
        return int(self.count.sum())


def sampled_transitions(
    times: ArrayLike, photons: ArrayLike, segments: ArrayLike | None = None, step_rtol: float = 1e-9
) -> SampledTransitions:
    """Group the transitions of a sampled record.

    Steps that agree to ``step_rtol`` relative (clock jitter from rounding the
    times when they were written) are merged into their first value.
    """
    times = np.asarray(times, dtype=float)
    photons = np.asarray(photons, dtype=np.int64)
    if segments is None:
        segments = np.zeros(times.size, dtype=np.int64)
    segments = np.asarray(segments)
    same = segments[1:] == segments[:-1]
    dt = np.diff(times)[same]
    n_from = photons[:-1][same]
    n_to = photons[1:][same]
    order = np.argsort(dt, kind="stable")
    sorted_dt = dt[order]
    new_group = np.r_[True, np.diff(sorted_dt) > step_rtol * np.abs(sorted_dt[1:])]
    group = np.cumsum(new_group) - 1
    steps = sorted_dt[new_group]
    step_index = np.empty(dt.size, dtype=np.int64)
    step_index[order] = group
    n_levels = int(photons.max(initial=0)) + 1
    key = (step_index * n_levels + n_from) * n_levels + n_to
    keys, count = np.unique(key, return_counts=True)
    starts = np.flatnonzero(np.r_[True, segments[1:] != segments[:-1]])
    return SampledTransitions(
        from_state=(keys // n_levels) % n_levels,
        to_state=keys % n_levels,
        step_index=keys // (n_levels * n_levels),
        count=count,
        steps=steps,
        initial_states=photons[starts].copy(),
        n_max=n_levels - 1,
    )


def sampled_log_likelihood(
    trans: SampledTransitions,
    lifetime: ArrayLike,
    n_thermal: ArrayLike,
    n_levels: int,
    initial: str = "conditional",
) -> np.ndarray:
    """``sum count * log P(step)[from, to]`` for a batch of (T_c, n_th); shape (k,).

    ``P`` comes from one batched eigen-decomposition of the symmetrized
    truncated generator per parameter set: ``P_ij(dt) = sum_m R_im L_mj
    exp(lam_m dt)`` (see :mod:`cavchar.dynamics`), evaluated only at the
    observed (from, to, step) triples.  ``n_levels`` must exceed ``trans.n_max``.
    """
    lifetime = np.atleast_1d(np.asarray(lifetime, dtype=float))
    n_thermal = np.atleast_1d(np.asarray(n_thermal, dtype=float))
    out = np.full(lifetime.shape, -np.inf)
    ok = (lifetime > 0) & (n_thermal > 0) & np.isfinite(lifetime) & np.isfinite(n_thermal)
    if not np.any(ok):
        return out
    nth = n_thermal[ok]
    lam, vecs, half_log_r = symmetric_eigen_batch(1.0 / lifetime[ok], nth, n_levels)
    weights = vecs[:, trans.from_state, :] * vecs[:, trans.to_state, :]  # (k, g, N)
    decay = np.exp(lam[:, None, :] * trans.steps[None, :, None])  # (k, u, N)
    prob = np.einsum("kgm,kgm->kg", weights, decay[:, trans.step_index, :])
    prob *= np.exp(half_log_r[:, None] * (trans.to_state - trans.from_state)[None, :])
    with np.errstate(divide="ignore", invalid="ignore"):
        logp = np.log(np.clip(prob, 0.0, None))
    total = logp @ trans.count
    if initial == "stationary":
        total = total + np.sum(np.log(bose_einstein(nth, trans.initial_states)), axis=1)
    elif initial != "conditional":
        raise ValueError("initial must be 'conditional' or 'stationary'")
    out[ok] = np.where(np.isnan(total), -np.inf, total)
    return out


@dataclass(frozen=True)
class ExactJumpModel:
    """Likelihood model of an exact record (:mod:`cavchar.models.protocol`): parameters
    ``(T_c [s], n_th)``, :func:`exact_log_likelihood` of the record's statistics."""

    stats: JumpStatistics
    specs: tuple[ParameterSpec, ...]
    initial: str = "conditional"

    def log_likelihood(self, theta: np.ndarray) -> np.ndarray:
        """Exact-record log-likelihood of ``theta`` ``(k, 2)`` = (T_c in s, n_th) -> ``(k,)``.

        See :func:`exact_log_likelihood` for the equation."""
        theta = np.asarray(theta, dtype=float)
        return exact_log_likelihood(self.stats, theta[:, 0], theta[:, 1], initial=self.initial)

    def initial_guess(self) -> np.ndarray:
        """Maximum-likelihood rates ``a = U / A_1``, ``b = D / A_0`` (half a jump when
        there is none), then ``kappa = b - a``, ``n_th = a / kappa``."""
        stats = self.stats
        a = max(stats.up, 0.5) / stats.time_n_plus_1
        b = max(stats.down, 0.5) / max(stats.time_n, 1e-300)
        if not (math.isfinite(b) and b > 2 * a):
            b = 2 * a + 1.0 / stats.duration
        kappa = b - a
        return np.array([1.0 / kappa, a / kappa])


@dataclass(frozen=True)
class SampledJumpModel:
    """Likelihood model of a sampled record (:mod:`cavchar.models.protocol`): parameters
    ``(T_c [s], n_th)``, :func:`sampled_log_likelihood` with ``n_levels`` levels;
    ``guess`` is the start the fit computed from the record's mean relaxation."""

    transitions: SampledTransitions
    specs: tuple[ParameterSpec, ...]
    n_levels: int
    guess: tuple[float, float]
    initial: str = "conditional"

    def log_likelihood(self, theta: np.ndarray) -> np.ndarray:
        """Sampled-record log-likelihood of ``theta`` ``(k, 2)`` = (T_c in s, n_th) -> ``(k,)``.

        See :func:`sampled_log_likelihood` for the equation."""
        theta = np.asarray(theta, dtype=float)
        return sampled_log_likelihood(self.transitions, theta[:, 0], theta[:, 1],
                                      self.n_levels, initial=self.initial)

    def initial_guess(self) -> np.ndarray:
        """The starting point ``(T_c in s, n_th)``, shape ``(2,)``."""
        return np.asarray(self.guess, dtype=float)


def dwell_times(
    times: ArrayLike, photons: ArrayLike, segment_ends: ArrayLike, segments: ArrayLike | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Dwell durations (s), their photon number, and whether each is complete.

    A dwell is complete when it ends in a jump (not at a segment end); the first
    dwell of a segment is left-censored but, by memorylessness, its remaining
    duration has the same exponential law, so it is complete if it ends in a jump.
    """
    _, photons, _, ends_idx, dwell = _dwells(times, photons, segment_ends, segments)
    complete = np.ones(photons.size, dtype=bool)
    complete[ends_idx - 1] = False
    return dwell, photons, complete


def exact_fisher_information(lifetime: float, n_thermal: float, duration: float) -> np.ndarray:
    """Expected Fisher information of an exact stationary jump record, parameters (T_c, n_th).

    Derivation.  In the rate coefficients ``a = kappa n_th``, ``b = kappa (1 + n_th)``
    the log-likelihood ``U log a + D log b - a A_1 - b A_0`` has
    ``-d2/da2 = U/a^2``, ``-d2/db2 = D/b^2`` and no cross term.  In a stationary
    record of duration ``T`` the expected integrals are ``E[A_1] = T (1 + n_th)``
    and ``E[A_0] = T n_th`` and, since jumps arrive at the integrated rates,
    ``E[U] = a E[A_1]``, ``E[D] = b E[A_0]``; hence

        I_aa = T (1 + n) / (kappa n),   I_bb = T n / (kappa (1 + n)),   I_ab = 0.

    With the Jacobian ``d(a, b)/d(kappa, n) = [[n, kappa], [1 + n, kappa]]``:

        I_kk = 2 T n (1 + n) / kappa,   I_kn = T (1 + 2 n),
        I_nn = T kappa [(1 + n)/n + n/(1 + n)],

    whose determinant is exactly ``T^2``, so the Cramér–Rao variances are
    ``var(kappa) = kappa [(1+n)/n + n/(1+n)] / T`` and ``var(n) = 2 n (1+n) / (kappa T)``.
    Finally ``T_c = 1/kappa`` (``dT_c/dkappa = -T_c^2``) gives the matrix returned.
    The information of the first state (Bose–Einstein) is O(1) and neglected.

    Parameters
    ----------
    lifetime : float
        T_c in s.
    n_thermal : float
        n_th (> 0).
    duration : float
        Record length T in s.

    Returns
    -------
    (2, 2) ndarray
        Fisher information for (T_c [s], n_th).
    """
    kappa = 1.0 / lifetime
    n = n_thermal
    t = duration
    i_kk = 2.0 * t * n * (1.0 + n) / kappa
    i_kn = t * (1.0 + 2.0 * n)
    i_nn = t * kappa * ((1.0 + n) / n + n / (1.0 + n))
    jac = np.array([[-(kappa**2), 0.0], [0.0, 1.0]])  # d(kappa, n)/d(T_c, n)
    info_kn = np.array([[i_kk, i_kn], [i_kn, i_nn]])
    return jac.T @ info_kn @ jac
