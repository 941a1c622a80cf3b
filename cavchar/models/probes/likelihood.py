"""Probe-record likelihood: a hidden Markov model of the photon number.

Hidden state: the photon number ``n`` of the mode at each probe, truncated to
``0..N-1`` (:func:`choose_levels`).  Between probes it evolves by the
damped-mode birth-death process (:mod:`cavchar.dynamics`): with
``kappa = 1/T_c`` the transition matrix over an interval ``dt`` is
``P(dt) = expm(Q dt)``.  Emission: the probe response ``P(y | n, setting)``
(:mod:`cavchar.models.probes.response`); a lost probe emits nothing, its interval
still counts.  Each segment starts from the stationary (Bose-Einstein) law,
or from a given Fock state.

    log L(T_c, n_th, response) = log sum over paths of
        p0(n_0) e_0(n_0) prod_t P(dt_t)[n_{t-1}, n_t] e_t(n_t)

evaluated by the scaled forward algorithm (:mod:`cavchar.models.probes.hmm_kernels`)
for a batch of parameter sets at once.  The probe intervals are examined once:
one distinct interval (equal spacing, up to a relative 1e-9) -> one matrix per
parameter set; up to 32 distinct intervals -> one matrix per interval;
otherwise (irregular spacing: Poisson times, gaps) the grid route of
:mod:`cavchar.models.probes.hmm_kernels`: ``dt = j h + r`` with ``h`` an eighth of
the mean interval, ``P(dt) = P(j h) exp(Q r)``, a table of ``P(j h)`` for the
intervals up to their 99.9% quantile and a uniformization series for the
remainder truncated below the rounding of one step, or (few levels, short
steps) the remainder in the eigen basis with ``exp(lambda r)`` by a Taylor
polynomial whose remainder is below 2^-53 (exact either way: no bound to
report; :meth:`ProbeLikelihood.interval_route` says which route was taken).
``irregular="eigen"`` keeps the interval-by-interval eigen route
``alpha P(dt) = ((alpha R) e^{lambda dt}) L``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from cavchar.dynamics import transition_matrices_batch
from cavchar.errors import InputError
from cavchar.models.probes import hmm_kernels as hk
from cavchar.models.probes.response import SETTING_TOLERANCE, FringeResponse, TableResponse
from cavchar.records import ProbeRecord

__all__ = [
    "ProbeLikelihood",
    "ProbeSteps",
    "Trajectory",
    "probe_steps",
    "choose_levels",
    "levels_needed",
    "group_settings",
    "TRUNCATION_VISITS",
    "route_text",
]

#: relative tolerance under which two probe intervals count as equal
STEP_RTOL = 1e-9
#: most distinct intervals handled with one matrix each (beyond: eigen route)
MAX_DISTINCT_STEPS = 32
#: bound on the expected number of visits above the top level during the record
TRUNCATION_VISITS = 1e-2
#: automatic truncations are multiples of this (few distinct compiled kernels)
LEVEL_STEP = 2
#: rows whose truncations differ by at most this factor share one kernel call
PAD_RATIO = 1.25
#: largest rounding amplification eps * sqrt(pi_0 / pi_{N-1}) accepted on the eigen route
_EIGEN_ROUNDING = 1e-10
#: grid route: base step h = mean interval / GRID_SUBSTEPS
GRID_SUBSTEPS = 8
#: grid route: the table covers the intervals up to this quantile ...
GRID_QUANTILE = 0.999
#: ... with at most this many matrices (longer intervals: eigen route)
GRID_MAX_STEPS = 512
#: grid route: apply the remainder in the eigen basis where allowed (hmm_kernels docstring)
EIGEN_GRID = True


@dataclass(frozen=True)
class ProbeSteps:
    """Intervals before each probe (0 at segment starts) and how they are handled.

    Attributes
    ----------
    kind : "regular", "indexed" or "irregular"
    steps : ndarray (M,)
        Distinct intervals in s (regular/indexed); for irregular the table of the
        grid route, ``h * arange(J)``.
    step_index : ndarray of int32 (T,)
        Index into ``steps`` of each probe's interval (0 at segment starts); for
        irregular ``j = floor(dt / h)``, or -1 beyond the table.
    dts : ndarray (T,)
        The intervals themselves in s.
    remainder : ndarray (T,)
        Irregular only: ``r = dt - j h`` in s, ``0 <= r < h`` (0 beyond the table).
    grid_step : float
        Irregular only: ``h`` in s.
    """

    kind: str
    steps: np.ndarray
    step_index: np.ndarray
    dts: np.ndarray
    remainder: np.ndarray | None = None
    grid_step: float = 0.0


def probe_intervals(time: ArrayLike, starts: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Interval before each probe (s), 0 at the first probe of each segment, shape (T,);
    and the mask of the probes inside a segment (not its first), shape (T,)."""
    time = np.asarray(time, dtype=float)
    dts = np.zeros(time.size)
    dts[1:] = np.diff(time)
    first = np.zeros(time.size, bool)
    first[np.asarray(starts, dtype=np.int64)[:-1]] = True
    dts[first] = 0.0
    return dts, ~first


