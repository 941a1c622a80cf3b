"""Thermal budget of a mode: is it hot because the stage is warm, or because
something hot leaks in?

Data: several measurements of the thermal photon number n_th (posterior draws
of earlier fits) at stage temperatures T_i, one mode frequency nu.

Models (Planck occupation ``n(nu, T) = 1/expm1(h nu / k_B T)``):

* two-bath  ``n_th(T) = (1 - f) n(nu, T) + f n(nu, T_hot)``, parametrised by
  the hot photon number ``h = f n(nu, T_hot)`` and ``T_hot`` (so ``f = h /
  n(nu, T_hot) <= 1``); priors log-uniform on ``h`` in ``excess_range`` and on
  ``T_hot`` from the warmest stage temperature to ``t_hot_max_k``;
* stage plus constant excess  ``n_th(T) = n(nu, T) + h`` (the f -> 0 limit at
  fixed h), log-uniform prior on ``h`` in ``excess_range``.

The two-bath posterior is sampled with emcee through
:func:`cavchar.inference.sample_posterior`; the one-parameter excess model is
integrated exactly on an adaptive grid (quadrature beats MCMC in one dimension:
no Monte Carlo error, milliseconds).

T_hot enters only through the factor ``1 - f`` on the stage occupation, so it
is identified only when f is large enough to change the slope of n_th(T).
T_hot is called identifiable when its 95 % interval spans less than a factor
of 10 and stays clear (by 10 %) of both prior bounds; otherwise the budget is
stated as stage occupation plus a constant excess, and it says so.

Likelihood of each measurement.  With a log-uniform fit prior on n_th (flat
in y = ln n_th) the fit's posterior density of y is proportional to its
likelihood, so the posterior of y serves as the likelihood of the budget
model's prediction ``y_i = ln n_th(T_i)``.  If the fit used another prior and
it is known, its log density (in y, Jacobian included) is subtracted.  The
posterior of y is approximated by a normal (``"lognormal"``: exact for a
Gaussian posterior in ln n_th, smooth far from the draws, where the sampler's
MAP search may wander) or by a Gaussian kernel density estimate (``"kde"``,
Scott's bandwidth, tabulated on a grid, with the Gaussian tail of the outermost
kernel beyond it: keeps skewed and one-sided posteriors, e.g. upper limits,
honest).  ``"auto"`` takes the normal unless the draws of y are visibly skewed
(``|skewness| > 0.5``) or heavy tailed (``|excess kurtosis| > 1``).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from cavchar.errors import CavcharWarning, InputError
from cavchar.quantities import interval
from cavchar.thermal import planck_occupation

__all__ = ["BudgetPoint", "BudgetFit", "Budget", "budget_occupation", "thermal_budget",
           "occupation_likelihood", "MODEL_TWO_BATH", "MODEL_EXCESS", "excess_log_likelihood"]

MODEL_TWO_BATH = "two-bath"
MODEL_EXCESS = "stage plus constant excess"
_GRID = 512


@dataclass(frozen=True)
class BudgetPoint:
    """One n_th measurement: draws of n_th at stage temperature ``stage_temp_k`` [K].

    ``prior`` is the fit's prior on n_th (a cavchar.priors Prior), None if it was
    log-uniform; ``prior_known`` False when the fit did not record it (then it
    is taken as log-uniform); ``label`` says where the draws came from.
    """

    label: str
    stage_temp_k: float
    n_thermal: np.ndarray
    prior: object | None = None
    prior_known: bool = True


def budget_occupation(freq_hz: float, stage_temp_k, hot_photons, t_hot_k=None) -> np.ndarray:
    """``(1 - f) n(nu, T_stage) + h`` with ``f = h / n(nu, T_hot)`` (``f = 0`` without T_hot).

    Broadcasts over its arguments; equals
    ``cavchar.thermal.two_bath_occupation(nu, T_stage, T_hot, f)``.
    """
    n_stage = planck_occupation(freq_hz, stage_temp_k)
    h = np.asarray(hot_photons, dtype=float)
    if t_hot_k is None:
        return n_stage + h
    f = h / planck_occupation(freq_hz, t_hot_k)
    return (1.0 - f) * n_stage + h


class _LogPosteriorOfLog:
    """ln p(y) of one point's posterior of y = ln n_th, up to a constant, batched."""

    def __init__(self, point: BudgetPoint, method: str) -> None:
        draws = np.asarray(point.n_thermal, dtype=float)
        if draws.ndim != 1 or draws.size < 20 or not np.all(np.isfinite(draws)):
            raise InputError(f"{point.label}: needs at least 20 finite draws of n_th")
        if np.any(draws <= 0):
            raise InputError(f"{point.label}: n_th draws must be positive for the budget")
        y = np.log(draws)
        self.mean, self.sd = float(y.mean()), float(y.std(ddof=1))
        if not self.sd > 0:
            raise InputError(f"{point.label}: the n_th draws are all equal")
        if method == "auto":
            z = (y - y.mean()) / y.std()
            skew, kurt = float(np.mean(z**3)), float(np.mean(z**4) - 3.0)
            method = "kde" if abs(skew) > 0.5 or abs(kurt) > 1.0 else "lognormal"
        if method not in ("lognormal", "kde"):
            raise InputError(f"unknown approximation {method!r}", hint="lognormal, kde or auto")
        self.method = method
        if method == "kde":
            from scipy.stats import gaussian_kde

            kde = gaussian_kde(y)
            self.bw = float(np.sqrt(kde.covariance[0, 0]))
            self.y_min, self.y_max = float(y.min()), float(y.max())
            self.grid = np.linspace(self.y_min - 5 * self.bw, self.y_max + 5 * self.bw, _GRID)
            self.values = kde.logpdf(self.grid)

    def __call__(self, y: np.ndarray) -> np.ndarray:
        if self.method == "lognormal":
            return -0.5 * ((y - self.mean) / self.sd) ** 2
        lo, hi = self.grid[0], self.grid[-1]
        out = np.interp(y, self.grid, self.values)
        # beyond the grid: the Gaussian tail of the outermost kernel
        below, above = y < lo, y > hi
        out = np.where(below, self.values[0] - 0.5 * ((y - self.y_min) ** 2
                                                      - (lo - self.y_min) ** 2) / self.bw ** 2, out)
        out = np.where(above, self.values[-1] - 0.5 * ((y - self.y_max) ** 2
                                                       - (hi - self.y_max) ** 2) / self.bw ** 2,
                       out)
        return out


