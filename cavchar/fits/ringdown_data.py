"""Ring-down input: read the traces, apply the time options, validate, build model data.

Validation (each an :class:`~cavchar.errors.InputError` naming the file unless
said otherwise):

* negative values of a linear power trace beyond the noise (more than
  :data:`NEGATIVE_SIGMAS` noise sd below zero: dB data or a wrong sign), unless
  ``allow_negative_power`` (background-subtracted traces);
* dB values above :data:`DB_WARNING_LIMIT` only give a
  :class:`~cavchar.errors.CavcharWarning` (a cryogenic ring-down rarely exceeds
  +30 dBm: the column may be linear power or a gain was left in);
* fewer than :data:`MIN_POINTS` points in a trace after the start time;
* a trace that does not decay (:func:`decay_check`): no significant decaying
  amplitude, a decay much slower than the record, or one faster than the
  sampling — then no lifetime is returned.
"""

from __future__ import annotations

import math
import os
import warnings
from dataclasses import dataclass

import numpy as np

from cavchar.errors import CavcharWarning, InputError
from cavchar.models.ringdown.series import DecaySeries
from cavchar.records import RingdownTrace

__all__ = ["RingdownData", "load_traces", "prepare", "decay_check", "MIN_POINTS",
           "DB_WARNING_LIMIT", "SIGNAL_NAMES", "time_factor"]

#: fewest points per trace after the start time
MIN_POINTS = 8
#: a linear power this many noise sd below zero is an error
NEGATIVE_SIGMAS = 5.0
#: dB values above this only warn
DB_WARNING_LIMIT = 30.0
#: smallest |amplitude| / sd of the least-squares decay that counts as a decay
DECAY_SIGNIFICANCE = 3.0
#: user-facing signal names -> record signal names
SIGNAL_NAMES = {"power": "power", "power2": "power", "db": "db", "amplitude": "amplitude",
                "iq": "iq", "mean-n": "mean_n", "mean_n": "mean_n",
                "populations": "populations"}


@dataclass(frozen=True)
class RingdownData:
    """Model-ready traces of one fit.

    ``series`` holds one :class:`DecaySeries` per trace (``tau`` from the start
    time); ``counts`` the (m, K) counts of a populations fit; ``records`` the
    records read (for provenance); ``signal`` the user-facing signal name.
    """

    signal: str
    series: tuple[DecaySeries, ...]
    records: tuple[RingdownTrace, ...]
    counts: np.ndarray | None = None
    start_time: float | None = None
    time_factor: float = 1.0

    @property
    def source(self) -> str:
        """The source files of the traces joined by ", " (``"the trace"`` when none has one)."""
        names = [r.source for r in self.records if r.source]
        return ", ".join(names) if names else "the trace"


def time_factor(time_unit: float | str | None) -> float:
    """Seconds per unit of the time column: 1, or e.g. ``"ms"`` / ``1e-3``."""
    if time_unit is None:
        return 1.0
    if isinstance(time_unit, str):
        from cavchar.units import parse_quantity

        text = time_unit.strip()
        value = parse_quantity(text if text[:1].isdigit() else "1" + text, "time")
    else:
        value = float(time_unit)
    if not (math.isfinite(value) and value > 0):
        raise InputError(f"the time unit must be a positive time, got {time_unit!r}",
                         hint="e.g. --time-unit ms")
    return value


def load_traces(inputs, signal: str | None) -> tuple[str, tuple[RingdownTrace, ...]]:
    """Records from a RingdownTrace, a path or a sequence of them; one signal for all."""
    from cavchar.io.readers import read_ringdown

    items = inputs if isinstance(inputs, (list, tuple)) else [inputs]
    if not items:
        raise InputError("no ring-down trace given")
    wanted = None if signal is None else str(signal).lower().replace("_", "-")
    if wanted is not None and wanted not in SIGNAL_NAMES:
        raise InputError(f"unknown signal {signal!r}",
                         hint="one of power, power2, db, amplitude, iq, mean-n, populations")
    record_signal = None if wanted is None else SIGNAL_NAMES[wanted]
    records = []
    for item in items:
        if isinstance(item, RingdownTrace):
            rec = item
        elif isinstance(item, (str, os.PathLike)):
            rec = read_ringdown(item, record_signal)
        else:
            raise TypeError("give RingdownTrace objects or file paths")
        if record_signal is not None and rec.signal != record_signal:
            raise InputError(f"the trace holds {rec.signal} data, not {record_signal}",
                             path=rec.source, hint=f"use --signal {rec.signal.replace('_', '-')}")
        records.append(rec)
    kinds = {r.signal for r in records}
    if len(kinds) > 1:
        raise InputError(f"the traces mix signal kinds {sorted(kinds)}",
                         hint="fit one signal kind at a time")
    if wanted is None:
        wanted = records[0].signal.replace("_", "-")
    return wanted, tuple(records)