def probe_steps(time: ArrayLike, starts: ArrayLike, rtol: float = STEP_RTOL,
                max_distinct: int = MAX_DISTINCT_STEPS) -> ProbeSteps:
    """Classify the probe intervals of a record (``starts``: first probe of each segment)."""
    dts, inside = probe_intervals(time, starts)
    inner = dts[inside]
    if inner.size == 0:
        return ProbeSteps("regular", np.array([0.0]), np.zeros(dts.size, np.int32), dts)
    uniq = np.unique(inner)
    new = np.ones(uniq.size, bool)
    new[1:] = uniq[1:] > uniq[:-1] * (1.0 + rtol)
    if new.sum() <= max_distinct:
        label = np.cumsum(new) - 1
        lo = uniq[new]
        hi = np.maximum.reduceat(uniq, np.flatnonzero(new))
        if np.all(hi <= lo * (1.0 + 10 * rtol)):
            steps = 0.5 * (lo + hi)
            idx = np.zeros(dts.size, np.int32)
            idx[inside] = label[np.searchsorted(uniq, inner)]
            kind = "regular" if steps.size == 1 else "indexed"
            return ProbeSteps(kind, steps, idx, dts)
    h = float(inner.mean()) / GRID_SUBSTEPS
    if not h > 0:
        h = float(inner.max()) or 1.0
    top = float(np.quantile(inner, GRID_QUANTILE))
    n_grid = int(min(GRID_MAX_STEPS, max(2, math.floor(top / h) + 1)))
    j = np.floor(dts / h)
    beyond = j >= n_grid
    idx = np.where(beyond, -1, j).astype(np.int32)
    rem = np.where(beyond, 0.0, np.maximum(dts - j * h, 0.0))
    return ProbeSteps("irregular", h * np.arange(n_grid), idx, dts, rem, h)


def eigen_grid_allowed(eigenvalues: np.ndarray, grid_step: float, n_levels: int) -> bool:
    """Whether the grid route may apply its remainder in the eigen basis: unrolled
    kernels (N <= :data:`~cavchar.models.probes._unrolled.MAX_UNROLLED_LEVELS`),
    ``EIGEN_GRID`` set and ``max |lambda| h`` within
    :data:`~cavchar.models.probes.hmm_kernels.EIGEN_GRID_LIMIT` (eigenvalues in 1/s, h in s).
    The caller also requires a well-conditioned eigen basis."""
    from cavchar.models.probes._unrolled import MAX_UNROLLED_LEVELS

    return bool(EIGEN_GRID and n_levels <= MAX_UNROLLED_LEVELS
                and np.max(-np.asarray(eigenvalues), initial=0.0) * grid_step
                <= hk.EIGEN_GRID_LIMIT)