def occupation_likelihood(point: BudgetPoint, method: str = "auto"):
    """ln L(n) of a predicted thermal photon number ``n`` (any shape) for one point.

    The posterior of ``ln n_th`` (approximated as described in the module
    notes) divided by the fit's prior in ``ln n_th`` if one is given;
    ``-inf`` for ``n <= 0`` and outside that prior's support.
    """
    post = _LogPosteriorOfLog(point, method)
    prior = point.prior

    def log_likelihood(n: np.ndarray) -> np.ndarray:
        n = np.asarray(n, dtype=float)
        positive = n > 0
        y = np.log(np.where(positive, n, 1.0))
        out = post(y)
        if prior is not None:
            lp = prior.logpdf(np.where(positive, n, 1.0)) + y
            out = np.where(np.isfinite(lp), out - lp, -np.inf)
        return np.where(positive, out, -np.inf)

    log_likelihood.method = post.method  # type: ignore[attr-defined]
    log_likelihood.mean, log_likelihood.sd = post.mean, post.sd  # type: ignore[attr-defined]
    return log_likelihood


@dataclass(frozen=True)
class BudgetFit:
    """One model fitted to the series: parameter intervals and draws (SI units)."""

    model: str
    parameters: dict
    draws: dict
    converged: bool
    diagnostics: dict = field(default_factory=dict)


