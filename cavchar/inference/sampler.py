"""The posterior sampler every fit shares: MAP fit, emcee ensemble, convergence loop.

Steps of :func:`sample_posterior`:

1. Work in sampler coordinates ``u`` (``ln x`` for log-scale parameters, see
   :mod:`cavchar.parameters`); the log posterior is
   ``ln L(x(u)) + ln p_u(u)`` (prior with its Jacobian).
2. Maximum a posteriori point from the initial guess with scipy.optimize
   (Nelder-Mead, then L-BFGS-B and Powell from its result; the best value kept).
3. Local covariance from a finite-difference Hessian at the MAP (one batched
   call of the log posterior); the walkers start in a ball of
   ``init_scale`` times that Laplace width around the MAP.
4. emcee's affine-invariant ensemble sampler (Goodman & Weare 2010) runs in
   chunks; after each chunk the integrated autocorrelation time ``tau`` is
   measured.  The run stops when, for every parameter, the kept chain (after a
   burn-in of ``burn_in_taus * tau``) is longer than ``min_tau_multiple * tau``,
   ``tau`` changed by less than ``tau_tol`` (relative) since the previous
   check, the rank-normalized split R-hat is below ``rhat_max`` and the bulk
   and tail ESS reach ``target_ess`` (if set); or when ``max_steps`` is reached.
5. Draws: the chain after burn-in, thinned by ``thin_taus * min(tau)``.

Not converged: :class:`cavchar.errors.ConvergenceError` (exit code 3) naming
the failed checks, or with ``allow_unconverged`` a
:class:`cavchar.errors.ConvergenceWarning` and ``converged = False``.
"""

from __future__ import annotations

import math
import sys
import time
import warnings
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass, replace
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from cavchar.errors import CavcharError, ConvergenceError, ConvergenceWarning, InputError
from cavchar.inference import diagnostics as diag
from cavchar.inference.start import find_map, initial_ball, local_covariance
from cavchar.parameters import ParameterSpace, ParameterSpec

__all__ = ["SamplerSettings", "PosteriorRun", "sample_posterior", "LogLikelihood"]

#: a batched log-likelihood: physical parameters (k, ndim) -> (k,)
LogLikelihood = Callable[[np.ndarray], np.ndarray]

_MOVES = ("de", "stretch", "de-snooker")


#: sampler settings that differ from the :class:`SamplerSettings` defaults, per fit kind
#: (ring-down posteriors are cheap and well-shaped: frequent checks, more effective draws)
FIT_KIND_DEFAULTS: dict[str, dict[str, Any]] = {"ringdown": {"chunk": 200, "target_ess": 2000}}


