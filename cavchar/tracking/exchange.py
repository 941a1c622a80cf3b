"""Export the cooldown log to JSON or CSV and import such files back.

JSON export (complete): ``{"format": "cavchar cooldown log export", "version": 2,
"log_schema": 2, "exported_at", "cavities": [...], "cooldowns": [...],
"fits": [...]}``; each fit carries its settings, summary, provenance fields and
its stored draws as base64 text of little-endian float32
(``"draws": {"lifetime": "..."}``).

CSV export: one row per fit with its cavity and cooldown columns, the settings
and summary as JSON text, readable median and 68 % / 95 % interval columns
(SI units in the column names; ignored on import) and the draws as base64
columns ``draws_<parameter>``.  Cavities or cooldowns without any fit are only
in the JSON export.

Both import back with :func:`import_log` into the same or another log: the
draws come back bit for bit, and fits already present are skipped.  Version 2
adds each fit's mark, mark reason, notes and tags; version 1 files still import.
A file is checked whole (version, the type of every container and field) before
anything is written: a wrong one is refused with one line naming the element.
"""

from __future__ import annotations

import base64
import csv
import io
import json
import math
import os
from dataclasses import asdict, dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np

from cavchar.errors import InputError
from cavchar.quantities import QUANTILES_68
from cavchar.tracking.entries import (
    KEY_PARAMETERS,
    FitEntry,
    canonical_json,
    decode_draws,
    encode_draws,
)
from cavchar.tracking.store import SCHEMA_VERSION, CooldownLog, _insert_cavity, _insert_cooldown

__all__ = ["EXPORT_FORMAT", "EXPORT_VERSION", "ImportReport", "export_document", "export_log",
           "import_log", "read_export"]

EXPORT_FORMAT = "cavchar cooldown log export"
EXPORT_VERSION = 2
_UNIT_TAG = {"lifetime": "_s", "n_thermal": "", "effective_temperature": "_K"}
_FIT_FIELDS = ("kind", "model", "settings", "seed", "summary", "input_sha256", "settings_sha256",
               "tool_version", "fitted_at", "logged_at", "freq_hz", "stage_temp_k", "source",
               "n_draws_total", "parameters", "mark", "mark_reason", "notes", "tags")
_CAVITY_FIELDS = ("name", "freq_hz", "notes", "created_at")
_COOLDOWN_FIELDS = ("label", "start_date", "stage_temp_k", "stage_temps", "notes", "created_at")
_JSON_CELLS = {"settings", "seed", "summary", "cooldown_stage_temps", "parameters", "tags"}
_FLOAT_CELLS = {"freq_hz", "stage_temp_k", "cavity_freq_hz", "cooldown_stage_temp_k"}


@dataclass(frozen=True)
class ImportReport:
    """What an import did: counts of fits added and skipped (already present)."""

    fits_added: int
    fits_skipped: int
    cavities_added: int
    cooldowns_added: int


def _b64(values: np.ndarray) -> str:
    return base64.b64encode(encode_draws(values)).decode("ascii")


def export_document(log: CooldownLog, *, cavity: str | None = None) -> dict:
    """The whole log (or one cavity's part) as a JSON-ready dict."""
    fits = log.fits(cavity=cavity)
    cavities = [c for c in log.cavities() if cavity is None or c.name == cavity]
    used = {f.cooldown for f in fits}
    cooldowns = [c for c in log.cooldowns() if cavity is None or c.label in used]
    out_fits = []
    for fit in fits:
        record = {"id": fit.id, "cavity": fit.cavity, "cooldown": fit.cooldown}
        record.update({k: getattr(fit, k) for k in _FIT_FIELDS})
        record["draws"] = {p: _b64(v) for p, v in sorted(log.draws(fit.id).items())}
        out_fits.append(record)
    return {
        "format": EXPORT_FORMAT, "version": EXPORT_VERSION, "log_schema": SCHEMA_VERSION,
        "exported_at": datetime.now(UTC).isoformat(timespec="seconds"),
        "draws_encoding": "base64 of little-endian float32",
        "cavities": [{k: asdict(c)[k] for k in _CAVITY_FIELDS} for c in cavities],
        "cooldowns": [{k: asdict(c)[k] for k in _COOLDOWN_FIELDS} for c in cooldowns],
        "fits": out_fits,
    }


