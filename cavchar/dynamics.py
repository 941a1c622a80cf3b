"""Populations of a thermally damped cavity mode: the birth–death process.

The diagonal of the Lindblad master equation with jump operators
``sqrt(kappa (1 + n_th)) a`` and ``sqrt(kappa n_th) a†`` is a continuous-time
birth–death chain on the photon number (e.g. Carmichael, *Statistical Methods
in Quantum Optics 1*, ch. 3):

    dP_n/dt = kappa (1 + n_th) [(n+1) P_{n+1} - n P_n]
            + kappa n_th       [n P_{n-1} - (n+1) P_n]

Conventions (those of continuous-time Markov chains):

* rate matrix ``Q[i, j]`` = rate from ``i`` to ``j`` (``i != j``); rows sum to 0;
* populations are row vectors and ``p(t) = p(0) @ expm(Q t)``;
* ``P(dt)[i, j] = Prob(n(t + dt) = j | n(t) = i)`` (row-stochastic, like
  hmmlearn's ``transmat_``).

The chain is truncated to the levels ``0 .. N-1`` with a reflecting top level
(no up rate out of ``N-1``).  Detailed balance holds for every birth–death
chain, so with ``pi`` the stationary law the matrix
``S = diag(sqrt(pi)) Q diag(1/sqrt(pi))`` is symmetric tridiagonal,
``S[n-1, n] = sqrt(a b) n`` with ``a = kappa n_th`` and ``b = kappa (1+n_th)``.
One symmetric eigen-decomposition ``S = V diag(lam) V^T`` then gives every
transition matrix at once:

    P(dt) = diag(pi^{-1/2}) V diag(exp(lam dt)) V^T diag(pi^{1/2}).

The similarity transform amplifies rounding: the absolute error of
``P(dt)[i, j]`` is about ``eps * sqrt(pi_j / pi_i)``, large only for rows far
above the thermal bulk when ``n_th`` is tiny.  :class:`DampedModePropagator`
checks this bound for the rows a caller needs and falls back to
scaling-and-squaring matrix exponentials (``scipy.linalg.expm``) when it
exceeds 1e-11, saying so in ``method``.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike
from scipy import linalg

__all__ = [
    "up_rate",
    "down_rate",
    "mean_jump_rate",
    "truncation_levels",
    "MAX_LEVELS",
    "check_levels",
    "rate_matrix",
    "stationary_distribution",
    "bose_einstein",
    "DampedModePropagator",
    "transition_matrices_batch",
    "symmetric_eigen_batch",
    "populations",
    "mean_photon_number",
]

#: largest truncation (number of photon-number levels) cavchar builds: a 400 x 400
#: generator is 1.3 MB and its eigen-decomposition about 0.1 s, while a larger one
#: means an n_th above about 14 or a Fock state above 400 photons, far outside a
#: cavity at millikelvin (a unit slip or a record too short to bound n_th)
MAX_LEVELS = 400

#: accepted bound on the absolute rounding error of an eigen-route probability
_EIGEN_TOLERANCE = 1e-11
_EPS = float(np.finfo(float).eps)


def up_rate(kappa: ArrayLike, n_th: ArrayLike, n: ArrayLike) -> np.ndarray:
    """Rate of n -> n+1 in 1/s: ``kappa n_th (n + 1)``."""
    return np.asarray(kappa) * np.asarray(n_th) * (np.asarray(n) + 1)


def down_rate(kappa: ArrayLike, n_th: ArrayLike, n: ArrayLike) -> np.ndarray:
    """Rate of n -> n-1 in 1/s: ``kappa (1 + n_th) n``."""
    return np.asarray(kappa) * (1 + np.asarray(n_th)) * np.asarray(n)


def mean_jump_rate(kappa: ArrayLike, n_th: ArrayLike) -> np.ndarray:
    """Mean number of jumps per second in equilibrium, in 1/s: ``2 kappa n_th (1 + n_th)``.

    The up plus down rates averaged over the Bose–Einstein law (mean ``<n> = n_th``):
    ``kappa [n_th (<n> + 1) + (1 + n_th) <n>]``.
    """
    n_th = np.asarray(n_th)
    return 2 * np.asarray(kappa) * n_th * (1 + n_th)


def bose_einstein(n_th: ArrayLike, n: ArrayLike) -> np.ndarray:
    """Untruncated Bose–Einstein law ``P_n = n_th^n / (1 + n_th)^(n+1)``.

    A scalar ``n_th`` gives the shape of ``n``; an array ``n_th`` of shape (k,)
    gives shape (k,) + ``n.shape`` (one law per parameter set).
    """
    n = np.asarray(n, dtype=float)
    nth = np.asarray(n_th, dtype=float)
    batched = nth.ndim > 0
    nth = nth.reshape(nth.shape + (1,) * n.ndim) if batched else nth
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.exp(n * np.log(nth) - (n + 1) * np.log1p(nth))
    return np.where(nth == 0, np.where(n == 0, 1.0, 0.0), out)


def truncation_levels(n_th: float, n_max: int = 0, tail: float = 1e-12) -> int:
    """Number of levels N so that the neglected probability is below ``tail``.

    At any time after starting from photon numbers ``<= n_max`` the photon
    number is at most ``n_max`` surviving photons plus a thermal part whose
    law is geometric with mean ``<= n_th`` (the stationary law is the worst
    case).  So ``P(n >= N) <= r^(N - n_max)`` with ``r = n_th / (1 + n_th)``,
    and ``N = n_max + ceil(log(tail) / log(r))`` levels suffice (at least
    ``n_max + 2``).

    Parameters
    ----------
    n_th : float
        Mean thermal photon number (>= 0).
    n_max : int
        Largest photon number present initially or observed in the data.
    tail : float
        Bound on the neglected stationary probability.
    """
    if n_th < 0 or not math.isfinite(n_th):
        raise ValueError("n_th must be finite and >= 0")
    if not 0 < tail < 1:
        raise ValueError("tail must lie in (0, 1)")
    if n_th == 0:
        return int(n_max) + 2
    r = n_th / (1.0 + n_th)
    extra = math.ceil(math.log(tail) / math.log(r))
    return int(n_max) + max(extra, 2)


def check_levels(n_levels: int, n_th: float | None = None, limit: int = MAX_LEVELS) -> int:
    """``n_levels`` if it is at most ``limit`` (default :data:`MAX_LEVELS`); else an
    InputError that says what asked for so many levels (``n_th`` when given).

    For entry points whose truncation follows from user input (simulators,
    planners, the sampled-record fit), called before anything is allocated."""
    if n_levels <= limit:
        return int(n_levels)
    from cavchar.errors import InputError

    cause = "" if n_th is None else f" (n_th = {n_th:.3g})"
    raise InputError(f"the photon number would need {n_levels:,} levels{cause}, more than "
                     f"the {limit} cavchar handles",
                     hint="check the thermal photon number, the initial photon number and "
                     "their units; a cavity at millikelvin needs far fewer levels")


def rate_matrix(kappa: float, n_th: float, n_levels: int) -> np.ndarray:
    """Truncated generator ``Q`` (shape (N, N), rows summing to 0), see module docstring."""
    n = np.arange(n_levels)
    up = up_rate(kappa, n_th, n[:-1])
    down = down_rate(kappa, n_th, n[1:])
    q = np.diag(up, 1) + np.diag(down, -1)
    q -= np.diag(q.sum(axis=1))
    return q


def stationary_distribution(n_th: float, n_levels: int) -> np.ndarray:
    """Stationary law of the truncated chain: Bose–Einstein renormalised on 0..N-1."""
    p = bose_einstein(n_th, np.arange(n_levels))
    return p / p.sum()


def _symmetric_parts(kappa: np.ndarray, n_th: np.ndarray, n_levels: int):
    """Diagonal (k, N), off-diagonal (k, N-1) of S and sqrt(pi) (k, N), batched."""
    n = np.arange(n_levels, dtype=float)
    a = (kappa * n_th)[:, None]
    b = (kappa * (1.0 + n_th))[:, None]
    up = a * (n + 1)
    up[:, -1] = 0.0
    diag = -(up + b * n)
    off = np.sqrt(a * b) * n[1:]
    # log sqrt(pi_n) = n/2 log r, up to normalisation (which cancels in P)
    log_ratio = np.log(n_th / (1.0 + n_th))[:, None]
    sqrt_pi = np.exp(0.5 * n * log_ratio)
    return diag, off, sqrt_pi


def _tridiagonal_stack(diag: np.ndarray, off: np.ndarray) -> np.ndarray:
    """Symmetric tridiagonal matrices (k, N, N) from diagonals (k, N) and off-diagonals (k, N-1)."""
    k, n_levels = diag.shape
    sym = np.zeros((k, n_levels, n_levels))
    idx = np.arange(n_levels)
    sym[:, idx, idx] = diag
    sym[:, idx[:-1], idx[1:]] = off
    sym[:, idx[1:], idx[:-1]] = off
    return sym


def symmetric_eigen_batch(
    kappa: ArrayLike, n_th: ArrayLike, n_levels: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Eigen-decomposition of the symmetrized generator for a batch of parameter sets.

    Returns ``(lam, vecs, half_log_r)`` with ``lam`` (k, N) <= 0, ``vecs`` (k, N, N) and
    ``half_log_r = ln(n_th / (1 + n_th)) / 2`` (k,), so that (module docstring)
    ``P(dt)[i, j] = exp(half_log_r (j - i)) sum_m vecs[i, m] vecs[j, m] exp(lam_m dt)``.
    Needs ``n_th > 0``.
    """
    kappa = np.atleast_1d(np.asarray(kappa, dtype=float))
    n_th = np.atleast_1d(np.asarray(n_th, dtype=float))
    diag, off, _ = _symmetric_parts(kappa, n_th, n_levels)
    lam, vecs = np.linalg.eigh(_tridiagonal_stack(diag, off))
    return np.minimum(lam, 0.0), vecs, 0.5 * np.log(n_th / (1.0 + n_th))