@dataclass(frozen=True)
class Budget:
    """The thermal budget: both models, which one is stated, and why."""

    freq_hz: float
    points: tuple[dict, ...]
    excess: BudgetFit
    two_bath: BudgetFit | None
    model: str
    reason: str
    excess_floor: float
    notes: tuple[str, ...] = ()

    @property
    def stated(self) -> BudgetFit:
        """The fit of the stated model: the two-bath fit, or the stage-plus-excess fit."""
        return self.two_bath if self.model == MODEL_TWO_BATH else self.excess

    @property
    def excess_is_upper_limit(self) -> bool:
        """The excess posterior reaches down to its prior floor: only an upper limit."""
        return self.excess.parameters["excess_photons"].lo95 < 100 * self.excess_floor

    def predicted(self, stage_temp_k: Sequence[float], n_curves: int = 1000
                  ) -> dict[str, np.ndarray]:
        """Median and 68 / 95 % bands of the stated model's n_th at these stage temperatures."""
        temps = np.asarray(stage_temp_k, dtype=float)
        fit = self.stated
        h = fit.draws["excess_photons" if fit is self.excess else "hot_photons"]
        rows = np.linspace(0, h.size - 1, min(n_curves, h.size)).astype(int)
        t_hot = None if fit is self.excess else fit.draws["hot_temperature"][rows, None]
        curves = budget_occupation(self.freq_hz, temps[None, :], h[rows, None], t_hot)
        q = np.quantile(curves, [0.5, 0.16, 0.84, 0.025, 0.975], axis=0)
        return dict(zip(("median", "lo68", "hi68", "lo95", "hi95"), q, strict=True))

    def to_dict(self) -> dict:
        """Plain-JSON form: frequency, stated model and reason, both fits with their parameters."""
        def fit_dict(fit: BudgetFit | None) -> dict | None:
            if fit is None:
                return None
            return {"model": fit.model, "converged": fit.converged,
                    "parameters": {k: v.as_dict() for k, v in fit.parameters.items()}}

        return {"freq_hz": self.freq_hz, "model": self.model, "reason": self.reason,
                "excess_is_upper_limit": self.excess_is_upper_limit,
                "points": list(self.points), "stage_plus_excess": fit_dict(self.excess),
                "two_bath": fit_dict(self.two_bath), "notes": list(self.notes)}


def _quadrature_1d(loglike, lo: float, hi: float, n_grid: int = 4097, n_draws: int = 8000
                   ) -> tuple[np.ndarray, dict]:
    """Posterior of one parameter with a log-uniform prior on [lo, hi], by quadrature.

    The prior is flat in u = ln h, so the posterior density in u is
    ``exp(ln L(e^u))``; it is tabulated on a grid, refined twice onto the region
    within 60 log units of the maximum, integrated by the trapezoid rule, and
    turned into ``n_draws`` stratified draws by inverting the CDF at
    ``(i + 1/2) / n_draws`` (exact to the grid resolution, no Monte Carlo error).
    """
    a, b = math.log(lo), math.log(hi)
    for _ in range(3):
        u = np.linspace(a, b, n_grid)
        lp = loglike(np.exp(u)[:, None])
        if not np.isfinite(lp).any():
            raise InputError("the excess model fits none of the data (likelihood zero "
                             "everywhere in the prior range)")
        keep = np.flatnonzero(lp > lp.max() - 60.0)
        step = u[1] - u[0]
        a, b = max(u[keep[0]] - step, math.log(lo)), min(u[keep[-1]] + step, math.log(hi))
    weights = np.exp(lp - lp.max())
    cdf = np.concatenate([[0.0], np.cumsum(0.5 * (weights[1:] + weights[:-1]) * np.diff(u))])
    cdf /= cdf[-1]
    draws = np.exp(np.interp((np.arange(n_draws) + 0.5) / n_draws, cdf, u))
    return draws, {"method": "quadrature on a grid in ln h", "grid_points": n_grid,
                   "grid_low": float(math.exp(u[0])), "grid_high": float(math.exp(u[-1])),
                   "n_draws": n_draws}


def _sample(loglike, specs, guess, seed: int, max_steps: int):
    from cavchar.inference.sampler import SamplerSettings, sample_posterior

    settings = SamplerSettings(seed=seed, quiet=True, max_steps=max_steps, chunk=250,
                               allow_unconverged=True)
    return sample_posterior(loglike, specs, guess, settings)