def prepare(inputs, signal: str | None = None, *, start_time: float | None = None,
            time_unit: float | str | None = None, allow_negative_power: bool = False,
            ) -> RingdownData:
    """Read and validate the traces; cut at the start time; build the model series.

    ``start_time`` (s, after applying ``time_unit``) drops earlier samples (the
    switch-off transient) and is the reference time ``t0`` of the amplitudes;
    by default each trace starts at its first sample.
    """
    wanted, records = load_traces(inputs, signal)
    factor = time_factor(time_unit)
    _check_time_units(records, factor, time_unit)
    if wanted not in ("power", "mean-n"):
        count = sum(r.n_traces for r in records)
        if count > 1:
            ids = ", ".join(str(int(i)) for r in records for i in r.trace_ids[:10])
            raise InputError(f"a {wanted} fit takes one trace; the input holds {count} "
                             f"(trace ids {ids})", path=records[0].source,
                             hint="pick one with --trace ID (trace= when reading in Python), "
                             "or fit the traces one by one")
    series: list[DecaySeries] = []
    counts = None
    for rec in records:
        where = rec.source
        for seg in rec.traces():
            t = np.asarray(seg.time, dtype=float) * factor
            label = f"{os.path.basename(where) if where else 'trace'}#{seg.id}"
            if start_time is not None and t.size and start_time < t[0]:
                raise InputError(f"--start-time {start_time:g} s is before the first sample "
                                 f"of trace {label} ({t[0]:g} s): the amplitudes would be "
                                 "extrapolated to a time without data", path=where,
                                 hint="give a start time inside the data, or leave "
                                 "--start-time out (each trace starts at its first sample)")
            keep = slice(None) if start_time is None else t >= start_time
            t, value = t[keep], np.asarray(seg.value)[keep]
            sigma = None if seg.sigma is None else np.asarray(seg.sigma, dtype=float)[keep]
            if t.size < MIN_POINTS:
                raise InputError(f"trace {label} has {t.size} points after the start time; "
                                 f"a ring-down fit needs at least {MIN_POINTS}", path=where,
                                 hint="give more points or an earlier --start-time")
            _check_values(wanted, t, value, sigma, where, allow_negative_power, label)
            t0 = float(t[0]) if start_time is None else float(start_time)
            if wanted == "populations":
                if counts is not None:
                    raise InputError("a populations fit takes one trace", path=where)
                counts = np.asarray(value, dtype=float)
                value = counts @ np.arange(counts.shape[1]) / counts.sum(axis=1)
            series.append(DecaySeries(tau=t - t0, values=value, sigma=sigma, t0=t0,
                                      label=label))
    return RingdownData(signal=wanted, series=tuple(series), records=records, counts=counts,
                        start_time=start_time, time_factor=factor)


def _check_time_units(records, factor: float, time_unit) -> None:
    """A header that gave the time unit (times already in s) and a --time-unit other than
    seconds would convert twice: refused."""
    from cavchar.io.readers import HEADER_TIME_UNIT

    for rec in records:
        unit = rec.metadata.get(HEADER_TIME_UNIT)
        if unit is not None and factor != 1.0:
            raise InputError(f"the header already gives the time unit ({unit}) and the times "
                             f"were converted to s; --time-unit {time_unit} would convert "
                             "them again", path=rec.source,
                             hint="leave --time-unit out")


def noise_level(values: np.ndarray, sigma: np.ndarray | None) -> np.ndarray | float:
    """Per-point noise sd: the known sigma, or a robust estimate from first differences
    (median absolute difference / (0.6745 sqrt 2), insensitive to the decay itself)."""
    if sigma is not None:
        return sigma
    diffs = np.diff(np.asarray(values, dtype=float))
    return float(np.median(np.abs(diffs)) / (0.6745 * np.sqrt(2.0))) if diffs.size else 0.0


