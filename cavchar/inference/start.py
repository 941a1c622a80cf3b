"""Where the sampler starts: MAP search, local covariance, start ball of walkers.

All in sampler coordinates ``u`` (see :mod:`cavchar.parameters`); ``logpost``
is a batched log posterior ``(k, ndim) -> (k,)``.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np

from cavchar.errors import InputError
from cavchar.inference.derivatives import numerical_gradient, numerical_hessian
from cavchar.parameters import ParameterSpace
from cavchar.quantities import QUANTILES_68

__all__ = ["find_map", "local_covariance", "initial_ball", "support_in_sampler"]

_BIG = 1e300  # objective value the optimizers see outside the support


def prior_quantiles_68(space: ParameterSpace) -> np.ndarray:
    """The 16% and 84% prior quantiles in sampler coordinates, shape ``(2, ndim)``."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.array([spec.to_sampler(spec.prior.ppf(np.array(QUANTILES_68)))
                         for spec in space.specs], dtype=float).T


def _widths(space: ParameterSpace, widths: np.ndarray | None) -> np.ndarray:
    """Width of the central 68% of each prior (NaN where not finite and positive)."""
    if widths is None:
        lo, hi = prior_quantiles_68(space)
        with np.errstate(invalid="ignore"):
            widths = hi - lo
    widths = np.asarray(widths, dtype=float)
    return np.where(np.isfinite(widths) & (widths > 0), widths, math.nan)


def find_map(logpost: Callable[[np.ndarray], np.ndarray], u0: np.ndarray,
             space: ParameterSpace, rng: np.random.Generator, *,
             widths: np.ndarray | None = None,
             support: tuple[np.ndarray, np.ndarray] | None = None,
             ) -> tuple[np.ndarray, float, dict[str, Any]]:
    """Maximum of the log posterior in sampler coordinates.

    1. Nelder-Mead from ``u0`` to a loose tolerance (the simplex's values
       within ``SIMPLEX_FTOL`` of each other): it finds the basin without gradients;
    2. L-BFGS-B from there, inside the support, with the gradient by central
       differences (one-sided at a bound) from one batched call of ``2 ndim + 1``
       points per iteration: it converges to the maximum with few calls;
    3. Powell only if L-BFGS-B fails.
    The best value is kept.  If ``u0`` has no finite posterior, the best of
    ``64 * ndim`` prior draws is the start.  ``widths`` (the prior's central 68%
    width per coordinate, which sets the first simplex) and ``support`` (``(lo,
    hi)`` per coordinate) default to the space's own; a caller working in other
    coordinates passes them in those.

    Returns
    -------
    (u_map, log_posterior, info) with ``info`` naming the start, the methods'
    values and the number of posterior evaluations.
    """
    from scipy.optimize import minimize

    ndim = space.ndim
    counted = _CountedPosterior(logpost)
    lp0 = float(counted(u0[None])[0])
    start = "initial guess"
    if not np.isfinite(lp0):
        cand = space.to_sampler(space.sample_prior(rng, 64 * ndim))
        lps = counted(cand)
        if not np.isfinite(lps).any():
            raise InputError("no parameter values with a finite posterior were found: the "
                             "initial guess and 64 prior draws all have zero likelihood",
                             hint="check that the priors cover values the data allow")
        best = int(np.argmax(lps))
        u0, lp0 = cand[best], float(lps[best])
        start = "best prior draw (the initial guess has zero posterior density)"
    lo, hi = support_in_sampler(space) if support is None else support

    def objective(u: np.ndarray) -> float:
        v = float(counted(u[None])[0])
        return -v if np.isfinite(v) else _BIG

    widths = _widths(space, widths)
    steps = np.maximum(0.05 * np.abs(u0), np.where(np.isfinite(widths), 1e-2 * widths, 0.0))
    steps = np.where(steps > 0, steps, 2.5e-4)
    simplex = np.vstack([u0, u0 + np.diag(steps)])
    best_u, best_lp, best_method = np.array(u0, dtype=float), lp0, "start"
    values: dict[str, float | None] = {}

    def keep(method: str, res) -> bool:
        nonlocal best_u, best_lp, best_method
        u = np.asarray(res.x, dtype=float)
        lp = float(counted(u[None])[0])
        values[method] = lp if np.isfinite(lp) else None
        if np.isfinite(lp) and lp > best_lp:
            best_u, best_lp, best_method = u, lp, method
        return bool(res.success) and np.isfinite(lp)

    try:
        keep("Nelder-Mead", minimize(objective, best_u, method="Nelder-Mead", options={
            "initial_simplex": simplex, "xatol": math.inf, "fatol": SIMPLEX_FTOL,
            "maxiter": 400 * ndim, "adaptive": ndim > 2}))
    except (ValueError, ArithmeticError, np.linalg.LinAlgError):
        values["Nelder-Mead"] = None
    polished = False
    try:
        # strictly inside the support: a likelihood is never asked for a value on its
        # bound (each finite bound moved in by its own relative 1e-10; open sides stay open)
        with np.errstate(invalid="ignore"):  # inf - inf on open sides, replaced below
            lo_in = np.where(np.isfinite(lo), lo + 1e-10 * np.maximum(1.0, np.abs(lo)), -np.inf)
            hi_in = np.where(np.isfinite(hi), hi - 1e-10 * np.maximum(1.0, np.abs(hi)), np.inf)
        value_and_gradient = _BatchedGradient(counted, lo_in, hi_in)
        bounds = [(a if np.isfinite(a) else None, b if np.isfinite(b) else None)
                  for a, b in zip(lo_in, hi_in, strict=True)]
        polished = keep("L-BFGS-B", minimize(value_and_gradient, best_u, jac=True,
                                             method="L-BFGS-B", bounds=bounds,
                                             options={"maxiter": 200}))
    except (ValueError, ArithmeticError, np.linalg.LinAlgError):
        values["L-BFGS-B"] = None
    if not polished:
        try:
            keep("Powell", minimize(objective, best_u, method="Powell",
                                    options={"xtol": 1e-9, "ftol": 1e-13}))
        except (ValueError, ArithmeticError, np.linalg.LinAlgError):
            values["Powell"] = None
    return best_u, best_lp, {"start": start, "method": best_method, "methods": values,
                             "evaluations": counted.points}