def _series_loglike(points: Sequence[BudgetPoint], freq_hz: float, approximation: str):
    """The points' likelihoods, their stage occupations and ``total(n_model (k, m)) -> (k,)``,
    the summed ln L of predictions at the points' stage temperatures."""
    temps = np.array([p.stage_temp_k for p in points], dtype=float)
    likes = [occupation_likelihood(p, approximation) for p in points]
    n_stage = planck_occupation(freq_hz, temps)
    normal = np.array([like.method == "lognormal" and p.prior is None
                       for like, p in zip(likes, points, strict=True)])
    mean = np.array([like.mean for like in likes])[normal]
    sd = np.array([like.sd for like in likes])[normal]
    others = [(i, like) for i, like in enumerate(likes) if not normal[i]]

    def total(n_model: np.ndarray) -> np.ndarray:
        """Sum of the points' ln L for predictions n_model (k, m) -> (k,)."""
        positive = np.all(n_model > 0, axis=1)
        n_model = np.where(positive[:, None], n_model, 1.0)
        out = -0.5 * np.sum(((np.log(n_model[:, normal]) - mean) / sd) ** 2, axis=1)
        for i, like in others:
            out = out + like(n_model[:, i])
        return np.where(positive & ~np.isnan(out), out, -np.inf)

    return likes, n_stage, total


def excess_log_likelihood(points: Sequence[BudgetPoint], freq_hz: float,
                          approximation: str = "auto"):
    """ln L(n_x) of the stage-plus-excess model for these points: a function of an array
    of excess photon numbers ``n_x`` (any 1-D shape) returning ln L of the same shape."""
    _, n_stage, total = _series_loglike(points, freq_hz, approximation)

    def loglike(excess: np.ndarray) -> np.ndarray:
        x = np.asarray(excess, dtype=float).reshape(-1, 1)
        return total(n_stage[None, :] + x)

    return loglike


