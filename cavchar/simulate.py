"""Seeded simulators of every data shape cavchar reads.

Physics (one thermally damped mode; see :mod:`cavchar.dynamics`): from photon
number ``n`` the mode jumps up at rate ``kappa n_th (n + 1)`` and down at rate
``kappa (1 + n_th) n``, ``kappa = 1 / T_c`` with ``T_c`` the energy lifetime.
By default each segment starts in a state drawn from the stationary
Bose–Einstein law ``P_n = n_th^n / (1 + n_th)^(n+1)``.

* :func:`simulate_jump_record` — exact change points by the Gillespie
  algorithm (Gillespie, J. Phys. Chem. 81, 2340 (1977)): exponential waiting
  time with the total exit rate, then up or down in proportion to the rates.
  The chain is simulated without truncation.
* :func:`simulate_sampled_record` — the exact path read at given probe times.
* :func:`simulate_probe_record` — 0/1 probe outcomes drawn from a response
  ``P(1 | n, setting)`` (the Ramsey-fringe and table models of
  :mod:`cavchar.models.response`, or any callable), optionally with lost probes.
* :func:`probes_on_path` — the same on a given path (an exact jump record).
* :func:`simulate_ringdown` — power, dB, amplitude, IQ, mean photon number and
  Fock-population ring-down traces with their noise models.

Every function takes ``seed`` (an int, a :class:`numpy.random.Generator` or
None) and is reproducible bit for bit with the same seed and arguments.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np
from numpy.typing import ArrayLike

from cavchar.errors import InputError
from cavchar.records import JumpRecord, ProbeRecord, RingdownTrace, SampledRecord

__all__ = [
    "jump_path",
    "stationary_draw",
    "simulate_jump_record",
    "probe_times",
    "simulate_sampled_record",
    "simulate_probe_record",
    "probes_on_path",
    "photons_at",
    "simulate_ringdown",
]

Seed = int | np.random.Generator | None


def _rng(seed: Seed) -> np.random.Generator:
    return np.random.default_rng(seed)


def _check_physics(lifetime: float, n_th: float) -> float:
    if not (math.isfinite(lifetime) and lifetime > 0):
        raise InputError(f"the lifetime must be a positive time, not {lifetime} s")
    if not (math.isfinite(n_th) and n_th >= 0):
        raise InputError(f"the thermal photon number must be >= 0, not {n_th}")
    return 1.0 / lifetime


# ------------------------------------------------------------------ Gillespie core


def _gillespie_steps(n, t, t_end, a, b, exps, unifs, out_t, out_n):
    """Advance the birth–death chain with one exponential and one uniform draw per jump.

    From state ``n`` the up rate is ``a (n + 1)`` and the down rate ``b n``
    (``a = kappa n_th``, ``b = kappa (1 + n_th)``).  Writes the jump times and
    new states to ``out_t``/``out_n`` and returns ``(count, n, t, done)``;
    ``done`` is true once the next jump would fall at or after ``t_end``.
    Compiled with numba when available; this plain-Python form is the peer the
    benchmark compares against and gives identical results.
    """
    k = 0
    for i in range(exps.shape[0]):
        up = a * (n + 1.0)
        total = up + b * n
        if total <= 0.0:
            return k, n, t_end, True
        t = t + exps[i] / total
        if t >= t_end:
            return k, n, t_end, True
        if unifs[i] * total < up:
            n += 1
        else:
            n -= 1
        out_t[k] = t
        out_n[k] = n
        k += 1
    return k, n, t, False


_COMPILED: list = []


def _kernel():
    if not _COMPILED:
        try:
            import numba
        except ImportError:  # pragma: no cover - numba is a dependency
            _COMPILED.append(_gillespie_steps)
        else:
            _COMPILED.append(numba.njit(cache=True)(_gillespie_steps))
    return _COMPILED[0]


def stationary_draw(n_th: float, size: int | None, rng: np.random.Generator):
    """Photon numbers from the Bose–Einstein law ``P_n = n_th^n / (1+n_th)^(n+1)``
    (a geometric law on 0, 1, ... with success probability ``1/(1+n_th)``)."""
    return rng.geometric(1.0 / (1.0 + n_th), size=size) - 1


def jump_path(
    kappa: float, n_th: float, n0: int, t_start: float, t_end: float,
    rng: np.random.Generator, *, compiled: bool = True,
) -> tuple[np.ndarray, np.ndarray]:
    """Exact path of the photon number on ``[t_start, t_end)`` (Gillespie algorithm).

    Parameters
    ----------
    kappa : float
        Energy decay rate 1/T_c in 1/s.
    n_th : float
        Mean thermal photon number.
    n0 : int
        Photon number at ``t_start``.
    t_start, t_end : float
        Time span in s.
    rng : numpy.random.Generator
        Source of randomness; draws are taken in fixed-size blocks of
        exponential and uniform variates, so results are reproducible.
    compiled : bool
        Use the numba-compiled kernel (False: the plain-Python loop, same result).

    Returns
    -------
    times : ndarray (j + 1,)
        ``t_start`` followed by the jump times (s).
    photons : ndarray (j + 1,) of int64
        ``n0`` followed by the photon number after each jump.
    """
    a, b = kappa * n_th, kappa * (1.0 + n_th)
    expected = (t_end - t_start) * 2.0 * a * (1.0 + n_th) + 2.0 * n0
    block = int(min(max(1.1 * expected + 5.0 * math.sqrt(expected), 4096), 1 << 20))
    kernel = _kernel() if compiled else _gillespie_steps
    times, photons = [np.array([t_start], float)], [np.array([n0], np.int64)]
    n, t, done = int(n0), float(t_start), False
    while not done:
        exps = rng.standard_exponential(block)
        unifs = rng.random(block)
        out_t = np.empty(block)
        out_n = np.empty(block, np.int64)
        k, n, t, done = kernel(n, t, float(t_end), a, b, exps, unifs, out_t, out_n)
        times.append(out_t[:k])
        photons.append(out_n[:k])
    return np.concatenate(times), np.concatenate(photons)


def _initial(initial: int | None, n_th: float, rng: np.random.Generator) -> int:
    if initial is None:
        return int(stationary_draw(n_th, None, rng))
    if int(initial) != initial or initial < 0:
        raise InputError(f"the initial photon number must be a whole number >= 0, not {initial}")
    return int(initial)


def _truth(lifetime: float, n_th: float, seed: Seed, extra: Mapping | None) -> dict[str, str]:
    meta = {"simulated": "invented data from cavchar.simulate",
            "true_lifetime": f"{lifetime!r} s", "true_n_thermal": repr(float(n_th))}
    if isinstance(seed, int):
        meta["seed"] = str(seed)
    meta.update({str(k): str(v) for k, v in (extra or {}).items()})
    return meta


def simulate_jump_record(
    lifetime: float,
    n_th: float,
    duration: float,
    *,
    segments: int = 1,
    gap: float = 0.0,
    start: float = 0.0,
    initial: int | None = None,
    seed: Seed = None,
    metadata: Mapping[str, object] | None = None,
) -> JumpRecord:
    """Exact jump record of ``segments`` independent segments of ``duration`` s each.

    Segment ``j`` (id ``j``) runs from ``start + j (duration + gap)`` for
    ``duration`` seconds and starts in ``initial`` photons, or in a state drawn
    from the stationary Bose–Einstein law when ``initial`` is None.

    Parameters
    ----------
    lifetime : float
        Energy lifetime T_c = 1/kappa in s.
    n_th : float
        Mean thermal photon number (>= 0).
    duration : float
        Length of each segment in s.
    segments, gap, start, initial, seed, metadata
        See above; ``metadata`` is added to the record's (which holds the true
        parameters and the seed).

    Returns
    -------
    JumpRecord
    """
    kappa = _check_physics(lifetime, n_th)
    if not (math.isfinite(duration) and duration > 0) or segments < 1 or gap < 0:
        raise InputError("duration must be > 0, segments >= 1 and gap >= 0")
    rng = _rng(seed)
    times, photons, ids, ends = [], [], [], []
    for j in range(int(segments)):
        t0 = start + j * (duration + gap)
        t, n = jump_path(kappa, n_th, _initial(initial, n_th, rng), t0, t0 + duration, rng)
        times.append(t)
        photons.append(n)
        ids.append(np.full(t.size, j, np.int64))
        ends.append(t0 + duration)
    return JumpRecord(np.concatenate(times), np.concatenate(photons), np.array(ends),
                      segment=np.concatenate(ids),
                      metadata=_truth(lifetime, n_th, seed, metadata))


# ------------------------------------------------------------------ probe times, sampling


def probe_times(
    duration: float,
    interval: float,
    *,
    segments: int = 1,
    gap: float = 0.0,
    start: float = 0.0,
    spacing: str = "regular",
    seed: Seed = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Probe times of ``segments`` segments of ``duration`` s.

    ``spacing="regular"``: ``round(duration / interval)`` probes ``interval``
    apart from the segment start; ``"poisson"``: a Poisson process of mean
    spacing ``interval`` (first probe at the segment start).  Returns the
    times (s) and the segment id of each.
    """
    if not (duration > 0 and interval > 0) or segments < 1:
        raise InputError("duration and interval must be > 0 and segments >= 1")
    if spacing not in ("regular", "poisson"):
        raise InputError(f"unknown spacing {spacing!r}", hint="use regular or poisson")
    rng = _rng(seed)
    out_t, out_s = [], []
    for j in range(int(segments)):
        t0 = start + j * (duration + gap)
        if spacing == "regular":
            t = t0 + interval * np.arange(max(1, round(duration / interval)))
        else:
            mean = duration / interval
            steps = rng.standard_exponential(int(mean + 10 * math.sqrt(mean) + 10)) * interval
            t = t0 + np.concatenate(([0.0], np.cumsum(steps)))
            while t[-1] < t0 + duration:
                more = rng.standard_exponential(int(mean / 10) + 10) * interval
                t = np.concatenate((t, t[-1] + np.cumsum(more)))
            t = t[t < t0 + duration]
        out_t.append(t)
        out_s.append(np.full(t.size, j, np.int64))
    return np.concatenate(out_t), np.concatenate(out_s)


