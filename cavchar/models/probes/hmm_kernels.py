"""Compiled hidden-Markov-model kernels for binary probe records.

Model (Rabiner, Proc. IEEE 77, 257 (1989), sections III.A-B): hidden state =
photon number ``n_t`` in ``0..N-1`` at probe ``t``; outcome ``y_t`` in {0, 1}
or lost.  With ``P_t`` the transition matrix over the interval before probe
``t`` (row-stochastic, ``P_t[i, j] = Prob(n_t = j | n_{t-1} = i)``) and
``e_t[j] = P(y_t | n_t = j)`` (``e_t = 1`` for a lost probe: no emission, time
still advances) the forward variables obey

    alpha_0 = p0 * e_0,        alpha_t = (alpha_{t-1} @ P_t) * e_t,
    log L = log sum_j alpha_{T-1}[j].

The scaled forward algorithm divides alpha by its sum; here the division is
lazy (only when the sum falls below 1e-150, its log is then added to log L),
which is exact up to rounding and avoids a logarithm per probe.

Transitions come in three forms (:class:`Transitions`):

* ``regular``: one matrix per parameter set (equal probe spacing);
* ``indexed``: a few matrices per parameter set and, per probe, the index of
  the one to use (a few distinct spacings);
* ``eigen``: irregular spacing, exactly, through the eigen-decomposition
  ``P(dt) = R diag(exp(lambda dt)) L`` of the damped-mode generator:
  ``alpha P(dt) = ((alpha R) * exp(lambda dt)) L`` (:func:`eigen_parts`).
* ``grid``: irregular spacing, exactly, at about the cost of a few distinct
  spacings: each interval is split as ``dt = j h + r`` (``0 <= r < h``) and

      P(dt) = P(j h) exp(Q r),
      exp(Q r) = exp(-q r) sum_k (q r)^k / k! U^k,   U = I + Q / q

  (the two factors commute; uniformization, Grassmann, Comput. Oper. Res. 4,
  47 (1977); ``q`` the largest exit rate, so ``U`` is stochastic and every
  term is non-negative: no cancellation).  ``P(j h)`` comes from a table of
  matrices (exact, from one eigen-decomposition); ``U`` is tridiagonal, so a
  term costs 3 N multiply-adds; the series stops at the smallest ``K`` with
  ``P(Poisson(q h) > K) <= 2^-53`` (:func:`uniformization_terms`), below the
  rounding of one step, so the route is as exact as the others.  The factor
  ``exp(-q r)`` is added to log L as ``-q r``.  Intervals longer than the
  table take the eigen route.

  In the unrolled kernels (N <= 16) the remainder is applied in the eigen basis
  instead when that is well conditioned (the test of the regular route) and
  ``max |lambda| h <= EIGEN_GRID_LIMIT``: ``alpha P(dt) = ((alpha T_j)
  exp(lambda r)) L`` with a table ``T_j = P(j h) R`` and ``exp(lambda r)`` by its
  Taylor polynomial of degree 5, whose remainder ``|lambda r|^6 / 6!`` stays
  below 2^-53: ``2 N^2 + 5 N`` multiply-adds per probe against ``N^2 + 4 K N``
  (measured 2%, 4% and 22% faster for N = 6, 8, 10; docs/probe-records.md).

Outcomes are encoded once as integer codes (:class:`ProbeSequence`): probe
with setting ``s`` and outcome ``y`` has code ``3 s + y`` with ``y = 2`` for a
lost probe, and an emission table (``k, C, N``) gives ``P(y | n, s)`` per code
(:func:`emission_table`).  A per-code log offset (``k, C``) is added to log L
for each probe: zero for single probes, the log of the scale of a block
emission in the coarse mode.

All forward kernels are vectorized over k parameter sets (numba ``prange``:
the sets are shared among threads).  For N <= 12 fully unrolled kernels are
generated (:mod:`cavchar.models.probes._unrolled`); the loop kernels below are
the reference implementation and serve larger N.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit, prange
from numpy.typing import ArrayLike

from cavchar.models.probes import _unrolled as _hmm_unrolled

__all__ = [
    "ProbeSequence",
    "Transitions",
    "emission_table",
    "eigen_parts",
    "uniformization_parts",
    "uniformization_terms",
    "forward_loglik",
    "posterior_marginals",
    "viterbi",
]

LOST = 2
_TINY = 1e-150
_HUGE = 1e150
#: truncation tolerance of the uniformization series: below the rounding of one step
SERIES_TOLERANCE = 2.0**-53
#: eigen-basis grid: largest |lambda| h for which the Taylor polynomial of exp of degree
#: _hmm_unrolled.EXP_DEGREE (5) keeps its remainder |x|^6 / 6! below 2^-53 (x = 6.5e-3)
EIGEN_GRID_LIMIT = 6.5e-3


# --------------------------------------------------------------------------- inputs


@dataclass(frozen=True, eq=False)
class ProbeSequence:
    """Validated integer codes of a probe record, built once per record.

    Attributes
    ----------
    codes : ndarray of int32, shape (T,)
        ``3 * setting_index + outcome`` (outcome 2 = lost probe).
    n_codes : int
        ``3 * n_settings``: the number of rows an emission table needs.
    starts : ndarray of int64, shape (n_segments + 1,)
        First probe of each independent segment, then T.
    """

    codes: np.ndarray
    n_codes: int
    starts: np.ndarray

    @classmethod
    def from_outcomes(
        cls,
        outcome: ArrayLike,
        setting_index: ArrayLike | None = None,
        n_settings: int | None = None,
        segment_starts: ArrayLike | None = None,
    ) -> ProbeSequence:
        """Encode outcomes (0, 1; NaN or -1 = lost) and setting indices (0..S-1)."""
        y = np.asarray(outcome, dtype=float)
        if y.ndim != 1 or y.size == 0:
            raise ValueError("outcome must be a non-empty 1-d array")
        lost = np.isnan(y) | (y == -1)
        if np.any(~lost & (y != 0) & (y != 1)):
            raise ValueError("outcomes must be 0, 1 or lost (NaN / -1)")
        if setting_index is None:
            s = np.zeros(y.size, dtype=np.int64)
            n_settings = 1 if n_settings is None else int(n_settings)
        else:
            s = np.asarray(setting_index, dtype=np.int64)
            if s.shape != y.shape or s.min() < 0:
                raise ValueError("setting_index must be non-negative, one per probe")
            n_settings = int(s.max()) + 1 if n_settings is None else int(n_settings)
            if s.max() >= n_settings:
                raise ValueError("setting_index out of range")
        codes = np.where(lost, LOST, 3 * s + np.where(lost, 0, y).astype(np.int64))
        return cls.from_codes(codes, 3 * n_settings, segment_starts)

    @classmethod
    def from_codes(
        cls, codes: ArrayLike, n_codes: int, segment_starts: ArrayLike | None = None
    ) -> ProbeSequence:
        """Wrap ready-made codes in ``0..n_codes-1`` (e.g. block patterns of the coarse mode)."""
        # writeable arrays: numba compiles (and caches) a separate kernel for read-only ones
        codes = np.require(codes, np.int32, ["C", "W"])
        if codes.ndim != 1 or codes.size == 0:
            raise ValueError("codes must be a non-empty 1-d array")
        if codes.min() < 0 or codes.max() >= n_codes:
            raise ValueError(f"codes must lie in 0..{n_codes - 1}")
        if segment_starts is None:
            starts = np.array([0, codes.size], dtype=np.int64)
        else:
            starts = np.asarray(segment_starts, dtype=np.int64)
            if starts.size == 0 or starts[0] != 0:
                raise ValueError("segment starts must begin with 0")
            starts = np.append(starts, codes.size) if starts[-1] != codes.size else starts
            if np.any(np.diff(starts) <= 0):
                raise ValueError("segment starts must increase and lie inside the record")
        return cls(codes, int(n_codes), np.require(starts, np.int64, ["C", "W"]))

    @property
    def n_probes(self) -> int:
        """Number T of entries of ``codes`` (probes, or blocks in the coarse mode), all segments."""
        return int(self.codes.size)


@dataclass(frozen=True, eq=False)
class Transitions:
    """Transition matrices over the probe intervals, for k parameter sets.

    Build with :meth:`regular`, :meth:`indexed` or :meth:`eigen`.  For a
    probe ``t`` that starts a segment the transition is not used.
    """

    kind: str
    matrices: np.ndarray  # (k, M, N, N); M = 1 for "regular"
    step_index: np.ndarray  # (T,) int32, "indexed" only
    right: np.ndarray  # (k, N, N), "eigen" only
    eigenvalues: np.ndarray  # (k, N)
    left: np.ndarray  # (k, N, N)
    dts: np.ndarray  # (T,) seconds, "eigen" and "grid": interval before each probe
    remainder: np.ndarray | None = None  # (T,) seconds, "grid" only: r of dt = j h + r
    uniform: np.ndarray | None = None  # (k, 3, N) "grid": U above, on, below the diagonal
    rates: np.ndarray | None = None  # (k,) 1/s, "grid": uniformization rate q
    terms: np.ndarray | None = None  # (k,) int64, "grid": series terms K
    eigen_table: np.ndarray | None = None  # (k, J, N, N) "grid", optional: P(j h) R

    @classmethod
    def regular(cls, matrices: ArrayLike) -> Transitions:
        """One matrix per set, ``matrices`` of shape (k, N, N)."""
        m = np.require(matrices, float, ["C", "W"])
        if m.ndim != 3 or m.shape[1] != m.shape[2]:
            raise ValueError("regular transitions need shape (k, N, N)")
        return cls("regular", m[:, None], *_dummies(m.shape[2]))

    @classmethod
    def indexed(cls, matrices: ArrayLike, step_index: ArrayLike, check: bool = True) -> Transitions:
        """Matrices (k, M, N, N) and, per probe, the index (0..M-1) of its interval."""
        m = np.require(matrices, float, ["C", "W"])
        idx = np.require(step_index, np.int32, ["C", "W"])
        if m.ndim != 4 or m.shape[2] != m.shape[3]:
            raise ValueError("indexed transitions need matrices of shape (k, M, N, N)")
        if check and (idx.ndim != 1 or idx.min() < 0 or idx.max() >= m.shape[1]):
            raise ValueError("step_index must be a 1-d array of indices into the matrices")
        d = _dummies(m.shape[2])
        return cls("indexed", m, idx, d[1], d[2], d[3], d[4])

    @classmethod
    def eigen(
        cls, right: ArrayLike, eigenvalues: ArrayLike, left: ArrayLike, dts: ArrayLike,
        check: bool = True,
    ) -> Transitions:
        """``P(dt) = right diag(exp(eigenvalues dt)) left`` per set; ``dts`` (T,) in seconds."""
        r = np.require(right, float, ["C", "W"])
        lam = np.require(eigenvalues, float, ["C", "W"])
        lt = np.require(left, float, ["C", "W"])
        dts = np.require(dts, float, ["C", "W"])
        if r.ndim != 3 or lt.shape != r.shape or lam.shape != r.shape[:2]:
            raise ValueError("eigen transitions need right, left (k, N, N), eigenvalues (k, N)")
        if check and (dts.ndim != 1 or not np.all(dts >= 0)):
            raise ValueError("intervals must be a 1-d array of values >= 0")
        n = r.shape[1]
        return cls("eigen", np.zeros((r.shape[0], 1, n, n)), np.zeros(1, np.int32), r, lam, lt,
                   dts)

    @classmethod
    def grid(
        cls, matrices: ArrayLike, step_index: ArrayLike, remainder: ArrayLike,
        uniform: ArrayLike, rates: ArrayLike, terms: ArrayLike, right: ArrayLike,
        eigenvalues: ArrayLike, left: ArrayLike, dts: ArrayLike,
        eigen_table: ArrayLike | None = None,
    ) -> Transitions:
        """Grid route (module docstring): table ``matrices[c, j] = P(j h)`` (k, J, N, N);
        per probe the table index ``j`` (-1: beyond the table, eigen route) and the
        remainder ``r`` in s; per set the tridiagonal ``U`` as (k, 3, N) (above, on,
        below the diagonal), the rate ``q`` (1/s) and the series length ``K``; the
        eigen parts and the whole intervals ``dts`` (s) for the intervals beyond
        the table and for forward-backward / Viterbi.  ``eigen_table`` (k, J, N, N),
        optional: ``P(j h) R`` for the eigen-basis form of the remainder (module
        docstring), used by the unrolled kernels; the caller guarantees
        ``max |lambda| h <= EIGEN_GRID_LIMIT`` and a well-conditioned eigen basis."""
        m = np.require(matrices, float, ["C", "W"])
        idx = np.require(step_index, np.int32, ["C", "W"])
        rem = np.require(remainder, float, ["C", "W"])
        uni = np.require(uniform, float, ["C", "W"])
        q = np.require(rates, float, ["C", "W"])
        kk = np.require(terms, np.int64, ["C", "W"])
        k, n = m.shape[0], m.shape[-1]
        if m.ndim != 4 or m.shape[2] != n or uni.shape != (k, 3, n) or q.shape != (k,) \
                or kk.shape != (k,) or idx.shape != rem.shape or idx.max() >= m.shape[1]:
            raise ValueError("grid transitions: inconsistent shapes")
        e = cls.eigen(right, eigenvalues, left, dts, check=False)
        et = None if eigen_table is None else np.require(eigen_table, float, ["C", "W"])
        if et is not None and et.shape != m.shape:
            raise ValueError("grid transitions: the eigen table must have the table's shape")
        return cls("grid", m, idx, e.right, e.eigenvalues, e.left, e.dts, rem, uni, q, kk, et)

    def as_eigen(self) -> Transitions:
        """The same transitions on the eigen route (grid -> eigen; others unchanged)."""
        if self.kind != "grid":
            return self
        return Transitions.eigen(self.right, self.eigenvalues, self.left, self.dts, check=False)

    @property
    def n_sets(self) -> int:
        """Number k of parameter sets the transitions are built for."""
        return int(self.matrices.shape[0] if self.kind != "eigen" else self.right.shape[0])

    @property
    def n_levels(self) -> int:
        """Number N of photon-number levels (size of each N x N transition matrix)."""
        return int(self.matrices.shape[-1])

    def select(self, i: int) -> Transitions:
        """The transitions of parameter set ``i`` alone (k = 1)."""
        sl = slice(i, i + 1)
        if self.kind == "grid":
            et = None if self.eigen_table is None else self.eigen_table[sl]
            return Transitions("grid", self.matrices[sl], self.step_index, self.right[sl],
                               self.eigenvalues[sl], self.left[sl], self.dts, self.remainder,
                               self.uniform[sl], self.rates[sl], self.terms[sl], et)
        if self.kind == "eigen":
            return Transitions("eigen", self.matrices[sl], self.step_index, self.right[sl],
                               self.eigenvalues[sl], self.left[sl], self.dts)
        return Transitions(self.kind, self.matrices[sl], self.step_index, self.right,
                           self.eigenvalues, self.left, self.dts)

    def _args(self):
        return (self.matrices, self.step_index, self.right, self.eigenvalues, self.left, self.dts)

    def _grid_args(self):
        if self.kind == "grid":
            return self.remainder, self.uniform, self.rates, self.terms
        k, n = self.n_sets, self.n_levels
        return np.zeros(1), np.zeros((k, 3, n)), np.zeros(k), np.zeros(k, np.int64)


def _dummies(n: int):
    return (np.zeros(1, np.int32), np.zeros((1, n, n)), np.zeros((1, n)), np.zeros((1, n, n)),
            np.zeros(1))


_MODE = {"regular": 0, "indexed": 1, "eigen": 2, "grid": 3}


def emission_table(p_one: ArrayLike) -> np.ndarray:
    """Emission table per code from ``P(1 | n, setting)``.

    Parameters
    ----------
    p_one : array, shape (k, S, N) or (S, N)
        Probability of outcome 1 for photon number n and setting s.

    Returns
    -------
    ndarray, shape (k, 3 S, N)
        Rows ``3s``: ``1 - P(1|n,s)``; ``3s+1``: ``P(1|n,s)``; ``3s+2``: 1 (lost).
    """
    p = np.asarray(p_one, dtype=float)
    if p.ndim == 2:
        p = p[None]
    k, s, n = p.shape
    out = np.empty((k, s, 3, n))
    out[:, :, 0] = 1.0 - p
    out[:, :, 1] = p
    out[:, :, 2] = 1.0
    return out.reshape(k, 3 * s, n)


def eigen_parts(kappa: ArrayLike, n_th: ArrayLike, n_levels: int):
    """Batched eigen-decomposition of the damped-mode generator.

    With ``pi`` the stationary law, ``S = D^{1/2} Q D^{-1/2}`` (``D = diag(pi)``)
    is symmetric (detailed balance), ``S = V diag(lambda) V^T``, and
    ``P(dt) = expm(Q dt) = R diag(exp(lambda dt)) L`` with
    ``R = D^{-1/2} V`` and ``L = V^T D^{1/2}``.  The rounding error of an entry
    is about ``eps sqrt(pi_j / pi_i)`` (large only for downward transitions
    from levels far above the thermal population).

    Parameters
    ----------
    kappa, n_th : array (k,)
        Damping rate in 1/s and thermal photon number of each parameter set.
    n_levels : int

    Returns
    -------
    right (k, N, N), eigenvalues (k, N) in 1/s (<= 0), left (k, N, N)
    """
    kappa = np.atleast_1d(np.asarray(kappa, dtype=float))
    n_th = np.atleast_1d(np.asarray(n_th, dtype=float))
    n = np.arange(n_levels, dtype=float)
    a = (kappa * n_th)[:, None]  # up: a (m + 1) from m < N-1
    b = (kappa * (1.0 + n_th))[:, None]  # down: b m from m > 0
    up = a * (n + 1.0)
    up[:, -1] = 0.0
    sym = np.zeros((kappa.size, n_levels, n_levels))
    idx = np.arange(n_levels)
    sym[:, idx, idx] = -(up + b * n)
    off = np.sqrt(a * b) * n[1:]  # sqrt(Q[m-1, m] Q[m, m-1]) = sqrt(a b) m
    sym[:, idx[:-1], idx[1:]] = off
    sym[:, idx[1:], idx[:-1]] = off
    lam, vecs = np.linalg.eigh(sym)
    with np.errstate(divide="ignore"):
        h = 0.5 * n[None, :] * (np.log(n_th) - np.log1p(n_th))[:, None]  # log sqrt(pi_n / pi_0)
    h = np.maximum(h, -300.0)
    right = vecs * np.exp(-h)[:, :, None]
    left = np.swapaxes(vecs, 1, 2) * np.exp(h)[:, None, :]
    return right, np.minimum(lam, 0.0), left


def uniformization_parts(kappa: ArrayLike, n_th: ArrayLike, n_levels: ArrayLike,
                         n_pad: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Uniformized damped-mode generator ``U = I + Q / q`` for k parameter sets.

    ``Q`` is the generator truncated to ``0..N-1`` (up rate ``kappa n_th (n+1)``
    below the top level, down rate ``kappa (1+n_th) n``) and ``q = max_n (-Q_nn)``
    its largest exit rate, so ``U`` is stochastic.  Levels from each set's own
    ``N`` up to ``n_pad`` are padding: ``U`` is the identity there and no rate
    leads into them.

    Returns
    -------
    uniform : (k, 3, n_pad)
        ``U[n, n+1]``, ``U[n, n]``, ``U[n, n-1]`` for each n.
    rates : (k,)
        ``q`` in 1/s.
    """
    kappa = np.atleast_1d(np.asarray(kappa, dtype=float))
    n_th = np.atleast_1d(np.asarray(n_th, dtype=float))
    levels = np.broadcast_to(np.asarray(n_levels, dtype=np.int64), kappa.shape)
    top = int(levels.max()) if n_pad is None else int(n_pad)
    n = np.arange(top, dtype=float)[None, :]
    inside = n < levels[:, None]
    up = np.where(n < levels[:, None] - 1, (kappa * n_th)[:, None] * (n + 1.0), 0.0)
    down = np.where(inside, (kappa * (1.0 + n_th))[:, None] * n, 0.0)
    q = np.max(up + down, axis=1)
    q = np.where(q > 0, q, 1.0)
    uni = np.stack([up, 1.0 - (up + down) / q[:, None], down], axis=1)
    uni[:, 0] /= q[:, None]
    uni[:, 2] /= q[:, None]
    return uni, q


