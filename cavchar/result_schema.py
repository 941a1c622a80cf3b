"""Validation of result files against their schema, before anything is built from them.

A result file is plain, strict JSON (RFC 8259: no ``NaN`` or ``Infinity``
literals).  :func:`load_result_json` reads one with those literals refused, a
size and nesting limit, and :func:`validate_result_data` checks every field the
package reads: its type, that numbers are finite, that draws are numbers of one
length per column, and the known parts of diagnostics, settings, provenance,
checks and extras.  Each problem is one :class:`~cavchar.errors.InputError`
naming the field (``diagnostics.n_walkers``) and what was expected, so a
damaged or crafted file never reaches a report, a log or a qualification
verdict.

Limits (documented in docs/inference.md): files up to :data:`MAX_RESULT_BYTES`,
nesting up to :data:`MAX_DEPTH` levels, at least :data:`MIN_DRAWS` draws, at
most :data:`MAX_CELLS` numbers of draws, strings up to :data:`MAX_STRING` characters.
"""

from __future__ import annotations

import json
import math
import os
import re
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

from cavchar.errors import InputError
from cavchar.result_types import parse_timestamp

__all__ = ["MAX_RESULT_BYTES", "MAX_DEPTH", "MIN_DRAWS", "MAX_CELLS", "MAX_STRING",
           "load_result_json", "validate_result_data"]

#: largest result file read (bytes)
MAX_RESULT_BYTES = 1 << 30
#: deepest nesting of objects and arrays accepted anywhere in a result file
MAX_DEPTH = 32
#: fewest posterior draws a result must hold (a spread needs two)
MIN_DRAWS = 2
#: most numbers in the draws table (draws x columns)
MAX_CELLS = 50_000_000
#: longest string accepted in a result file (characters)
MAX_STRING = 1_000_000

_KIND = re.compile(r"^[A-Za-z][A-Za-z0-9_-]{0,63}$")
_SHA256 = re.compile(r"^[0-9a-f]{64}$")


class _Bad(Exception):
    """A field that does not match the schema: where, and what was expected."""

    def __init__(self, where: str, expected: str, value: Any) -> None:
        self.where, self.expected, self.value = where, expected, value
        super().__init__(where)