def _sample_path(kappa, n_th, times, segment, initial, rng):
    segment = np.zeros(times.size, np.int64) if segment is None else np.asarray(segment)
    photons = np.empty(times.size, np.int64)
    change = np.flatnonzero(segment[1:] != segment[:-1]) + 1
    for lo, hi in zip(np.r_[0, change], np.r_[change, times.size], strict=True):
        t = times[lo:hi]
        if np.any(np.diff(t) <= 0):
            raise InputError("probe times must increase strictly within each segment")
        path_t, path_n = jump_path(kappa, n_th, _initial(initial, n_th, rng), t[0],
                                   np.nextafter(t[-1], np.inf), rng)
        photons[lo:hi] = path_n[np.searchsorted(path_t, t, side="right") - 1]
    return segment, photons


def simulate_sampled_record(
    lifetime: float,
    n_th: float,
    times: ArrayLike,
    *,
    segment: ArrayLike | None = None,
    initial: int | None = None,
    seed: Seed = None,
    metadata: Mapping[str, object] | None = None,
) -> SampledRecord:
    """Photon number at the given probe times, read off an exact simulated path.

    Parameters
    ----------
    lifetime, n_th
        Energy lifetime T_c (s) and mean thermal photon number.
    times : array (m,)
        Probe times in s (e.g. from :func:`probe_times`), increasing within a segment.
    segment : array (m,), optional
        Segment id of each time; segments are independent and each starts in
        ``initial`` photons or a stationary draw.
    """
    kappa = _check_physics(lifetime, n_th)
    times = np.asarray(times, dtype=float)
    rng = _rng(seed)
    segment, photons = _sample_path(kappa, n_th, times, segment, initial, rng)
    return SampledRecord(times, photons, segment=segment,
                         metadata=_truth(lifetime, n_th, seed, metadata))


