"""Residual diagnostics and posterior model curves of a ring-down fit.

Residuals are standardized at the posterior median of the sampled parameters,
``r_i = (y_i - E[y_i]) / sd_i``, with the model's expected value and noise sd
(linear parameters at their conditional best; complex IQ residuals as real and
imaginary parts).  Per trace:

* reduced chi-square ``sum r^2 / (n - p)``; with known noise it is flagged when
  the chi-square law with ``n - p`` degrees of freedom puts it in either tail
  beyond 1e-3 (with fitted noise it is 1 by construction and not judged);
* lag-1 autocorrelation ``rho_1 = sum r_i r_{i+1} / sum r_i^2``, for white noise
  about ``N(0, 1/n)`` (Box & Jenkins): flagged when ``|rho_1| > 3.29 / sqrt(n)``
  (two-sided 1e-3);
* populations: the deviance of the counts calibrated by a parametric bootstrap
  with refits (:mod:`cavchar.fits.population_check`): sparse cells and the fixed
  shots per delay make Pearson's chi-square law invalid there; flagged below 1e-3.

Flags raise a :class:`~cavchar.errors.ModelMisfitWarning`.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
from scipy import special

from cavchar.errors import ModelMisfitWarning

__all__ = ["residual_diagnostics", "posterior_curves", "MISFIT_P"]

#: two-sided tail probability below which a diagnostic is flagged
MISFIT_P = 1e-3
_Z = float(-special.ndtri(MISFIT_P / 2))  # 3.29, the normal quantile isf(p/2)
#: points of each trace kept for figures, and posterior draws for the model band
PLOT_POINTS = 600
BAND_DRAWS = 200


def _standardized(model, theta: np.ndarray) -> list[np.ndarray]:
    out = []
    for s, mean, sd in zip(model_series(model), model.expected(theta), model.noise_scale(theta),
                           strict=True):
        r = (np.asarray(s.values) - mean) / sd
        out.append(np.concatenate([r.real, r.imag]) if np.iscomplexobj(r) else r)
    return out


def model_series(model) -> list:
    series = getattr(model, "series", None)
    return list(series) if isinstance(series, (list, tuple)) else [series]


def residual_diagnostics(model, signal: str, theta: np.ndarray,
                         rng: np.random.Generator | None = None) -> dict:
    """Diagnostics of the module docstring at the parameter point ``theta`` (ndim,).

    ``rng`` drives the bootstrap of the population check (default: seed 0).
    """
    if signal == "populations":
        return _population_diagnostics(model, theta, rng or np.random.default_rng(0))
    n_traces = len(model_series(model))
    linear = {"power": 2, "power2": 1, "iq": 4, "mean-n": 1}.get(signal, 0)
    per_param = model.ndim / n_traces + linear  # fitted parameters per trace
    out = []
    flags = []
    fitted = np.atleast_1d(getattr(model, "fitted_sigma", True))
    for j, r in enumerate(_standardized(model, theta)):
        n = r.size
        dof = max(n - per_param, 1.0)
        chi2 = float(r @ r)
        rho = float(np.dot(r[:-1], r[1:]) / chi2) if chi2 > 0 else math.nan
        known = not bool(fitted[min(j, fitted.size - 1)])
        entry = {"points": int(n), "reduced_chi2": chi2 / dof, "dof": dof,
                 "lag1_autocorrelation": rho, "autocorrelation_limit": _Z / math.sqrt(n),
                 "noise_known": known}
        if known and signal != "amplitude":
            p_high = float(special.chdtrc(dof, chi2))  # chi-square survival function
            p_low = float(special.chdtr(dof, chi2))  # chi-square distribution function
            entry["chi2_tail_probability"] = min(p_high, p_low)
            if min(p_high, p_low) < MISFIT_P / 2:
                flags.append(f"trace {j + 1}: reduced chi-square {chi2 / dof:.3g} with "
                             f"{dof:.0f} degrees of freedom is "
                             f"{'too large' if p_high < p_low else 'too small'} for the "
                             "given noise")
        if abs(rho) > _Z / math.sqrt(n):
            flags.append(f"trace {j + 1}: residual lag-1 autocorrelation {rho:.3g} beyond "
                         f"+-{_Z / math.sqrt(n):.2g} (white noise)")
        out.append(entry)
    return _finish({"traces": out}, flags)


def _population_diagnostics(model, theta, rng: np.random.Generator) -> dict:
    from cavchar.fits.population_check import population_goodness_of_fit

    check = population_goodness_of_fit(model, theta, rng, threshold=MISFIT_P)
    flag = check.pop("flag")
    return _finish(check, [flag] if flag else [])


def _finish(out: dict, flags: list[str]) -> dict:
    out["misfit"] = bool(flags)
    out["flags"] = flags
    out["threshold"] = MISFIT_P
    if flags:
        warnings.warn("residual check: " + "; ".join(flags) + " - the noise model may not "
                      "describe the data", ModelMisfitWarning, stacklevel=4)
    return out


# ---------------------------------------------------------------- model curves


def _column(nuisance: dict, name: str, j: int, several: bool):
    return nuisance[f"{name}_{j + 1}" if several else name]


def _curves(signal, model, theta, nuisance, j, idx):
    """Model curves (s, p) for draws ``theta`` (s, ndim) at the points ``idx`` of trace j."""
    series = model_series(model)
    s = series[j]
    tau = s.tau[idx][None, :]
    several = len(series) > 1
    life = theta[:, :1]
    if signal == "power":
        a = _column(nuisance, "amplitude", j, several)[:, None]
        f = _column(nuisance, "floor", j, several)[:, None]
        return a * np.exp(-tau / life) + f
    if signal == "power2":
        f = nuisance["floor"][:, None]
        return (theta[:, 2:3] * np.exp(-tau / life) + theta[:, 3:4] * np.exp(-tau / theta[:, 1:2])
                + f)
    if signal == "db":
        return 10 * np.log10(theta[:, 1:2] * np.exp(-tau / life) + theta[:, 2:3])
    if signal == "amplitude":
        nu = theta[:, 1:2] * np.exp(-tau / (2 * life))
        sig = theta[:, 2:3] if model.fitted_sigma else s.sigma[idx][None, :]
        x = -(nu * nu) / (2 * sig * sig)
        lag = (1 - x) * special.i0e(-x / 2) - x * special.i1e(-x / 2)
        return sig * math.sqrt(math.pi / 2) * lag
    if signal == "iq":
        alpha = nuisance["amplitude"] * np.exp(1j * nuisance["phase"])
        offset = nuisance["offset_re"] + 1j * nuisance["offset_im"]
        phase = np.exp(-(0.5 / life + 2j * math.pi * theta[:, 1:2]) * tau)
        return alpha[:, None] * phase + offset[:, None]
    if signal == "mean-n":
        n0 = (_column(nuisance, "n_initial", j, several)[:, None] if model.n0 is None
              else model.n0)
        return theta[:, 1:2] + (n0 - theta[:, 1:2]) * np.exp(-tau / life)
    raise ValueError(signal)


def posterior_curves(model, signal: str, draws: np.ndarray, nuisance: dict, theta: np.ndarray,
                     rng: np.random.Generator) -> dict:
    """Data excerpts, posterior bands of the model and standardized residuals, for figures.

    Plain JSON: per trace ``time`` (s, absolute), ``value`` (real part; ``imag``
    for IQ), ``sigma``, band quantiles ``q025 q16 q50 q84 q975`` of the model
    curve over up to 200 posterior draws (real and imaginary parts for IQ), and
    ``residual`` (standardized, at the posterior median).  Populations: the
    observed fractions and bands per level.
    """
    pick = rng.choice(draws.shape[0], size=min(BAND_DRAWS, draws.shape[0]), replace=False)
    sub_theta = draws[pick]
    sub_nuis = {k: np.asarray(v)[pick] for k, v in nuisance.items()}
    qs = [0.025, 0.16, 0.5, 0.84, 0.975]
    if signal == "populations":
        from cavchar.models.ringdown.photon_number import fock_populations

        pops = fock_populations(sub_theta[:, 0], sub_theta[:, 1], model.p0, model.tau,
                                model.n_levels)
        band = np.quantile(pops, qs, axis=0)  # (5, m, K)
        frac = model.counts / model.counts.sum(axis=1, keepdims=True)
        return {"populations": {"delay": model.tau.tolist(), "fraction": frac.tolist(),
                                **{f"q{int(q * 1000):03d}": b.tolist()
                                   for q, b in zip(qs, band, strict=True)}}}
    traces = []
    standardized = _standardized(model, theta)
    for j, s in enumerate(model_series(model)):
        n = s.n
        idx = np.unique(np.linspace(0, n - 1, min(n, PLOT_POINTS)).astype(int))
        curves = _curves(signal, model, sub_theta, sub_nuis, j, idx)
        entry = {"label": s.label, "time": (s.tau[idx] + s.t0).tolist(), "t0": s.t0,
                 "value": np.real(s.values[idx]).tolist(),
                 "sigma": None if s.sigma is None else s.sigma[idx].tolist(),
                 "residual": standardized[j][idx].tolist()}
        for q, b in zip(qs, np.quantile(curves.real, qs, axis=0), strict=True):
            entry[f"q{int(q * 1000):03d}"] = b.tolist()
        if np.iscomplexobj(curves):
            entry["imag"] = np.imag(s.values[idx]).tolist()
            entry["residual_imag"] = standardized[j][n + idx].tolist()
            for q, b in zip(qs, np.quantile(curves.imag, qs, axis=0), strict=True):
                entry[f"q{int(q * 1000):03d}_imag"] = b.tolist()
        traces.append(entry)
    return {"traces": traces}