def uniformization_terms(z: ArrayLike, tol: float = SERIES_TOLERANCE) -> np.ndarray:
    """Smallest K per entry with ``P(Poisson(z) > K) <= tol`` (vectorized, z >= 0).

    The tail after term K is at most ``p_{K+1} / (1 - z / (K + 2))`` (a geometric
    bound, valid once ``K + 2 > z``), which is what is tested.
    """
    z = np.atleast_1d(np.asarray(z, dtype=float))
    out = np.zeros(z.shape, np.int64)
    for i, zi in enumerate(z):
        k, term = 0, np.exp(-zi)
        while True:
            nxt = term * zi / (k + 1)
            if zi < k + 2 and nxt / (1.0 - zi / (k + 2)) <= tol:
                break
            k, term = k + 1, nxt
        out[i] = k
    return out


# --------------------------------------------------------------------------- loop kernels


@njit(cache=True, nogil=True)
def _propagate(mode, c, t, a, b, x, trans, sidx, right, lam, left, dts, rem, uni, rates,
               terms):
    """b = a @ P_t for parameter set c (P_t = transition into probe t)."""
    n = a.shape[0]
    if mode == 2 or (mode == 3 and sidx[t] < 0):
        d = dts[t]
        for m in range(n):
            acc = 0.0
            for i in range(n):
                acc += a[i] * right[c, i, m]
            x[m] = acc * np.exp(lam[c, m] * d)
        for j in range(n):
            acc = 0.0
            for m in range(n):
                acc += x[m] * left[c, m, j]
            b[j] = max(acc, 0.0)
    elif mode == 3:  # grid: b = (a P(j h)) S_K(r), S_K without its factor exp(-q r)
        mm = sidx[t]
        for j in range(n):
            acc = 0.0
            for i in range(n):
                acc += a[i] * trans[c, mm, i, j]
            x[j] = acc
            b[j] = acc
        z = rates[c] * rem[t]
        w = 1.0
        for kk in range(1, terms[c] + 1):
            w *= z / kk
            carry = 0.0  # old x[j - 1] U[j - 1, j]
            for j in range(n):
                cur = x[j]
                acc = carry + cur * uni[c, 1, j]
                if j + 1 < n:
                    acc += x[j + 1] * uni[c, 2, j + 1]
                carry = cur * uni[c, 0, j]
                x[j] = acc
                b[j] += w * acc
    else:
        mm = sidx[t] if mode == 1 else 0
        for j in range(n):
            b[j] = 0.0
        for i in range(n):
            ai = a[i]
            for j in range(n):
                b[j] += ai * trans[c, mm, i, j]