# ------------------------------------------------------------------ probe records


def _response_probabilities(response, photons: np.ndarray, setting: np.ndarray) -> np.ndarray:
    """P(1) per probe from a response model (``prob_one``) or a plain callable."""
    if hasattr(response, "prob_one"):
        unique, index = np.unique(setting, return_inverse=True)
        table, valid = response.prob_one(None, int(photons.max()) + 1, unique)
        if not bool(np.asarray(valid).reshape(-1)[0]):
            raise InputError("the probe response parameters are outside their physical range")
        return np.asarray(table)[0][index.reshape(-1), photons]
    return np.asarray(response(photons, setting), dtype=float)


def simulate_probe_record(
    lifetime: float,
    n_th: float,
    times: ArrayLike,
    response: object,
    *,
    settings: ArrayLike | None = None,
    segment: ArrayLike | None = None,
    loss: float = 0.0,
    initial: int | None = None,
    seed: Seed = None,
    metadata: Mapping[str, object] | None = None,
) -> tuple[ProbeRecord, SampledRecord]:
    """Raw probe outcomes from a hidden photon-number path.

    The hidden path is that of :func:`simulate_sampled_record`; outcome ``k``
    is 1 with probability ``response(n_k, setting_k)``; each probe is lost
    (outcome NaN) with probability ``loss``.

    Parameters
    ----------
    times : array (m,)
        Probe times in s.
    response : response model or callable
        A :class:`cavchar.models.response.FringeResponse` or
        :class:`~cavchar.models.response.TableResponse` with fixed parameters
        (anything with their ``prob_one(None, n_levels, settings)``), or a
        callable ``response(photons (m,), settings (m,)) -> P(1) (m,)``.
    settings : float or array, optional
        Probe phase settings in rad: one value, one per probe, or a shorter
        sequence repeated cyclically (interleaved settings).  None: no setting
        column (setting 0 is passed to the response).
    loss : float
        Probability that a probe is lost.

    Returns
    -------
    (ProbeRecord, SampledRecord)
        The probe record and the hidden photon number at each probe (the truth).
    """
    _check_physics(lifetime, n_th)
    times = np.asarray(times, dtype=float)
    rng = _rng(seed)
    segment, photons = _sample_path(1.0 / lifetime, n_th, times, segment, initial, rng)
    return _probe_outcomes(times, photons, segment, response, settings, loss, rng,
                           _truth(lifetime, n_th, seed, metadata))


