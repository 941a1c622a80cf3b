"""Ring-down likelihood models: one entry point over the signal types.

=============== ===================================================== =====================
signal          model                                                 module
=============== ===================================================== =====================
``power``       ``A e^{-tau/T_c} + F``, Gaussian noise; several        power
                traces share ``T_c``; A and F marginalized
``power2``      two exponentials + floor (model comparison)           two_exponentials
``db``          ``10 log10(A e^{-tau/T_c} + F)`` + Gaussian dB noise  decibel
``amplitude``   field magnitude ``a e^{-tau/(2 T_c)}``, Rice noise    field
``iq``          complex ``alpha e^{-tau/(2T_c)} e^{-2 pi i delta tau}  field
                + c``; alpha and c marginalized
``mean-n``      ``n_th + (n0 - n_th) e^{-tau/T_c}``                   photon_number
``populations`` multinomial photon-number counts after a Fock state   photon_number
=============== ===================================================== =====================

Every model offers the same interface:

* ``specs``: tuple of :class:`~cavchar.parameters.ParameterSpec` (sampled
  parameters, physical units, default priors; see
  :func:`~cavchar.models.ringdown.series.default_spec`);
* ``log_likelihood(theta)``: batched ``(k, ndim) -> (k,)``, ``-inf`` outside the
  support, never NaN;
* ``initial_guess()``: the least-squares start (variable projection where
  the model has linear parameters; no user guess needed);
* ``draw_nuisance(draws, rng)``: exact conditional draws of the parameters
  that were marginalized analytically (dict of arrays);
* ``expected(theta)`` and ``noise_scale(theta)``: model curve and per-point
  noise sd of each trace at one parameter point (for residual diagnostics).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from cavchar.models.ringdown.decibel import DecibelDecay
from cavchar.models.ringdown.field import IQDecay, MagnitudeDecay, rice_logpdf
from cavchar.models.ringdown.photon_number import MeanPhotonDecay, PopulationDecay, fock_populations
from cavchar.models.ringdown.power import PowerDecay
from cavchar.models.ringdown.series import DecaySeries, default_spec
from cavchar.models.ringdown.two_exponentials import (
    ModelComparison,
    TwoExponentialPower,
    compare_exponentials,
)

__all__ = [
    "SIGNALS",
    "build_model",
    "DecaySeries",
    "default_spec",
    "PowerDecay",
    "TwoExponentialPower",
    "DecibelDecay",
    "MagnitudeDecay",
    "IQDecay",
    "MeanPhotonDecay",
    "PopulationDecay",
    "ModelComparison",
    "compare_exponentials",
    "rice_logpdf",
    "fock_populations",
    "profile_check",
]

#: signal name -> what it means (the ``--signal`` choices)
SIGNALS: dict[str, str] = {
    "power": "linear power A exp(-t/T_c) + floor",
    "power2": "two exponentials + floor (compared with one)",
    "db": "power in dB: 10 log10(A exp(-t/T_c) + floor)",
    "amplitude": "field magnitude, decays in 2 T_c, Rice noise",
    "iq": "complex IQ samples with detuning",
    "mean-n": "mean photon number relaxing to n_th",
    "populations": "photon-number counts after a Fock-state preparation",
}


def build_model(signal: str, series: Sequence[DecaySeries] | DecaySeries, **options: Any):
    """The likelihood model of ``signal`` for the traces ``series``.

    ``options`` go to the model class (e.g. ``amplitude_max``, ``compress``,
    ``n0``); for ``populations`` pass ``counts`` (m, K) and ``p0`` and let
    ``series`` carry the delays in ``tau``.
    """
    many = [series] if isinstance(series, DecaySeries) else list(series)
    if signal not in SIGNALS:
        raise ValueError(f"unknown signal {signal!r}; one of {', '.join(SIGNALS)}")
    if signal == "power":
        return PowerDecay(many, **options)
    if signal == "mean-n":
        return MeanPhotonDecay(many, **options)
    if signal == "populations":
        counts = options.pop("counts")
        p0 = options.pop("p0")
        return PopulationDecay(many[0].tau, counts, p0, **options)
    if len(many) != 1:
        raise ValueError(f"signal {signal!r} fits one trace at a time")
    single = many[0]
    cls = {"power2": TwoExponentialPower, "db": DecibelDecay, "amplitude": MagnitudeDecay,
           "iq": IQDecay}[signal]
    return cls(single, **options)


def profile_check(model, theta: np.ndarray) -> float:
    """Largest ``|ln L_compressed - ln L_direct|`` over ``theta`` (k, ndim), for models
    with compressed sums (the effect of the compression on the log posterior)."""
    theta = np.atleast_2d(np.asarray(theta, dtype=float))
    fast = model.log_likelihood(theta)
    slow = model.log_likelihood(theta, direct=True)
    both = np.isfinite(fast) & np.isfinite(slow)
    if not np.array_equal(np.isfinite(fast), np.isfinite(slow)):
        return float("inf")
    return float(np.max(np.abs(fast[both] - slow[both]))) if both.any() else 0.0
