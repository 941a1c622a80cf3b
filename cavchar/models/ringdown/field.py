r"""Ring-downs of the field: magnitudes (Rice noise) and complex IQ samples.

The field amplitude decays at half the energy rate: ``|a(t)| ∝ exp(-t / (2 T_c))``
(amplitude decay time ``2 T_c``); every model here is parametrized by the
energy lifetime ``T_c``.

Magnitude (:class:`MagnitudeDecay`)
-----------------------------------
``m_i = |nu_i e^{i phi} + noise|`` with complex Gaussian noise of sd ``sigma``
per quadrature and ``nu_i = a exp(-tau_i / (2 T_c))`` follows the Rice law
(Rice, Bell Syst. Tech. J. 24, 46 (1945))::

    ln f(m | nu, sigma) = ln m - 2 ln sigma - (m^2 + nu^2) / (2 sigma^2) + ln I_0(m nu / sigma^2)

with ``ln I_0(x) = ln i0e(x) + x`` (exponentially scaled Bessel function), so
the noise floor enters through the likelihood rather than by subtraction.
Sampled: ``lifetime``, ``amplitude`` (``a``) and, unless known, ``sigma``.

IQ (:class:`IQDecay`)
---------------------
``z_i = alpha exp(-tau_i/(2 T_c)) exp(-2 pi i delta tau_i) + c + noise`` with
complex ``alpha`` (amplitude and phase at ``t0``) and offset ``c``, detuning
``delta`` in Hz, and noise of sd ``sigma`` per quadrature.  For fixed
``(T_c, delta)`` the model is linear in ``(alpha, c)``; with basis
``phi = exp(-s tau)``, ``s = 1/(2 T_c) + 2 pi i delta``, the Hermitian Gram
matrix ``G = [[S_w(1/T_c), S_w(conj s)], [conj S_w(conj s), S_w(0)]]`` and
``b = (S_y(conj s), S_y(0))`` (exponential sums at complex rates):

    sum_i w_i |z_i - model|^2 = RSS + (c - c_hat)^H G (c - c_hat),  RSS = sum w|z|^2 - Re b^H c_hat.

Priors: ``alpha`` uniform on the disk ``|alpha| <= alpha_max`` (density
``1/(pi alpha_max^2)``), ``c`` flat on the complex plane.  Integrating the four
real linear parameters (a complex Gaussian integral gives
``(2 pi sigma^2)^p / det G``, ``p = 2``):

    ln L = -n ln(2 pi sigma^2) - RSS/(2 sigma^2) + 2 ln(2 pi sigma^2) - ln det G
           + ln P(|alpha| <= alpha_max) - ln(pi alpha_max^2),

where ``alpha`` is marginally circular Gaussian about ``alpha_hat`` with
variance ``sigma^2 V`` per quadrature, ``V = (G^{-1})_{11}``, so
``P = F_{chi'^2}(alpha_max^2 / (sigma^2 V); 2, |alpha_hat|^2 / (sigma^2 V))``
(non-central chi-square with 2 degrees of freedom).  Known per-point sigma:
weights ``1/sigma_i^2`` and ``sigma = 1`` in the formula, with
``-sum ln(2 pi sigma_i^2)`` for the normalization.  Sampled: ``lifetime``,
``detuning`` and, unless known, ``sigma``.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize, special

from cavchar.decay import rice_logpdf
from cavchar.models.ringdown.exponential_sums import ExponentialSums
from cavchar.models.ringdown.least_squares import fit_exponentials
from cavchar.models.ringdown.power import default_lifetime_bounds
from cavchar.models.ringdown.series import (
    DecayModel,
    DecaySeries,
    amplitude_bound,
    as_batch,
    default_spec,
)

__all__ = ["rice_logpdf", "MagnitudeDecay", "IQDecay"]

_BLOCK = 2_000_000


class MagnitudeDecay(DecayModel):
    """Field magnitudes with Rice noise; see the module docstring.

    Parameters
    ----------
    series
        One trace of magnitudes (>= 0); ``sigma`` (per quadrature) known or ``None``.
    """

    signal = "amplitude"

    def __init__(self, series: DecaySeries) -> None:
        self._hold(series)
        self.m = np.asarray(series.values, dtype=float)
        low, high = default_lifetime_bounds([series])
        top = float(self.m.max())
        params = [
            default_spec("lifetime", "s", "T_c", low, high, True),
            default_spec("amplitude", "", "a", 1e-6 * top, 1e3 * top, True),
        ]
        if self.fitted_sigma:
            params.append(default_spec("sigma", "", "sigma", 1e-6 * top, 1e2 * top, True))
        self.specs = tuple(params)
        self.start = self._least_squares()  # evaluates the likelihood: after the specs

    def _least_squares(self) -> np.ndarray:
        """Start from the power ``m^2``: ``E[m^2] = nu^2 + 2 sigma^2`` decays with ``T_c``."""
        lin = fit_exponentials(self.tau, self.m**2, 1, t0=0.0)
        top = float(self.m.max())
        amp = math.sqrt(max(float(lin.amplitudes[0]), 1e-6 * top * top))
        sig = math.sqrt(max(0.5 * float(lin.floor), 1e-8 * top * top))
        guess = [1.0 / float(lin.rates[0]), amp]
        if self.fitted_sigma:
            guess.append(sig)
        x0 = np.log(guess)
        sol = optimize.minimize(lambda x: -float(self.log_likelihood(np.exp(x)[None])[0])
                                if np.all(np.isfinite(x)) else np.inf,
                                x0, method="Nelder-Mead",
                                options={"xatol": 1e-8, "fatol": 1e-8, "maxiter": 4000})
        x = sol.x if np.isfinite(sol.fun) else x0
        return np.exp(x)

    def log_likelihood(self, theta: np.ndarray) -> np.ndarray:
        """(k, ndim) -> (k,), columns lifetime, amplitude[, sigma]."""
        theta = as_batch(theta, self.ndim)
        ok = np.isfinite(theta).all(axis=1) & (theta > 0).all(axis=1)
        out = np.full(theta.shape[0], -np.inf)
        if not ok.any():
            return out
        th = theta[ok]
        res = np.empty(th.shape[0])
        step = max(1, _BLOCK // max(self.tau.size, 1))
        sig_known = None if self.fitted_sigma else self.series.sigma
        for s in range(0, th.shape[0], step):
            t = th[s:s + step]
            nu = t[:, 1:2] * np.exp(-self.tau / (2.0 * t[:, 0:1]))
            sig = t[:, 2:3] if self.fitted_sigma else sig_known
            res[s:s + step] = rice_logpdf(self.m, nu, sig).sum(axis=1)
        out[ok] = np.where(np.isnan(res), -np.inf, res)
        return out

    __call__ = log_likelihood

    def expected(self, theta: np.ndarray) -> list[np.ndarray]:
        """Mean magnitude ``E[m]`` of the Rice law at ``theta`` (Rice 1945)."""
        theta = np.asarray(theta, dtype=float)
        nu = theta[1] * np.exp(-self.tau / (2 * theta[0]))
        sig = theta[2] if self.fitted_sigma else self.series.sigma
        x = -(nu * nu) / (2 * sig * sig)
        # E[m] = sigma sqrt(pi/2) L_{1/2}(x), L_{1/2}(x) = e^{x/2}[(1-x) I0(-x/2) - x I1(-x/2)]
        half = -x / 2
        lag = (1 - x) * special.i0e(half) - x * special.i1e(half)
        return [sig * math.sqrt(math.pi / 2) * lag]

    def noise_scale(self, theta: np.ndarray) -> list[np.ndarray]:
        """Sd of the Rice law at ``theta``: ``sqrt(2 sigma^2 + nu^2 - E[m]^2)``."""
        theta = np.asarray(theta, dtype=float)
        nu = theta[1] * np.exp(-self.tau / (2 * theta[0]))
        sig = theta[2] if self.fitted_sigma else self.series.sigma
        mean = self.expected(theta)[0]
        return [np.sqrt(np.maximum(2 * sig * sig + nu * nu - mean * mean, 1e-300))]


class IQDecay(DecayModel):
    """Complex IQ ring-down with detuning; amplitude and offset marginalized (module docstring).

    Parameters
    ----------
    series
        One trace of complex samples; ``sigma`` per quadrature known or ``None``.
    alpha_max
        Radius of the uniform prior disk of ``alpha`` (default 100 times the
        largest ``|z|``).
    compress
        Compressed exponential sums (exact to rounding) instead of brute force.
    """

    signal = "iq"

    def __init__(self, series: DecaySeries, *, alpha_max: float | None = None,
                 compress: bool = True) -> None:
        self._hold(series)
        self.z = np.asarray(series.values, dtype=complex)
        self.alpha_max = float(alpha_max if alpha_max is not None
                               else amplitude_bound(np.abs(self.z)))
        self.weights = series.weights()
        offset = complex(np.mean(self.z[self.tau >= np.quantile(self.tau, 0.9)]))
        exact = ExponentialSums(self.tau, self.z, self.weights, offset=offset)
        lifetime, detuning = self._grid_start(exact)
        self.sums = exact
        if compress:
            self.sums = self._compressed(lifetime, detuning, offset)
        lifetime, detuning = self._refine(lifetime, detuning)
        if compress and self._needed_limit(lifetime, detuning) > self.sums.rate_limit:
            self.sums = self._compressed(lifetime, detuning, offset)
        n = series.n
        rss = float(self._pieces(np.array([lifetime]), np.array([detuning]))["rss"][0])
        sigma = math.sqrt(max(rss, 1e-300) / (2 * max(n - 2, 1)))
        self.start = np.array([lifetime, detuning] + ([sigma] if self.fitted_sigma else []))
        if self.fitted_sigma:
            self._const = 0.0
        else:
            self._const = -float(np.sum(np.log(2 * math.pi * series.sigma**2))) \
                + 2 * math.log(2 * math.pi)
        low, high = default_lifetime_bounds([series])
        nyquist = 0.5 / float(np.median(np.diff(np.sort(self.tau))))
        top = float(np.abs(self.z).max())
        params = [
            default_spec("lifetime", "s", "T_c", low, high, True),
            default_spec("detuning", "Hz", "delta", -nyquist, nyquist, False),
        ]
        if self.fitted_sigma:
            params.append(default_spec("sigma", "", "sigma", 1e-6 * top, 1e2 * top, True))
        self.specs = tuple(params)

    def _needed_limit(self, lifetime: float, detuning: float) -> float:
        """Rates the posterior needs, ``1/T_c`` and ``|s|``, with headroom for ``T_c``
        down to 2/3 of the start and ``delta`` within 1.5/span of it (other rates are
        summed directly: the headroom affects speed only)."""
        rate = 1.5 / lifetime
        return max(rate, abs(0.5 * rate + 2j * math.pi * (abs(detuning) + 1.5 / max(
            self.series.span, 1e-300))))

    def _compressed(self, lifetime: float, detuning: float, offset: complex) -> ExponentialSums:
        return ExponentialSums(self.tau, self.z, self.weights, offset=offset,
                               rate_limit=self._needed_limit(lifetime, detuning))

    def _grid_start(self, sums: ExponentialSums) -> tuple[float, float]:
        """Detuning from the periodogram peak, lifetime from the power envelope."""
        z = self.z - sums.offset
        steps = np.diff(self.tau)
        dt = float(np.median(steps))
        if np.all(steps > 0) and np.allclose(steps, dt, rtol=1e-6, atol=0):
            size = 1 << int(math.ceil(math.log2(4 * z.size)))
            spec = np.abs(np.fft.fft(z, size))
            freq = np.fft.fftfreq(size, dt)
            detuning = -float(freq[int(np.argmax(spec))])
        else:
            grid = np.linspace(-0.5 / dt, 0.5 / dt, 2049)
            _, power = sums.direct(2j * math.pi * grid)
            detuning = -float(grid[int(np.argmax(np.abs(power)))])
        env = fit_exponentials(self.tau, np.abs(z) ** 2, 1, t0=0.0)
        return 1.0 / float(env.rates[0]), detuning

    def _refine(self, lifetime: float, detuning: float) -> tuple[float, float]:
        """Minimize the profiled RSS over (ln T_c, delta) (Nelder-Mead)."""
        scale = 1.0 / (2 * math.pi * lifetime)

        def objective(x):
            p = self._pieces(np.array([math.exp(x[0])]), np.array([detuning + x[1] * scale]))
            v = float(p["rss"][0])
            return v if np.isfinite(v) else np.inf

        sol = optimize.minimize(objective, np.array([math.log(lifetime), 0.0]),
                                method="Nelder-Mead",
                                options={"xatol": 1e-9, "fatol": 1e-12, "maxiter": 2000})
        return math.exp(sol.x[0]), detuning + sol.x[1] * scale

    def _pieces(self, lifetime: np.ndarray, detuning: np.ndarray, direct: bool = False) -> dict:
        s = self.sums
        k = lifetime.size
        rate = 1.0 / lifetime
        srate = 0.5 * rate - 2j * math.pi * detuning  # conj(s)
        evaluate = s.direct if direct else s
        w, y = evaluate(np.concatenate([rate.astype(complex), srate]))
        w11 = w[:k].real
        w12 = w[k:]
        b1 = y[k:]
        w0, b2 = s.sum_w, s.sum_y
        det = w11 * w0 - (w12.real**2 + w12.imag**2)
        with np.errstate(divide="ignore", invalid="ignore"):
            alpha = (w0 * b1 - w12 * b2) / det
            offset = (w11 * b2 - np.conj(w12) * b1) / det
            rss = s.sum_yy - (np.conj(b1) * alpha + np.conj(b2) * offset).real
            v = w0 / det
        return {"det": det, "alpha": alpha, "offset": offset + s.offset, "rss": rss, "v": v}

    def log_likelihood(self, theta: np.ndarray, *, direct: bool = False) -> np.ndarray:
        """(k, ndim) -> (k,), columns lifetime, detuning[, sigma] (module docstring)."""
        theta = as_batch(theta, self.ndim)
        ok = np.isfinite(theta).all(axis=1) & (theta[:, 0] > 0)
        if self.fitted_sigma:
            ok &= theta[:, 2] > 0
        out = np.full(theta.shape[0], -np.inf)
        if not ok.any():
            return out
        th = theta[ok]
        p = self._pieces(th[:, 0], th[:, 1], direct)
        n = self.series.n
        with np.errstate(divide="ignore", invalid="ignore"):
            if self.fitted_sigma:
                s2 = th[:, 2] ** 2
                ll = (-(n - 2) * np.log(2 * math.pi * s2) - p["rss"] / (2 * s2)
                      - np.log(p["det"]))
            else:
                s2 = np.ones(th.shape[0])
                ll = -0.5 * p["rss"] - np.log(p["det"])
            var = s2 * p["v"]
            dist = self.alpha_max - np.abs(p["alpha"])
            need = ~(dist > 9.2 * np.sqrt(var))  # outside: P = 1 to 1e-18
            disk = np.zeros(th.shape[0])
            if need.any():
                prob = special.chndtr(self.alpha_max**2 / var[need], 2,
                                      np.abs(p["alpha"][need]) ** 2 / var[need])
                disk[need] = np.log(prob)
        ll = ll + disk + self._const - math.log(math.pi * self.alpha_max**2)
        bad = ~(p["det"] > 0) | ~(p["rss"] > 0)
        out[ok] = np.where(bad | np.isnan(ll), -np.inf, ll)
        return out

    __call__ = log_likelihood

    def draw_nuisance(self, draws: np.ndarray, rng: np.random.Generator) -> dict:
        """Draws of ``|alpha|``, its phase and the offset given each draw (Gaussian, the
        disk constraint applied by rejection; the disk is normally far away)."""
        draws = as_batch(draws, self.ndim)
        p = self._pieces(draws[:, 0], draws[:, 1])
        s2 = draws[:, 2] ** 2 if self.fitted_sigma else np.ones(draws.shape[0])
        w0 = self.sums.sum_w
        alpha = np.empty(draws.shape[0], dtype=complex)
        todo = np.arange(draws.shape[0])
        for _ in range(100):
            sd = np.sqrt(s2[todo] * p["v"][todo])
            cand = p["alpha"][todo] + sd * (rng.standard_normal(todo.size)
                                            + 1j * rng.standard_normal(todo.size))
            good = np.abs(cand) <= self.alpha_max
            alpha[todo[good]] = cand[good]
            todo = todo[~good]
            if not todo.size:
                break
        alpha[todo] = p["alpha"][todo]
        # offset | alpha: mean c_hat - (G_21 / G_22)(alpha - alpha_hat), variance sigma^2/G_22
        rate = 1.0 / draws[:, 0]
        w12, _ = self.sums(0.5 * rate - 2j * math.pi * draws[:, 1])
        mean_c = p["offset"] - np.conj(w12) / w0 * (alpha - p["alpha"])
        sd_c = np.sqrt(s2 / w0)
        offset = mean_c + sd_c * (rng.standard_normal(alpha.size)
                                  + 1j * rng.standard_normal(alpha.size))
        return {"amplitude": np.abs(alpha), "phase": np.angle(alpha),
                "offset_re": offset.real, "offset_im": offset.imag}

    def expected(self, theta: np.ndarray) -> list[np.ndarray]:
        """Best complex model curve at ``theta`` (linear parameters at their conditional best)."""
        theta = np.asarray(theta, dtype=float)
        p = self._pieces(theta[:1], theta[1:2])
        phi = np.exp(-(0.5 / theta[0] + 2j * math.pi * theta[1]) * self.tau)
        return [p["alpha"][0] * phi + p["offset"][0]]

    def noise_scale(self, theta: np.ndarray) -> list[np.ndarray]:
        """Per-quadrature noise sd of each point at ``theta`` (one array per trace)."""
        theta = np.asarray(theta, dtype=float)
        if self.fitted_sigma:
            return [np.full(self.tau.size, theta[2])]
        return [self.series.sigma]