def probes_on_path(
    path: JumpRecord,
    times: ArrayLike,
    response: object,
    *,
    settings: ArrayLike | None = None,
    segment: ArrayLike | None = None,
    loss: float = 0.0,
    seed: Seed = None,
    metadata: Mapping[str, object] | None = None,
) -> tuple[ProbeRecord, SampledRecord]:
    """Probe outcomes on a given photon-number path (an exact jump record, e.g. from
    another simulator); arguments as for :func:`simulate_probe_record`."""
    times = np.asarray(times, dtype=float)
    photons = photons_at(path, times, segment)
    segment = np.full(times.size, path.segment_ids[0]) if segment is None else segment
    meta = {**dict(path.metadata), **{str(k): str(v) for k, v in (metadata or {}).items()}}
    if path.source:
        meta["hidden_path"] = path.source
    return _probe_outcomes(times, photons, np.asarray(segment), response, settings, loss,
                           _rng(seed), meta)


def photons_at(path: JumpRecord, times: ArrayLike, segment: ArrayLike | None = None):
    """Photon number (m,) of an exact jump record at the given times (s).

    ``segment`` (m,) names the record segment of each time (default: the
    record's only segment); every time must lie in its segment's span
    ``[first row time, end time)``.
    """
    times = np.asarray(times, dtype=float)
    ids = (np.full(times.size, path.segment_ids[0]) if segment is None
           else np.asarray(segment, np.int64))
    if segment is None and path.n_segments > 1:
        raise InputError("the path has several segments: give the segment of each time")
    out = np.empty(times.size, np.int64)
    for part in path.segments():
        mine = ids == part.id
        t = times[mine]
        if t.size and (t.min() < part.time[0] or t.max() >= part.end_time):
            raise InputError(f"times outside segment {part.id} of the path "
                             f"({part.time[0]} s to {part.end_time} s)", path=path.source)
        out[mine] = part.photons[np.searchsorted(part.time, t, side="right") - 1]
    unknown = ~np.isin(ids, path.segment_ids)
    if unknown.any():
        raise InputError(f"segment {ids[unknown][0]} is not in the path", path=path.source)
    return out


def _probe_outcomes(times, photons, segment, response, settings, loss, rng, meta):
    if not 0 <= loss < 1:
        raise InputError(f"the probe loss must lie in [0, 1), not {loss}")
    setting = None if settings is None else np.resize(np.asarray(settings, float), times.size)
    p_one = _response_probabilities(response, photons,
                                    np.zeros(times.size) if setting is None else setting)
    if p_one.shape != times.shape or np.any(~np.isfinite(p_one)) or np.any(
            (p_one < 0) | (p_one > 1)):
        raise InputError("the probe response must give one probability in [0, 1] per probe")
    outcome = (rng.random(times.size) < p_one).astype(float)
    if loss > 0:
        outcome[rng.random(times.size) < loss] = np.nan
    describe = getattr(response, "describe", None)
    if callable(describe) and describe().get("kind") == "fringe":
        meta.update({f"true_{k}": repr(v) for k, v in describe().items() if k != "kind"})
    truth = SampledRecord(times, photons, segment=segment, metadata=meta)
    return ProbeRecord(times, outcome, setting=setting, segment=segment, metadata=meta), truth