#: Nelder-Mead stops when its simplex's log posteriors agree to this (the basin is
#: found; L-BFGS-B then converges with gradients)
SIMPLEX_FTOL = 1e-3


def support_in_sampler(space: ParameterSpace) -> tuple[np.ndarray, np.ndarray]:
    """The priors' supports in sampler coordinates, ``(lo, hi)`` each ``(ndim,)``; ``±inf``
    where open (``ln 0 = -inf`` for a log-scale parameter bounded by 0)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        support = np.array([spec.to_sampler(np.array(spec.prior.support, dtype=float))
                            for spec in space.specs], dtype=float)
    lo = np.where(np.isnan(support[:, 0]), -np.inf, support[:, 0])
    hi = np.where(np.isnan(support[:, 1]), np.inf, support[:, 1])
    return lo, hi


class _CountedPosterior:
    """A batched log posterior that counts the points it is asked for."""

    def __init__(self, logpost: Callable[[np.ndarray], np.ndarray]) -> None:
        self.logpost, self.points = logpost, 0

    def __call__(self, u: np.ndarray) -> np.ndarray:
        u = np.atleast_2d(u)
        self.points += u.shape[0]
        return np.asarray(self.logpost(u), dtype=float)


class _BatchedGradient:
    """``u -> (-log p(u), -grad log p(u))`` for L-BFGS-B, from one batched call
    (:func:`cavchar.inference.derivatives.numerical_gradient`); ``(huge, 0)`` where the
    log posterior is not finite."""

    def __init__(self, logpost: Callable[[np.ndarray], np.ndarray], lo: np.ndarray,
                 hi: np.ndarray) -> None:
        self.logpost, self.lo, self.hi = logpost, lo, hi

    def __call__(self, u: np.ndarray) -> tuple[float, np.ndarray]:
        grad, f0 = numerical_gradient(self.logpost, u, self.lo, self.hi)
        if not np.isfinite(f0):
            return _BIG, np.zeros(np.size(u))
        return -f0, -grad


def local_covariance(logpost: Callable[[np.ndarray], np.ndarray], u_map: np.ndarray,
                     lp_map: float, space: ParameterSpace, *,
                     widths: np.ndarray | None = None) -> tuple[np.ndarray, str]:
    """Approximate posterior covariance at the MAP (sampler coordinates), ``(ndim, ndim)``.

    Per axis a step ``h_i`` is found at which the log posterior drops by
    0.05-2 (judged on the side inside the support when the MAP sits on a bound);
    the Hessian from central differences with those steps (one batched
    call) gives ``cov = (-H)^-1`` if ``-H`` is positive definite ("hessian"),
    else the diagonal curvatures ("diagonal"), else ``h_i^2`` ("steps").
    ``widths`` as in :func:`find_map`.
    """
    ndim = space.ndim
    widths = _widths(space, widths)
    h = np.empty(ndim)
    for i in range(ndim):
        hi = 0.1 * widths[i] if np.isfinite(widths[i]) else 0.1 * max(abs(u_map[i]), 1.0)
        ref, shrunk = hi, False
        for _ in range(80):
            pts = np.tile(u_map, (2, 1))
            pts[0, i] += hi
            pts[1, i] -= hi
            drop = lp_map - logpost(pts)
            # at a MAP on a prior bound one side is outside the support: judge the step by
            # the side that is inside, so the start keeps a positive width there
            inside = np.isfinite(drop)
            dmax = float(np.max(drop[inside])) if inside.any() else math.inf
            if not np.isfinite(dmax) or dmax > 2.0:
                hi /= 3.0
                shrunk = True
            elif dmax < 0.05 and not shrunk and hi < 1e6 * ref:
                hi *= 3.0
            else:
                break
        h[i] = hi
    with np.errstate(invalid="ignore"):  # -inf - -inf next to a bound: not finite, handled below
        _grad, hess, _f0 = numerical_hessian(logpost, u_map, h)
    if np.isfinite(hess).all():
        try:
            np.linalg.cholesky(-hess)
            cov = np.linalg.inv(-hess)
            cov = 0.5 * (cov + cov.T)
            np.linalg.cholesky(cov)
            return cov, "hessian"
        except np.linalg.LinAlgError:
            pass
    curv = -np.diag(hess)
    if np.all(np.isfinite(curv) & (curv > 0)):
        return np.diag(1.0 / curv), "diagonal"
    return np.diag(h**2), "steps"


def initial_ball(logpost: Callable[[np.ndarray], np.ndarray], u_map: np.ndarray,
                 cov: np.ndarray, n_walkers: int, scale: float,
                 rng: np.random.Generator) -> np.ndarray:
    """Walker start positions ``u_map + scale * L z`` (``L L^T = cov``), ``(n_walkers, ndim)``.

    Walkers that land outside the support are redrawn with the scale halved,
    up to 30 times; any left are put at the MAP plus a 1e-6 jitter.
    """
    ndim = u_map.size
    chol = np.linalg.cholesky(cov)
    u = u_map + scale * rng.standard_normal((n_walkers, ndim)) @ chol.T
    lp = logpost(u)
    for attempt in range(1, 31):
        bad = ~np.isfinite(lp)
        if not bad.any():
            return u
        shrink = scale * 0.5**attempt
        u[bad] = u_map + shrink * rng.standard_normal((int(bad.sum()), ndim)) @ chol.T
        lp[bad] = logpost(u[bad])
    bad = ~np.isfinite(lp)
    u[bad] = u_map + 1e-6 * rng.standard_normal((int(bad.sum()), ndim)) @ chol.T
    return u