def _cell(value: Any, name: str) -> str:
    if value is None:
        return ""
    if name in _JSON_CELLS:
        return canonical_json(value)
    if isinstance(value, float):
        return repr(value)  # shortest text that reads back to the same float
    return str(value)


def _csv_text(doc: dict) -> str:
    cavities = {c["name"]: c for c in doc["cavities"]}
    cooldowns = {c["label"]: c for c in doc["cooldowns"]}
    stats = ("median", "lo68", "hi68", "lo95", "hi95")
    quantiles = (0.5, *QUANTILES_68, 0.025, 0.975)
    header = (["fit_id", "cavity"] + [f"cavity_{k}" for k in _CAVITY_FIELDS[1:]]
              + ["cooldown"] + [f"cooldown_{k}" for k in _COOLDOWN_FIELDS[1:]]
              + list(_FIT_FIELDS)
              + [f"{p}{_UNIT_TAG[p]}_{s}" for p in KEY_PARAMETERS for s in stats]
              + [f"draws_{p}" for p in KEY_PARAMETERS])
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(header)
    for fit in doc["fits"]:
        cav, cool = cavities[fit["cavity"]], cooldowns[fit["cooldown"]]
        row = [str(fit["id"]), fit["cavity"]]
        row += [_cell(cav[k], f"cavity_{k}") for k in _CAVITY_FIELDS[1:]]
        row += [fit["cooldown"]] + [_cell(cool[k], f"cooldown_{k}") for k in _COOLDOWN_FIELDS[1:]]
        row += [_cell(fit[k], k) for k in _FIT_FIELDS]
        for p in KEY_PARAMETERS:
            if p in fit["draws"]:
                values = decode_draws(base64.b64decode(fit["draws"][p]))
                row += [f"{q:.6g}" for q in np.quantile(values, quantiles)]
            else:
                row += [""] * len(stats)
        row += [fit["draws"].get(p, "") for p in KEY_PARAMETERS]
        writer.writerow(row)
    return buffer.getvalue()


def export_log(log: CooldownLog, path: str | os.PathLike, *, fmt: str | None = None,
               cavity: str | None = None, force: bool = False) -> int:
    """Write the log (or one cavity's fits) to ``path`` as JSON or CSV; returns the fit count.

    ``fmt`` is ``"json"`` or ``"csv"`` (default: from the file suffix).  The file
    is written atomically and an existing file is only replaced with ``force``.
    """
    from cavchar.io.atomic import check_can_write, write_text_atomic

    target = Path(path)
    fmt = (fmt or target.suffix.lstrip(".")).lower()
    if fmt not in ("json", "csv"):
        raise InputError(f"unknown export format {fmt!r}", path=target,
                         hint="use a .json or .csv file name or --format json/csv")
    check_can_write(target, force)
    doc = export_document(log, cavity=cavity)
    text = json.dumps(doc, indent=1, sort_keys=True) if fmt == "json" else _csv_text(doc)
    write_text_atomic(target, text, force=force)
    return len(doc["fits"])


def _parse_cell(text: str, name: str) -> Any:
    if text == "":
        return None
    if name in _JSON_CELLS:
        return json.loads(text)
    if name in _FLOAT_CELLS:
        return float(text)
    if name == "n_draws_total":
        return int(text)
    return text


def _document_from_csv(text: str, file: Path) -> dict:
    reader = csv.DictReader(io.StringIO(text))
    needed = {"cavity", "cooldown", "kind", "settings", "settings_sha256"}
    missing = needed - set(reader.fieldnames or [])
    if missing:
        raise InputError(f"not a cooldown log export: columns {', '.join(sorted(missing))} "
                         "are missing", path=file, line=1)
    doc: dict = {"cavities": {}, "cooldowns": {}, "fits": []}
    for line, row in enumerate(reader, start=2):
        try:
            cells = {k: _parse_cell(v or "", k) for k, v in row.items() if k is not None}
        except ValueError as exc:
            raise InputError(f"unreadable cell ({exc})", path=file, line=line) from None
        doc["cavities"].setdefault(cells["cavity"], {
            "name": cells["cavity"], **{k: cells.get(f"cavity_{k}") for k in _CAVITY_FIELDS[1:]}})
        doc["cooldowns"].setdefault(cells["cooldown"], {
            "label": cells["cooldown"],
            **{k: cells.get(f"cooldown_{k}") for k in _COOLDOWN_FIELDS[1:]}})
        fit = {k: cells.get(k) for k in ("cavity", "cooldown", *_FIT_FIELDS)}
        fit["draws"] = {p: cells[f"draws_{p}"] for p in KEY_PARAMETERS if cells.get(f"draws_{p}")}
        fit["_line"] = line
        doc["fits"].append(fit)
    doc["cavities"] = list(doc["cavities"].values())
    doc["cooldowns"] = list(doc["cooldowns"].values())
    return doc


