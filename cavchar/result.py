"""FitResult: the frozen, typed outcome of every fit, and its plain-JSON file format.

A result holds the posterior draws (derived quantities included), the parameter
specifications, the MAP, the sampler diagnostics, every setting (the seed
among them), the provenance (input SHA-256, command line, versions, date) and
the checks (Planck check, posterior predictive checks); the typed parts are in
:mod:`cavchar.result_types`, and every field is read-only.  ``summary()`` gives median,
mean, sd, equal-tailed 68% and 95% intervals and MAP per quantity; asymmetric
intervals stay asymmetric.  The JSON layout is described field by field in
docs/inference.md; its version string is :data:`SCHEMA_VERSION`.
"""

from __future__ import annotations

import copy
import gzip
import io
import json
import math
import os
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from cavchar.derived import COLUMN_INFO, QUANTILES_68, add_derived_quantities, planck_check
from cavchar.errors import InputError
from cavchar.parameters import ParameterSpec
from cavchar.result_types import FitKind, PlanckCheck, Provenance, SamplerDiagnostics, freeze
from cavchar.units import decimals_for

if TYPE_CHECKING:
    import pandas as pd

    from cavchar.inference.sampler import PosteriorRun

__all__ = ["FitResult", "SCHEMA_VERSION", "to_plain_json", "default_draws_name",
           "interval_texts"]

#: schema of the result JSON: "<name>/<major>"; readers accept every major they know
SCHEMA_VERSION = "cavchar-fit-result/2"
_SCHEMA_NAME, _KNOWN_MAJORS = "cavchar-fit-result", (1, 2)

#: per-draw bookkeeping columns kept in ``samples`` but left out of ``summary()``
BOOKKEEPING = ("log_posterior", "log_likelihood")

_SUMMARY_COLUMNS = ["unit", "median", "mean", "sd", "lo68", "hi68", "lo95", "hi95", "map"]
_Q68 = QUANTILES_68