@dataclass(frozen=True)
class SamplerSettings:
    """Settings of :func:`sample_posterior` (all stored in the result).

    Parameters
    ----------
    n_walkers
        Ensemble size (even, at least twice the number of parameters).
    max_steps
        Largest number of steps per walker.
    chunk
        Steps between convergence checks.
    seed
        Seed of every random choice (MAP restarts, start ball, emcee).  ``None``
        draws a fresh seed, which is then stored in :attr:`PosteriorRun.settings`.
    target_ess
        Smallest bulk and tail ESS (Vehtari et al. 2021) for every parameter,
        or ``None`` for no such requirement.
    tau_tol
        Largest relative change of ``tau`` between two checks.
    min_tau_multiple
        The kept chain must be longer than this many ``tau``.
    rhat_max
        Largest rank-normalized split R-hat (walkers as chains).
    burn_in_taus, thin_taus
        Burn-in ``ceil(burn_in_taus * max(tau))`` steps; thinning
        ``max(1, floor(thin_taus * min(tau)))``.
    init_scale
        Radius of the start ball in units of the local (Laplace) standard deviation.
    moves
        ``"de"`` (emcee's differential-evolution move, ter Braak 2006; on near-Gaussian
        posteriors its autocorrelation time is about 4 times shorter than the stretch
        move's at 1.7 times the cost per step), ``"stretch"`` (emcee's default
        affine-invariant stretch move, Goodman & Weare 2010) or ``"de-snooker"``
        (80% differential evolution, 20% snooker update, ter Braak & Vrugt 2008;
        for posteriors with separated modes).
    allow_unconverged
        Keep an unconverged run (warning instead of :class:`ConvergenceError`).
    quiet
        No progress bar on stderr.
    """

    n_walkers: int = 32
    max_steps: int = 20000
    chunk: int = 500
    seed: int | None = None
    target_ess: int | None = None
    tau_tol: float = 0.1
    min_tau_multiple: float = 50.0
    rhat_max: float = 1.01
    burn_in_taus: float = 3.0
    thin_taus: float = 0.5
    init_scale: float = 0.5
    moves: str = "de"
    allow_unconverged: bool = False
    quiet: bool = False

    @classmethod
    def for_fit(cls, kind: str | None = None, **changes: Any) -> SamplerSettings:
        """The defaults of a fit kind (:data:`FIT_KIND_DEFAULTS`, e.g. ring-down fits check
        convergence more often and want 2,000 effective draws) with ``changes`` applied;
        the one place where sampler defaults live."""
        return cls(**{**FIT_KIND_DEFAULTS.get(kind or "", {}), **changes})

    def __post_init__(self) -> None:
        def bad(message: str, hint: str | None = None) -> InputError:
            return InputError(f"sampler settings: {message}", hint=hint)

        if int(self.n_walkers) != self.n_walkers or self.n_walkers < 4 or self.n_walkers % 2:
            raise bad(f"the number of walkers must be an even integer >= 4, got "
                      f"{self.n_walkers}", hint="e.g. 32 walkers")
        if int(self.max_steps) != self.max_steps or self.max_steps < 1:
            raise bad(f"max_steps must be a positive integer, got {self.max_steps}")
        if int(self.chunk) != self.chunk or self.chunk < 1:
            raise bad(f"chunk must be a positive integer, got {self.chunk}")
        if self.seed is not None and (int(self.seed) != self.seed or self.seed < 0):
            raise bad(f"the seed must be a non-negative integer, got {self.seed}")
        if self.target_ess is not None and not self.target_ess > 0:
            raise bad(f"target_ess must be positive, got {self.target_ess}")
        for name in ("tau_tol", "min_tau_multiple", "burn_in_taus", "thin_taus", "init_scale"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value > 0):
                raise bad(f"{name} must be a positive number, got {value}")
        if not self.rhat_max > 1:
            raise bad(f"rhat_max must be above 1, got {self.rhat_max}")
        if self.moves not in _MOVES:
            raise bad(f"unknown moves {self.moves!r}", hint=f"one of {', '.join(_MOVES)}")

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form of the settings (every field)."""
        return asdict(self)


@dataclass(frozen=True)
class PosteriorRun:
    """Outcome of :func:`sample_posterior`.

    Attributes
    ----------
    specs
        The parameter specifications, in column order.
    draws : ndarray, shape (n_draws, ndim)
        Posterior draws in physical units (after burn-in and thinning).
    log_posterior, log_likelihood : ndarray, shape (n_draws,)
        Log posterior density in sampler coordinates (prior Jacobian included,
        up to the evidence) and log-likelihood of each draw.
    map : ndarray, shape (ndim,)
        Maximum of the posterior density in sampler coordinates, in physical units
        (with log-uniform priors on log-scale parameters this is the
        maximum-likelihood point).
    map_log_posterior
        Log posterior at the MAP.
    trace : ndarray, shape (n_trace, n_walkers, ndim)
        The whole chain including burn-in, every ``thin``-th step, physical units
        (for trace plots); step of row ``i`` is ``i * thin``.
    diagnostics
        Plain-JSON dictionary (see docs/inference.md).
    converged
        Whether every convergence check passed.
    settings
        The settings used, with the seed resolved.
    """

    specs: tuple[ParameterSpec, ...]
    draws: np.ndarray
    log_posterior: np.ndarray
    log_likelihood: np.ndarray
    map: np.ndarray
    map_log_posterior: float
    trace: np.ndarray
    diagnostics: dict[str, Any]
    converged: bool
    settings: SamplerSettings

    @property
    def names(self) -> list[str]:
        """Parameter names in the order of the columns of the draws."""
        return [s.name for s in self.specs]


class _Posterior:
    """Batched log posterior in sampler coordinates; checks the likelihood's output."""

    def __init__(self, log_likelihood: LogLikelihood, space: ParameterSpace) -> None:
        self.log_likelihood = log_likelihood
        self.space = space

    def __call__(self, u: np.ndarray) -> np.ndarray:
        u = np.atleast_2d(u)
        lp = self.space.log_prior(u)
        ok = np.isfinite(lp)
        if not ok.any():
            return lp
        x = self.space.to_physical(u if ok.all() else u[ok])
        ll = np.asarray(self.log_likelihood(x), dtype=float)
        if ll.shape != (x.shape[0],):
            raise CavcharError(f"the log-likelihood returned shape {ll.shape} for "
                               f"{x.shape[0]} parameter sets (a bug in the model: it must "
                               "map (k, ndim) to (k,))")
        if not (ll < np.inf).all():  # NaN or +inf
            bad = x[~(ll < np.inf)][0]
            raise CavcharError(f"the log-likelihood returned {ll[~(ll < np.inf)][0]} at "
                               f"{dict(zip(self.space.names, bad.tolist(), strict=True))} "
                               "(a bug in the model: it must be finite or -inf)")
        if ok.all():
            return lp + ll
        out = np.full(u.shape[0], -np.inf)
        out[ok] = lp[ok] + ll
        return out


