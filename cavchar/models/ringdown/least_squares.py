"""Least-squares fits of sums of exponentials by variable projection.

Model (``tau = t - t0``, rates ``r_j > 0`` in 1/s)::

    y(t) = sum_{j=1}^{m} A_j exp(-r_j tau) [+ F] + noise

The amplitudes ``A_j`` and the floor ``F`` enter linearly.  Variable
projection (Golub & Pereyra, SIAM J. Numer. Anal. 10, 413 (1973)) solves for
them exactly at every set of rates, so only the rates are searched:

    minimize_r  || P_perp(r) W^{1/2} y ||^2,     P_perp = I - Phi Phi^+,

with ``Phi`` the weighted design matrix (columns ``exp(-r_j tau)`` and 1).
Nothing depends on a user guess:

1. a coarse grid over ``ln r`` (all ordered combinations of ``m`` grid rates,
   on a bin-averaged copy of long traces) gives the starts;
2. each of the best starts is refined: for short traces by
   Levenberg–Marquardt on the projected residual with the exact Golub–Pereyra
   Jacobian; for long traces on the compressed exponential sums of
   :mod:`cavchar.models.ringdown.exponential_sums` (bounded Brent search for one rate,
   Nelder–Mead for several), then polished by Gauss–Newton steps on the full
   data;
3. the covariance of all parameters is ``(J^T W J)^{-1}`` from the full
   Jacobian ``J`` at the optimum (pseudo-inverse by SVD), times the residual
   variance ``RSS / (n - p)`` unless ``absolute_sigma`` (the conventions of
   ``scipy.optimize.curve_fit``).

Several traces sharing one rate: :mod:`cavchar.models.ringdown.shared_rate`.

Parameter order of :attr:`ExponentialFit.params`: ``A_1, r_1, ..., A_m, r_m``
and then ``F`` (rates ascending: slowest decay first).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from numba import njit
from numpy.typing import ArrayLike
from scipy import optimize

from cavchar.errors import InputError
from cavchar.models.ringdown.exponential_sums import ExponentialSums

__all__ = ["ExponentialFit", "fit_exponentials", "profile_objective", "gram_matrices",
           "validate_trace"]

#: traces longer than this are refined on compressed sums instead of full residuals
LONG_TRACE = 4096
#: traces longer than this are bin-averaged to this many points for the grid search
GRID_POINTS = 2048
_GRID_SIZE = {1: 64, 2: 32, 3: 22}


@dataclass(frozen=True)
class ExponentialFit:
    """Result of :func:`fit_exponentials`.

    Attributes
    ----------
    rates, amplitudes : ndarray, shape (m,)
        Decay rates in 1/s (ascending) and amplitudes at ``t0`` (data units).
    floor : float
        Constant floor (0 when not fitted).
    has_floor : bool
    t0 : float
        Reference time in s.
    covariance : ndarray, shape (p, p)
        Covariance of :attr:`params`.
    rss : float
        Weighted residual sum of squares (chi-square when ``sigma`` was given).
    n_points, dof : int
        Number of points and ``n - p``.
    at_grid_edge : bool
        The slowest rate sits at the low end of the search range (the trace
        barely decays over its span) or the fastest at the high end.
    """

    rates: np.ndarray
    amplitudes: np.ndarray
    floor: float
    has_floor: bool
    t0: float
    covariance: np.ndarray
    rss: float
    n_points: int
    dof: int
    absolute_sigma: bool
    at_grid_edge: bool
    method: str
    sums: ExponentialSums | None = field(default=None, repr=False, compare=False)

    @property
    def n_exp(self) -> int:
        """Number of exponentials in the fit."""
        return int(self.rates.size)

    @property
    def params(self) -> np.ndarray:
        """``A_1, r_1, ..., A_m, r_m[, F]``."""
        out = np.column_stack([self.amplitudes, self.rates]).ravel()
        return np.append(out, self.floor) if self.has_floor else out

    @property
    def stderr(self) -> np.ndarray:
        """Standard errors of the parameters: square roots of the covariance diagonal."""
        return np.sqrt(np.clip(np.diag(self.covariance), 0.0, None))

    @property
    def lifetimes(self) -> np.ndarray:
        """Energy lifetimes ``1 / r_j`` in s (for power-like data)."""
        return 1.0 / self.rates

    @property
    def lifetime_sd(self) -> np.ndarray:
        """Standard error of ``1 / r_j`` by the delta method: ``sd(r) / r^2``."""
        return self.stderr[1:2 * self.n_exp:2] / self.rates**2

    @property
    def amplitude_significance(self) -> float:
        """Smallest ``|A_j| / sd(A_j)``: a trace that does not decay has a small value."""
        sd = self.stderr[0:2 * self.n_exp:2]
        with np.errstate(divide="ignore", invalid="ignore"):
            z = np.abs(self.amplitudes) / sd
        return float(np.nanmin(z)) if z.size else math.nan

    @property
    def reduced_chi2(self) -> float:
        """Residual sum of squares per degree of freedom (NaN without degrees of freedom)."""
        return self.rss / self.dof if self.dof > 0 else math.nan


@njit(cache=True, nogil=True)
def _normal_equations(tau, y, w, amps, rates, floor_value, has_floor
                      ):  # pragma: no cover - compiled; checked against the SVD route
    """One pass: ``J^T W J``, ``J^T W r`` and ``r^T W r`` of the model in
    ``A_1, r_1, ..., A_m, r_m[, F]`` at the given parameters."""
    m = rates.size
    p = 2 * m + (1 if has_floor else 0)
    jtj = np.zeros((p, p))
    jtr = np.zeros(p)
    col = np.empty(p)
    rss = 0.0
    for i in range(tau.size):
        t = tau[i]
        model = floor_value if has_floor else 0.0
        for j in range(m):
            e = np.exp(-rates[j] * t)
            model += amps[j] * e
            col[2 * j] = e
            col[2 * j + 1] = -amps[j] * t * e
        if has_floor:
            col[p - 1] = 1.0
        wi = w[i]
        res = y[i] - model
        rss += wi * res * res
        for a in range(p):
            ca = wi * col[a]
            jtr[a] += ca * res
            for b in range(a + 1):
                jtj[a, b] += ca * col[b]
    for a in range(p):
        for b in range(a):
            jtj[b, a] = jtj[a, b]
    return jtj, jtr, rss


@njit(cache=True, nogil=True)
def _bin_sums(tau, y, w, lo, width, n_bins):  # pragma: no cover - compiled
    """Per-bin ``sum w``, ``sum w tau``, ``sum w y`` (for the grid search)."""
    out = np.zeros((3, n_bins))
    for i in range(tau.size):
        b = min(max(int((tau[i] - lo) / width), 0), n_bins - 1)
        out[0, b] += w[i]
        out[1, b] += w[i] * tau[i]
        out[2, b] += w[i] * y[i]
    return out


def _design(tau: np.ndarray, rates: np.ndarray, floor: bool) -> np.ndarray:
    """Columns ``exp(-r_j tau)`` (and 1); rates may be batched: (..., m) -> (..., n, p)."""
    rates = np.asarray(rates, dtype=float)
    cols = np.exp(-rates[..., None, :] * tau[:, None])
    if floor:
        ones = np.ones(cols.shape[:-1] + (1,))
        cols = np.concatenate([cols, ones], axis=-1)
    return cols


def validate_trace(t: ArrayLike, y: ArrayLike, sigma: ArrayLike | None, n_params: int):
    """Check one trace; return flat ``(t, y, w)`` with weights ``w = 1/sigma^2`` (ones if None).

    Refuses (InputError) unequal lengths, non-finite numbers, no more points than
    ``n_params``, all points at one time and a sigma that is not finite and > 0."""
    t = np.asarray(t, dtype=float).ravel()
    y = np.asarray(y, dtype=float).ravel()
    if t.shape != y.shape:
        raise InputError(f"times and values differ in length ({t.size} and {y.size})")
    if not (np.isfinite(t).all() and np.isfinite(y).all()):
        raise InputError("times and values must be finite numbers",
                         hint="remove or fill NaN/inf samples")
    if t.size <= n_params:
        raise InputError(f"{t.size} points are too few to fit {n_params} parameters",
                         hint=f"give at least {n_params + 1} points")
    if np.ptp(t) <= 0:
        raise InputError("all samples are at one time: nothing decays")
    if sigma is None:
        w = np.ones_like(t)
    else:
        s = np.broadcast_to(np.asarray(sigma, dtype=float), t.shape)
        if not (np.isfinite(s).all() and (s > 0).all()):
            raise InputError("per-point uncertainties must be finite and > 0")
        w = 1.0 / s**2
    return t, y, w


def _default_rate_range(tau: np.ndarray) -> tuple[float, float]:
    span = float(np.ptp(tau))
    # a rough typical step is enough for the search range: median of a subsample
    sub = tau[:: max(1, tau.size // 20_000)]
    steps = np.diff(np.sort(sub))
    steps = steps[steps > 0]
    dt = float(np.median(steps)) * sub.size / tau.size if steps.size else span
    return 0.05 / span, 2.0 / dt


def _bin_average(tau: np.ndarray, y: np.ndarray, w: np.ndarray, n_bins: int):
    """Weighted bin averages (for the grid search only)."""
    lo, span = float(tau.min()), float(np.ptp(tau))
    sw, swt, swy = _bin_sums(tau, y, w, lo, span / n_bins, n_bins)
    keep = sw > 0
    return swt[keep] / sw[keep], swy[keep] / sw[keep], sw[keep]


def _grid_starts(tau, y, w, n_exp, floor, rate_range, grid_size, n_best):
    """Best ``n_best`` ordered rate combinations on a log grid, by projected RSS."""
    if tau.size > GRID_POINTS:
        tau, y, w = _bin_average(tau, y, w, GRID_POINTS)
        rate_range = (rate_range[0], min(rate_range[1], 2.0 * tau.size / np.ptp(tau)))
    grid = np.geomspace(rate_range[0], rate_range[1], grid_size)
    combos = np.array(list(itertools.combinations(range(grid_size), n_exp)))
    sw = np.sqrt(w)
    yw = y * sw
    rss = np.empty(len(combos))
    block = max(1, 4_000_000 // (tau.size * (n_exp + 1)))
    for s in range(0, len(combos), block):
        phi = _design(tau, grid[combos[s:s + block]], floor) * sw[:, None]
        q, _ = np.linalg.qr(phi)
        proj = np.einsum("cnp,n->cp", q, yw)
        rss[s:s + block] = yw @ yw - np.sum(proj**2, axis=1)
    order = np.argsort(rss)[:n_best]
    return grid[combos[order]], grid


class _Projection:
    """Projected residual and its Golub–Pereyra Jacobian in ``theta = ln r`` (short traces)."""

    def __init__(self, tau, y, w, n_exp, floor):
        self.tau, self.sw, self.n_exp, self.floor = tau, np.sqrt(w), n_exp, floor
        self.yw = y * self.sw
        self._cache: tuple | None = None

    def _solve(self, theta):
        if self._cache is not None and np.array_equal(self._cache[0], theta):
            return self._cache[1]
        rates = np.exp(theta)
        phi = _design(self.tau, rates, self.floor) * self.sw[:, None]
        q, r = np.linalg.qr(phi)
        coef = np.linalg.solve(r, np.einsum("np,n->p", q, self.yw))
        res = self.yw - np.einsum("np,p->n", phi, coef)
        out = (rates, phi, q, r, coef, res)
        self._cache = (np.array(theta), out)
        return out

    def residual(self, theta):
        return self._solve(theta)[5]

    def jacobian(self, theta):
        rates, phi, q, r, coef, res = self._solve(theta)
        jac = np.empty((self.tau.size, self.n_exp))
        for k in range(self.n_exp):
            d = -rates[k] * self.tau * phi[:, k]  # d phi_k / d ln r_k (weighted)
            a = coef[k] * d
            a = a - np.einsum("np,p->n", q, np.einsum("np,n->p", q, a))
            e = np.zeros(r.shape[0])
            e[k] = np.einsum("n,n->", d, res)
            b = np.einsum("np,p->n", q, np.linalg.solve(r.T, e))
            jac[:, k] = -(a + b)
        return jac


def profile_objective(sums: Sequence[ExponentialSums], rates: np.ndarray, floor: bool,
                      fitted_sigma: bool) -> np.ndarray:
    """Profiled objective of shared rates over several traces, batched: (k, m) -> (k,).

    For each trace the linear parameters are solved exactly from the sums
    ``S_w`` and ``S_y`` (Gram ``G_jl = S_w(r_j + r_l)``, right side ``S_y(r_j)``,
    the floor being the rate 0); the trace's weighted residual sum of squares
    is ``sum w y^2 - b^T G^{-1} b``.  Returns ``sum_j RSS_j`` (known noise) or
    ``sum_j (n_j / 2) ln RSS_j`` (noise scale fitted per trace), ``inf`` where
    the Gram matrix is singular.
    """
    rates = np.atleast_2d(rates)
    total = np.zeros(rates.shape[0])
    for s in sums:
        gram, rhs = gram_matrices(s, rates, floor)
        with np.errstate(all="ignore"):
            try:
                coef = np.linalg.solve(gram, rhs[..., None])[..., 0]
                rss = s.sum_yy - np.sum(rhs * coef, axis=-1)
            except np.linalg.LinAlgError:
                rss = np.full(rates.shape[0], np.nan)
        rss = np.where(np.isfinite(rss), np.maximum(rss, 1e-300 * max(s.sum_yy, 1e-300)), np.inf)
        total += 0.5 * s.n * np.log(rss) if fitted_sigma else rss
    return total


def gram_matrices(s: ExponentialSums, rates: np.ndarray, floor: bool):
    """Gram matrices (k, p, p) and right sides (k, p) from the sums (batched rates (k, m))."""
    k, m = rates.shape
    p = m + int(floor)
    ext = np.concatenate([rates, np.zeros((k, 1))], axis=1) if floor else rates
    pair = ext[:, :, None] + ext[:, None, :]
    iu = np.triu_indices(p)
    gw, _ = s(pair[:, iu[0], iu[1]])
    gram = np.empty((k, p, p))
    gram[:, iu[0], iu[1]] = gw
    gram[:, iu[1], iu[0]] = gw
    _, rhs = s(ext)
    return gram, rhs


def _polish(tau, y, w, rates, floor, max_iter=12):
    """Gauss–Newton steps in the rates on the full data (SVD solves; short traces).

    Near the optimum the residual sum is flat to rounding (its relative
    rounding is about ``eps |y| / |r|``), so progress is judged by the steps:
    iterate while they shrink, stop below 1e-13 relative or when a step no
    longer shrinks, and reject a point whose residual sum rose by more than
    rounding.  Returns (rates, coef, weighted jacobian, rss).
    """
    sw = np.sqrt(w)
    m = rates.size
    best = None
    last = math.inf
    for _ in range(max_iter + 1):
        phi = _design(tau, rates, floor) * sw[:, None]
        coef = np.linalg.lstsq(phi, y * sw, rcond=None)[0]
        res = y * sw - np.einsum("np,p->n", phi, coef)
        rss = float(res @ res)
        if best is not None and rss > best[3] * (1 + 1e-9):
            break
        jac = _full_jacobian(tau, sw, rates, coef, floor)
        best = (rates, coef, jac, rss)
        step = np.linalg.lstsq(jac, res, rcond=None)[0][1:2 * m:2]
        size = float(np.max(np.abs(step) / rates))
        if not np.all(rates + step > 0) or size <= 1e-13 or size >= last:
            break
        last = size
        rates = rates + step
    return best


def _polish_normal(tau, y, w, rates, floor, sums=None, max_iter=3):
    """Gauss–Newton steps on the full data by scaled normal equations (long traces).

    Starts from the exact linear parameters at ``rates`` (from ``sums``); each
    step is one compiled pass over the data (``J^T W J``, ``J^T W r``, RSS),
    and the loop stops once a step is below 1e-3 of every parameter's standard
    error (then applied: quadratic convergence leaves ~1e-6 sd).
    Returns (rates, coef, J^T W J, rss).
    """
    m = rates.size
    sums = sums or ExponentialSums(tau, y, w)
    gram, rhs = gram_matrices(sums, rates[None], floor)
    coef = np.linalg.solve(gram[0], rhs[0])
    if floor:
        coef[m] += sums.offset  # the sums are those of y - offset
    params = np.concatenate([np.column_stack([coef[:m], rates]).ravel(), coef[m:]])
    best = None
    for it in range(max_iter + 1):
        amps, rts = params[0:2 * m:2], params[1:2 * m:2]
        jtj, grad, rss = _normal_equations(tau, y, w, amps, rts,
                                           float(params[-1]) if floor else 0.0, floor)
        if best is not None and rss > best[3]:
            break
        best = (rts.copy(), np.concatenate([amps, params[2 * m:]]), jtj, rss)
        if it == max_iter:
            break
        scale = 1.0 / np.sqrt(np.diag(jtj))
        inner = np.linalg.inv(jtj * np.outer(scale, scale))
        step = scale * (inner @ (scale * grad))
        sd = scale * np.sqrt(np.diag(inner))
        new = params + step
        if not np.all(new[1:2 * m:2] > 0):
            break
        if np.all(np.abs(step) <= 1e-3 * sd):
            # the residual sum drops by the Gauss-Newton prediction grad . step; the
            # curvature at the previous point serves the covariance
            best = (new[1:2 * m:2], np.concatenate([new[0:2 * m:2], new[2 * m:]]), jtj,
                    rss - float(grad @ step))
            break
        params = new
    return best


def _full_jacobian(tau, sw, rates, coef, floor):
    """Weighted Jacobian of the model in ``A_1, r_1, ..., A_m, r_m[, F]``, shape (n, p)."""
    m = rates.size
    jac = np.empty((tau.size, 2 * m + int(floor)), order="F")
    for j in range(m):
        e = np.exp(-rates[j] * tau)
        e *= sw
        jac[:, 2 * j] = e
        np.multiply(e, tau, out=jac[:, 2 * j + 1])
        jac[:, 2 * j + 1] *= -coef[j]
    if floor:
        jac[:, -1] = sw
    return jac


def _covariance(jac: np.ndarray) -> np.ndarray:
    """``(J^T J)^{-1}`` by the SVD pseudo-inverse (short traces)."""
    _, s, vt = np.linalg.svd(jac, full_matrices=False)
    keep = s > s[0] * np.finfo(float).eps * max(jac.shape)
    inv = np.zeros_like(s)
    inv[keep] = 1.0 / s[keep] ** 2
    return (vt.T * inv) @ vt


def fit_exponentials(
    t: ArrayLike,
    y: ArrayLike,
    n_exp: int = 1,
    *,
    floor: bool = True,
    sigma: ArrayLike | None = None,
    absolute_sigma: bool = True,
    t0: float | None = None,
    rate_range: tuple[float, float] | None = None,
    grid_size: int | None = None,
    n_starts: int | None = None,
) -> ExponentialFit:
    """Least-squares fit of ``sum_j A_j exp(-r_j (t - t0)) [+ F]`` by variable projection.

    Parameters
    ----------
    t, y : array, shape (n,)
        Times in s and values (any units).
    n_exp : int
        Number of exponentials ``m`` (1 to 3).
    floor : bool
        Fit a constant floor ``F``.
    sigma : array, shape (n,) or scalar, optional
        Per-point standard deviations; weights ``1 / sigma^2``.
    absolute_sigma : bool
        With ``sigma`` given, take it as the true noise (covariance
        ``(J^T W J)^{-1}``); otherwise, and always without ``sigma``, scale the
        covariance by ``RSS / (n - p)`` (as ``scipy.optimize.curve_fit``).
    t0 : float, optional
        Reference time of the amplitudes (default: the earliest time).
    rate_range : (float, float), optional
        Search range of the rates in 1/s (default ``0.05 / span`` to
        ``2 / median step``).
    grid_size, n_starts : int, optional
        Number of grid rates and of refined starts.

    Returns
    -------
    ExponentialFit
    """
    if n_exp not in (1, 2, 3):
        raise InputError(f"n_exp must be 1, 2 or 3, got {n_exp}")
    n_params = 2 * n_exp + int(floor)
    t, y, w = validate_trace(t, y, sigma, n_params)
    t0 = float(t.min()) if t0 is None else float(t0)
    tau = t - t0
    rate_range = _default_rate_range(tau) if rate_range is None else tuple(map(float, rate_range))
    grid_size = grid_size or _GRID_SIZE[n_exp]
    n_starts = n_starts or (3 if n_exp == 1 else 8 if tau.size <= LONG_TRACE else 4)
    starts, grid = _grid_starts(tau, y, w, n_exp, floor, rate_range, grid_size, n_starts)
    sums = None
    if tau.size <= LONG_TRACE:
        rates, method = _refine_short(tau, y, w, n_exp, floor, starts)
    else:
        rates, method, sums = _refine_long(tau, y, w, n_exp, floor, starts, grid)
    if tau.size <= LONG_TRACE:
        rates, coef, jac, rss = _polish(tau, y, w, rates, floor)
        curvature = None
    else:
        rates, coef, curvature, rss = _polish_normal(tau, y, w, rates, floor, sums)
    order = np.argsort(rates)
    perm = np.concatenate([np.column_stack([2 * order, 2 * order + 1]).ravel(),
                           [2 * n_exp] if floor else []]).astype(int)
    if curvature is None:
        cov = _covariance(jac[:, perm])
    else:
        jtj = curvature[np.ix_(perm, perm)]
        scale = 1.0 / np.sqrt(np.diag(jtj))
        cov = np.linalg.inv(jtj * np.outer(scale, scale)) * np.outer(scale, scale)
    dof = tau.size - n_params
    scaled = sigma is None or not absolute_sigma
    if scaled:
        cov = cov * (rss / dof if dof > 0 else math.inf)
    edge = bool(rates.min() <= grid[0] * 1.0001 or rates.max() >= grid[-1] * 0.9999)
    return ExponentialFit(
        rates=rates[order], amplitudes=coef[:n_exp][order],
        floor=float(coef[n_exp]) if floor else 0.0, has_floor=floor, t0=t0,
        covariance=cov, rss=rss, n_points=int(tau.size), dof=int(dof),
        absolute_sigma=not scaled, at_grid_edge=edge, method=method, sums=sums)


def _refine_short(tau, y, w, n_exp, floor, starts):
    proj = _Projection(tau, y, w, n_exp, floor)
    best, best_cost = None, math.inf
    for start in starts:
        try:
            sol = optimize.least_squares(proj.residual, np.log(start), jac=proj.jacobian,
                                         method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15,
                                         max_nfev=400 * n_exp)
        except (np.linalg.LinAlgError, ValueError):
            continue
        rates = np.exp(sol.x)
        if np.unique(np.round(np.log(rates), 9)).size < n_exp:
            continue  # two rates merged: a degenerate solution
        if sol.cost < best_cost:
            best, best_cost = rates, sol.cost
    if best is None:
        best = starts[0]
    return best, "variable projection, Levenberg-Marquardt with Golub-Pereyra Jacobian"


def _refine_long(tau, y, w, n_exp, floor, starts, grid):
    """Long traces.  One rate: bounded Brent search on the compressed sums (which the
    posterior models reuse).  Several rates: variable projection with Levenberg-Marquardt
    on the bin-averaged trace of the grid search, a start that the Gauss-Newton polish
    on the full data then finishes (its steps converge quadratically from there)."""
    if n_exp > 1:
        tb, yb, wb = _bin_average(tau, y, w, GRID_POINTS)
        rates, _ = _refine_short(tb, yb, wb, n_exp, floor, starts)
        return (rates, "variable projection on the bin-averaged trace, Gauss-Newton polish "
                "on the full data", None)
    step = float(grid[1] / grid[0])
    limit = 2.0 * float(np.max(starts)) * max(step**3, 5.0)
    # subtracting a floor estimate (the mean of the last 5% of the trace) keeps the
    # residual sums accurate; with a free floor the fit is exactly invariant to it
    offset = float(np.mean(y[tau >= np.quantile(tau, 0.95)])) if floor else 0.0
    sums = [ExponentialSums(tau, y, w, rate_limit=limit, offset=offset)]
    best, best_value = None, math.inf
    for start in starts:
        lo, hi = math.log(start[0] / step**2), math.log(start[0] * step**2)
        sol = optimize.minimize_scalar(
            lambda x: float(profile_objective(sums, np.array([[math.exp(x)]]), floor,
                                              False)[0]),
            bounds=(lo, hi), method="bounded", options={"xatol": 1e-10})
        if float(sol.fun) < best_value:
            best, best_value = np.array([math.exp(sol.x)]), float(sol.fun)
    return (best, "variable projection on compressed exponential sums, Gauss-Newton polish",
            sums[0])
