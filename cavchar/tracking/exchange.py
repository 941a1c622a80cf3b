"""Export the cooldown log to JSON or CSV and import such files back.

JSON export (complete): ``{"format": "cavchar cooldown log export", "version": 1,
"log_schema": 1, "exported_at", "cavities": [...], "cooldowns": [...],
"fits": [...]}``; each fit carries its settings, summary, provenance fields and
its stored draws as base64 text of little-endian float32
(``"draws": {"lifetime": "..."}``).

CSV export: one row per fit with its cavity and cooldown columns, the settings
and summary as JSON text, readable median and 68 % / 95 % interval columns
(SI units in the column names; ignored on import) and the draws as base64
columns ``draws_<parameter>``.  Cavities or cooldowns without any fit are only
in the JSON export.

Both import back with :func:`import_log` into the same or another log: the
draws come back bit for bit, and fits already present are skipped.
"""

from __future__ import annotations

import base64
import csv
import io
import json
import os
from dataclasses import asdict, dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np

from cavchar.errors import InputError
from cavchar.tracking.records import (
    KEY_PARAMETERS,
    FitEntry,
    canonical_json,
    decode_draws,
    encode_draws,
)
from cavchar.tracking.store import SCHEMA_VERSION, CooldownLog, _insert_cavity, _insert_cooldown

__all__ = ["EXPORT_FORMAT", "EXPORT_VERSION", "ImportReport", "export_document", "export_log",
           "import_log"]

EXPORT_FORMAT = "cavchar cooldown log export"
EXPORT_VERSION = 1
_UNIT_TAG = {"lifetime": "_s", "n_thermal": "", "effective_temperature": "_K"}
_FIT_FIELDS = ("kind", "model", "settings", "seed", "summary", "input_sha256", "settings_sha256",
               "tool_version", "fitted_at", "logged_at", "freq_hz", "stage_temp_k", "source",
               "n_draws_total", "parameters")
_CAVITY_FIELDS = ("name", "freq_hz", "notes", "created_at")
_COOLDOWN_FIELDS = ("label", "start_date", "stage_temp_k", "stage_temps", "notes", "created_at")
_JSON_CELLS = {"settings", "seed", "summary", "cooldown_stage_temps", "parameters"}
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
    stats = ("median", "low_68", "high_68", "low_95", "high_95")
    quantiles = (0.5, 0.16, 0.84, 0.025, 0.975)
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
    if int(doc.get("version", 0)) > EXPORT_VERSION:
        raise InputError(f"export version {doc.get('version')} is newer than this cavchar "
                         "reads", path=file, hint="update cavchar")
    return doc


def import_log(log: CooldownLog, path: str | os.PathLike) -> ImportReport:
    """Add the cavities, cooldowns and fits of an export file to ``log`` (one transaction).

    Fits already in the log (same input SHA-256 and settings) are skipped; an
    existing cavity or cooldown keeps its own frequency, temperatures and notes.
    """
    file = Path(path)
    doc = _read_document(file)
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
                _, new = log._add_fit_locked(
                    con, entry, fit["cavity"], fit["cooldown"], stage_temp_k=None, create=False,
                    on_duplicate="skip_quiet", logged_at=fit.get("logged_at"))
                added, skipped = added + new, skipped + (not new)
    except (KeyError, TypeError, ValueError) as exc:
        raise InputError(f"not a complete cooldown log export (problem with {exc})",
                         path=file) from None
    return ImportReport(added, skipped,
                        len({c.name for c in log.cavities()} - known_cavities),
                        len({c.label for c in log.cooldowns()} - known_cooldowns))


def _entry_from_record(fit: dict, file: Path) -> FitEntry:
    draws = {p: decode_draws(base64.b64decode(text, validate=True))
             for p, text in fit["draws"].items()}
    fields = {k: fit.get(k) for k in _FIT_FIELDS
              if k not in ("kind", "settings_sha256", "logged_at", "parameters")}
    entry = FitEntry(kind=fit["kind"], draws=draws, parameters=tuple(fit.get("parameters") or ()),
                     **fields)
    if fit.get("settings_sha256") and entry.settings_sha256 != fit["settings_sha256"]:
        raise InputError("a fit's settings do not match their SHA-256 (the file was edited)",
                         path=file, line=fit.get("_line"))
    return entry