def to_plain_json(value: Any) -> Any:
    """Convert to plain JSON types: numpy scalars and arrays to numbers and lists, tuples
    to lists, paths to strings, non-finite floats to None (strict JSON has no NaN)."""
    if isinstance(value, Mapping):
        return {str(k): to_plain_json(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        if value and all(type(v) is float for v in value):  # a long list of numbers: fast path
            return to_plain_json(np.asarray(value, dtype=float))
        return [to_plain_json(v) for v in value]
    if isinstance(value, np.ndarray):
        if value.dtype.kind in "biu":
            return value.tolist()  # plain bools and ints, any shape
        if value.dtype.kind == "f":
            finite = np.isfinite(value)
            if finite.all():
                return value.tolist()  # plain floats, any shape
            cells = value.astype(object)
            cells[~finite] = None
            return cells.tolist()
        return to_plain_json(value.tolist())
    if isinstance(value, bool | np.bool_):
        return bool(value)
    if isinstance(value, int | np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        value = float(value)
        return value if math.isfinite(value) else None
    if value is None or isinstance(value, str):
        return value
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    if hasattr(value, "to_dict"):
        return to_plain_json(value.to_dict())
    raise TypeError(f"cannot store {type(value).__name__} in a result file")


def default_draws_name(stem: str = "draws") -> str:
    """``draws.parquet`` when pyarrow is importable, else ``draws.csv``."""
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        return f"{stem}.csv"
    return f"{stem}.parquet"


@dataclass(frozen=True, eq=False)
class FitResult:
    """Outcome of a fit (immutable fields; the tables given are copied; compared by identity).

    Every field is read-only, all the way down: the draws (see ``samples``), and the
    mappings and lists of the settings, checks, extras, MAP values and typed parts
    (:class:`~cavchar.result_types.FrozenDict`, :class:`~cavchar.result_types.FrozenList`:
    plain dicts and lists to every reader, but changing one raises ``TypeError``).
    The constructor also takes the plain-JSON forms of ``kind``, ``diagnostics``,
    ``provenance`` and ``checks["planck"]`` (those of schema 1 included).

    Attributes
    ----------
    kind
        What was fitted (:class:`~cavchar.result_types.FitKind`: family and variant;
        ``str(kind)`` is the compound name ``"jumps-exact"``).
    specs
        Parameter specifications (names, units, labels, priors), in order.
    samples
        Posterior draws, one row per draw: the parameters (SI units), derived
        columns and ``log_posterior`` / ``log_likelihood``.  Read-only: the draws
        are copied once into a read-only array, and each access gives a new
        DataFrame over it, so nothing can change what :meth:`summary` and
        :meth:`to_json` report (writing into the frame raises ``ValueError``).
    map_values
        MAP of each parameter (and of derived quantities computed from it).
    diagnostics
        Sampler diagnostics (:class:`~cavchar.result_types.SamplerDiagnostics`).
    settings
        Every setting, as plain JSON: ``{"sampler": {...}, "fit": {...}}``; the seed is
        ``settings["sampler"]["seed"]`` (read it as :attr:`seed`).
    provenance
        Input files and SHA-256, command line, versions, date, platform
        (:class:`~cavchar.result_types.Provenance`).
    checks
        The other checks, plain JSON, e.g. ``{"dwell_times": {...}, "prior_bounds": {...}}``.
    planck
        The Planck check (:class:`~cavchar.result_types.PlanckCheck`), None when the fit
        had no n_th, frequency or stage temperature; written as ``checks.planck``.
    extras
        Model-specific plain-JSON data for plots and reports.
    converged
        Whether the sampler passed all convergence checks.
    trace
        Optional walker chain ``(n_steps, n_walkers, ndim)`` in physical units for
        trace plots; kept in memory only, not written to JSON.
    """

    kind: FitKind
    specs: tuple[ParameterSpec, ...]
    samples: pd.DataFrame
    map_values: dict[str, float]
    diagnostics: SamplerDiagnostics
    settings: dict[str, Any]
    provenance: Provenance
    checks: dict[str, Any] = field(default_factory=dict)
    extras: dict[str, Any] = field(default_factory=dict)
    converged: bool = True
    trace: np.ndarray | None = field(default=None, repr=False, compare=False)
    planck: PlanckCheck | None = None

    def __post_init__(self) -> None:
        specs = tuple(self.specs)
        columns, draws = _draw_table(self.__dict__.pop("_samples_given"))
        missing = [s.name for s in specs if s.name not in columns]
        if missing:
            raise ValueError(f"samples lack the parameter columns {missing}")
        object.__setattr__(self, "specs", specs)
        # the draws are kept as one read-only float array: neither the frames handed out
        # by ``samples`` nor the arrays taken from them can change what summary() and
        # to_json() see
        draws.flags.writeable = False
        object.__setattr__(self, "_draws", draws)
        object.__setattr__(self, "_columns", columns)
        if self.trace is not None:
            trace = np.array(self.trace, dtype=float, copy=True)
            trace.flags.writeable = False
            object.__setattr__(self, "trace", trace)
        # the typed parts also accept their plain-JSON forms (schema 1 spellings included)
        object.__setattr__(self, "kind", FitKind.parse(self.kind))
        diagnostics = self.diagnostics
        if not isinstance(diagnostics, SamplerDiagnostics):
            diagnostics = SamplerDiagnostics.from_dict(to_plain_json(diagnostics))
        object.__setattr__(self, "diagnostics", diagnostics)
        for name in ("map_values", "settings", "checks", "extras"):
            object.__setattr__(self, name, to_plain_json(copy.deepcopy(getattr(self, name))))
        provenance = self.provenance
        if not isinstance(provenance, Provenance):
            plain = to_plain_json(provenance or {})
            # schema 1 kept the seed in the provenance too: its one home is the settings
            seed = plain.get("seed")
            sampler = self.settings.setdefault("sampler", {}) if seed is not None else {}
            if seed is not None and sampler.get("seed") is None:
                sampler["seed"] = seed
            provenance = Provenance.from_dict(plain)
        object.__setattr__(self, "provenance", provenance)
        planck = self.checks.pop("planck", None) if self.planck is None else self.planck
        if planck is not None and not isinstance(planck, PlanckCheck):
            planck = PlanckCheck.from_dict(planck)
        self.checks.pop("planck", None)
        object.__setattr__(self, "planck", planck)
        object.__setattr__(self, "map_values",
                           {k: (math.nan if v is None else v) for k, v in self.map_values.items()})
        # read-only from here on: nothing can change what summary() and to_json() report
        for name in ("map_values", "settings", "checks", "extras"):
            object.__setattr__(self, name, freeze(getattr(self, name)))

    def __setstate__(self, state: dict[str, Any]) -> None:
        """Unpickling (dask, copy): the draws and the chain stay read-only."""
        state = dict(state)
        for key in ("_draws", "trace"):
            if state.get(key) is not None:
                array = np.array(state[key], dtype=float, copy=True)
                array.flags.writeable = False
                state[key] = array
        self.__dict__.update(state)

    # ------------------------------------------------------------------ construction
    @classmethod
    def from_run(
        cls,
        kind: FitKind | str,
        run: PosteriorRun,
        *,
        freq_hz: float | None = None,
        stage_temp_k: float | None = None,
        provenance: Provenance | None = None,
        fit_settings: Mapping[str, Any] | None = None,
        checks: Mapping[str, Any] | None = None,
        extras: Mapping[str, Any] | None = None,
    ) -> FitResult:
        """Build a result from a :class:`cavchar.inference.PosteriorRun`.

        Adds the derived quantities (:func:`cavchar.derived.add_derived_quantities`)
        when there is a ``lifetime`` parameter, the Planck check when ``n_thermal``,
        ``freq_hz`` and ``stage_temp_k`` are all there, and records ``freq_hz``,
        ``stage_temp_k`` and ``fit_settings`` under ``settings["fit"]``.  Without
        ``provenance`` one is collected (no input file, no command line); the run's
        seed is recorded with its settings.
        """
        from cavchar.provenance import collect_provenance

        names = run.names
        samples = {n: run.draws[:, i] for i, n in enumerate(names)}
        map_frame = {n: run.map[i:i + 1] for i, n in enumerate(names)}
        if "lifetime" in names:
            samples = add_derived_quantities(samples, freq_hz, stage_temp_k)
            map_frame = add_derived_quantities(map_frame, freq_hz, stage_temp_k)
        samples["log_posterior"] = run.log_posterior
        samples["log_likelihood"] = run.log_likelihood
        all_checks = dict(checks or {})
        planck = all_checks.pop("planck", None)
        if planck is None and "n_thermal" in names and freq_hz is not None \
                and stage_temp_k is not None:
            planck = planck_check(samples, freq_hz, stage_temp_k)
        prov = provenance if provenance is not None else collect_provenance()
        fit = {"freq_hz": freq_hz, "stage_temp_k": stage_temp_k, **dict(fit_settings or {})}
        return cls(kind=FitKind.parse(kind), specs=run.specs, samples=samples,
                   map_values={k: float(np.asarray(v)[0]) for k, v in map_frame.items()},
                   diagnostics=SamplerDiagnostics.from_dict(to_plain_json(run.diagnostics)),
                   settings={"sampler": run.settings.to_dict(), "fit": fit},
                   provenance=prov, checks=all_checks, extras=dict(extras or {}),
                   converged=run.converged, trace=run.trace, planck=planck)

    # ------------------------------------------------------------------ access
    @property
    def parameter_names(self) -> list[str]:
        """Names of the sampled parameters, in the order of the draws' columns."""
        return [s.name for s in self.specs]

    @property
    def n_draws(self) -> int:
        """Number of posterior draws."""
        return int(self._draws.shape[0])

    def column(self, name: str) -> np.ndarray:
        """The draws of one column as a read-only float array (no copy), SI units."""
        try:
            index = self._columns.index(name)
        except ValueError:
            raise KeyError(f"no column {name!r} in the posterior draws") from None
        return self._draws[:, index]

    @property
    def seed(self) -> int | None:
        """The sampler seed (its one home: ``settings["sampler"]["seed"]``)."""
        sampler = self.settings.get("sampler")
        return sampler.get("seed") if isinstance(sampler, Mapping) else None

    def column_info(self, name: str) -> tuple[str, str, str]:
        """``(unit, dimension, label)`` of a column of :attr:`samples`."""
        for spec in self.specs:
            if spec.name == name:
                return spec.unit, spec.dimension, spec.label
        if name in COLUMN_INFO:
            return COLUMN_INFO[name]
        extra = (self.extras.get("nuisance_columns") or {}).get(name) \
            if isinstance(self.extras, Mapping) else None
        if isinstance(extra, Mapping) and name in self._columns:
            return (str(extra.get("unit", "")), str(extra.get("dimension", "dimensionless")),
                    str(extra.get("label", name)))
        if name not in self._columns:
            raise KeyError(f"no column {name!r} in the posterior draws")
        return "", "dimensionless", name

    def prior_limit(self, name: str) -> dict | None:
        """How ``name`` must be quoted when its posterior (or that of the parameter it is
        derived from) reaches a bound of the prior (``checks["prior_bounds"]``, see
        :mod:`cavchar.inference.prior_bounds`); None when it is a measurement.

        Returns ``{"kind": "lower" | "upper" | "none", "limit": value in SI units
        (the 5 % quantile of a lower limit, the 95 % quantile of an upper one; NaN
        for "none"), "parameter": the flagged parameter, "text": e.g.
        "T_c > 956 s (95% one-sided lower limit: the posterior reaches the prior's
        upper bound 1 ks)"}``.  Derived quantities follow their parameter: Q and the
        amplitude decay time rise with T_c, the linewidth falls; T_eff and the
        excess photon number rise with n_th.
        """
        from cavchar.units import format_quantity

        flagged = (self.checks.get("prior_bounds") or {}).get("parameters") or {}
        source, direction = _DERIVED_FROM.get(name, (name, 1))
        entry = flagged.get(source)
        if not isinstance(entry, dict) or name not in self._columns:
            return None
        _, dimension, label = self.column_info(name)
        _, source_dim, source_label = self.column_info(source)
        side = entry.get("side")
        bounds = entry.get("bounds") or [math.nan, math.nan]
        x = self.column(name)
        if side == "both":
            return {"kind": "none", "limit": math.nan, "parameter": source,
                    "text": f"{label}: not constrained by the data (the posterior of "
                            f"{source_label} fills its prior range)"}
        bound = bounds[1] if side == "upper" else bounds[0]
        kind = "lower" if (side == "upper") == (direction > 0) else "upper"
        limit = float(np.quantile(x, 0.05 if kind == "lower" else 0.95))
        which = "upper" if side == "upper" else "lower"
        sign = ">" if kind == "lower" else "<"
        return {"kind": kind, "limit": limit, "parameter": source,
                "text": f"{label} {sign} {format_quantity(limit, dimension, 3)} (95% one-sided "
                        f"{kind} limit: the posterior of {source_label} reaches the prior's "
                        f"{which} bound {format_quantity(float(bound), source_dim, 3)})"}

    def quantity_names(self) -> list[str]:
        """Summarised columns: the parameters first, then the derived quantities."""
        rest = [c for c in self._columns
                if c not in self.parameter_names and c not in BOOKKEEPING]
        return self.parameter_names + rest

    def summary(self) -> pd.DataFrame:
        """Per quantity: unit, median, mean, sd, equal-tailed 68% (lo68, hi68; one-sigma mass
        0.6827) and 95% (lo95, hi95) credible intervals, and the MAP (NaN if unknown)."""
        import pandas as pd

        table = pd.DataFrame.from_dict(self.summary_rows(), orient="index",
                                       columns=_SUMMARY_COLUMNS)
        table.index.name = "quantity"
        return table

    def summary_rows(self) -> dict[str, dict[str, Any]]:
        """The rows of :meth:`summary` as plain dicts by quantity (no pandas needed)."""
        rows = {}
        for name in self.quantity_names():
            x = self.column(name)
            lo68, med, hi68, lo95, hi95 = np.quantile(x, [_Q68[0], 0.5, _Q68[1], 0.025, 0.975])
            with np.errstate(over="ignore", invalid="ignore"):  # draws near 1e308: sd inf
                mean, sd = float(np.mean(x)), float(np.std(x, ddof=1))
            rows[name] = {"unit": self.column_info(name)[0], "median": med,
                          "mean": mean, "sd": sd,
                          "lo68": lo68, "hi68": hi68, "lo95": lo95, "hi95": hi95,
                          "map": float(self.map_values.get(name, math.nan))}
        return rows

    def one_line(self, name: str, upper_limit: bool | None = None) -> str:
        """One printable line, e.g. ``"T_c = 1.210(+0.040/-0.030) ms (68% credible)"``.

        The median with its asymmetric 68% interval, in one SI prefix chosen by
        :func:`cavchar.units.format_quantity`; decimals follow the Particle Data
        Group rounding rule applied to the smaller error (leading three digits
        100-354: two significant digits, 355-949: one, 950-999: round up to two).
        ``upper_limit`` (default: when the Planck check found n_th piled up against
        zero, for ``n_thermal`` and ``effective_temperature``) prints the one-sided
        95% upper limit instead: ``"n_th < 0.0031 (95% upper limit)"``.
        """
        from cavchar.units import format_quantity

        unit, dimension, label = self.column_info(name)
        x = self.column(name)
        limit = self.prior_limit(name)
        if limit is not None:
            return limit["text"]
        if upper_limit is None:
            upper_limit = (name in ("n_thermal", "effective_temperature")
                           and self.planck is not None and self.planck.piles_up_at_zero)
        if upper_limit:
            limit = format_quantity(float(np.quantile(x, 0.95)), dimension)
            return f"{label} < {limit} (95% upper limit)"
        lo, med, hi = np.quantile(x, [_Q68[0], 0.5, _Q68[1]])
        value, plus, minus, unit_text = _scaled(med, hi - med, med - lo, dimension)
        return f"{label} = {value}(+{plus}/-{minus}){unit_text} (68% credible)"

    # ------------------------------------------------------------------ display
    def plot(self, which: str = "corner", **kwargs: Any) -> Any:
        """A figure of this result, for notebooks and scripts (matplotlib, imported lazily).

        Parameters
        ----------
        which
            ``"corner"`` (marginal posteriors, :func:`cavchar.plots.posterior.corner_plot`),
            ``"trace"`` (walker chains or the kept draws,
            :func:`cavchar.plots.posterior.trace_plot`) or ``"data"`` (the first figure of
            the data with the posterior fit that the result's own excerpts allow).
        **kwargs
            Passed to the plotting function (``columns=``, ``truths=``, ...).

        Returns
        -------
        matplotlib.figure.Figure
        """
        from cavchar.plots import posterior

        if which == "corner":
            return posterior.corner_plot(self, **kwargs)
        if which == "trace":
            return posterior.trace_plot(self, **kwargs)
        if which == "data":
            from cavchar.report.figures import data_figures

            made, notes = data_figures(self)
            if not made:
                raise InputError("no data figure can be drawn from this result"
                                 + (f": {notes[0]}" if notes else ""))
            return made[0].figure
        raise InputError(f"unknown figure {which!r}", hint="use corner, trace or data")

    def _repr_html_(self) -> str:
        """Summary table and one-line forms as escaped HTML (Jupyter's rich display)."""
        from cavchar.report.html import result_summary_html

        return result_summary_html(self)

    # ------------------------------------------------------------------ files
    def to_dict(self) -> dict[str, Any]:
        """The plain-JSON form written by :meth:`to_json`."""
        summary = self.summary_rows()
        columns = {c: dict(zip(("unit", "dimension", "label"), self.column_info(c),
                               strict=True)) for c in self._columns}
        checks = dict(self.checks)
        if self.planck is not None:
            checks = {"planck": self.planck.to_dict(), **checks}
        return to_plain_json({
            "schema": SCHEMA_VERSION,
            "kind": self.kind.to_dict(),
            "converged": self.converged,
            "parameters": [s.to_dict() for s in self.specs],
            "columns": columns,
            "summary": summary,
            "map": self.map_values,
            "diagnostics": self.diagnostics.to_dict(),
            "settings": self.settings,
            "provenance": self.provenance.to_dict(),
            "checks": checks,
            "extras": self.extras,
            "samples": {c: self.column(c) for c in self._columns},
        })

    def to_json(self, path: str | os.PathLike, force: bool = False) -> Path:
        """Write the result as strict JSON, atomically; an existing file needs ``force=True``."""
        from cavchar.io.atomic import write_text_atomic

        return write_text_atomic(path, _dump(self.to_dict()), force=force)

    @classmethod
    def from_dict(cls, data: Mapping[str, Any], path: str | os.PathLike | None = None
                  ) -> FitResult:
        """Inverse of :meth:`to_dict`; raises :class:`InputError` for other files.

        The data are checked against the schema first
        (:func:`cavchar.result_schema.validate_result_data`: types, finite draws,
        sizes, nesting); the first mismatch is refused with one line naming the field.
        """
        from cavchar.result_schema import validate_result_data

        schema = data.get("schema") if isinstance(data, Mapping) else None
        name, _, major = str(schema).partition("/")
        if name != _SCHEMA_NAME:
            raise InputError("not a cavchar result file (no schema string)", path=path)
        if not major.isdigit() or int(major) not in _KNOWN_MAJORS:
            raise InputError(f"result schema {schema!r} is newer than this cavchar reads",
                             path=path, hint="update cavchar")
        validate_result_data(data, path=path)
        try:
            data = _migrate(data, int(major))
            specs = tuple(ParameterSpec.from_dict(p) for p in data["parameters"])
            samples = {c: np.array(v, dtype=float) for c, v in data["samples"].items()}
            map_values = {k: (math.nan if v is None else float(v))
                          for k, v in data["map"].items()}
            return cls(kind=FitKind.from_dict(data["kind"]), specs=specs, samples=samples,
                       map_values=map_values,
                       diagnostics=SamplerDiagnostics.from_dict(data["diagnostics"]),
                       settings=data["settings"],
                       provenance=Provenance.from_dict(data["provenance"]),
                       checks=data.get("checks", {}), extras=data.get("extras", {}),
                       converged=bool(data["converged"]))
        except InputError as exc:
            raise InputError(f"damaged cavchar result file: {exc.message}", path=path,
                             hint=exc.hint) from None
        except (KeyError, TypeError, ValueError) as exc:
            raise InputError(f"damaged cavchar result file ({type(exc).__name__}: "
                             f"{str(exc)[:200]})", path=path) from None

    @classmethod
    def from_json(cls, path: str | os.PathLike) -> FitResult:
        """Read a file written by :meth:`to_json` (any schema version this cavchar knows).

        The file must be strict JSON (``NaN``/``Infinity`` literals are refused) and
        match the schema (see :meth:`from_dict`); anything else is one
        :class:`InputError` naming the file and the field.
        """
        from cavchar.result_schema import load_result_json

        return cls.from_dict(load_result_json(path), path=path)

    def write_draws(self, path: str | os.PathLike, force: bool = False) -> Path:
        """Write the draws table: Parquet for ``.parquet``/``.pq`` (needs pyarrow), else CSV
        (``.csv``; ``.csv.gz`` compressed), floats written round-trip exact; atomic."""
        from cavchar.io.atomic import check_can_write, write_bytes_atomic, write_text_atomic

        target = check_can_write(path, force)
        suffixes = [s.lower() for s in target.suffixes]
        if suffixes and suffixes[-1] in (".parquet", ".pq"):
            try:
                import pyarrow  # noqa: F401
            except ImportError:
                raise InputError("writing Parquet needs pyarrow", path=target,
                                 hint="pip install pyarrow, or write a .csv file") from None
            buffer = io.BytesIO()
            self.samples.to_parquet(buffer, index=False)
            return write_bytes_atomic(target, buffer.getvalue(), force=force)
        text = self.samples.to_csv(index=False, float_format=None, lineterminator="\n")
        if suffixes[-2:] == [".csv", ".gz"] or (suffixes and suffixes[-1] == ".gz"):
            return write_bytes_atomic(target, gzip.compress(text.encode(), mtime=0), force=force)
        return write_text_atomic(target, text, force=force)


def _get_samples(self: FitResult) -> pd.DataFrame:
    """The posterior draws as a new DataFrame over read-only memory (see the class doc)."""
    import pandas as pd

    return pd.DataFrame(self._draws, columns=list(self._columns), copy=False)


def _draw_table(given: Any) -> tuple[tuple[str, ...], np.ndarray]:
    """Column names and a fresh float array ``(n_draws, n_columns)`` (Fortran order) from a
    DataFrame or a mapping of equal-length columns (scalars are broadcast)."""
    if hasattr(given, "to_numpy") and hasattr(given, "columns"):  # a DataFrame
        return (tuple(given.columns),
                np.array(given.to_numpy(dtype=float), dtype=float, copy=True, order="F"))
    columns = tuple(str(c) for c in given)
    arrays = [np.asarray(given[c], dtype=float) for c in given]
    n = max((a.size for a in arrays if a.ndim), default=0)
    draws = np.empty((n, len(arrays)), dtype=float, order="F")
    for j, a in enumerate(arrays):
        if a.ndim > 1 or (a.ndim == 1 and a.size != n):
            raise ValueError(f"sample column {columns[j]!r} has shape {a.shape}, not ({n},)")
        draws[:, j] = a
    return columns, draws


def _set_samples(self: FitResult, value: Any) -> None:
    if "_draws" in self.__dict__:  # only the generated __init__ may set it, once
        raise AttributeError("the draws of a FitResult are read-only")
    self.__dict__["_samples_given"] = value


FitResult.samples = property(  # type: ignore[assignment]
    _get_samples, _set_samples,
    doc="Posterior draws, one row per draw: a new DataFrame over read-only memory at each "
        "access (writing into it raises; adding columns changes only that frame).")


def _migrate(data: Mapping[str, Any], major: int) -> dict[str, Any]:
    """Bring a (validated) file of an older schema major to the current layout.

    Schema 1 -> 2: ``kind`` was the compound text ``"jumps-exact"`` (now
    ``{"family", "variant"}``); the seed stood three times (top level, provenance,
    ``settings.sampler``: now only in the settings); the provenance held
    ``input_path`` / ``input_sha256`` as texts or parallel lists (now ``inputs``, a
    list of ``{"path", "sha256"}``), the command line twice (``command`` text and
    ``command_line`` list: now the list) and the cavchar version twice
    (``cavchar_version`` and ``versions.cavchar``: now the latter); the diagnostics
    repeated ``converged`` (now only at the top level).
    """
    out = dict(data)
    if major == 2:
        return out
    if major != 1:  # pragma: no cover - _KNOWN_MAJORS lists what is handled here
        raise InputError(f"no migration from result schema major {major}")
    seed = out.pop("seed", None)
    provenance = dict(out.get("provenance") or {})
    seed = provenance.pop("seed", None) if seed is None else seed
    provenance.pop("seed", None)
    settings = {k: dict(v) if isinstance(v, Mapping) else v
                for k, v in (out.get("settings") or {}).items()}
    if seed is not None:
        sampler = settings.setdefault("sampler", {})
        if sampler.get("seed") is None:
            sampler["seed"] = seed
    out["settings"] = settings
    out["provenance"] = Provenance.from_dict(provenance).to_dict()
    out["kind"] = FitKind.parse(str(out["kind"])).to_dict()
    out["diagnostics"] = {k: v for k, v in (out.get("diagnostics") or {}).items()
                          if k != "converged"}
    out["schema"] = SCHEMA_VERSION
    return out


def _dump(data: dict[str, Any]) -> str:
    """Strict JSON: metadata indented, each column of draws on one line."""
    parts = []
    for key, value in data.items():
        if key == "samples":
            cols = ",\n".join(f"  {json.dumps(c)}: {json.dumps(v, allow_nan=False)}"
                               for c, v in value.items())
            body = "{\n" + cols + "\n }" if value else "{}"
        else:
            body = json.dumps(value, indent=1, allow_nan=False).replace("\n", "\n ")
        parts.append(f" {json.dumps(key)}: {body}")
    return "{\n" + ",\n".join(parts) + "\n}\n"


#: derived column -> (parameter it is computed from, +1 rising / -1 falling with it)
_DERIVED_FROM = {"quality_factor": ("lifetime", 1), "amplitude_decay_time": ("lifetime", 1),
                 "linewidth": ("lifetime", -1), "effective_temperature": ("n_thermal", 1),
                 "excess_photons": ("n_thermal", 1)}


def _display_unit(median: float, plus: float, minus: float, dimension: str
                  ) -> tuple[float, str]:
    """(factor, suffix): the display unit of a median (SI prefix or power of ten)."""
    from cavchar.units import format_quantity, parse_quantity

    if dimension in ("dimensionless", "phase"):
        magnitude = abs(median) if median != 0 else max(plus, minus)
        exponent = 0
        if magnitude > 0 and math.isfinite(magnitude) and not 1e-3 <= magnitude < 1e4:
            exponent = math.floor(math.log10(magnitude))
        return 10.0**exponent, ((f"e{exponent}" if exponent else "")
                                + (" rad" if dimension == "phase" else ""))
    text = format_quantity(median, dimension)
    unit = text.split(" ", 1)[1] if " " in text and math.isfinite(median) else ""
    return (parse_quantity("1" + unit, dimension) if unit else 1.0), (f" {unit}" if unit
                                                                       else "")


def interval_texts(median: float, lo68: float, hi68: float, lo95: float, hi95: float,
                   dimension: str) -> dict[str, str]:
    """Median and interval bounds as text in the display unit of :meth:`FitResult.one_line`,
    with as many decimals as the interval needs.

    The unit (SI prefix, or a power of ten for dimensionless numbers) is chosen
    from the median; the decimals follow the PDG rule applied to the smaller
    half-width of the 68 % interval (as ``one_line``), so an interval narrower
    than the median's third digit keeps its digits: ``1.85001 kHz [1.84991 kHz,
    1.85012 kHz]``, never ``1.85 kHz [1.85 kHz, 1.85 kHz]``.  A bound that would
    show fewer than two significant digits (the far end of a wide, skewed
    interval) gets two.

    Returns
    -------
    dict
        ``median``, ``lo68``, ``hi68``, ``lo95``, ``hi95`` (numbers with the unit
        suffix, e.g. ``"1.21 ms"``) and ``unit`` (the suffix alone).
    """
    values = {"median": median, "lo68": lo68, "hi68": hi68, "lo95": lo95, "hi95": hi95}
    if not all(math.isfinite(v) for v in values.values()):
        return {**{k: ("nan" if not math.isfinite(v) else f"{v:.4g}") for k, v in
                   values.items()}, "unit": ""}
    plus, minus = hi68 - median, median - lo68
    factor, suffix = _display_unit(median, plus, minus, dimension)
    smaller = min(plus, minus) / factor
    if not smaller > 0:
        smaller = max(plus, minus) / factor
    decimals = decimals_for(smaller)
    if median != 0:  # never more than 7 significant digits (float32 draws hold no more)
        decimals = min(decimals, 6 - math.floor(math.log10(abs(median / factor))))
    out = {}
    for key, value in values.items():
        v = value / factor
        d = decimals
        if key != "median" and v != 0:
            lead = math.floor(math.log10(abs(v)))
            if lead + 1 + d < 2:
                d = 1 - lead
        if d < 0:
            step = 10.0**-d
            out[key] = f"{round(v / step) * step:.0f}{suffix}"
        else:
            out[key] = f"{v:.{d}f}{suffix}"
    out["unit"] = suffix.strip()
    return out


def _scaled(median: float, plus: float, minus: float, dimension: str
            ) -> tuple[str, str, str, str]:
    """Median and errors as strings in one display unit (prefix or power of ten)."""
    from cavchar.units import format_quantity, parse_quantity

    suffix = ""
    if dimension in ("dimensionless", "phase"):
        magnitude = abs(median) if median != 0 else max(plus, minus)
        exponent = 0
        if magnitude > 0 and not 1e-3 <= magnitude < 1e4:
            exponent = math.floor(math.log10(magnitude))
        factor = 10.0**exponent
        suffix = (f"e{exponent}" if exponent else "") + (" rad" if dimension == "phase" else "")
    else:
        text = format_quantity(median, dimension)
        unit = text.split(" ", 1)[1] if " " in text else ""
        factor = parse_quantity("1" + unit, dimension) if unit else 1.0
        suffix = f" {unit}" if unit else ""
    med, p, m = median / factor, plus / factor, minus / factor
    smaller = min(p, m)
    decimals = decimals_for(smaller)
    if decimals < 0:  # errors of tens or more in this unit: round to that place
        step = 10.0**-decimals
        med, p, m = (round(v / step) * step for v in (med, p, m))
        decimals = 0
    return f"{med:.{decimals}f}", f"{p:.{decimals}f}", f"{m:.{decimals}f}", suffix