@njit(cache=True, nogil=True)
def _step_matrix(mode, c, t, out, trans, sidx, right, lam, left, dts, ex):
    """out = P_t for parameter set c (``ex``: scratch of length N)."""
    n = out.shape[0]
    if mode == 2:
        d = dts[t]
        for m in range(n):  # N exponentials per interval, not N^3
            ex[m] = np.exp(lam[c, m] * d)
        for i in range(n):
            for j in range(n):
                out[i, j] = 0.0
            for m in range(n):
                rm = right[c, i, m] * ex[m]
                for j in range(n):
                    out[i, j] += rm * left[c, m, j]
            for j in range(n):
                out[i, j] = max(out[i, j], 0.0)
    else:
        mm = sidx[t] if mode == 1 else 0
        for i in range(n):
            for j in range(n):
                out[i, j] = trans[c, mm, i, j]


@njit(parallel=True, cache=True, nogil=True, fastmath={"contract"})
def _forward_loops(mode, trans, sidx, right, lam, left, dts, rem, uni, rates, terms, p0, emis,
                   offs, codes, starts, out):
    k = out.shape[0]
    n = p0.shape[1]
    nseg = starts.shape[0] - 1
    for c in prange(k):
        a = np.empty(n)
        b = np.empty(n)
        x = np.empty(n)
        pm = trans[c, 0].copy()  # regular spacing: the one matrix, contiguous
        em = emis[c].copy()
        total = 0.0
        for g in range(nseg):
            t0 = starts[g]
            code = codes[t0]
            ll = offs[c, code]
            s = 0.0
            for j in range(n):
                a[j] = p0[c, j] * em[code, j]
                s += a[j]
            dead = not s > 0.0
            for t in range(t0, starts[g + 1]):
                if t > t0:
                    code = codes[t]
                    if mode == 0:
                        for j in range(n):
                            b[j] = 0.0
                        for i in range(n):
                            ai = a[i]
                            for j in range(n):
                                b[j] += ai * pm[i, j]
                    else:
                        _propagate(mode, c, t, a, b, x, trans, sidx, right, lam, left, dts, rem,
                                   uni, rates, terms)
                        if mode == 3 and sidx[t] >= 0:
                            ll -= rates[c] * rem[t]
                    ll += offs[c, code]
                    s = 0.0
                    for j in range(n):
                        a[j] = b[j] * em[code, j]
                        s += a[j]
                if not (_TINY <= s <= _HUGE):
                    if s > 0.0:
                        ll += np.log(s)
                        for j in range(n):
                            a[j] /= s
                        s = 1.0
                    else:
                        dead = True
                        break
            if dead:
                total = -np.inf
            else:
                total += ll + np.log(s)
        out[c] = total


