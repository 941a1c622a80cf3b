"""Exponential sums of a trace, compressed so that one evaluation costs no pass over the data.

Every exponential ring-down model with linear amplitudes and floor needs only
two functions of a (possibly complex) rate ``r`` (Golub & Pereyra 1973: the
linear parameters are solved for exactly at each rate):

    S_w(r) = sum_i w_i exp(-r tau_i)          S_y(r) = sum_i w_i y_i exp(-r tau_i)

(the Gram matrix of ``exp(-r_j tau)`` and ``exp(-r_l tau)`` is ``S_w(r_j + r_l)``,
a floor is the rate 0), plus the constant ``sum_i w_i |y_i|^2``.

Compression (exact to rounding).  Cut the time axis into bins of half-width
``h`` with centres ``c_b`` and write ``tau_i = c_b + h u_i`` with
``|u_i| <= 1``.  Then

    sum_{i in b} w_i y_i e^{-r tau_i} = e^{-r c_b} sum_{m=0}^{M-1} (-r h)^m / m! * Y_bm,
    Y_bm = sum_{i in b} w_i y_i u_i^m,

with a Taylor remainder per point of at most ``rho^M e^rho / M!`` relative to
``|w_i y_i| e^{-Re(r) tau_i}`` for ``|r| h <= rho``.  With ``rho = 1/2`` and
``M = 16`` this is 1.2e-18, far below double rounding, so the compressed sums
equal the brute-force sums to rounding for every rate with
``|r| <= rate_limit = rho / h``.  Rates beyond the limit are summed directly
(exact, one pass over the data each), so the result never depends on the
compression; only the speed does.  The moments cost one compiled pass over
the data (``2 M`` multiply-adds per point, any order of the times); an
evaluation then costs ``O(B M)`` for ``B`` bins instead of ``O(n)``.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit
from numpy.typing import ArrayLike

__all__ = ["ExponentialSums", "TAYLOR_ORDER", "TAYLOR_RHO", "taylor_remainder_bound"]

#: number of Taylor terms M and largest |r h| of the compressed evaluation
TAYLOR_ORDER = 16
TAYLOR_RHO = 0.5
#: below this many points per bin on average the compression does not pay
_MIN_POINTS_PER_BIN = 32
#: largest (rates x points) block summed at once by the direct route
_BLOCK = 2_000_000


@njit(cache=True, nogil=True)
def _real_moment_sums(rates, centres, half, moments):  # pragma: no cover - compiled
    """Compiled form of the compressed sums for real rates and real moments (B, 2M)."""
    k = rates.size
    n_bins, two_m = moments.shape
    order = two_m // 2
    sw = np.zeros(k)
    sy = np.zeros(k)
    for i in range(k):
        r = rates[i]
        x = -r * half
        acc_w = 0.0
        acc_y = 0.0
        for b in range(n_bins):
            pw = moments[b, order - 1]
            py = moments[b, two_m - 1]
            for m in range(order - 2, -1, -1):  # Horner in x = -r h
                pw = pw * x + moments[b, m]
                py = py * x + moments[b, order + m]
            e = np.exp(-r * centres[b])
            acc_w += e * pw
            acc_y += e * py
        sw[i] = acc_w
        sy[i] = acc_y
    return sw, sy


@njit(cache=True, nogil=True)
def _bin_moments(tau, w, y_re, y_im, lo, width, n_bins, order):  # pragma: no cover - compiled
    """One pass: ``sum w u^m``, ``sum w y u^m`` per bin, ``u = (tau - centre) / half``."""
    mw = np.zeros((n_bins, order))
    my_re = np.zeros((n_bins, order))
    my_im = np.zeros((n_bins, order) if y_im.size else (0, order))
    half = 0.5 * width
    complex_y = y_im.size > 0
    for i in range(tau.size):
        b = int((tau[i] - lo) / width)
        b = min(max(b, 0), n_bins - 1)
        u = (tau[i] - (lo + (b + 0.5) * width)) / half
        p = w[i]
        yr = y_re[i]
        if complex_y:
            yi = y_im[i]
            for m in range(order):
                mw[b, m] += p
                my_re[b, m] += p * yr
                my_im[b, m] += p * yi
                p *= u
        else:
            for m in range(order):
                mw[b, m] += p
                my_re[b, m] += p * yr
                p *= u
    return mw, my_re, my_im


def taylor_remainder_bound(order: int = TAYLOR_ORDER, rho: float = TAYLOR_RHO) -> float:
    """Bound ``rho^M e^rho / M!`` on the relative Taylor remainder of ``exp(-x)``, |x| <= rho."""
    return rho**order * math.exp(rho) / math.factorial(order)


class ExponentialSums:
    """``S_w(r)`` and ``S_y(r)`` of one trace for any array of rates (see module docstring).

    Parameters
    ----------
    tau : array, shape (n,)
        Times since the reference time ``t0``, in s (any order, any spacing).
    y : array, shape (n,)
        Data (real or complex).
    weights : array, shape (n,), optional
        Weights ``w_i`` (``1 / sigma_i^2`` for known per-point noise); default 1.
    rate_limit : float, optional
        Largest ``|r|`` (1/s) served from the compressed moments.  ``None``:
        no compression (every evaluation sums directly).
    offset : float or complex
        Constant subtracted from ``y`` before summing (the sums are those of
        ``y - offset``).  Models with a free floor are exactly invariant to it;
        subtracting a floor estimate keeps ``sum w y^2`` small, so the residual
        sum ``sum w y^2 - b^T G^{-1} b`` loses fewer digits.

    Attributes
    ----------
    n : int
        Number of points.
    sum_w, sum_y, sum_yy : float
        ``S_w(0)``, ``S_y(0)`` and ``sum_i w_i |y_i|^2``.
    compressed : bool
        Whether evaluations with ``|r| <= rate_limit`` use the moments.
    n_bins : int
        Number of bins ``B`` (0 when not compressed).
    """

    def __init__(
        self,
        tau: ArrayLike,
        y: ArrayLike,
        weights: ArrayLike | None = None,
        *,
        rate_limit: float | None = None,
        offset: float | complex = 0.0,
    ) -> None:
        tau = np.ascontiguousarray(tau, dtype=float)
        y = np.asarray(y)
        y = np.ascontiguousarray(y, dtype=complex if np.iscomplexobj(y) else float)
        self.offset = offset
        if offset != 0:
            y = y - offset
        w = np.ones_like(tau) if weights is None else np.ascontiguousarray(weights, dtype=float)
        if tau.ndim != 1 or y.shape != tau.shape or w.shape != tau.shape:
            raise ValueError("tau, y and weights must be 1-D arrays of one length")
        self.tau, self.y, self.w = tau, y, w
        self.wy = w * y
        self.n = tau.size
        self.sum_w = float(w.sum())
        self.sum_y = self.wy.sum()
        self.sum_yy = float(np.sum(w * (y.real**2 + y.imag**2))) if y.dtype.kind == "c" \
            else float(np.dot(self.wy, y))
        self.rate_limit = math.inf
        self.compressed = False
        self.n_bins = 0
        if rate_limit is not None and self.n > 0:
            self._compress(float(rate_limit))

    def _compress(self, rate_limit: float) -> None:
        lo, hi = float(self.tau.min()), float(self.tau.max())
        span = hi - lo
        n_bins = max(1, math.ceil(span * rate_limit / (2 * TAYLOR_RHO))) if span > 0 else 1
        if self.n < _MIN_POINTS_PER_BIN * n_bins:
            return  # the direct sum is as cheap: stay uncompressed
        width = span / n_bins if span > 0 else 1.0
        half = 0.5 * width  # <= TAYLOR_RHO / rate_limit
        complex_y = self.y.dtype.kind == "c"
        y_re = np.ascontiguousarray(self.y.real)
        y_im = np.ascontiguousarray(self.y.imag) if complex_y else y_re[:0]
        mw, my_re, my_im = _bin_moments(self.tau, self.w, y_re, y_im, lo, width, n_bins,
                                        TAYLOR_ORDER)
        used = mw[:, 0] > 0  # weights are positive: empty bins have no weight
        my = my_re[used] + 1j * my_im[used] if complex_y else my_re[used]
        inv_factorial = 1.0 / np.array([math.factorial(m) for m in range(TAYLOR_ORDER)])
        # moments scaled by 1/m!, laid out (B, 2M): weight moments, then data moments
        self.moments = np.concatenate([mw[used].astype(my.dtype), my], axis=1)
        self.moments *= np.concatenate([inv_factorial, inv_factorial])
        self.centres = lo + (np.flatnonzero(used) + 0.5) * width
        self.half_width = half
        self.rate_limit = TAYLOR_RHO / half
        self._real = self.moments.dtype.kind == "f"
        self.compressed = True
        self.n_bins = int(used.sum())

    def __call__(self, rates: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
        """``(S_w(r), S_y(r))`` for every rate; arrays of the shape of ``rates``.

        ``rates`` in 1/s, real or complex (complex rates give complex sums).
        """
        r = np.asarray(rates)
        if (self.compressed and r.ndim == 1 and r.dtype.kind == "f" and r.size
                and np.max(np.abs(r)) <= self.rate_limit):
            if self._real:  # the common case: one compiled call
                return _real_moment_sums(r, self.centres, self.half_width, self.moments)
            return self._moment_sums(r)
        shape = r.shape
        r = r.ravel()
        cdtype = complex if (r.dtype.kind == "c" or self.y.dtype.kind == "c") else float
        wdtype = complex if r.dtype.kind == "c" else float
        out_w = np.empty(r.size, dtype=wdtype)
        out_y = np.empty(r.size, dtype=cdtype)
        fast = np.abs(r) <= self.rate_limit if self.compressed else np.zeros(r.size, bool)
        if fast.any():
            if self._real and r.dtype.kind == "f":
                sw, sy = _real_moment_sums(np.ascontiguousarray(r[fast]), self.centres,
                                           self.half_width, self.moments)
            else:
                sw, sy = self._moment_sums(r[fast])
            out_w[fast] = sw if wdtype is complex else sw.real
            out_y[fast] = sy if cdtype is complex else sy.real
        slow = ~fast
        if slow.any():
            sw, sy = self.direct(r[slow])
            out_w[slow] = sw
            out_y[slow] = sy
        return out_w.reshape(shape), out_y.reshape(shape)

    def _moment_sums(self, r: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        expo = np.exp(np.multiply.outer(-r, self.centres))  # (k, B)
        proj = np.einsum("kb,bm->km", expo, self.moments)  # (k, 2M), no threaded BLAS
        powers = np.vander(-r * self.half_width, TAYLOR_ORDER, increasing=True)  # (k, M)
        sw = (proj[:, :TAYLOR_ORDER] * powers).sum(axis=1)
        sy = (proj[:, TAYLOR_ORDER:] * powers).sum(axis=1)
        if r.dtype.kind == "f":
            sw = sw.real
            if self._real:
                sy = sy.real
        return sw, sy

    def direct(self, rates: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
        """Brute-force sums (one pass over the data per rate); the reference for tests."""
        r = np.atleast_1d(np.asarray(rates))
        cdtype = complex if (r.dtype.kind == "c" or self.y.dtype.kind == "c") else float
        sw = np.empty(r.size, dtype=complex if r.dtype.kind == "c" else float)
        sy = np.empty(r.size, dtype=cdtype)
        step = max(1, _BLOCK // max(self.n, 1))
        for start in range(0, r.size, step):
            block = r[start:start + step]
            e = np.exp(-np.multiply.outer(block, self.tau))  # (kb, n)
            # einsum, not BLAS: threaded BLAS on a busy shared machine stalls on these
            sw[start:start + step] = np.einsum("kn,n->k", e, self.w)
            sy[start:start + step] = np.einsum("kn,n->k", e, self.wy)
        return sw, sy
