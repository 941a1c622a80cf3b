"""Noise-free ring-down curves of every signal kind, their Jacobians, and the Rice law.

One home for the decay laws that the simulator, the planner and the models
share (``u = exp(-(t - t0) / T_c)``, ``tau = t - t0``, ``T_c`` the energy
lifetime; the field decays with the amplitude decay time ``2 T_c``):

* power ``A u + F``; dB ``10 log10(A u + F)``;
* amplitude (the Rice location) ``A u^(1/2)``;
* IQ ``(c_re + i c_im) u^(1/2) exp(-2 pi i Delta tau) + o_re + i o_im``;
* mean photon number ``n_th + (n0 - n_th) u`` (Walls & Milburn, *Quantum
  Optics*, 2nd ed., sec. 6.1: ``d<n>/dt = -kappa (<n> - n_th)``).

The magnitude of a complex signal with Gaussian noise of sd ``sigma`` per
quadrature follows the Rice law (Rice, *Bell Syst. Tech. J.* 24, 46 (1945)):
``p(m) = m / sigma^2 exp(-(m^2 + nu^2) / 2 sigma^2) I_0(m nu / sigma^2)``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

from cavchar.errors import InputError

__all__ = ["RINGDOWN_NUISANCES", "RingdownCurve", "ringdown_signal", "ringdown_mean",
           "rice_logpdf", "initial_distribution"]

#: nuisance parameters of :func:`ringdown_mean`, after the parameters of interest
RINGDOWN_NUISANCES = {
    "power": ("amplitude", "floor"),
    "db": ("amplitude", "floor"),
    "amplitude": ("amplitude", "noise"),
    "iq": ("amplitude_re", "amplitude_im", "detuning", "offset_re", "offset_im"),
    "mean_n": ("initial_mean",),
    "populations": (),
}


def ringdown_signal(signal: str) -> str:
    """The canonical signal name (``mean-n`` -> ``mean_n``); InputError when unknown."""
    name = str(signal).lower().replace("-", "_")
    if name not in RINGDOWN_NUISANCES:
        raise InputError(f"unknown signal kind {signal!r}",
                         hint="choose power, db, amplitude, iq, mean-n or populations")
    return name


def ringdown_mean(signal: str, times: ArrayLike, theta: ArrayLike, t0: float = 0.0,
                  ) -> tuple[np.ndarray, np.ndarray]:
    """Noise-free ring-down curve and its Jacobian (module docstring).

    Parameters
    ----------
    signal
        ``power``, ``db``, ``amplitude``, ``iq`` or ``mean_n``.
    times : array, shape (m,)
        Sample times in s.
    theta : array, shape (p,)
        ``T_c`` in s (and ``n_th`` for mean_n) then every nuisance of
        :data:`RINGDOWN_NUISANCES` in that order (detuning in Hz).
    t0
        Start of the decay in s.

    Returns
    -------
    model : ndarray, shape (m,)
        Complex for IQ.
    jacobian : ndarray, shape (m, p)
        Derivatives with respect to ``theta``.
    """
    signal = ringdown_signal(signal)
    theta = np.asarray(theta, dtype=float)
    tau = np.asarray(times, dtype=float) - t0
    t_c = theta[0]
    u = np.exp(-tau / t_c)
    du = u * tau / t_c**2  # du/dT_c
    if signal in ("power", "db"):
        a, f = theta[1], theta[2]
        lin = a * u + f
        jac = np.column_stack([a * du, u, np.ones_like(u)])
        if signal == "power":
            return lin, jac
        if np.any(lin <= 0):
            raise InputError("a dB ring-down needs amplitude * decay + floor > 0 at all times")
        return 10 * np.log10(lin), jac * (10 / math.log(10)) / lin[:, None]
    if signal == "amplitude":
        a = theta[1]
        r = np.sqrt(u)
        return a * r, np.column_stack([a * 0.5 * du / r, r, np.zeros_like(u)])
    if signal == "iq":
        c = theta[1] + 1j * theta[2]
        rot = np.sqrt(u) * np.exp(-2j * np.pi * theta[3] * tau)
        field = c * rot
        one = np.ones_like(rot)
        jac = np.column_stack([field * 0.5 * tau / t_c**2, rot, 1j * rot,
                               field * (-2j * np.pi * tau), one, 1j * one])
        return field + theta[4] + 1j * theta[5], jac
    if signal == "mean_n":
        n, n0 = theta[1], theta[2]
        return n + (n0 - n) * u, np.column_stack([(n0 - n) * du, 1 - u, u])
    raise InputError("populations have no Gaussian mean model; see cavchar.dynamics.populations")


@dataclass(frozen=True)
class RingdownCurve:
    """The assumed noise-free ring-down of every signal kind (module docstring), in SI units.

    One set of values that the simulator draws traces around and the planner
    computes the information of.

    Attributes
    ----------
    lifetime
        Energy lifetime ``T_c`` in s.
    amplitude
        ``A``: power units for power/db, field units for amplitude/iq.
    floor
        Power floor ``F`` (power/db).
    t0
        Start of the decay in s.
    n_thermal
        Thermal photon number ``n_th`` (mean_n, populations).
    initial
        The prepared state (mean_n, populations): a Fock number, or the
        probabilities of ``0, 1, ...``; for mean_n a single number is the
        initial mean photon number ``n0``.
    detuning
        IQ detuning ``Delta`` in Hz.
    phase
        Phase of the field at ``t0`` in rad (amplitude/iq): ``c = A e^{i phase}``.
    offset
        Constant complex IQ offset ``o``.
    """

    lifetime: float
    amplitude: float = 1.0
    floor: float = 0.0
    t0: float = 0.0
    n_thermal: float = 0.0
    initial: int | float | ArrayLike = 1
    detuning: float = 0.0
    phase: float = 0.0
    offset: complex = 0.0

    @property
    def initial_mean(self) -> float:
        """Initial mean photon number ``n0``: ``initial`` itself when it is one number,
        else ``sum_n n p_n`` of the distribution."""
        p0 = np.atleast_1d(np.asarray(self.initial, dtype=float))
        return float(p0[0]) if p0.size == 1 else float(np.dot(np.arange(p0.size), p0))

    def parameters(self, signal: str, noise: float = 0.0) -> dict[str, float]:
        """Every parameter of the ``signal`` model by name, in :func:`ringdown_mean` order.

        ``lifetime`` (s), ``n_thermal`` for mean_n and populations, then the
        nuisances of :data:`RINGDOWN_NUISANCES` (``noise``: the noise sd per
        quadrature of an amplitude signal, in field units).
        """
        signal = ringdown_signal(signal)
        field = self.amplitude * np.exp(1j * self.phase)
        offset = complex(self.offset)
        known = {"amplitude": self.amplitude, "floor": self.floor, "noise": noise,
                 "initial_mean": self.initial_mean, "amplitude_re": float(field.real),
                 "amplitude_im": float(field.imag), "detuning": self.detuning,
                 "offset_re": offset.real, "offset_im": offset.imag}
        values = {"lifetime": self.lifetime}
        if signal in ("mean_n", "populations"):
            values["n_thermal"] = self.n_thermal
        return values | {name: known[name] for name in RINGDOWN_NUISANCES[signal]}

    def mean(self, signal: str, times: ArrayLike, noise: float = 0.0,
             ) -> tuple[np.ndarray, np.ndarray]:
        """:func:`ringdown_mean` of this curve at ``times`` (s): model (m,) and Jacobian
        (m, p) with respect to :meth:`parameters`."""
        theta = list(self.parameters(signal, noise).values())
        return ringdown_mean(signal, times, theta, self.t0)


def rice_logpdf(m: ArrayLike, nu: ArrayLike, sigma: ArrayLike) -> np.ndarray:
    """Log density of the Rice law (module docstring); broadcasts; -inf for ``m <= 0``.

    Uses ``ln I_0(x) = ln i0e(x) + x`` (exponentially scaled Bessel function) so
    large arguments do not overflow.
    """
    m = np.asarray(m, dtype=float)
    nu = np.asarray(nu, dtype=float)
    sigma = np.asarray(sigma, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        s2 = sigma * sigma
        x = m * nu / s2
        out = (np.log(m) - np.log(s2) - (m * m + nu * nu) / (2 * s2)
               + np.log(special.i0e(x)) + x)
    return np.where(m > 0, out, -np.inf)


def initial_distribution(initial: int | float | ArrayLike) -> np.ndarray:
    """Photon-number distribution of a prepared state, shape (L,).

    A whole number ``n`` gives the Fock state ``|n>`` (``[0, ..., 0, 1]``); a
    sequence is taken as probabilities of ``0, 1, ...`` and must sum to 1.
    """
    from cavchar.dynamics import MAX_LEVELS

    if np.ndim(initial) == 0 or np.size(initial) == 1:
        value = float(np.ravel(np.asarray(initial, dtype=float))[0])
        if not (math.isfinite(value) and 0 <= value <= MAX_LEVELS):
            raise InputError(f"the initial Fock number must lie in 0..{MAX_LEVELS}, not {value:g}")
        if not value.is_integer():
            raise InputError(f"the initial Fock number must be a whole number >= 0, not {value:g}")
        p0 = np.zeros(int(value) + 1)
        p0[int(value)] = 1.0
        return p0
    p0 = np.asarray(initial, float)
    if p0.size > MAX_LEVELS:
        raise InputError(f"the initial distribution has {p0.size} photon numbers, more than "
                         f"the {MAX_LEVELS} cavchar handles")
    if p0.ndim != 1 or np.any(p0 < 0) or not np.isclose(p0.sum(), 1.0, atol=1e-9):
        raise InputError("the initial distribution must be probabilities summing to 1")
    return p0