def group_settings(setting: ArrayLike | None, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Distinct settings (rad, within 1e-6 rad) and the index of each probe's setting."""
    if setting is None:
        return np.zeros(1), np.zeros(n, np.int64)
    s = np.asarray(setting, dtype=float)
    uniq = np.unique(s)
    new = np.ones(uniq.size, bool)
    new[1:] = np.diff(uniq) > SETTING_TOLERANCE
    label = np.cumsum(new) - 1
    values = uniq[new]
    return values, label[np.searchsorted(uniq, s)]


def levels_needed(n_th: ArrayLike, n_initial: int, duration_over_lifetime: ArrayLike,
                  visits: float = TRUNCATION_VISITS) -> np.ndarray:
    """Truncation (k,) so that the chain rarely needs the levels above it (vectorized).

    In equilibrium the probability of being at or above ``N`` is
    ``r^(N - n_initial)`` (``r = n_th / (1 + n_th)``, see
    :func:`cavchar.dynamics.truncation_levels`); the expected number of visits
    there during a record of ``D = duration / T_c`` lifetimes is at most about
    ``D (1 + n_th) N r^(N - n_initial)``.  N is the smallest number that keeps this
    below ``visits`` (and the tail below 1e-4).  Paths that would climb higher
    carry at most that much probability, so log L changes by about ``visits``.
    """
    n_th = np.maximum(np.atleast_1d(np.asarray(n_th, dtype=float)), 1e-12)
    d = np.maximum(np.atleast_1d(np.asarray(duration_over_lifetime, dtype=float)), 1.0)
    log_r = np.log(n_th) - np.log1p(n_th)
    n = np.full(n_th.shape, float(n_initial + 2))
    for _ in range(4):  # the bound has N in it: a few fixed-point passes
        tail = np.minimum(1e-4, visits / (d * (1.0 + n_th) * n))
        n = n_initial + np.maximum(np.ceil(np.log(tail) / log_r), 2.0)
    return n.astype(np.int64)


def choose_levels(n_thermal_high: float, n_initial: int, duration_over_lifetime: float,
                  visits: float = TRUNCATION_VISITS) -> int:
    """Scalar form of :func:`levels_needed`."""
    return int(levels_needed(n_thermal_high, n_initial, duration_over_lifetime, visits)[0])


@dataclass(frozen=True)
class Trajectory:
    """Reconstructed photon-number trajectory at one parameter point.

    Attributes
    ----------
    time : ndarray (T,)
        Probe times in s.
    marginals : ndarray (T, N)
        Posterior ``P(n_t = j | outcomes)`` (forward-backward).
    mean : ndarray (T,)
        Posterior mean photon number.
    path : ndarray of int (T,) or None
        Most likely path (Viterbi); None when not asked for.
    log_likelihood : float
    """

    time: np.ndarray
    marginals: np.ndarray
    mean: np.ndarray
    path: np.ndarray | None
    log_likelihood: float


class ProbeLikelihood:
    """Batched log-likelihood of a probe record, ``(k, ndim) -> (k,)``.

    Parameters
    ----------
    record : ProbeRecord
    response : FringeResponse or TableResponse
    n_levels : int, optional
        Fixed truncation N of the photon number.  Default: chosen for each
        parameter set by :func:`choose_levels` (rounded up to an even number,
        so that few distinct kernels are needed), at most ``max_levels``.
    initial : "stationary" or int
        Photon-number law at the first probe of each segment: the thermal law
        of the parameter set, or a Fock state.
    max_levels : int, optional
        Upper limit of the automatic truncation (default 64, or the photon
        numbers a table response covers).  Parameter sets that would need more
        are evaluated at the limit and counted in :attr:`capped`.
    irregular : "grid" or "eigen"
        Route for irregular probe spacing (module docstring); both are exact,
        ``"grid"`` is the fast one.

    The parameter vector is ``(lifetime [s], n_thermal, *response.free_names)``.
    """

    def __init__(self, record: ProbeRecord, response: FringeResponse | TableResponse,
                 n_levels: int | None = None, *, initial: str | int = "stationary",
                 max_levels: int | None = None, irregular: str = "grid") -> None:
        if not isinstance(record, ProbeRecord):
            raise TypeError("record must be a ProbeRecord")
        if irregular not in ("grid", "eigen"):
            raise InputError(f"unknown route {irregular!r} for irregular spacing",
                             hint="use 'grid' or 'eigen'")
        self.irregular = irregular
        self.record = record
        self.response = response
        if isinstance(initial, str) and initial != "stationary":
            raise InputError(f"unknown initial state {initial!r}",
                             hint="use 'stationary' or a photon number")
        self.initial = initial
        self.n0 = 0 if isinstance(initial, str) else int(initial)
        if self.n0 < 0:
            raise InputError(f"initial photon number {initial} is negative")
        table_top = response.max_photons + 1 if isinstance(response, TableResponse) else None
        self.fixed_levels = None if n_levels is None else int(n_levels)
        limit = max_levels or 64
        if table_top is not None:
            limit = min(limit, table_top)
        self.max_levels = int(limit if self.fixed_levels is None else self.fixed_levels)
        if self.max_levels < self.n0 + 2:
            self.max_levels = self.n0 + 2
        self.settings, setting_index = group_settings(record.setting, len(record))
        response.check_coverage(self.fixed_levels or self.n0 + 2, self.settings)
        starts = np.asarray(record.bounds, dtype=np.int64)
        self.sequence = hk.ProbeSequence.from_outcomes(record.outcome, setting_index,
                                                       self.settings.size, starts)
        self.steps = probe_steps(record.time, starts)
        self.names = ("lifetime", "n_thermal") + tuple(response.free_names)
        # a response without fitted parameters: P(1 | n, s) once, for every truncation
        # (a likelihood call reads it and never changes the model)
        self._fixed_prob_one = None
        if not response.free_names:
            response.check_coverage(self.max_levels, self.settings)
            self._fixed_prob_one = response.prob_one(None, self.max_levels,
                                                     self.settings)[0][:1]

    @property
    def ndim(self) -> int:
        """Number of parameters: lifetime (s), n_thermal, then the free response parameters."""
        return len(self.names)

    @property
    def duration(self) -> float:
        """Total time covered by the segments, s."""
        b = self.record.bounds
        t = self.record.time
        return float(np.sum(t[b[1:] - 1] - t[b[:-1]])) or 1e-300

    # -- pieces -----------------------------------------------------------------------

    def levels_for(self, lifetime: ArrayLike, n_th: ArrayLike, cap: bool = True) -> np.ndarray:
        """Truncation used for each parameter set (k,) (``cap=False``: the one it needs)."""
        lifetime = np.atleast_1d(np.asarray(lifetime, dtype=float))
        n_th = np.atleast_1d(np.asarray(n_th, dtype=float))
        if self.fixed_levels is not None:
            return np.full(n_th.size, self.fixed_levels)
        need = levels_needed(n_th, self.n0, self.duration / lifetime)
        step = -(-need // LEVEL_STEP) * LEVEL_STEP  # few distinct N: few compiled kernels
        need = np.where(step <= self.max_levels, step, need)
        if not cap:
            return need
        return np.minimum(need, self.max_levels)

    def transitions(self, kappa: np.ndarray, n_th: np.ndarray,
                    n_levels: int | np.ndarray) -> hk.Transitions:
        """Transition matrices of the probe intervals for k parameter sets.

        ``n_levels`` is one truncation for all sets or one per set (k,); sets with
        fewer levels than the largest are padded with levels that are never
        reached (no transition into them, zero initial probability), which
        leaves their likelihood exactly that of their own truncation.
        """
        return self._transitions(kappa, n_th, n_levels, self.steps, self.irregular)

    @staticmethod
    def _transitions(kappa, n_th, n_levels, steps: ProbeSteps,
                     irregular: str = "grid") -> hk.Transitions:
        levels = np.broadcast_to(np.asarray(n_levels, dtype=np.int64), np.shape(kappa))
        top = int(levels.max())
        k = levels.size
        r = np.zeros((k, top, top))
        lam = np.zeros((k, top))
        left = np.zeros((k, top, top))
        for n in np.unique(levels):
            g = np.flatnonzero(levels == n)
            r[g, :n, :n], lam[g, :n], left[g, :n, :n] = hk.eigen_parts(kappa[g], n_th[g], int(n))
        if steps.kind == "irregular" and irregular == "eigen":
            return hk.Transitions.eigen(r, lam, left, steps.dts, check=False)
        # eigen route P = R diag(exp(lambda dt)) L, rounding error eps sqrt(pi_j / pi_i)
        # (hk.eigen_parts); sets where that could exceed 1e-10 use scaling-and-squaring
        decay = np.exp(lam[:, None, :] * steps.steps[None, :, None])  # (k, M, N)
        mats = np.clip(np.matmul(r[:, None] * decay[:, :, None, :], left[:, None]), 0.0, 1.0)
        with np.errstate(divide="ignore", over="ignore"):
            amp = np.exp(-0.5 * (levels - 1) * (np.log(n_th) - np.log1p(n_th)))
        ill = np.flatnonzero(~(np.finfo(float).eps * amp <= _EIGEN_ROUNDING))
        for i in ill:
            n = int(levels[i])
            mats[i, :, :n, :n] = transition_matrices_batch(kappa[i:i + 1], n_th[i:i + 1], n,
                                                           steps.steps)[0]
        if steps.kind == "irregular":
            uni, rates = hk.uniformization_parts(kappa, n_th, levels, top)
            terms = hk.uniformization_terms(rates * steps.grid_step)
            table = None
            if eigen_grid_allowed(lam, steps.grid_step, top) and ill.size == 0:
                table = r[:, None] * decay[:, :, None, :]  # P(j h) R = R diag(e^{lambda j h})
            return hk.Transitions.grid(mats, steps.step_index, steps.remainder, uni, rates, terms,
                                       r, lam, left, steps.dts, table)
        if steps.kind == "regular":
            return hk.Transitions.regular(mats[:, 0])
        return hk.Transitions.indexed(mats, steps.step_index, check=False)

    def initial_law(self, n_th: np.ndarray, n_levels: int | np.ndarray) -> np.ndarray:
        """(k, N_max) law at each segment start (zero above each set's own truncation)."""
        n_th = np.atleast_1d(n_th)
        levels = np.broadcast_to(np.asarray(n_levels, dtype=np.int64), n_th.shape)
        top = int(levels.max())
        inside = np.arange(top)[None, :] < levels[:, None]
        if self.initial == "stationary":  # Bose-Einstein law renormalised on 0..N-1
            log_r = np.log(n_th) - np.log1p(n_th)
            p = np.where(inside, np.exp(np.arange(top)[None, :] * log_r[:, None]), 0.0)
            return p / p.sum(axis=1, keepdims=True)
        p0 = np.zeros((n_th.size, top))
        p0[:, self.n0] = 1.0
        return p0

    def prob_one(self, free: np.ndarray | None, n_levels: int, k: int) -> np.ndarray:
        """``P(1 | n, s)`` (k, S, N); computed once at construction when the response has
        no fitted parameter (then of shape (1, S, N))."""
        if free is None:
            if n_levels > self.max_levels:
                self.response.check_coverage(n_levels, self.settings)
                return self.response.prob_one(None, n_levels, self.settings)[0][:1]
            return np.ascontiguousarray(self._fixed_prob_one[:, :, :n_levels])
        return self.response.prob_one(free, n_levels, self.settings)[0]

    def _split(self, theta: ArrayLike):
        theta = np.atleast_2d(np.asarray(theta, dtype=float))
        if theta.shape[1] != self.ndim:
            raise ValueError(f"expected {self.ndim} parameters {self.names}, got {theta.shape[1]}")
        with np.errstate(divide="ignore"):
            kappa = 1.0 / theta[:, 0]
        n_th = theta[:, 1]
        ok = np.isfinite(kappa) & (kappa > 0) & np.isfinite(n_th) & (n_th > 0)
        free = theta[:, 2:] if self.ndim > 2 else None
        if free is not None:
            ok &= self.response.prob_one(free, 2, self.settings)[1]
        return theta, kappa, n_th, free, ok

    def evaluate(self, theta: ArrayLike, forward) -> np.ndarray:
        """Call ``forward(levels (k,), kappa, n_th, free)`` on the rows inside the support.

        Rows whose truncations differ by at most 25% share one call (each keeps its own
        truncation, padded to the group's largest, see :meth:`transitions`), so the
        threads share them and an outlying walker does not make the others slow.
        """
        theta, kappa, n_th, free, ok = self._split(theta)
        out = np.full(theta.shape[0], -np.inf)
        sel = np.flatnonzero(ok)
        if sel.size == 0:
            return out
        levels = self.levels_for(theta[sel, 0], n_th[sel])
        group = np.zeros(levels.size, np.int64)
        low = None
        for n in np.unique(levels):
            if low is None or n > PAD_RATIO * low:
                low = n
                current = n
            group[levels == n] = current
        for g in np.unique(group):
            rows = sel[group == g]
            out[rows] = forward(levels[group == g], kappa[rows], n_th[rows],
                                None if free is None else free[rows])
        return out

    def interval_route(self, theta: ArrayLike | None = None) -> dict:
        """How the probe intervals are propagated, for the result file.

        ``route`` is ``"regular clock"`` (one matrix), ``"distinct intervals"`` (one
        matrix per interval), ``"exact grid"`` (irregular spacing, module docstring)
        or ``"per-interval eigen"``; all are exact, so ``bound`` says why no error
        bound is needed.  For the grid: its step ``grid_step_s`` (s), the number of
        table matrices, the longest tabulated interval (s), the fraction of intervals
        beyond it (eigen route) and, at the parameter point ``theta`` (lifetime in s,
        n_th, ...), the truncation and how the remainder is applied (eigen basis, with
        the largest ``|lambda| h``, or the uniformization series and its terms).
        """
        s = self.steps
        exact = "none: exact (rounding only)"
        if s.kind == "regular":
            return {"route": "regular clock", "interval_s": float(s.steps[0]), "bound": exact}
        if s.kind == "indexed":
            return {"route": "distinct intervals", "intervals": int(s.steps.size),
                    "bound": exact}
        if self.irregular == "eigen":
            return {"route": "per-interval eigen", "bound": exact}
        out = {"route": "exact grid", "grid_step_s": float(s.grid_step),
               "table_matrices": int(s.steps.size), "table_top_s": float(s.steps[-1]),
               "beyond_table_fraction": float(np.mean(s.step_index < 0)),
               "series_tolerance": float(hk.SERIES_TOLERANCE),
               "bound": "none: exact (truncation of the remainder below 2^-53 of each "
                        "step, under its rounding)"}
        if theta is not None:
            theta = np.asarray(theta, dtype=float).reshape(1, -1)
            n = int(min(self.levels_for(theta[:, 0], theta[:, 1], cap=False)[0],
                        self.max_levels))
            tr = self.transitions(1.0 / theta[:, 0], theta[:, 1:2].ravel(), n)
            out["levels"] = n
            if tr.eigen_table is not None:
                out["remainder"] = ("eigen basis, exp(lambda r) by its Taylor polynomial of "
                                    "degree 5")
                out["largest_lambda_h"] = float(np.max(-tr.eigenvalues) * s.grid_step)
            else:
                out["remainder"] = "uniformization series"
                out["series_terms"] = int(tr.terms[0])
        return out

    # -- likelihood -------------------------------------------------------------------

    def __call__(self, theta: ArrayLike) -> np.ndarray:
        """Log-likelihood for each row of ``theta`` (k, ndim); -inf outside the support."""
        return self.evaluate(theta, self._forward)

    def _forward(self, levels, kappa, n_th, free) -> np.ndarray:
        tr = self.transitions(kappa, n_th, levels)
        emis = hk.emission_table(self.prob_one(free, int(levels.max()), kappa.size))
        return hk.forward_loglik(tr, self.initial_law(n_th, levels), emis, self.sequence)

    # -- trajectory -------------------------------------------------------------------

    def trajectory(self, theta: ArrayLike, viterbi: bool = True) -> Trajectory:
        """Forward-backward marginals (T, N) and the Viterbi path (unless ``viterbi`` is
        False) at one parameter point (N: the truncation :meth:`levels_for` gives that
        point)."""
        theta, kappa, n_th, free, ok = self._split(np.asarray(theta, dtype=float).reshape(1, -1))
        if not ok[0]:
            raise InputError("the parameter point is outside the model's support")
        n_levels = int(self.levels_for(theta[:, 0], n_th)[0])
        tr = self.transitions(kappa, n_th, n_levels)
        emis = hk.emission_table(self.prob_one(free, n_levels, 1))[0]
        p0 = self.initial_law(n_th, n_levels)[0]
        post, ll = hk.posterior_marginals(tr, p0, emis, self.sequence)
        path = hk.viterbi(tr, p0, emis, self.sequence)[0] if viterbi else None
        mean = post @ np.arange(n_levels, dtype=float)
        return Trajectory(np.asarray(self.record.time), post, mean, path, ll)


def route_text(route: dict) -> str:
    """One line for the command's output from :meth:`ProbeLikelihood.interval_route`."""
    from cavchar.units import format_quantity

    kind = route["route"]
    if kind == "quantized intervals":
        how = (f"{route['bins_used']} distinct intervals, each its own representative"
               if route["quantization_exact"] else
               f"{route['bins_used']} representative intervals (bin means, edge ratio "
               f"{route['largest_bin_ratio']:.3f})")
        return (f"probe intervals: irregular, quantized route, {how}; bias bound "
                f"{route['bias_bound_sd']:.3f} posterior sd (checked against the exact "
                f"likelihood on {route['draws_checked']} draws, accepted below "
                f"{route['bias_limit_sd']:g})")
    if kind == "regular clock":
        return (f"probe intervals: regular clock, "
                f"{format_quantity(route['interval_s'], 'time')} (exact)")
    if kind == "distinct intervals":
        return f"probe intervals: {route['intervals']} distinct intervals (exact)"
    if kind == "per-interval eigen":
        return "probe intervals: irregular, per-interval eigen route (exact)"
    terms = ""
    if "series_terms" in route:
        terms = f", remainder by {route['series_terms']} uniformization terms"
    elif "largest_lambda_h" in route:
        terms = ", remainder in the eigen basis"
    return (f"probe intervals: irregular, exact grid route (step "
            f"{format_quantity(route['grid_step_s'], 'time')}, {route['table_matrices']} "
            f"matrices up to {format_quantity(route['table_top_s'], 'time')}, "
            f"{100 * route['beyond_table_fraction']:.2g}% of the intervals beyond{terms}); "
            "no bound needed: truncation below 2^-53 per step")


def exit_rate(kappa: float, n_th: float, n: float) -> float:
    """Total rate (1/s) of leaving photon number n: ``kappa [(1 + n_th) n + n_th (n + 1)]``."""
    return kappa * ((1.0 + n_th) * n + n_th * (n + 1.0))


def typical_dwell(lifetime: float, n_th: float) -> float:
    """Mean dwell time (s) of photon number ``n* = max(1, ceil(n_th))`` (short dwells)."""
    n_star = max(1, math.ceil(n_th))
    return 1.0 / exit_rate(1.0 / lifetime, n_th, n_star)