@njit(cache=True, nogil=True)
def _marginals(mode, trans, sidx, right, lam, left, dts, p0, emis, codes, starts, post):
    """Forward-backward for one parameter set; fills post (T, N); returns log L."""
    n = p0.shape[0]
    b = np.empty(n)
    x = np.empty(n)
    v = np.empty(n)
    pm = np.empty((n, n))
    scale = np.empty(codes.shape[0])
    total = 0.0
    for g in range(starts.shape[0] - 1):
        t0 = starts[g]
        t1 = starts[g + 1]
        for t in range(t0, t1):
            code = codes[t]
            if t == t0:
                for j in range(n):
                    b[j] = p0[j]
            else:
                _propagate(mode, 0, t, post[t - 1], b, x, trans, sidx, right, lam, left, dts,
                           dts, right, lam[:, 0], sidx)
            s = 0.0
            for j in range(n):
                post[t, j] = b[j] * emis[code, j]
                s += post[t, j]
            if not s > 0.0:
                return -np.inf
            scale[t] = s
            total += np.log(s)
            for j in range(n):
                post[t, j] /= s
        beta = np.ones(n)
        for t in range(t1 - 1, t0, -1):
            code = codes[t]
            for j in range(n):
                v[j] = emis[code, j] * beta[j]
            _step_matrix(mode, 0, t, pm, trans, sidx, right, lam, left, dts, x)
            mx = 0.0
            for i in range(n):
                acc = 0.0
                for j in range(n):
                    acc += pm[i, j] * v[j]
                beta[i] = acc
                mx = max(mx, acc)
            s = 0.0
            for i in range(n):
                beta[i] /= mx
                post[t - 1, i] *= beta[i]
                s += post[t - 1, i]
            for i in range(n):
                post[t - 1, i] /= s
    return total