# ------------------------------------------------------------------ ring-down traces


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
    kappa = _check_physics(lifetime, n_th)
    times = np.asarray(times, dtype=float)
    if times.ndim != 1 or times.size == 0 or traces < 1 or noise < 0:
        raise InputError("give at least one time, traces >= 1 and noise >= 0")
    rng = _rng(seed)
    m = times.size
    decay = np.exp(-(times - t0) * kappa)
    shape = (int(traces), m)
    extra: dict[str, object] = {"signal": signal, "true_t0": f"{t0!r} s"}
    if signal in ("power", "db"):
        clean = amplitude * decay + floor
        extra.update(true_amplitude=repr(amplitude), true_floor=repr(floor))
        if signal == "db":
            if np.any(clean <= 0):
                raise InputError("a dB trace needs amplitude * decay + floor > 0 at all times")
            clean = 10.0 * np.log10(clean)
        value = clean + noise * rng.standard_normal(shape)
    elif signal in ("amplitude", "iq"):
        field = amplitude * np.exp(1j * phase) * np.sqrt(decay)
        extra.update(true_amplitude=repr(amplitude), true_phase=f"{phase!r} rad")
        if signal == "iq":
            field = field * np.exp(-2j * np.pi * detuning * (times - t0)) + offset
            extra.update(true_detuning=f"{detuning!r} Hz", true_offset=repr(complex(offset)))
        value = field + noise * (rng.standard_normal(shape) + 1j * rng.standard_normal(shape))
        if signal == "amplitude":
            value = np.abs(value)
    elif signal in ("mean_n", "populations"):
        p0 = _initial_distribution(initial)
        if signal == "mean_n":
            n0 = float(np.dot(np.arange(p0.size), p0))
            value = n_th + (n0 - n_th) * decay + noise * rng.standard_normal(shape)
            known_sigma = True if known_sigma is None else known_sigma
        else:
            value = _population_counts(kappa, n_th, p0, times - t0, shots, n_levels, shape, rng)
            known_sigma = False
        extra.update(true_initial_mean=repr(float(np.dot(np.arange(p0.size), p0))))
    else:
        raise InputError(f"unknown signal kind {signal!r}",
                         hint="choose power, db, amplitude, iq, mean_n or populations")
    if signal == "populations":
        extra["shots"] = str(shots)
    sigma = None
    if known_sigma and noise > 0:
        sigma = np.full(shape[0] * m, float(noise))
    ids = np.repeat(np.arange(shape[0]), m)
    value = value.reshape((shape[0] * m,) + value.shape[2:])
    return RingdownTrace(np.tile(times, shape[0]), value, signal, sigma=sigma, trace=ids,
                         metadata=_truth(lifetime, n_th, seed, {**extra, **(metadata or {})}))


def _initial_distribution(initial) -> np.ndarray:
    if np.ndim(initial) == 0:
        n0 = int(initial)
        if n0 != initial or n0 < 0:
            raise InputError(f"the initial Fock number must be a whole number >= 0, not {initial}")
        p0 = np.zeros(n0 + 1)
        p0[n0] = 1.0
        return p0
    p0 = np.asarray(initial, float)
    if p0.ndim != 1 or np.any(p0 < 0) or not np.isclose(p0.sum(), 1.0, atol=1e-9):
        raise InputError("the initial distribution must be probabilities summing to 1")
    return p0


def _population_counts(kappa, n_th, p0, delays, shots, n_levels, shape, rng) -> np.ndarray:
    from cavchar.dynamics import populations

    if np.any(delays < 0):
        raise InputError("populations are simulated for times after t0 only")
    if int(shots) != shots or shots < 1:
        raise InputError(f"shots must be a whole number >= 1, not {shots}")
    p = populations(kappa, n_th, p0, delays, n_levels=n_levels)  # (m, N)
    p = np.clip(p, 0.0, None)
    p /= p.sum(axis=1, keepdims=True)
    return rng.multinomial(int(shots), np.broadcast_to(p, (shape[0],) + p.shape))
