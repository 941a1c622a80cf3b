"""Precision forecasts: how much data a target precision needs, or what an amount of data gives.

Information adds over independent data, so the Cramér–Rao standard deviation
of every quantity falls as ``1 / sqrt(amount)``:

    sd(amount) = sd_1 / sqrt(amount),    needed amount = (sd_1 / (target * value))^2

with ``sd_1`` the sd for one unit of data (one second of a jump record, one
probe, one trace) from :mod:`cavchar.plan.fisher`.  Derived quantities follow
by the delta method: the quality factor ``Q = 2 pi nu T_c`` has the lifetime's
relative sd; the effective temperature has ``sd_T = |dT_eff/dn| sd_n``
(:func:`cavchar.thermal.d_temperature_d_occupation`).

:func:`plan_jumps`, :func:`plan_probes` and :func:`plan_ringdown` return a
table (pandas DataFrame) with one row per quantity; the columns are listed in
:data:`COLUMNS`.  The planned amount is the largest needed amount over the
targets (every target met), or the amount given.  With ``check=True`` a
simulate-and-fit study at the planned amount (:mod:`cavchar.plan.study`)
adds the simulated spread of the estimates; :func:`precision_curve` gives the
expected relative sd over a range of amounts, for the plot.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from cavchar.decay import RingdownCurve
from cavchar.dynamics import mean_jump_rate
from cavchar.errors import CavcharWarning, InputError
from cavchar.plan import fisher, study
from cavchar.plan.fisher import Information
from cavchar.quantities import quality_factor

__all__ = ["Forecast", "plan_jumps", "plan_probes", "plan_ringdown", "precision_curve",
           "COLUMNS", "StudyDisagreementWarning"]

#: columns of a plan table (units: the quantity's unit, amounts in ``attrs["amount_unit"]``)
COLUMNS = ("quantity", "unit", "assumed", "target_relative_sd", "needed_amount",
           "planned_amount", "expected_sd", "expected_relative_sd", "forecast_relative_error",
           "perfect_readout_relative_sd", "simulated_sd", "simulated_sd_error", "fit_sd",
           "simulated_to_expected", "records", "failed_records")

#: simulated probes (records x probes) or jumps a study may use before it is cut down
STUDY_BUDGET = 20_000_000


class StudyDisagreementWarning(CavcharWarning):
    """The simulate-and-fit study does not confirm the Cramér–Rao forecast."""


@dataclass(frozen=True)
class Forecast:
    """Cramér–Rao forecast for one data shape.

    Attributes
    ----------
    kind : str
        ``"jumps"``, ``"jumps-sampled"``, ``"probes"`` or ``"ringdown-<signal>"``.
    information : Information
        Per unit of information (s, transition, probe or trace).
    units_per_amount : float
        Units of information per unit of amount (e.g. transitions per second).
    amount_name, amount_unit : str
        What the amount is ("record length" in "s", "probes", "traces").
    integer : bool
        Whether amounts are whole numbers.
    freq_hz : float or None
        Mode frequency (enables the quality factor and effective temperature).
    seconds_per_amount : float or None
        Record time per unit of amount (jump and probe records).
    """

    kind: str
    information: Information
    units_per_amount: float
    amount_name: str
    amount_unit: str
    integer: bool
    freq_hz: float | None = None
    seconds_per_amount: float | None = None

    def unit_relative_sd(self) -> dict[str, tuple[str, float, float, float, float]]:
        """quantity -> (unit, assumed value, relative sd for one amount unit, MC error,
        perfect-readout relative sd for one amount unit or NaN)."""
        from cavchar.thermal import d_temperature_d_occupation, effective_temperature

        info = self.information
        sd = info.sd(self.units_per_amount)
        bound = (np.full(sd.shape, math.nan) if info.bound is None else
                 Information(info.names, info.values, info.bound, info.unit,
                             info.rel_error).sd(self.units_per_amount))
        out = {}
        units = {"lifetime": "s", "n_thermal": ""}
        for i, name in enumerate(info.names):
            value = float(info.values[i])
            rel = sd[i] / value if value > 0 else math.inf
            out[name] = (units[name], value, rel, float(info.rel_error[i]),
                         bound[i] / value if value > 0 else math.nan)
        if self.freq_hz:
            unit_, t_c, rel, err, brel = out["lifetime"]
            out["quality_factor"] = ("", float(quality_factor(self.freq_hz, t_c)), rel, err, brel)
            if "n_thermal" in out and out["n_thermal"][1] > 0:
                n = out["n_thermal"][1]
                t_eff = float(effective_temperature(self.freq_hz, n))
                slope = float(d_temperature_d_occupation(self.freq_hz, n))
                i = info.names.index("n_thermal")
                brel = bound[i] * slope / t_eff
                out["effective_temperature"] = ("K", t_eff, sd[i] * slope / t_eff,
                                                out["n_thermal"][3], brel)
        return out

    def relative_sd(self, amount: ArrayLike) -> dict[str, np.ndarray]:
        """Expected relative sd of every quantity for ``amount`` units of data."""
        amount = np.asarray(amount, dtype=float)
        return {q: v[2] / np.sqrt(amount) for q, v in self.unit_relative_sd().items()}

    def needed(self, targets: Mapping[str, float]) -> dict[str, float]:
        """Amount of data for each target relative sd (quantity -> amount)."""
        units = self.unit_relative_sd()
        out = {}
        for name, target in targets.items():
            if name not in units:
                raise InputError(f"no forecast for {name} with {self.kind} data",
                                 hint=f"targets can be set on {', '.join(units)}"
                                 + ("" if self.freq_hz else " (the temperature needs the "
                                    "mode frequency)"))
            if not (math.isfinite(target) and target > 0):
                raise InputError(f"the target relative precision of {name} must be > 0, "
                                 f"not {target}")
            if not math.isfinite(units[name][2]):
                raise InputError(f"no relative precision of {name} at an assumed value of "
                                 f"{units[name][1]:g}", hint="assume a value > 0")
            amount = (units[name][2] / target) ** 2
            out[name] = float(math.ceil(amount)) if self.integer else amount
        return out


def _targets(**targets: float | None) -> dict[str, float]:
    return {k: float(v) for k, v in targets.items() if v is not None}


def _table(forecast: Forecast, targets: dict[str, float], amount: float | None) -> pd.DataFrame:
    if not targets and amount is None:
        raise InputError("give a target precision or an amount of data",
                         hint="e.g. --target-lifetime 3% or --record-length 60s")
    needed = forecast.needed(targets)
    if amount is None:
        amount = max(needed.values())
        if forecast.integer:
            amount = max(amount, 1.0)
    elif not (math.isfinite(amount) and amount > 0):
        raise InputError(f"the amount of data must be > 0, not {amount}")
    rows = []
    for name, (unit, value, rel1, err, brel1) in forecast.unit_relative_sd().items():
        rel = rel1 / math.sqrt(amount)
        rows.append({"quantity": name, "unit": unit, "assumed": value,
                     "target_relative_sd": targets.get(name, math.nan),
                     "needed_amount": needed.get(name, math.nan), "planned_amount": amount,
                     "expected_sd": rel * value, "expected_relative_sd": rel,
                     "forecast_relative_error": err,
                     "perfect_readout_relative_sd": brel1 / math.sqrt(amount)})
    table = pd.DataFrame(rows)
    for col in COLUMNS:
        if col not in table:
            table[col] = np.nan
    table = table[list(COLUMNS)]
    table.attrs.update(kind=forecast.kind, amount_name=forecast.amount_name,
                       amount_unit=forecast.amount_unit, planned_amount=float(amount),
                       information_method=forecast.information.extra.get("method", ""))
    if forecast.seconds_per_amount:
        table.attrs["planned_record_length_s"] = float(amount * forecast.seconds_per_amount)
    return table


def _merge_study(table: pd.DataFrame, result: study.StudyResult, freq_hz: float | None
                 ) -> pd.DataFrame:
    """Add the study columns; derived quantities from the per-record estimates."""
    from cavchar.thermal import d_temperature_d_occupation, effective_temperature

    est = result.estimates[result.estimates["ok"]].copy()
    if freq_hz and "lifetime" in est:
        est["quality_factor"] = quality_factor(freq_hz, est["lifetime"])
        est["quality_factor_sd"] = quality_factor(freq_hz, est["lifetime_sd"])
    if freq_hz and "n_thermal" in est and (est["n_thermal"] > 0).all():
        est["effective_temperature"] = effective_temperature(freq_hz, est["n_thermal"])
        est["effective_temperature_sd"] = (d_temperature_d_occupation(freq_hz, est["n_thermal"])
                                           * est["n_thermal_sd"])
    m = len(est)
    failed = int((~result.estimates["ok"]).sum())
    for i, name in enumerate(table["quantity"]):
        if name not in est or m < 2:
            continue
        spread = float(np.std(est[name], ddof=1))
        table.loc[i, "simulated_sd"] = spread
        table.loc[i, "simulated_sd_error"] = spread / math.sqrt(2 * (m - 1))
        table.loc[i, "fit_sd"] = float(np.median(est[f"{name}_sd"]))
        table.loc[i, "simulated_to_expected"] = spread / table.loc[i, "expected_sd"]
        table.loc[i, "records"] = m
        table.loc[i, "failed_records"] = failed
    checked = table.dropna(subset=["simulated_to_expected"])
    tolerance = 0.15 + 3 * checked["simulated_sd_error"] / checked["simulated_sd"]
    off = checked[(checked["simulated_to_expected"] - 1).abs() > tolerance]
    if len(off) or failed:
        what = ", ".join(f"{q} {r:.2f}x" for q, r in zip(off["quantity"],
                                                          off["simulated_to_expected"],
                                                          strict=True))
        warnings.warn("the simulation study does not confirm the forecast"
                      + (f" (simulated spread / forecast: {what})" if what else "")
                      + (f"; {failed} of {failed + m} simulated records gave no estimate"
                         if failed else "")
                      + ": at this amount of data the Cramér–Rao bound is not yet reached; "
                      "plan with more data or trust the simulated spread",
                      StudyDisagreementWarning, stacklevel=3)
    table.attrs["study"] = "maximum likelihood on simulated records"
    return table


def _expected_jumps(table: pd.DataFrame, lifetime: float, n_thermal: float,
                    seconds: float) -> float:
    """Jumps expected in ``seconds`` of record (:func:`cavchar.dynamics.mean_jump_rate`),
    stored in ``table.attrs``; a warning when they are few."""
    expected_jumps = float(mean_jump_rate(1.0 / lifetime, n_thermal)) * seconds
    if expected_jumps < 30:
        warnings.warn(f"the planned record holds only about {expected_jumps:.0f} jumps: the "
                      "Cramér–Rao forecast is optimistic for so few; see the simulation study",
                      CavcharWarning, stacklevel=3)
    table.attrs["expected_jumps"] = expected_jumps
    return expected_jumps


def _records(check_records: int, cost_per_record: float) -> int:
    """Records a study can afford within :data:`STUDY_BUDGET` (0: skip it)."""
    affordable = int(STUDY_BUDGET // max(cost_per_record, 1.0))
    if affordable < 5:
        warnings.warn("the simulation study is skipped: the planned records are too long to "
                      "simulate and fit quickly (pass fewer targets or check by hand)",
                      CavcharWarning, stacklevel=4)
        return 0
    if affordable < check_records:
        warnings.warn(f"the simulation study uses {affordable} records instead of "
                      f"{check_records} (long records); its Monte Carlo error is larger",
                      CavcharWarning, stacklevel=4)
    return min(int(check_records), affordable)


def _with_study(table: pd.DataFrame, check: bool, check_records: int, cost_per_record: float,
                freq_hz: float | None, run: Callable[[int], study.StudyResult]) -> pd.DataFrame:
    """``table`` with the simulate-and-fit study ``run(n_records)`` merged in, when
    ``check`` asks for it and :func:`_records` finds it affordable."""
    if check:
        records = _records(check_records, cost_per_record)
        if records:
            table = _merge_study(table, run(records), freq_hz)
    return table


# --------------------------------------------------------------------------- public API


def plan_jumps(
    lifetime: float,
    n_thermal: float,
    *,
    target_lifetime: float | None = None,
    target_n_thermal: float | None = None,
    target_temperature: float | None = None,
    record_length: float | None = None,
    sample_interval: float | None = None,
    freq_hz: float | None = None,
    check: bool = True,
    check_records: int = 40,
    seed: int | None = 0,
) -> pd.DataFrame:
    """Record length for target precisions from a jump record, or precision for a length.

    Parameters
    ----------
    lifetime, n_thermal
        Assumed energy lifetime T_c (s) and thermal photon number.
    target_lifetime, target_n_thermal, target_temperature
        Target relative sds (0.03 = 3%) of T_c, n_th and the effective temperature
        (the last needs ``freq_hz``).
    record_length
        Total record length in s to forecast instead (overrides the targets' amount).
    sample_interval
        Photon number read every ``sample_interval`` s (sampled record) instead of
        exact change points.
    freq_hz
        Mode frequency in Hz (adds the quality factor and effective temperature).
    check, check_records, seed
        Run the simulate-and-fit study with ``check_records`` records.

    Returns
    -------
    DataFrame
        One row per quantity (:data:`COLUMNS`); amounts in seconds of record;
        ``attrs`` hold the kind, amount name and unit, planned amount.
    """
    targets = _targets(lifetime=target_lifetime, n_thermal=target_n_thermal,
                       effective_temperature=target_temperature)
    if sample_interval is None:
        info = fisher.exact_jump_information(lifetime, n_thermal)
        forecast = Forecast("jumps", info, 1.0, "record length", "s", False, freq_hz, 1.0)
    else:
        info = fisher.sampled_jump_information(lifetime, n_thermal, sample_interval)
        forecast = Forecast("jumps-sampled", info, 1.0 / sample_interval, "record length", "s",
                            False, freq_hz, 1.0)
    table = _table(forecast, targets, record_length)
    length = table.attrs["planned_amount"]
    jumps = _expected_jumps(table, lifetime, n_thermal, length)

    def run(records: int) -> study.StudyResult:
        return study.study_jumps(lifetime, n_thermal, length,
                                 info.sd(length * forecast.units_per_amount),
                                 sample_interval=sample_interval, n_records=records, seed=seed)

    cost = jumps + (length / sample_interval if sample_interval else 0.0)
    return _with_study(table, check, check_records, cost, freq_hz, run)


def plan_probes(
    lifetime: float,
    n_thermal: float,
    probe_interval: float,
    response=None,
    *,
    settings: ArrayLike | None = None,
    loss: float = 0.0,
    target_lifetime: float | None = None,
    target_n_thermal: float | None = None,
    target_temperature: float | None = None,
    n_probes: int | None = None,
    freq_hz: float | None = None,
    check: bool = True,
    check_records: int = 20,
    information_records: int = 4,
    max_information_probes: int = 2_000_000,
    seed: int | None = 0,
) -> pd.DataFrame:
    """Number of probes for target precisions from a raw probe record, or the reverse.

    Parameters
    ----------
    lifetime, n_thermal
        Assumed T_c (s) and n_th.
    probe_interval
        Time between probes in s.
    response
        Calibrated probe response (fixed values): a
        :class:`cavchar.models.probes.response.FringeResponse` / ``TableResponse`` or a
        callable ``(photons, setting) -> P(1)``; default: an ideal parity probe.
    settings, loss
        Interleaved probe settings (rad) and the probability that a probe is lost.
    target_lifetime, target_n_thermal, target_temperature, n_probes, freq_hz
        As for :func:`plan_jumps`; ``n_probes`` is the amount to forecast.
    check, check_records, seed
        Simulate-and-fit study.
    information_records, max_information_probes
        Simulated records (and their total probes) for the information estimate
        (:func:`cavchar.plan.fisher.probe_information`).

    Returns
    -------
    DataFrame
        As :func:`plan_jumps`, amounts in probes; ``perfect_readout_relative_sd``
        is the bound of a readout that reveals the photon number.
    """
    from cavchar.models.probes.response import FringeResponse

    response = FringeResponse() if response is None else response
    targets = _targets(lifetime=target_lifetime, n_thermal=target_n_thermal,
                       effective_temperature=target_temperature)
    if not targets and n_probes is None:  # fail before the simulation
        raise InputError("give a target precision or a number of probes",
                         hint="e.g. --target-lifetime 3% or --probes 1e6")
    rng = np.random.default_rng(seed)
    info = fisher.probe_information(lifetime, n_thermal, probe_interval, response,
                                    settings=settings, loss=loss, n_records=information_records,
                                    max_probes=max_information_probes, seed=rng)
    forecast = Forecast("probes", info, 1.0, "number of probes", "probes", True, freq_hz,
                        probe_interval)
    table = _table(forecast, targets, None if n_probes is None else float(n_probes))
    count = int(round(table.attrs["planned_amount"]))
    _expected_jumps(table, lifetime, n_thermal, count * probe_interval)
    table.attrs["probe_interval_s"] = probe_interval

    def run(records: int) -> study.StudyResult:
        return study.study_probes(lifetime, n_thermal, probe_interval, response, count,
                                  info.sd(count), settings=settings, loss=loss,
                                  n_records=records, seed=rng)

    return _with_study(table, check, check_records, count, freq_hz, run)


def plan_ringdown(
    signal: str,
    lifetime: float,
    *,
    noise: float = 0.0,
    times: ArrayLike | None = None,
    span: float | None = None,
    points: int = 1000,
    shots: int = 1000,
    fixed: Sequence[str] = (),
    target_lifetime: float | None = None,
    target_n_thermal: float | None = None,
    target_temperature: float | None = None,
    n_traces: int | None = None,
    freq_hz: float | None = None,
    check: bool = True,
    check_records: int = 40,
    seed: int | None = 0,
    **assumed: Any,
) -> pd.DataFrame:
    """Number of ring-down traces for target precisions, or the precision of N traces.

    Parameters
    ----------
    signal
        ``power``, ``db``, ``amplitude``, ``iq``, ``mean_n`` or ``populations``.
    lifetime
        Assumed energy lifetime T_c in s.
    noise
        Noise sd per point of one trace (value units; dB for db; per quadrature
        for iq and amplitude).
    times, span, points
        Sample times in s, or ``points`` equally spaced times over ``span`` s
        from ``t0`` (default span: 5 lifetimes).
    shots, fixed, **assumed
        As :func:`cavchar.plan.fisher.ringdown_information`: shots per delay, the
        nuisances held fixed, and the assumed curve (``amplitude``, ``floor``,
        ``t0``, ``n_thermal``, ``initial``, ``detuning``, ``phase``, ``offset``: the
        fields of :class:`cavchar.decay.RingdownCurve`).
    target_lifetime, target_n_thermal, target_temperature, n_traces, freq_hz
        As for :func:`plan_jumps`; ``n_traces`` is the amount to forecast
        (traces averaged or fitted together).
    check, check_records, seed
        Simulate-and-fit study.
    """
    if times is None:
        span = 5.0 * lifetime if span is None else span
        if not (math.isfinite(span) and span > 0) or int(points) < 2:
            raise InputError("the ring-down needs a span > 0 and at least 2 points")
        times = RingdownCurve(lifetime, **assumed).t0 + np.linspace(0.0, span, int(points))
    kw = dict(noise=noise, shots=shots, fixed=tuple(fixed), **assumed)
    info = fisher.ringdown_information(signal, times, lifetime, **kw)
    kind = f"ringdown-{signal.lower().replace('-', '_')}"
    if "n_thermal" not in info.names and (target_n_thermal or target_temperature):
        raise InputError(f"a {signal} ring-down carries no information on n_th",
                         hint="n_th enters mean-photon-number and population ring-downs")
    forecast = Forecast(kind, info, 1.0, "number of traces", "traces", True, freq_hz)
    targets = _targets(lifetime=target_lifetime, n_thermal=target_n_thermal,
                       effective_temperature=target_temperature)
    table = _table(forecast, targets, None if n_traces is None else float(n_traces))
    count = int(round(table.attrs["planned_amount"]))

    def run(records: int) -> study.StudyResult:
        return study.study_ringdown(signal, times, lifetime, count, None, n_records=records,
                                    seed=seed, **kw)

    return _with_study(table, check, check_records, count * np.size(times) / 100.0, freq_hz,
                       run)


def precision_curve(table: pd.DataFrame, amounts: ArrayLike | None = None,
                    points: int = 60) -> pd.DataFrame:
    """Expected relative sd of every quantity of a plan table over a range of amounts.

    ``amounts`` defaults to a logarithmic range from 1/30 to 30 times the planned
    amount.  Returns a long table with columns ``amount``, ``quantity``,
    ``expected_relative_sd``.
    """
    planned = float(table.attrs["planned_amount"])
    if amounts is None:
        amounts = np.geomspace(planned / 30, planned * 30, int(points))
    amounts = np.asarray(amounts, dtype=float)
    if np.any(amounts <= 0):
        raise InputError("amounts must be > 0")
    frames = []
    for _, row in table.iterrows():
        rel = row["expected_relative_sd"] * np.sqrt(planned / amounts)
        frames.append(pd.DataFrame({"amount": amounts, "quantity": row["quantity"],
                                    "expected_relative_sd": rel}))
    out = pd.concat(frames, ignore_index=True)
    out.attrs.update({k: v for k, v in table.attrs.items() if not isinstance(v, pd.DataFrame)})
    return out