def _read_document(file: Path) -> dict:
    try:
        text = file.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the export file ({exc})", path=file) from None
    if file.suffix.lower() == ".csv":
        return _document_from_csv(text, file)
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"not valid JSON ({exc.msg})", path=file, line=exc.lineno) from None
    if not isinstance(doc, dict) or doc.get("format") != EXPORT_FORMAT:
        raise InputError("not a cooldown log export (no 'format' marker)", path=file)
    version = doc.get("version")
    if isinstance(version, bool) or not isinstance(version, int) or version < 1:
        raise InputError(f"the export's 'version' must be a whole number from 1 to "
                         f"{EXPORT_VERSION}, not {_short(version)}", path=file)
    if version > EXPORT_VERSION:
        raise InputError(f"export version {version} is newer than this cavchar reads "
                         f"({EXPORT_VERSION})", path=file, hint="update cavchar")
    return doc


def _short(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


_TEXT, _NUMBER, _OBJECT, _LIST = "text", "a number", "an object", "a list"
_CAVITY_TYPES = {"name": _TEXT, "freq_hz": _NUMBER, "notes": _TEXT, "created_at": _TEXT}
_COOLDOWN_TYPES = {"label": _TEXT, "start_date": _TEXT, "stage_temp_k": _NUMBER,
                   "stage_temps": _OBJECT, "notes": _TEXT, "created_at": _TEXT}
_FIT_TYPES = {"cavity": _TEXT, "cooldown": _TEXT, "kind": _TEXT, "model": _TEXT,
              "settings": _OBJECT, "summary": _OBJECT, "input_sha256": _TEXT,
              "settings_sha256": _TEXT, "tool_version": _TEXT, "fitted_at": _TEXT,
              "logged_at": _TEXT, "freq_hz": _NUMBER, "stage_temp_k": _NUMBER, "source": _TEXT,
              "n_draws_total": _NUMBER, "parameters": _LIST, "mark": _TEXT,
              "mark_reason": _TEXT, "notes": _TEXT, "tags": _LIST, "draws": _OBJECT}
_REQUIRED = {"cavities": ("name",), "cooldowns": ("label",),
             "fits": ("cavity", "cooldown", "kind", "settings", "draws")}


def _type_ok(value: Any, want: str) -> bool:
    if value is None:
        return True
    if want == _TEXT:
        return isinstance(value, str)
    if want == _NUMBER:
        return (isinstance(value, int | float) and not isinstance(value, bool)
                and math.isfinite(value))
    if want == _OBJECT:
        return isinstance(value, dict)
    return isinstance(value, list)


def validate_document(doc: dict, file: Path) -> None:
    """Check the containers and field types of an export document; InputError naming the
    first wrong element (e.g. ``fits[3].draws``), before anything is written."""
    from cavchar.tracking.store import MARKS

    types = {"cavities": _CAVITY_TYPES, "cooldowns": _COOLDOWN_TYPES, "fits": _FIT_TYPES}
    for section, fields in types.items():
        items = doc.get(section, [])
        if not isinstance(items, list):
            raise InputError(f"'{section}' must be a list of objects, not "
                             f"{type(items).__name__}", path=file)
        for i, item in enumerate(items):
            where = f"{section}[{i}]"
            line = item.get("_line") if isinstance(item, dict) else None
            if not isinstance(item, dict):
                raise InputError(f"{where} must be an object, not {type(item).__name__}",
                                 path=file)
            for key in _REQUIRED[section]:
                if item.get(key) is None:
                    raise InputError(f"{where} has no '{key}'", path=file, line=line)
            for key, want in fields.items():
                if not _type_ok(item.get(key), want):
                    raise InputError(f"{where}.{key} must be {want}, not "
                                     f"{_short(item.get(key))}", path=file, line=line)
            if section == "fits":
                for name, text in item["draws"].items():
                    if name not in KEY_PARAMETERS or not isinstance(text, str):
                        raise InputError(f"{where}.draws must map {', '.join(KEY_PARAMETERS)} "
                                         f"to base64 text (found {_short(name)})", path=file,
                                         line=line)
                if item.get("mark") is not None and item["mark"] not in MARKS:
                    raise InputError(f"{where}.mark must be one of {', '.join(MARKS)}",
                                     path=file, line=line)
                if any(not isinstance(t, str) for t in item.get("tags") or ()):
                    raise InputError(f"{where}.tags must be a list of text", path=file,
                                     line=line)


def read_export(path: str | os.PathLike) -> dict:
    """Read and check an export file (JSON or CSV) without touching any log."""
    file = Path(path)
    doc = _read_document(file)
    validate_document(doc, file)
    return doc


def import_log(log: CooldownLog, path: str | os.PathLike, *,
               document: dict | None = None) -> ImportReport:
    """Add the cavities, cooldowns and fits of an export file to ``log`` (one transaction).

    Fits already in the log (same input SHA-256 and settings) are skipped; an
    existing cavity or cooldown keeps its own frequency, temperatures and notes.
    ``document`` is the file already read with :func:`read_export`.
    """
    file = Path(path)
    doc = read_export(file) if document is None else document
    known_cavities = {c.name for c in log.cavities()}
    known_cooldowns = {c.label for c in log.cooldowns()}
    added = skipped = 0
    try:
        with log.transaction() as con:
            for cav in doc.get("cavities", []):
                _insert_cavity(con, cav["name"], cav.get("freq_hz"), cav.get("notes") or "",
                               exist_ok=True, created_at=cav.get("created_at"))
            for cool in doc.get("cooldowns", []):
                _insert_cooldown(con, cool["label"], cool.get("start_date"),
                                 cool.get("stage_temp_k"), cool.get("stage_temps") or {},
                                 cool.get("notes") or "", exist_ok=True,
                                 created_at=cool.get("created_at"))
            for fit in doc.get("fits", []):
                entry = _entry_from_record(fit, file)
                fit_id, new = log._add_fit_locked(
                    con, entry, fit["cavity"], fit["cooldown"], stage_temp_k=None, create=False,
                    on_duplicate="skip_quiet", logged_at=fit.get("logged_at"), force_freq=True)
                if new and (fit.get("mark") or fit.get("notes") or fit.get("tags")):
                    con.execute("UPDATE fits SET mark = ?, mark_reason = ?, notes = ?, tags = ? "
                                "WHERE id = ?", (fit.get("mark"), fit.get("mark_reason") or "",
                                                 fit.get("notes") or "",
                                                 canonical_json(list(fit.get("tags") or [])),
                                                 fit_id))
                added, skipped = added + new, skipped + (not new)
    except (KeyError, TypeError, ValueError, AttributeError, OverflowError) as exc:
        raise InputError(f"not a complete cooldown log export (problem with {exc})",
                         path=file) from None
    return ImportReport(added, skipped,
                        len({c.name for c in log.cavities()} - known_cavities),
                        len({c.label for c in log.cooldowns()} - known_cooldowns))


def _entry_from_record(fit: dict, file: Path) -> FitEntry:
    draws = {p: decode_draws(base64.b64decode(text, validate=True))
             for p, text in fit["draws"].items()}
    fields = {k: fit.get(k) for k in _FIT_FIELDS
              if k not in ("kind", "settings_sha256", "logged_at", "parameters", "mark",
                           "mark_reason", "notes", "tags")}
    entry = FitEntry(kind=fit["kind"], draws=draws, parameters=tuple(fit.get("parameters") or ()),
                     **fields)
    if fit.get("settings_sha256") and entry.settings_sha256 != fit["settings_sha256"]:
        raise InputError("a fit's settings do not match their SHA-256 (the file was edited)",
                         path=file, line=fit.get("_line"))
    return entry