def _resolve_seed(settings: SamplerSettings) -> SamplerSettings:
    if settings.seed is not None:
        return settings
    seed = int(np.random.SeedSequence().generate_state(1, dtype=np.uint32)[0])
    return replace(settings, seed=seed)


def _make_moves(name: str):
    import emcee

    if name == "de":
        return emcee.moves.DEMove()
    if name == "de-snooker":
        return [(emcee.moves.DEMove(), 0.8), (emcee.moves.DESnookerMove(), 0.2)]
    return None  # emcee's default stretch move


class _Progress:
    """A text progress bar on stderr, redrawn at most every 0.25 s.

    ``total`` starts at ``max_steps`` and is lowered after each check to the expected
    length (burn-in + ``min_tau_multiple`` tau, or what ``target_ess`` needs).
    """

    def __init__(self, total: int, quiet: bool) -> None:
        self.total, self.quiet = total, quiet
        self.start = self.last = time.perf_counter()
        self.note = ""
        self.shown = False

    def update(self, step: int, force: bool = False) -> None:
        if self.quiet:
            return
        now = time.perf_counter()
        if not force and now - self.last < 0.25:
            return
        self.last = now
        width = 24
        filled = int(width * min(step, self.total) / self.total)
        bar = "#" * filled + "-" * (width - filled)
        sys.stderr.write(f"\rsampling [{bar}] {step}/~{self.total} steps  "
                         f"{now - self.start:5.1f} s  {self.note}   ")
        sys.stderr.flush()
        self.shown = True

    def close(self, step: int) -> None:
        if self.quiet:
            return
        self.update(step, force=True)
        sys.stderr.write("\n")
        sys.stderr.flush()