def _check_values(signal, t, value, sigma, where, allow_negative, label) -> None:
    if signal in ("power", "power2") and not allow_negative:
        # noise around a floor near zero may dip below zero; a value more than
        # NEGATIVE_SIGMAS noise sd below zero is not noise (dB data, wrong sign)
        limit = -NEGATIVE_SIGMAS * noise_level(value, sigma)
        bad = np.flatnonzero(np.asarray(value) < limit)
        if bad.size:
            raise InputError(f"trace {label}: negative linear power {float(value[bad[0]])!r} "
                             f"at t = {float(t[bad[0]])!r} s, more than {NEGATIVE_SIGMAS:g} "
                             f"noise sd below zero ({bad.size} such points)", path=where,
                             hint="a linear power is >= 0: use --signal db for dB data, or "
                             "--allow-negative for a background-subtracted trace")
    if signal == "db":
        top = float(np.max(value))
        if top > DB_WARNING_LIMIT:
            warnings.warn(f"{where or 'the trace'}: dB values up to {top:.1f} dB, above "
                          f"{DB_WARNING_LIMIT:g} dB; check that the column is in dB and no "
                          "gain is left in", CavcharWarning, stacklevel=4)
    if signal == "amplitude" and np.any(np.asarray(value) == 0):
        raise InputError(f"trace {label}: a magnitude of exactly 0 has zero Rice probability "
                         "density", path=where, hint="check for clipped or missing samples")


def decay_check(data: RingdownData) -> dict:
    """Least-squares look at each trace: does it decay, and on a measurable time scale?

    The power-like transform of each signal (power; 10^(dB/10); magnitude^2;
    |IQ - late mean|^2; mean photon number) is fitted by one exponential with a
    floor.  Raises :class:`InputError` when the decaying amplitude is below
    :data:`DECAY_SIGNIFICANCE` standard errors, when the best decay is at the
    slow end of the search (far slower than the record) or at the fast end
    (faster than the sampling).  Returns a plain-JSON summary per trace and the
    fits (:class:`~cavchar.models.ringdown.least_squares.ExponentialFit`), for reuse.
    """
    from cavchar.models.ringdown.least_squares import fit_exponentials

    out, fits = [], []
    for s in data.series:
        y = np.asarray(s.values)
        sigma = s.sigma
        if data.signal == "db":
            y, sigma = 10 ** (y / 10), None
        elif data.signal == "amplitude":
            y, sigma = y**2, None
        elif data.signal == "iq":
            late = s.tau >= np.quantile(s.tau, 0.9)
            y, sigma = np.abs(y - np.mean(y[late])) ** 2, None
        fit = fit_exponentials(s.tau, y.astype(float), 1, sigma=sigma, t0=0.0)
        z = fit.amplitude_significance
        span = s.span
        info = {"trace": s.label, "lifetime_lsq_s": float(fit.lifetimes[0]),
                "amplitude_significance": z, "span_s": span}
        where = data.source
        if fit.at_grid_edge:
            slow = fit.lifetimes[0] > 0.5 * span
            text = (f"decays far more slowly than its {span:.3g} s span (best lifetime "
                    f"{fit.lifetimes[0]:.3g} s)" if slow else
                    "decays faster than its sampling")
            raise InputError(f"trace {s.label} {text}: no lifetime can be given", path=where,
                             hint="record longer" if slow else "sample faster or check the "
                             "time unit")
        if not (z >= DECAY_SIGNIFICANCE):
            raise InputError(f"trace {s.label} does not decay: the best decaying amplitude is "
                             f"only {z:.1f} standard errors from zero, so no lifetime can be "
                             "given", path=where,
                             hint="check the time axis, --start-time and the signal kind")
        if data.signal in ("power", "power2", "db", "amplitude", "iq") and \
                fit.amplitudes[0] < 0:
            raise InputError(f"trace {s.label} grows instead of decaying", path=where,
                             hint="check the time axis and the signal kind")
        out.append(info)
        fits.append(fit)
    return {"traces": out, "significance_threshold": DECAY_SIGNIFICANCE}, fits