def _show(value: Any) -> str:
    """A short, printable description of a found value (never raw markup or escapes)."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        text = value.encode("ascii", "backslashreplace").decode()
        text = "".join(c if c.isprintable() else "?" for c in text)
        return "text " + (repr(text[:30]) + ("..." if len(text) > 30 else ""))
    if isinstance(value, int | float):
        return "a number" if math.isfinite(value) else "a non-finite number"
    if isinstance(value, Mapping):
        return "an object"
    if isinstance(value, list | tuple):
        return "a list"
    return type(value).__name__


# ---------------------------------------------------------------------------- reading
def _refuse_constant(name: str) -> float:
    raise ValueError(f"the literal {name} (strict JSON has no NaN or Infinity)")


def _finite_float(text: str) -> float:
    value = float(text)
    if not math.isfinite(value):
        raise ValueError(f"the number {text[:30]} (beyond the range of a double)")
    return value


def load_result_json(path: str | os.PathLike) -> Any:
    """Parse a result file as strict JSON (no NaN/Infinity, no overflowing numbers).

    Raises
    ------
    InputError
        Unreadable, too large, not strict JSON, or nested deeper than the parser allows.
    """
    file = Path(path)
    try:
        size = file.stat().st_size
        if size > MAX_RESULT_BYTES:
            raise InputError(f"the result file is {size / 2**20:.0f} MiB, more than the "
                             f"{MAX_RESULT_BYTES / 2**20:.0f} MiB a result file may hold",
                             path=path)
        text = file.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else \
            type(exc).__name__
        raise InputError(f"cannot read the result file ({reason})", path=path) from None
    try:
        return json.loads(text, parse_constant=_refuse_constant, parse_float=_finite_float)
    except json.JSONDecodeError as exc:
        raise InputError(f"not valid JSON: {exc.msg}", path=path, line=exc.lineno) from None
    except ValueError as exc:  # our hooks, or an integer of more than 4300 digits
        raise InputError(f"not strict JSON: {exc}", path=path,
                         hint="result files hold finite numbers only") from None
    except RecursionError:
        raise InputError("the result file is nested too deeply to be a result", path=path,
                         hint=f"result files nest at most {MAX_DEPTH} levels") from None


# ---------------------------------------------------------------------------- checkers
def _depth(value: Any, where: str) -> None:
    """Refuse nesting deeper than MAX_DEPTH and over-long strings (iterative walk)."""
    stack = [(value, 1, where)]
    while stack:
        item, level, at = stack.pop()
        if isinstance(item, str):
            if len(item) > MAX_STRING:
                raise _Bad(at, f"text of at most {MAX_STRING} characters", "a longer text")
            continue
        if not isinstance(item, Mapping | list | tuple):
            continue
        if level > MAX_DEPTH:
            raise _Bad(at, f"at most {MAX_DEPTH} levels of nesting", "deeper nesting")
        if isinstance(item, Mapping):
            for k, v in item.items():
                if not isinstance(k, str):
                    raise _Bad(at, "text keys", k)
                stack.append((v, level + 1, f"{at}.{k}"))
        else:
            stack.extend((v, level + 1, f"{at}[{i}]") for i, v in enumerate(item))


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool) and \
        math.isfinite(value)


def _number(value: Any, where: str, *, low: float | None = None, high: float | None = None,
            null: bool = False) -> None:
    if value is None and null:
        return
    if not _is_number(value):
        raise _Bad(where, "a finite number" + (" or null" if null else ""), value)
    if (low is not None and value < low) or (high is not None and value > high):
        span = f"in [{low}, {high}]" if low is not None and high is not None else \
            f">= {low}" if low is not None else f"<= {high}"
        raise _Bad(where, f"a number {span}", value)


def _whole(value: Any, where: str, *, low: int | None = 0, null: bool = True) -> None:
    if value is None and null:
        return
    if isinstance(value, bool) or not isinstance(value, int) or \
            (low is not None and value < low):
        raise _Bad(where, "a whole number" + (f" >= {low}" if low is not None else "")
                   + (" or null" if null else ""), value)


def _text(value: Any, where: str, *, null: bool = False) -> None:
    if value is None and null:
        return
    if not isinstance(value, str):
        raise _Bad(where, "text" + (" or null" if null else ""), value)


def _flag(value: Any, where: str) -> None:
    if not isinstance(value, bool):
        raise _Bad(where, "true or false", value)


def _obj(value: Any, where: str) -> Mapping:
    if not isinstance(value, Mapping):
        raise _Bad(where, "an object", value)
    return value


def _list(value: Any, where: str) -> list:
    if not isinstance(value, list | tuple):
        raise _Bad(where, "a list", value)
    return list(value)


def _numbers(value: Any, where: str, *, null: bool = False) -> None:
    for i, v in enumerate(_list(value, where)):
        _number(v, f"{where}[{i}]", null=null)


def _number_map(value: Any, where: str, *, null: bool = True) -> None:
    for k, v in _obj(value, where).items():
        _number(v, f"{where}.{k}", null=null)


def _number_map_or_null(value: Any, where: str) -> None:
    if value is not None:
        _number_map(value, where)


def _optional(block: Mapping, where: str, rules: Mapping[str, Callable[[Any, str], None]]
              ) -> None:
    for key, rule in rules.items():
        if key in block:
            rule(block[key], f"{where}.{key}")


def _interval(value: Any, where: str) -> None:
    _number_map(value, where, null=False)


# ---------------------------------------------------------------------------- sections
#: dimensions a result may give a parameter or column (those cavchar.units formats)
_DIMENSIONS = ("time", "frequency", "rate", "temperature", "power", "phase", "dimensionless")


def _dimension(value: Any, where: str) -> None:
    if value is None or value == "":
        return
    _text(value, where)
    if value not in _DIMENSIONS:
        raise _Bad(where, "one of " + ", ".join(_DIMENSIONS), value)


def _parameters(value: Any) -> list[str]:
    items = _list(value, "parameters")
    if not items:
        raise _Bad("parameters", "at least one parameter", value)
    names = []
    for i, item in enumerate(items):
        at = f"parameters[{i}]"
        spec = _obj(item, at)
        for key in ("name", "unit", "label"):
            if key not in spec:
                raise _Bad(f"{at}.{key}", "text", None)
            _text(spec[key], f"{at}.{key}")
        if not spec["name"]:
            raise _Bad(f"{at}.name", "a non-empty name", spec["name"])
        _flag(spec.get("log_scale"), f"{at}.log_scale")
        _dimension(spec.get("dimension", ""), f"{at}.dimension")
        prior = _obj(spec.get("prior"), f"{at}.prior")
        _text(prior.get("family"), f"{at}.prior.family")
        for k, v in prior.items():
            if k != "family":
                _number(v, f"{at}.prior.{k}", null=True)
        names.append(spec["name"])
    if len(set(names)) != len(names):
        raise _Bad("parameters", "distinct parameter names", "a repeated name")
    return names


def _samples(value: Any, names: list[str]) -> None:
    columns = _obj(value, "samples")
    lengths = set()
    for name, column in columns.items():
        at = f"samples.{name}"
        values = _list(column, at)
        lengths.add(len(values))
        if len(lengths) > 1:
            raise _Bad(at, "as many draws as the other columns", f"{len(values)} draws")
        for i, v in enumerate(values):
            if not _is_number(v):
                raise _Bad(f"{at}[{i}]", "a finite number (a draw)", v)
    n = lengths.pop() if lengths else 0
    if n < MIN_DRAWS:
        raise _Bad("samples", f"at least {MIN_DRAWS} draws per column", f"{n}")
    if n * len(columns) > MAX_CELLS:
        raise _Bad("samples", f"at most {MAX_CELLS} numbers", f"{n * len(columns)}")
    for name in names:
        if name not in columns:
            raise _Bad(f"samples.{name}", "the draws of this fitted parameter", None)
        first = columns[name][0]
        if all(v == first for v in columns[name]):
            raise _Bad(f"samples.{name}", "draws with a spread (a posterior sample)",
                       f"{n} equal draws")


_DIAGNOSTICS: dict[str, Callable[[Any, str], None]] = {
    **{k: _whole for k in ("n_walkers", "n_steps", "burn_in", "thin", "n_draws")},
    "elapsed_s": lambda v, w: _number(v, w, low=0.0, null=True),
    "converged": _flag,
    "moves": lambda v, w: _text(v, w, null=True),
    "failed_checks": lambda v, w: [_text(x, f"{w}[{i}]") for i, x in enumerate(_list(v, w))],
    # null where the sampler stopped before it could measure them (e.g. the change of
    # tau after a single measurement of it)
    **{k: _number_map_or_null for k in ("tau", "tau_relative_change", "chain_length_in_tau",
                                        "ess", "ess_bulk", "ess_tail", "rhat",
                                        "acceptance_fraction")},
    "map": _obj,
    "tau_history": _list,
    "sampler": lambda v, w: _text(v, w, null=True),
    "n_unique_draws": _whole,
    "importance": lambda v, w: None if v is None else _obj(v, w),
}

_SAMPLER = {"seed": _whole, "n_walkers": _whole, "max_steps": _whole, "chunk": _whole,
            "moves": lambda v, w: _text(v, w, null=True),
            "quiet": _flag, "allow_unconverged": _flag}
_FIT = {"freq_hz": lambda v, w: _number(v, w, low=0.0, null=True),
        "stage_temp_k": lambda v, w: _number(v, w, low=0.0, null=True),
        "end_time": lambda v, w: _number(v, w, null=True),
        "signal": lambda v, w: _text(v, w, null=True)}


def _text_or_texts(value: Any, where: str, pattern: re.Pattern | None = None) -> None:
    if value is None:
        return
    items = value if isinstance(value, list) else [value]
    for i, item in enumerate(items):
        at = f"{where}[{i}]" if isinstance(value, list) else where
        _text(item, at)
        if pattern is not None and not pattern.match(item):
            raise _Bad(at, "64 lower-case hex digits", item)


def _inputs(value: Any, where: str) -> None:
    for i, item in enumerate(_list(value, where)):
        block = _obj(item, f"{where}[{i}]")
        _text(block.get("path"), f"{where}[{i}].path")
        sha = block.get("sha256")
        if sha is not None:
            _text_or_texts(sha, f"{where}[{i}].sha256", _SHA256)


def _texts_or_null(value: Any, where: str) -> None:
    if value is not None:
        for i, x in enumerate(_list(value, where)):
            _text(x, f"{where}[{i}]")


def _date(value: Any, where: str) -> None:
    _text(value, where, null=True)
    if value is not None and parse_timestamp(value) is None:
        raise _Bad(where, "an ISO 8601 date with its time zone, e.g. 2026-03-01T11:00:00+00:00",
                   value)


_PROVENANCE = {
    "inputs": _inputs,  # schema 2
    "input_path": _text_or_texts,  # schema 1: text or list, with input_sha256 beside it
    "input_sha256": lambda v, w: _text_or_texts(v, w, _SHA256),
    "command_line": _texts_or_null,
    "command": lambda v, w: _text(v, w, null=True),
    "seed": _whole,
    "versions": lambda v, w: [_text(x, f"{w}.{k}", null=True)
                              for k, x in _obj(v, w).items()],
    "cavchar_version": lambda v, w: _text(v, w, null=True),
    "created_at": lambda v, w: _text(v, w, null=True),
    "platform": lambda v, w: _text(v, w, null=True),
}

_PLANCK = {
    "prob_hotter_than_stage": lambda v, w: _number(v, w, low=0.0, high=1.0),
    "decision_probability": lambda v, w: _number(v, w, low=0.5, high=1.0),
    "n_draws": _whole,
    "freq_hz": lambda v, w: _number(v, w, low=0.0),
    "stage_temperature_k": lambda v, w: _number(v, w, low=0.0),
    "stage_occupation": lambda v, w: _number(v, w, low=0.0),
    "pile_up_ratio": _number,
    "verdict": _text,
    "piles_up_at_zero": _flag,
    "n_thermal": _interval,
    "effective_temperature_k": _interval,
    "excess_photons": _interval,
    "n_thermal_upper95": _number,
    "effective_temperature_upper95_k": _number,
}


def _per_number_rows(value: Any, where: str) -> None:
    for i, row in enumerate(_list(value, where)):
        for k, v in _obj(row, f"{where}[{i}]").items():
            _number(v, f"{where}[{i}].{k}", null=True)


_DWELL = {"misfit": _flag, "smallest_p_value": lambda v, w: _number(v, w, null=True),
          "threshold": _number, "method": _text, "per_photon_number": _per_number_rows}


def _excerpt(keys_numbers: tuple[str, ...], scalars: tuple[str, ...] = (),
             nulls: bool = False) -> Callable[[Any, str], None]:
    def check(value: Any, where: str) -> None:
        block = _obj(value, where)
        for key in keys_numbers:
            if key in block:
                _numbers(block[key], f"{where}.{key}", null=nulls and key == "outcome")
        for key in scalars:
            if key in block:
                _number(block[key], f"{where}.{key}", null=True)
    return check


def _dwell_excerpt(value: Any, where: str) -> None:
    for k, v in _obj(value, where).items():
        if not k.lstrip("-").isdigit():
            raise _Bad(f"{where}.{k}", "photon numbers as keys", k)
        _numbers(v, f"{where}.{k}")


def _curves(value: Any, where: str) -> None:
    def walk(item: Any, at: str) -> None:
        if isinstance(item, Mapping):
            for k, v in item.items():
                walk(v, f"{at}.{k}")
        elif isinstance(item, list | tuple):
            for i, v in enumerate(item):
                walk(v, f"{at}[{i}]")
        elif not (item is None or isinstance(item, str) or _is_number(item)):
            raise _Bad(at, "numbers, text or lists of them", item)
    walk(_obj(value, where), where)


_EXTRAS = {
    "record_excerpt": _excerpt(("time", "photons"), ("end_time",)),
    "occupation_fraction": _numbers,
    "dwell_excerpt": _dwell_excerpt,
    "trajectory_excerpt": _excerpt(("time", "outcome", "mean_photons", "viterbi_photons",
                                    "sd_photons"), nulls=True),
    "curves": _curves,
    "signal": _text,
}

_COLUMN = {"unit": _text, "dimension": _dimension, "label": _text}


def validate_result_data(data: Any, path: str | os.PathLike | None = None) -> None:
    """Check a parsed result file against the schema; raise one clear InputError if not.

    Parameters
    ----------
    data
        The parsed JSON object.
    path
        The file it came from (named in the message).

    Raises
    ------
    InputError
        Naming the first field that does not match, what was expected and what was found.
    """
    try:
        _validate(data)
    except _Bad as bad:
        raise InputError(f"damaged or foreign result file: {bad.where} should be "
                         f"{bad.expected}, found {_show(bad.value)}", path=path,
                         hint="write the result again with cavchar fit") from None


def _validate(data: Any) -> None:
    top = _obj(data, "the file")
    _depth(top, "result")
    major = str(top.get("schema", "")).partition("/")[2]
    kind = top.get("kind")
    if major == "1":  # the compound text "jumps-exact"
        _text(kind, "kind")
        if not _KIND.match(kind):
            raise _Bad("kind", "a fit kind such as jumps-exact (letters, digits, - and _)",
                       kind)
    else:  # {"family": "jumps", "variant": "exact"}
        block = _obj(kind, "kind")
        for key in ("family", "variant"):
            value = block.get(key)
            if key == "variant" and value is None:
                continue
            _text(value, f"kind.{key}")
            if not _KIND.match(value) or (key == "family" and "-" in value):
                raise _Bad(f"kind.{key}", "a word such as jumps or exact (letters, digits, "
                           "- and _; no - in the family)", value)
    _flag(top.get("converged"), "converged")
    if "seed" in top:
        _whole(top["seed"], "seed", low=None)
    names = _parameters(top.get("parameters"))
    _samples(top.get("samples"), names)
    _number_map(_obj(top.get("map"), "map"), "map")
    for key, rules in (("diagnostics", _DIAGNOSTICS), ("provenance", _PROVENANCE)):
        _optional(_obj(top.get(key), key), key, rules)
    if major != "1":  # schema 2 writes one spelling of the date (schema 1: read if it can be)
        _date(top["provenance"].get("created_at"), "provenance.created_at")
    settings = _obj(top.get("settings"), "settings")
    if "sampler" in settings:
        _optional(_obj(settings["sampler"], "settings.sampler"), "settings.sampler", _SAMPLER)
    if "fit" in settings:
        _optional(_obj(settings["fit"], "settings.fit"), "settings.fit", _FIT)
    checks = _obj(top.get("checks", {}), "checks")
    if "planck" in checks:
        _optional(_obj(checks["planck"], "checks.planck"), "checks.planck", _PLANCK)
    if "dwell_times" in checks:
        _optional(_obj(checks["dwell_times"], "checks.dwell_times"), "checks.dwell_times",
                  _DWELL)
    _optional(_obj(top.get("extras", {}), "extras"), "extras", _EXTRAS)
    for name, info in _obj(top.get("columns", {}), "columns").items():
        _optional(_obj(info, f"columns.{name}"), f"columns.{name}", _COLUMN)
    if "summary" in top:
        _obj(top["summary"], "summary")