def thermal_budget(points: Sequence[BudgetPoint], freq_hz: float, *,
                   approximation: str = "auto", excess_range: tuple[float, float] = (1e-8, 10.0),
                   t_hot_max_k: float = 300.0, seed: int = 1, max_steps: int = 40000) -> Budget:
    """Fit the thermal budget of a mode to n_th measured at several stage temperatures.

    Parameters
    ----------
    points
        The measurements (at least one; the two-bath model needs three
        different stage temperatures).
    freq_hz
        Mode frequency nu [Hz].
    approximation
        ``"auto"``, ``"lognormal"`` or ``"kde"``: how each fit's n_th posterior
        becomes a likelihood (module notes).
    excess_range
        Bounds of the log-uniform prior on the excess (hot) photon number.
    t_hot_max_k
        Upper bound of the log-uniform prior on T_hot [K] (lower bound: the
        warmest stage temperature).
    seed
        Seed of the sampler (emcee via cavchar.inference.sample_posterior).
    max_steps
        Largest number of sampler steps per walker.
    """
    from cavchar.parameters import ParameterSpec
    from cavchar.priors import LogUniform

    if not (math.isfinite(freq_hz) and freq_hz > 0):
        raise InputError("the budget needs the mode frequency", hint="e.g. --freq 6.8GHz")
    if not points:
        raise InputError("the budget needs at least one n_th measurement")
    temps = np.array([p.stage_temp_k for p in points], dtype=float)
    for p in points:
        if not (math.isfinite(p.stage_temp_k) and p.stage_temp_k > 0):
            raise InputError(f"{p.label}: the stage temperature must be positive, "
                             f"not {p.stage_temp_k}", hint="log it with --stage-temp")
    likes, n_stage, total = _series_loglike(points, freq_hz, approximation)

    def excess_like(x: np.ndarray) -> np.ndarray:
        return total(n_stage[None, :] + x[:, :1])

    lo, hi = excess_range
    if not 0 < lo < hi:
        raise InputError(f"the excess range needs 0 < low < high, not {excess_range}")
    h_draws, grid_info = _quadrature_1d(excess_like, lo, hi)
    excess = BudgetFit(MODEL_EXCESS, {"excess_photons": interval(h_draws)},
                       {"excess_photons": h_draws}, True, grid_info)
    notes = []
    point_rows = tuple({"label": p.label, "stage_temp_k": float(p.stage_temp_k),
                        "approximation": like.method, "planck_occupation": float(ns),
                        "fit_prior": "log-uniform" if p.prior is None else p.prior.to_dict(),
                        **{"n_thermal_" + k: v for k, v in interval(p.n_thermal).as_dict().items()}}
                       for p, like, ns in zip(points, likes, n_stage, strict=True))
    if any(like.method == "kde" for like in likes):
        notes.append("skewed n_th posteriors were approximated by a kernel density")
    if not all(p.prior_known for p in points):
        notes.append("fits without a recorded n_th prior are taken to have used a "
                     "log-uniform one")
    t_lo = float(temps.max())
    two_bath = None
    if len(np.unique(temps)) < 3:
        reason = (f"T_hot is not identifiable from {len(np.unique(temps))} stage "
                  "temperature(s) (the two-bath model needs at least 3): stated as stage "
                  "occupation plus a constant excess")
        return Budget(float(freq_hz), point_rows, excess, None, MODEL_EXCESS, reason, lo,
                      tuple(notes))
    if not t_lo < t_hot_max_k:
        raise InputError("the warmest stage temperature is above the T_hot limit")

    def two_bath_like(x: np.ndarray) -> np.ndarray:
        h, t_hot = x[:, :1], x[:, 1:2]
        f = h / planck_occupation(freq_hz, t_hot)
        n_model = (1.0 - f) * n_stage[None, :] + h
        return np.where(f[:, 0] <= 1.0, total(np.where(f <= 1.0, n_model, 1.0)), -np.inf)

    specs_2 = [ParameterSpec("hot_photons", "", "h", LogUniform(lo, hi), log_scale=True),
               ParameterSpec("hot_temperature", "K", "T_hot", LogUniform(t_lo, t_hot_max_k),
                             log_scale=True, dimension="temperature")]
    h0 = float(np.clip(excess.parameters["excess_photons"].median, 10 * lo, hi / 10))
    t0 = math.sqrt(t_lo * t_hot_max_k)
    if h0 > planck_occupation(freq_hz, t0):
        t0 = t_hot_max_k / 1.5
    run_2 = _sample(two_bath_like, specs_2, [h0, t0], seed, max_steps)
    h, t_hot = run_2.draws[:, 0], run_2.draws[:, 1]
    f = h / planck_occupation(freq_hz, t_hot)
    share = h / (planck_occupation(freq_hz, temps.min()) * (1 - f) + h)
    params = {"hot_photons": interval(h), "hot_temperature": interval(t_hot),
              "hot_fraction": interval(f), "excess_share_at_coldest": interval(share)}
    two_bath = BudgetFit(MODEL_TWO_BATH, params, {"hot_photons": h, "hot_temperature": t_hot,
                                                  "hot_fraction": f}, run_2.converged,
                         run_2.diagnostics)
    t = params["hot_temperature"]
    identified = (t.hi95 / t.lo95 < 10.0 and t.lo95 > 1.1 * t_lo
                  and t.hi95 < t_hot_max_k / 1.1)
    if identified:
        model = MODEL_TWO_BATH
        reason = (f"T_hot is identified: its 95% interval spans a factor "
                  f"{t.hi95 / t.lo95:.2g} inside the prior range")
    else:
        from cavchar.units import format_quantity

        model = MODEL_EXCESS
        failed = []  # the conditions that did not hold, each said as it is
        if not t.hi95 / t.lo95 < 10.0:
            failed.append(f"its 95% interval spans a factor {t.hi95 / t.lo95:.3g} "
                          "(needs < 10)")
        if not t.lo95 > 1.1 * t_lo:
            failed.append("it reaches down to the prior's lower bound "
                          f"{format_quantity(t_lo, 'temperature')} (the warmest stage)")
        if not t.hi95 < t_hot_max_k / 1.1:
            failed.append("it reaches up to the prior's upper bound "
                          f"{format_quantity(t_hot_max_k, 'temperature')}")
        reason = ("T_hot is not identifiable from these data (" + "; ".join(failed)
                  + "): only the excess f n(nu, T_hot) is constrained, stated as stage "
                  "occupation plus a constant excess")
    if not (excess.converged and run_2.converged):
        warnings.warn("a budget fit did not fully converge; intervals are approximate",
                      CavcharWarning, stacklevel=2)
    return Budget(float(freq_hz), point_rows, excess, two_bath, model, reason, lo, tuple(notes))
