"""Ring-down traces of every signal kind with their noise models.

Power, dB, amplitude (Rice), IQ, mean photon number and Fock-population counts
(see :func:`simulate_ringdown`), decaying with ``u = exp(-(t - t0) / T_c)``,
``T_c`` the energy lifetime.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import replace

import numpy as np
from numpy.typing import ArrayLike

from cavchar.decay import RingdownCurve, initial_distribution
from cavchar.errors import InputError
from cavchar.records import RingdownTrace
from cavchar.simulate._common import (
    MAX_CELLS,
    MAX_ROWS,
    Seed,
    check_physics,
    check_size,
    rng_from,
    truth_metadata,
)

__all__ = ["simulate_ringdown"]


def simulate_ringdown(
    signal: str,
    times: ArrayLike,
    lifetime: float,
    *,
    amplitude: float = 1.0,
    floor: float = 0.0,
    t0: float = 0.0,
    noise: float = 0.0,
    detuning: float = 0.0,
    phase: float = 0.0,
    offset: complex = 0.0,
    n_th: float = 0.0,
    initial: int | ArrayLike = 1,
    shots: int = 1000,
    n_levels: int | None = None,
    traces: int = 1,
    known_sigma: bool | None = None,
    seed: Seed = None,
    metadata: Mapping[str, object] | None = None,
) -> RingdownTrace:
    """Ring-down traces of one signal kind, with ``u = exp(-(t - t0) / T_c)``:

    * ``power``: ``A u + floor + noise * N(0, 1)`` (linear power);
    * ``db``: ``10 log10(A u + floor) + noise * N(0, 1)`` (noise in dB);
    * ``amplitude``: ``|A e^{i phase} u^(1/2) + noise (X + iY)|`` — the field
      decays with the amplitude decay time 2 T_c; X, Y standard normal, so the
      magnitude is Rice distributed;
    * ``iq``: ``A e^{i phase} u^(1/2) exp(-2 pi i detuning (t - t0)) + offset
      + noise (X + iY)``;
    * ``mean_n``: ``n_th + (n0 - n_th) u + noise * N(0, 1)``, ``n0`` the mean
      of the initial state;
    * ``populations``: counts of photon numbers at each delay ``t - t0`` after
      preparing ``initial`` (a Fock number or a distribution), multinomial with
      ``shots`` shots and probabilities from :func:`cavchar.dynamics.populations`.

    Parameters
    ----------
    signal : str
        One of :data:`cavchar.records.SIGNALS` (``mean-n`` accepted).
    times : array (m,)
        Sample times in s, increasing.
    lifetime : float
        Energy lifetime T_c in s.
    amplitude, floor : float
        ``A`` (power units for power/db; field units for amplitude/iq) and the
        power floor (power/db).
    t0 : float
        Start of the decay in s.
    noise : float
        Standard deviation (value units; per quadrature for amplitude/iq; dB for db).
    detuning : float
        IQ detuning in Hz.
    phase : float
        Phase of the field at t0 in rad (amplitude/iq).
    offset : complex
        Constant IQ offset.
    n_th : float
        Thermal photon number (mean_n, populations).
    initial : int or array
        Initial Fock number, or initial distribution (mean_n, populations).
    shots, n_levels : int
        Shots per delay and number of photon-number columns (default: a
        truncation whose neglected tail is < 1e-12) for populations.
    traces : int
        Number of independent traces on the same times (ids 0, 1, ...).
    known_sigma : bool, optional
        Write the noise level as the ``sigma`` column (default: only for mean_n).
    """
    signal = str(signal).lower().replace("-", "_")
    kappa = check_physics(lifetime, n_th)
    times = np.asarray(times, dtype=float)
    if times.ndim != 1 or times.size == 0 or traces < 1 or noise < 0:
        raise InputError("give at least one time, traces >= 1 and noise >= 0")
    check_size(float(traces) * times.size, "trace points", MAX_ROWS,
               "reduce --points or --traces")
    rng = rng_from(seed)
    m = times.size
    shape = (int(traces), m)
    extra: dict[str, object] = {"signal": signal, "true_t0": f"{t0!r} s"}
    curve = RingdownCurve(lifetime, amplitude=amplitude, floor=floor, t0=t0, n_thermal=n_th,
                          initial=initial, detuning=detuning, phase=phase, offset=offset)
    if signal in ("power", "db"):
        clean, _ = curve.mean(signal, times)
        extra.update(true_amplitude=repr(amplitude), true_floor=repr(floor))
        value = clean + noise * rng.standard_normal(shape)
    elif signal in ("amplitude", "iq"):
        # a magnitude trace has no detuning or offset: the field is A e^{i phase} u^(1/2)
        field, _ = (curve if signal == "iq" else replace(curve, detuning=0.0, offset=0.0)
                    ).mean("iq", times)
        extra.update(true_amplitude=repr(amplitude), true_phase=f"{phase!r} rad")
        if signal == "iq":
            extra.update(true_detuning=f"{detuning!r} Hz", true_offset=repr(complex(offset)))
        value = field + noise * (rng.standard_normal(shape) + 1j * rng.standard_normal(shape))
        if signal == "amplitude":
            value = np.abs(value)
    elif signal in ("mean_n", "populations"):
        p0 = initial_distribution(initial)
        if signal == "mean_n":
            clean, _ = curve.mean("mean_n", times)
            value = clean + noise * rng.standard_normal(shape)
            known_sigma = True if known_sigma is None else known_sigma
        else:
            value = _population_counts(kappa, n_th, p0, times - t0, shots, n_levels, shape, rng)
            known_sigma = False
        extra.update(true_initial_mean=repr(float(np.dot(np.arange(p0.size), p0))))
    else:
        raise InputError(f"unknown signal kind {signal!r}",
                         hint="choose power, db, amplitude, iq, mean-n or populations")
    if signal == "populations":
        extra["shots"] = str(shots)
    sigma = None
    if known_sigma and noise > 0:
        sigma = np.full(shape[0] * m, float(noise))
    ids = np.repeat(np.arange(shape[0]), m)
    value = value.reshape((shape[0] * m,) + value.shape[2:])
    meta = truth_metadata(lifetime, n_th, seed, {**extra, **(metadata or {})})
    return RingdownTrace(np.tile(times, shape[0]), value, signal, sigma=sigma, trace=ids,
                         metadata=meta)


def _population_counts(kappa, n_th, p0, delays, shots, n_levels, shape, rng) -> np.ndarray:
    from cavchar.dynamics import populations

    if np.any(delays < 0):
        raise InputError("populations are simulated for times after t0 only")
    if int(shots) != shots or shots < 1:
        raise InputError(f"shots must be a whole number >= 1, not {shots}")
    from cavchar.dynamics import check_levels, truncation_levels

    if n_levels is None:
        n_levels = max(truncation_levels(n_th, p0.size - 1), p0.size)
    n_levels = check_levels(max(int(n_levels), p0.size), n_th)
    check_size(float(shape[0]) * delays.size * n_levels, "population counts", MAX_CELLS,
               "reduce --points, --traces or --levels")
    p = populations(kappa, n_th, p0, delays, n_levels=n_levels)  # (m, N)
    p = np.clip(p, 0.0, None)
    p /= p.sum(axis=1, keepdims=True)
    return rng.multinomial(int(shots), np.broadcast_to(p, (shape[0],) + p.shape))
