"""Exact photon-number paths of the damped mode: jump records and sampled records.

From photon number ``n`` the mode jumps up at rate ``kappa n_th (n + 1)`` and
down at rate ``kappa (1 + n_th) n``, ``kappa = 1 / T_c`` with ``T_c`` the energy
lifetime (see :mod:`cavchar.dynamics`).

* :func:`jump_path` — the Gillespie algorithm (Gillespie, J. Phys. Chem. 81,
  2340 (1977)): exponential waiting time with the total exit rate, then up or
  down in proportion to the rates; numba-compiled kernel, no truncation.
* :func:`simulate_jump_record` — exact change points of independent segments.
* :func:`probe_times`, :func:`simulate_sampled_record` — the exact path read at
  probe times; :func:`photons_at` — a given jump record read at given times.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np
from numpy.typing import ArrayLike

from cavchar.dynamics import mean_jump_rate
from cavchar.errors import InputError
from cavchar.records import JumpRecord, SampledRecord
from cavchar.simulate._common import (
    MAX_JUMPS,
    MAX_ROWS,
    Seed,
    check_physics,
    check_size,
    rng_from,
    truth_metadata,
)

__all__ = [
    "jump_path",
    "stationary_draw",
    "simulate_jump_record",
    "probe_times",
    "simulate_sampled_record",
    "photons_at",
]


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
    check_size(expected, "photon-number jumps", MAX_JUMPS, _JUMPS_HINT)
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


_JUMPS_HINT = ("the expected number of jumps is 2 n_th (1 + n_th) duration / lifetime; "
               "check the units of --duration, --lifetime and --n-thermal")


def _initial(initial: int | None, n_th: float, rng: np.random.Generator) -> int:
    if initial is None:
        return int(stationary_draw(n_th, None, rng))
    if int(initial) != initial or initial < 0:
        raise InputError(f"the initial photon number must be a whole number >= 0, not {initial}")
    return int(initial)


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
    kappa = check_physics(lifetime, n_th)
    if not (math.isfinite(duration) and duration > 0) or segments < 1 or gap < 0:
        raise InputError("duration must be > 0, segments >= 1 and gap >= 0")
    check_size(segments * duration * float(mean_jump_rate(kappa, n_th)), "photon-number jumps",
               MAX_JUMPS, _JUMPS_HINT)
    rng = rng_from(seed)
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
                      metadata=truth_metadata(lifetime, n_th, seed, metadata))


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
    check_size(segments * (duration / interval + 1), "probe times", MAX_ROWS,
               "the number of probes is duration / interval per segment; check the units of "
               "--duration and --interval")
    if spacing not in ("regular", "poisson"):
        raise InputError(f"unknown spacing {spacing!r}", hint="use regular or poisson")
    rng = rng_from(seed)
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


def sample_path(kappa, n_th, times, segment, initial, rng):
    """Segment ids (m,) and photon numbers (m,) at ``times`` (s) of an exact path
    simulated per segment, each starting in ``initial`` or a stationary draw."""
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
    kappa = check_physics(lifetime, n_th)
    times = np.asarray(times, dtype=float)
    rng = rng_from(seed)
    segment, photons = sample_path(kappa, n_th, times, segment, initial, rng)
    return SampledRecord(times, photons, segment=segment,
                         metadata=truth_metadata(lifetime, n_th, seed, metadata))


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