@njit(cache=True, nogil=True)
def _viterbi(mode, trans, sidx, right, lam, left, dts, p0, emis, codes, starts, path):
    """Max-product recursion in linear space, rescaled by the max each probe."""
    n = p0.shape[0]
    T = codes.shape[0]
    back = np.empty((T, n), dtype=np.int16)
    delta = np.empty(n)
    new = np.empty(n)
    ex = np.empty(n)
    pm = np.empty((n, n))
    total = 0.0
    for g in range(starts.shape[0] - 1):
        t0 = starts[g]
        t1 = starts[g + 1]
        for t in range(t0, t1):
            code = codes[t]
            if t == t0:
                for j in range(n):
                    new[j] = p0[j] * emis[code, j]
            else:
                _step_matrix(mode, 0, t, pm, trans, sidx, right, lam, left, dts, ex)
                for j in range(n):
                    best = -1.0
                    arg = 0
                    for i in range(n):
                        val = delta[i] * pm[i, j]
                        if val > best:
                            best = val
                            arg = i
                    back[t, j] = arg
                    new[j] = best * emis[code, j]
            mx = 0.0
            for j in range(n):
                mx = max(mx, new[j])
            if not mx > 0.0:
                total = -np.inf
                mx = 1.0
            else:
                total += np.log(mx)
            for j in range(n):
                delta[j] = new[j] / mx
        arg = 0
        for j in range(1, n):
            if delta[j] > delta[arg]:
                arg = j
        path[t1 - 1] = arg
        for t in range(t1 - 1, t0, -1):
            path[t - 1] = back[t, path[t]]
    return total