def _check(chain: np.ndarray, tau_prev: np.ndarray | None, names: list[str],
           settings: SamplerSettings, final: bool) -> dict[str, Any]:
    """Convergence checks on a chain (n_steps, n_walkers, ndim) in sampler coordinates."""
    n_steps = chain.shape[0]
    tau_all = diag.integrated_time(chain)
    tau_ref = tau_all if tau_prev is None else tau_prev
    finite_ref = tau_ref[np.isfinite(tau_ref)]
    burn = n_steps // 2
    if finite_ref.size:
        burn = int(min(math.ceil(settings.burn_in_taus * finite_ref.max()), burn))
    tau = diag.integrated_time(chain[burn:])
    kept = n_steps - burn
    failed: list[str] = []
    if not np.isfinite(tau).all():
        stuck = [n for n, t in zip(names, tau, strict=True) if not np.isfinite(t)]
        failed.append(f"no autocorrelation time for {', '.join(stuck)} (walkers not moving)")
        return {"tau": tau, "burn": burn, "failed": failed, "tau_change": None}
    length = kept / tau
    short = [f"{n} ({v:.0f})" for n, v in zip(names, length, strict=True)
             if v < settings.min_tau_multiple]
    if short:
        failed.append(f"chain after burn-in is only this many autocorrelation times long "
                      f"(needs {settings.min_tau_multiple:g}): {', '.join(short)}")
    change = None if tau_prev is None else np.abs(tau - tau_prev) / tau
    if change is None:
        failed.append("autocorrelation time measured only once so far")
    else:
        moving = [f"{n} ({100 * c:.1f}%)" for n, c in zip(names, change, strict=True)
                  if c >= settings.tau_tol]
        if moving:
            failed.append(f"autocorrelation time still changing by more than "
                          f"{100 * settings.tau_tol:g}%: {', '.join(moving)}")
    out: dict[str, Any] = {"tau": tau, "burn": burn, "failed": failed, "tau_change": change}
    if failed and not final:
        return out  # cheap checks failed: skip the rank statistics
    walkers = np.moveaxis(chain[burn:], 0, 1)  # (n_walkers, kept, ndim)
    ndim = chain.shape[2]
    rhat = np.array([diag.split_rhat(walkers[:, :, d]) for d in range(ndim)])
    bulk = np.array([diag.ess_bulk(walkers[:, :, d]) for d in range(ndim)])
    tail = np.array([diag.ess_tail(walkers[:, :, d]) for d in range(ndim)])
    out.update(rhat=rhat, ess_bulk=bulk, ess_tail=tail)
    high = [f"{n} ({r:.3f})" for n, r in zip(names, rhat, strict=True)
            if not r < settings.rhat_max]
    if high:
        failed.append(f"split R-hat not below {settings.rhat_max:g}: {', '.join(high)}")
    if settings.target_ess is not None:
        low = [f"{n} ({min(b, t):.0f})" for n, b, t in zip(names, bulk, tail, strict=True)
               if not min(b, t) >= settings.target_ess]
        if low:
            failed.append(f"effective sample size below the target {settings.target_ess}: "
                          f"{', '.join(low)}")
    return out


def _as_dict(names: list[str], values: ArrayLike | None) -> dict[str, float] | None:
    if values is None:
        return None
    return {n: float(v) for n, v in zip(names, np.asarray(values).tolist(), strict=True)}



def refuse_point_posterior(specs: Sequence[ParameterSpec], flat: ArrayLike) -> None:
    """Raise the one clear InputError for parameters whose posterior is narrower than the
    floating-point resolution around the MAP (``flat``: one bool per parameter), which
    neither sampler can represent: the data follow the model exactly."""
    flat = np.asarray(flat, dtype=bool)
    if flat.any():
        names = ", ".join(spec.name for spec, bad in zip(specs, flat, strict=True) if bad)
        raise InputError(f"the posterior of {names} is narrower than the floating-point "
                         "resolution around its best value: the data follow the model "
                         "exactly (noise-free, e.g. a computed curve rather than a "
                         "measurement)", hint="fit measured data, or simulate with noise")