def _amplification(n_th: float, rows: np.ndarray) -> np.ndarray:
    """Rounding amplification ``sqrt(pi_0 / pi_i) = r^(-i/2)`` of row ``i`` in the eigen route.

    The absolute error of ``P(dt)[i, j]`` computed through the symmetric
    eigen-decomposition is about ``eps * sqrt(pi_j / pi_i) <= eps * r^(-i/2)``.
    """
    if n_th <= 0:
        return np.full(np.shape(rows), np.inf)
    with np.errstate(over="ignore"):
        return np.exp(-0.5 * np.asarray(rows, dtype=float) * math.log(n_th / (1.0 + n_th)))


class DampedModePropagator:
    """Transition matrices and populations of the truncated damped mode.

    Parameters
    ----------
    kappa : float
        Energy damping rate 1/T_c in 1/s.
    n_th : float
        Mean thermal photon number of the bath.
    n_levels : int
        Number of photon-number levels N (see :func:`truncation_levels`).
    n_max : int, optional
        Highest photon number from which transitions must be accurate
        (default: every level).  The eigen route is used when its rounding
        error ``eps * r^(-n_max/2)`` (module docstring) is below 1e-11, else
        scaling-and-squaring ``expm``.

    Attributes
    ----------
    eigenvalues, right, left : ndarray or None
        ``P(dt) = right @ diag(exp(eigenvalues dt)) @ left`` (None when n_th = 0).
    method : str
        Route used by :meth:`transition_matrices`: ``"eigen"`` or ``"expm"``.
    """

    def __init__(self, kappa: float, n_th: float, n_levels: int, n_max: int | None = None) -> None:
        if not (kappa > 0 and n_th >= 0 and n_levels >= 2):
            raise ValueError("need kappa > 0, n_th >= 0 and at least 2 levels")
        self.kappa = float(kappa)
        self.n_th = float(n_th)
        self.n_levels = int(n_levels)
        self.rates = rate_matrix(self.kappa, self.n_th, self.n_levels)
        n_max = self.n_levels - 1 if n_max is None else min(int(n_max), self.n_levels - 1)
        self.eigenvalues = self.right = self.left = None
        top = _amplification(self.n_th, np.array(self.n_levels - 1))
        if np.isfinite(top) and top < 1e150:
            diag, off, sqrt_pi = _symmetric_parts(
                np.array([self.kappa]), np.array([self.n_th]), self.n_levels
            )
            lam, vecs = linalg.eigh_tridiagonal(diag[0], off[0])
            self.eigenvalues = np.minimum(lam, 0.0)
            self.right = vecs / sqrt_pi[0][:, None]
            self.left = vecs.T * sqrt_pi[0][None, :]
        accurate = self._eigen_ok(_amplification(self.n_th, np.array(n_max)))
        self.method = "eigen" if accurate else "expm"

    def _eigen_ok(self, amplification: float) -> bool:
        return self.right is not None and _EPS * float(amplification) <= _EIGEN_TOLERANCE

    def transition_matrices(self, dts: ArrayLike) -> np.ndarray:
        """``P(dt)`` for every dt; shape (m, N, N), entries clipped to [0, 1]."""
        dts = np.atleast_1d(np.asarray(dts, dtype=float))
        if np.any(dts < 0):
            raise ValueError("time steps must be >= 0")
        if self.method == "eigen":
            decay = np.exp(np.multiply.outer(dts, self.eigenvalues))
            out = np.einsum("ik,mk,kj->mij", self.right, decay, self.left, optimize=True)
        else:
            out = np.stack([linalg.expm(self.rates * dt) for dt in dts])
        return np.clip(out, 0.0, 1.0)

    def populations(self, p0: ArrayLike, times: ArrayLike) -> np.ndarray:
        """Populations ``p(t) = p0 @ P(t)`` at each time; shape (m, N).

        ``p0`` is the initial distribution over 0..N-1 (shorter vectors are
        padded with zeros).  The eigen route (one (m, N) exponential and two
        matrix products, whatever m is) is used when its rounding error
        ``eps * sum_i p0_i r^(-i/2)`` is below 1e-11; otherwise ``expm``.
        """
        p0 = self._pad(p0)
        times = np.atleast_1d(np.asarray(times, dtype=float))
        row_amplification = _amplification(self.n_th, np.arange(self.n_levels))
        occupied = p0 > 0
        amplification = float(np.sum(p0[occupied] * row_amplification[occupied]))
        if self._eigen_ok(amplification):
            coeff = p0 @ self.right  # (N,)
            decay = np.exp(np.multiply.outer(times, self.eigenvalues))  # (m, N)
            out = (decay * coeff) @ self.left
        else:
            out = np.stack([p0 @ linalg.expm(self.rates * t) for t in times])
        return np.clip(out, 0.0, 1.0)

    def _pad(self, p0: ArrayLike) -> np.ndarray:
        p0 = np.asarray(p0, dtype=float)
        if p0.ndim != 1 or p0.size > self.n_levels:
            raise ValueError(f"initial distribution must be a vector of <= {self.n_levels} values")
        out = np.zeros(self.n_levels)
        out[: p0.size] = p0
        return out