# --------------------------------------------------------------------------- public API


def _batch(arr: ArrayLike, k: int, ndim: int, what: str) -> np.ndarray:
    a = np.asarray(arr, dtype=float)
    if a.ndim == ndim - 1:
        a = a[None]
    if a.ndim != ndim or a.shape[0] not in (1, k):
        raise ValueError(f"{what} has shape {a.shape}; expected {ndim} dims with k = {k} or 1")
    # a writeable copy of a broadcast (read-only) view: one compiled signature per kernel
    return np.require(np.broadcast_to(a, (k,) + a.shape[1:]), requirements=["C", "W"])


def forward_loglik(
    transitions: Transitions,
    initial: ArrayLike,
    emission: ArrayLike,
    sequence: ProbeSequence,
    offsets: ArrayLike | None = None,
    *,
    unrolled: bool | None = None,
) -> np.ndarray:
    """Marginal log-likelihood of the outcomes for each of k parameter sets.

    Parameters
    ----------
    transitions : Transitions
        k parameter sets, N levels.
    initial : array (k, N) or (N,)
        Distribution of the photon number at the first probe of each segment.
    emission : array (k, C, N) or (C, N)
        Emission table per code (:func:`emission_table`), C >= ``sequence.n_codes``.
    sequence : ProbeSequence
    offsets : array (k, C) or (C,), optional
        Log offset added per probe with that code (default 0).
    unrolled : bool, optional
        Force (True) or forbid (False) the unrolled kernels; default: use them
        for N <= 16.

    Returns
    -------
    ndarray (k,)
        ``log L`` (natural log); ``-inf`` when the outcomes are impossible.
    """
    k, n = transitions.n_sets, transitions.n_levels
    p0 = _batch(initial, k, 2, "initial")
    emis = _batch(emission, k, 3, "emission")
    if p0.shape[1] != n or emis.shape[2] != n or emis.shape[1] < sequence.n_codes:
        raise ValueError("initial, emission and transitions disagree on N or the codes")
    offs = np.zeros((k, emis.shape[1])) if offsets is None else _batch(offsets, k, 2, "offsets")
    out = np.empty(k)
    seq = (sequence.codes, sequence.starts, out)
    use_unrolled = n <= _hmm_unrolled.MAX_UNROLLED_LEVELS if unrolled is None else unrolled
    tr = transitions
    mod = _hmm_unrolled.load(n) if use_unrolled else None  # None: no writable kernel folder
    if mod is not None:
        suffix = "_serial" if k == 1 else ""
        if tr.kind == "regular":
            getattr(mod, "forward_regular" + suffix)(
                np.ascontiguousarray(tr.matrices[:, 0]), p0, emis, offs, *seq)
        elif tr.kind == "indexed":
            getattr(mod, "forward_indexed" + suffix)(tr.matrices, tr.step_index, p0, emis, offs,
                                                     *seq)
        elif tr.kind == "grid" and tr.eigen_table is not None:
            getattr(mod, "forward_eigengrid" + suffix)(tr.eigen_table, tr.step_index,
                                                       tr.remainder, tr.right, tr.eigenvalues,
                                                       tr.left, tr.dts, p0, emis, offs, *seq)
        elif tr.kind == "grid":
            getattr(mod, "forward_grid" + suffix)(tr.matrices, tr.step_index, tr.remainder,
                                                  tr.uniform, tr.rates, tr.terms, tr.right,
                                                  tr.eigenvalues, tr.left, tr.dts, p0, emis, offs,
                                                  *seq)
        else:
            getattr(mod, "forward_eigen" + suffix)(tr.right, tr.eigenvalues, tr.left, tr.dts,
                                                   p0, emis, offs, *seq)
    else:
        _forward_loops(_MODE[tr.kind], *tr._args(), *tr._grid_args(), p0, emis, offs, *seq)
    return np.where(np.isnan(out), -np.inf, out)