def sample_posterior(
    log_likelihood: LogLikelihood,
    specs: Sequence[ParameterSpec],
    initial_guess: ArrayLike,
    settings: SamplerSettings | None = None,
) -> PosteriorRun:
    """Sample the posterior of a model with emcee until converged.

    Parameters
    ----------
    log_likelihood
        Batched log-likelihood: physical parameters ``(k, ndim)`` (SI units, in
        the order of ``specs``) -> ``(k,)``, ``-inf`` where impossible, never NaN.
        Called only inside the prior support.
    specs
        One :class:`cavchar.parameters.ParameterSpec` per parameter (priors, log scale).
    initial_guess : array, shape (ndim,)
        Starting point of the MAP search, physical units.
    settings
        :class:`SamplerSettings`; defaults if ``None``.

    Returns
    -------
    PosteriorRun

    Raises
    ------
    ConvergenceError
        If a convergence check fails at ``max_steps`` (exit code 3), unless
        ``settings.allow_unconverged``.
    InputError
        For settings that do not fit the model or no start with a finite posterior.
    """
    import emcee

    t0 = time.perf_counter()
    settings = _resolve_seed(settings or SamplerSettings())
    space = ParameterSpace(specs)
    names, ndim = space.names, space.ndim
    if settings.n_walkers < 2 * ndim:
        raise InputError(f"{settings.n_walkers} walkers are too few for {ndim} parameters",
                         hint=f"use at least {2 * ndim + (2 * ndim) % 2} walkers")
    seeds = np.random.SeedSequence(settings.seed).spawn(3)
    logpost = _Posterior(log_likelihood, space)

    u0 = space.to_sampler(np.asarray(initial_guess, dtype=float).reshape(ndim))
    u_map, lp_map, map_info = find_map(logpost, u0, space, np.random.default_rng(seeds[0]))
    cov, scale_method = local_covariance(logpost, u_map, lp_map, space)
    walkers0 = initial_ball(logpost, u_map, cov, settings.n_walkers, settings.init_scale,
                            np.random.default_rng(seeds[1]))
    flat = ~np.all(np.isfinite(walkers0), axis=0) | (np.ptp(walkers0, axis=0) == 0)
    refuse_point_posterior(specs, flat)  # an ensemble cannot move without spread

    sampler = emcee.EnsembleSampler(settings.n_walkers, ndim, logpost, vectorize=True,
                                    moves=_make_moves(settings.moves))
    emcee_seed = int(seeds[2].generate_state(1, dtype=np.uint32)[0])
    sampler.random_state = np.random.RandomState(emcee_seed).get_state()

    progress = _Progress(settings.max_steps, settings.quiet)
    state = emcee.State(walkers0, log_prob=logpost(walkers0))
    n_steps = 0
    tau_prev = None
    check: dict[str, Any] = {}
    history: list[dict[str, Any]] = []
    while n_steps < settings.max_steps:
        n_chunk = min(settings.chunk, settings.max_steps - n_steps)
        # the walkers have a spread (checked above); emcee's extra check refuses strongly
        # correlated but valid ensembles, which its affine-invariant moves handle
        for current in sampler.sample(state, iterations=n_chunk, store=True,
                                      skip_initial_state_check=True):
            n_steps += 1
            progress.update(n_steps)
        state = current
        final = n_steps >= settings.max_steps
        check = _check(sampler.get_chain(), tau_prev, names, settings, final=final)
        history.append({"steps": n_steps, "tau": _as_dict(names, check["tau"])})
        finite = check["tau"][np.isfinite(check["tau"])]
        if finite.size:  # expected length: burn-in plus the required multiple of tau
            expected = check["burn"] + settings.min_tau_multiple * finite.max()
            if settings.target_ess is not None:
                expected = max(expected, check["burn"]
                               + settings.target_ess * finite.max() / settings.n_walkers)
            progress.total = int(min(settings.max_steps,
                                     max(expected, n_steps + settings.chunk)))
            progress.note = f"tau {finite.max():.1f} steps"
        if not check["failed"]:
            break
        if np.isfinite(check["tau"]).all():
            tau_prev = check["tau"]
        if final:
            break
    progress.close(n_steps)
    if "rhat" not in check:  # loop ended on a cheap failure: compute everything for the report
        check = _check(sampler.get_chain(), tau_prev, names, settings, final=True)

    converged = not check["failed"]
    tau = check["tau"]
    burn = int(check["burn"])
    finite_tau = tau[np.isfinite(tau)]
    thin = max(1, int(math.floor(settings.thin_taus * finite_tau.min()))) if finite_tau.size else 1
    flat_u = sampler.get_chain(discard=burn, thin=thin, flat=True)
    flat_lp = sampler.get_log_prob(discard=burn, thin=thin, flat=True)
    draws = space.to_physical(flat_u)
    log_like = flat_lp - space.log_prior(flat_u)
    trace = space.to_physical(sampler.get_chain(thin=thin))
    acc = sampler.acceptance_fraction
    kept = n_steps - burn
    with np.errstate(divide="ignore", invalid="ignore"):
        ess_tau = settings.n_walkers * kept / tau

    diagnostics: dict[str, Any] = {
        "converged": converged,
        "failed_checks": list(check["failed"]),
        "n_walkers": settings.n_walkers,
        "n_steps": n_steps,
        "burn_in": burn,
        "thin": thin,
        "n_draws": int(draws.shape[0]),
        "moves": settings.moves,
        "tau": _as_dict(names, tau),
        "tau_relative_change": _as_dict(names, check["tau_change"]),
        "chain_length_in_tau": _as_dict(names, kept / tau),
        "ess": _as_dict(names, ess_tau),
        "ess_bulk": _as_dict(names, check["ess_bulk"]),
        "ess_tail": _as_dict(names, check["ess_tail"]),
        "rhat": _as_dict(names, check["rhat"]),
        "acceptance_fraction": {"mean": float(acc.mean()), "min": float(acc.min()),
                                "max": float(acc.max())},
        "map": {**map_info, "log_posterior": float(lp_map),
                "sampler_coordinates": _as_dict(names, u_map),
                "local_sd": _as_dict(names, np.sqrt(np.diag(cov))),
                "local_scale_method": scale_method},
        "tau_history": history,
        "elapsed_s": time.perf_counter() - t0,
    }
    if acc.mean() < 0.1:
        warnings.warn(f"low mean acceptance fraction {acc.mean():.3f}: the posterior may be "
                      "multimodal or badly scaled", ConvergenceWarning, stacklevel=2)
    if not converged:
        message, suggestion = _failure_message(check["failed"], n_steps, tau, settings)
        if not settings.allow_unconverged:
            raise ConvergenceError(message, diagnostics=diagnostics,
                                   suggested_max_steps=suggestion)
        warnings.warn(message + " (kept because unconverged runs are allowed)",
                      ConvergenceWarning, stacklevel=2)
    return PosteriorRun(specs=space.specs, draws=draws, log_posterior=flat_lp,
                        log_likelihood=log_like, map=space.to_physical(u_map),
                        map_log_posterior=float(lp_map), trace=trace,
                        diagnostics=diagnostics, converged=converged, settings=settings)


def _failure_message(failed: list[str], n_steps: int, tau: np.ndarray,
                     settings: SamplerSettings) -> tuple[str, int | None]:
    """The message of an unconverged run (in the sampler's own terms; the command line
    adds its option names) and a step budget that would likely suffice."""
    finite = tau[np.isfinite(tau)]
    text = f"the sampler did not converge in {n_steps} steps: " + "; ".join(failed) + "."
    suggestion = None
    if finite.size:
        need = (settings.min_tau_multiple + settings.burn_in_taus) * finite.max()
        suggestion = _round_up(max(2 * n_steps, 1.5 * need))
        text += f" Run longer, e.g. {suggestion} steps at most"
    else:
        text += " Check the model and priors (a parameter does not move)"
    text += ", or allow unconverged runs to keep this chain anyway."
    return text, suggestion


def _round_up(value: float) -> int:
    """Round up to two significant digits: 12345 -> 13000."""
    step = 10 ** max(0, math.floor(math.log10(max(value, 1.0))) - 1)
    return int(math.ceil(value / step) * step)