def transition_matrices_batch(
    kappa: ArrayLike, n_th: ArrayLike, n_levels: int, dts: ArrayLike, n_max: int | None = None
) -> np.ndarray:
    """Transition matrices for a batch of parameter sets: shape (k, m, N, N).

    One batched symmetric eigen-decomposition (``numpy.linalg.eigh`` on the
    (k, N, N) stack) serves all m time steps of each parameter set.  Parameter
    sets whose eigen route would lose accuracy on rows up to ``n_max``
    (default: all rows; see :class:`DampedModePropagator`) use ``expm`` instead.
    """
    kappa = np.atleast_1d(np.asarray(kappa, dtype=float))
    n_th = np.atleast_1d(np.asarray(n_th, dtype=float))
    dts = np.atleast_1d(np.asarray(dts, dtype=float))
    k = kappa.size
    out = np.empty((k, dts.size, n_levels, n_levels))
    n_max = n_levels - 1 if n_max is None else min(int(n_max), n_levels - 1)
    amp = np.array([float(_amplification(x, np.array(n_max))) for x in n_th])
    good = _EPS * amp <= _EIGEN_TOLERANCE
    if np.any(good):
        diag, off, sqrt_pi = _symmetric_parts(kappa[good], n_th[good], n_levels)
        lam, vecs = np.linalg.eigh(_tridiagonal_stack(diag, off))
        lam = np.minimum(lam, 0.0)
        right = vecs / sqrt_pi[:, :, None]
        left = np.swapaxes(vecs, 1, 2) * sqrt_pi[:, None, :]
        decay = np.exp(lam[:, None, :] * dts[None, :, None])  # (kg, m, N)
        out[good] = np.einsum("gik,gmk,gkj->gmij", right, decay, left, optimize=True)
    for i in np.flatnonzero(~good):
        q = rate_matrix(kappa[i], n_th[i], n_levels)
        out[i] = np.stack([linalg.expm(q * dt) for dt in dts])
    return np.clip(out, 0.0, 1.0)


def populations(
    kappa: float,
    n_th: float,
    p0: ArrayLike,
    times: ArrayLike,
    n_levels: int | None = None,
) -> np.ndarray:
    """Populations at each time from the initial distribution ``p0``; shape (m, N).

    ``n_levels`` defaults to :func:`truncation_levels` with the largest
    occupied initial level, so the neglected tail is below 1e-12.
    """
    p0 = np.asarray(p0, dtype=float)
    if n_levels is None:
        occupied = np.flatnonzero(p0 > 0)
        n_max = int(occupied[-1]) if occupied.size else 0
        n_levels = max(truncation_levels(n_th, n_max), p0.size)
    return DampedModePropagator(kappa, n_th, n_levels, n_max=0).populations(p0, times)


def mean_photon_number(
    times: ArrayLike, kappa: ArrayLike, n_th: ArrayLike, n0: ArrayLike
) -> np.ndarray:
    """Closed form ``<n>(t) = n_th + (n0 - n_th) exp(-kappa t)`` (exact, no truncation)."""
    t = np.asarray(times, dtype=float)
    return np.asarray(n_th) + (np.asarray(n0) - np.asarray(n_th)) * np.exp(-np.asarray(kappa) * t)