def _single(transitions: Transitions, initial, emission, sequence):
    if transitions.n_sets != 1:
        raise ValueError("pass the transitions of one parameter set (Transitions.select(i))")
    transitions = transitions.as_eigen()  # forward-backward and Viterbi: interval by interval
    n = transitions.n_levels
    p0 = np.require(initial, float, ["C", "W"])
    emis = np.require(emission, float, ["C", "W"])
    if emis.ndim == 3:
        emis = emis[0]
    if p0.shape != (n,) or emis.ndim != 2 or emis.shape[1] != n:
        raise ValueError("initial must be (N,), emission (C, N)")
    return (_MODE[transitions.kind], *transitions._args(), p0, emis, sequence.codes,
            sequence.starts)


def posterior_marginals(
    transitions: Transitions, initial: ArrayLike, emission: ArrayLike, sequence: ProbeSequence
) -> tuple[np.ndarray, float]:
    """Forward-backward posterior ``P(n_t = j | all outcomes)`` for one parameter set.

    Returns
    -------
    marginals : ndarray (T, N)
        Rows sum to one.
    loglik : float
        The forward log-likelihood (as :func:`forward_loglik`).
    """
    args = _single(transitions, initial, emission, sequence)
    post = np.empty((sequence.n_probes, transitions.n_levels))
    ll = _marginals(*args, post)
    if not np.isfinite(ll):
        post[:] = np.nan
    return post, float(ll)


def viterbi(
    transitions: Transitions, initial: ArrayLike, emission: ArrayLike, sequence: ProbeSequence
) -> tuple[np.ndarray, float]:
    """Most likely photon-number path (Viterbi) for one parameter set.

    Returns
    -------
    path : ndarray of int (T,)
        Photon number at each probe; segments decoded independently.
    log_prob : float
        Log of the joint probability of the path and the outcomes.
    """
    args = _single(transitions, initial, emission, sequence)
    path = np.empty(sequence.n_probes, dtype=np.int64)
    lp = _viterbi(*args, path)
    return path, float(lp)

