"""The cooldown log: an SQLite file of cavities, cooldowns and fits.

Layout (schema version :data:`SCHEMA_VERSION`, kept in ``PRAGMA user_version``;
the file is marked as a cavchar log by ``PRAGMA application_id``):

* ``cavities``  name, mode frequency [Hz], notes;
* ``cooldowns`` label, start date, base stage temperature [K], other stage
  temperatures (JSON ``{stage: K}``), notes;
* ``fits``      cavity, cooldown, kind, model, settings (JSON), seed, summary
  (JSON), input SHA-256, settings SHA-256, tool version, fit date, log date,
  mode frequency [Hz] and stage temperature [K] of the measurement;
* ``draws``     per fit and key parameter (:data:`KEY_PARAMETERS`), a thinned
  copy of the posterior draws (at most ``max_draws``, the same rows for every
  parameter so joint draws stay joint) as little-endian float32 blobs.

Schema version 2 adds to ``fits`` the user's mark (``mark``: ``"preferred"``
or ``"excluded"``, with ``mark_reason``), free ``notes`` and ``tags`` (JSON
list); see :mod:`cavchar.tracking.selection` for what the marks do.

Safety: the file runs in WAL mode with a busy timeout; every write is one
``BEGIN IMMEDIATE ... COMMIT`` transaction, so a process killed mid-write leaves
the log as it was and concurrent writers queue instead of failing.  The same
fit added twice (same input SHA-256, kind, model, settings and seed) is found
before it is written.
"""

from __future__ import annotations

import difflib
import json
import os
import sqlite3
import warnings
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from cavchar.errors import CavcharWarning, InputError
from cavchar.tracking.entries import (
    KEY_PARAMETERS,
    Cavity,
    Cooldown,
    FitEntry,
    FitRecord,
    canonical_json,
    decode_draws,
    encode_draws,
)
from cavchar.tracking.rules import DEFAULT_FREQ_TOLERANCE, check_fit_frequency

if TYPE_CHECKING:
    from cavchar.result import FitResult

__all__ = ["SCHEMA_VERSION", "LOG_ENV", "DEFAULT_LOG_NAME", "CooldownLog",
           "resolve_log_path", "open_log", "log_fit_result"]

SCHEMA_VERSION = 2
#: "CAVC" in ASCII: marks an SQLite file as a cavchar log
APPLICATION_ID = 0x43415643
LOG_ENV = "CAVCHAR_LOG"
DEFAULT_LOG_NAME = "cavchar.sqlite"
_SQLITE_MAGIC = b"SQLite format 3\x00"

# One tuple of statements per schema version; version v is reached by running
# _MIGRATIONS[v - 1] on a version v - 1 file (0 = empty file).
_MIGRATIONS: tuple[tuple[str, ...], ...] = (
    (
        """CREATE TABLE cavities (
            id INTEGER PRIMARY KEY, name TEXT NOT NULL UNIQUE, freq_hz REAL,
            notes TEXT NOT NULL DEFAULT '', created_at TEXT NOT NULL)""",
        """CREATE TABLE cooldowns (
            id INTEGER PRIMARY KEY, label TEXT NOT NULL UNIQUE, start_date TEXT,
            stage_temp_k REAL, stage_temps TEXT NOT NULL DEFAULT '{}',
            notes TEXT NOT NULL DEFAULT '', created_at TEXT NOT NULL)""",
        """CREATE TABLE fits (
            id INTEGER PRIMARY KEY,
            cavity_id INTEGER NOT NULL REFERENCES cavities(id),
            cooldown_id INTEGER NOT NULL REFERENCES cooldowns(id),
            kind TEXT NOT NULL, model TEXT, settings TEXT NOT NULL, seed TEXT,
            summary TEXT NOT NULL, input_sha256 TEXT, settings_sha256 TEXT NOT NULL,
            tool_version TEXT, fitted_at TEXT, logged_at TEXT NOT NULL,
            freq_hz REAL, stage_temp_k REAL, source TEXT, n_draws_total INTEGER,
            parameters TEXT NOT NULL DEFAULT '[]')""",
        "CREATE INDEX fits_by_place ON fits(cavity_id, cooldown_id)",
        "CREATE INDEX fits_by_input ON fits(input_sha256, settings_sha256)",
        """CREATE TABLE draws (
            fit_id INTEGER NOT NULL REFERENCES fits(id) ON DELETE CASCADE,
            parameter TEXT NOT NULL, data BLOB NOT NULL,
            PRIMARY KEY (fit_id, parameter)) WITHOUT ROWID""",
    ),
    (
        "ALTER TABLE fits ADD COLUMN mark TEXT",
        "ALTER TABLE fits ADD COLUMN mark_reason TEXT NOT NULL DEFAULT ''",
        "ALTER TABLE fits ADD COLUMN notes TEXT NOT NULL DEFAULT ''",
        "ALTER TABLE fits ADD COLUMN tags TEXT NOT NULL DEFAULT '[]'",
    ),
)
#: the marks a user can set on a logged fit (``cavchar log prefer`` / ``log exclude``)
MARKS = ("preferred", "excluded")
#: largest id SQLite stores (signed 64-bit integer)
MAX_ID = 2**63 - 1
assert len(_MIGRATIONS) == SCHEMA_VERSION


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds")


_FIT_COLUMNS = (
    "f.id, c.name, d.label, f.kind, f.model, f.settings, f.seed, f.summary, f.input_sha256, "
    "f.settings_sha256, f.tool_version, f.fitted_at, f.logged_at, f.freq_hz, f.stage_temp_k, "
    "f.source, f.n_draws_total, f.parameters, f.mark, f.mark_reason, f.notes, f.tags"
)
_FIT_FROM = "fits f JOIN cavities c ON c.id = f.cavity_id JOIN cooldowns d ON d.id = f.cooldown_id"


def _fit_record(row: Sequence) -> FitRecord:
    values = list(row)
    values[5] = json.loads(values[5])
    values[6] = None if values[6] is None else json.loads(values[6])
    values[7] = json.loads(values[7])
    values[17] = tuple(json.loads(values[17]))
    values[21] = tuple(json.loads(values[21]))
    return FitRecord(*values)


def check_fit_id(fit_id: object) -> int:
    """A fit id as int; InputError for anything SQLite cannot hold (not an integer, < 1,
    or above 2**63 - 1)."""
    try:
        value = int(fit_id)  # type: ignore[call-overload]
    except (TypeError, ValueError, OverflowError):
        raise InputError(f"fit id {str(fit_id)[:40]!r} is not a whole number",
                         hint="`cavchar log list` shows the fit ids") from None
    if isinstance(fit_id, float) and value != fit_id:
        raise InputError(f"fit id {fit_id!r} is not a whole number")
    if not 1 <= value <= MAX_ID:
        shown = str(value) if len(str(value)) <= 30 else str(value)[:27] + "..."
        raise InputError(f"fit id {shown} is out of range (ids run from 1 to {MAX_ID})",
                         hint="`cavchar log list` shows the fit ids")
    return value


#: SQLite primary result codes (sqlite.org/rescode.html) that say what is wrong
_SQLITE_PERM, _SQLITE_BUSY, _SQLITE_LOCKED, _SQLITE_READONLY = 3, 5, 6, 8
_SQLITE_IOERR, _SQLITE_CORRUPT, _SQLITE_FULL, _SQLITE_CANTOPEN, _SQLITE_NOTADB = 10, 11, 13, 14, 26


def sqlite_input_error(exc: BaseException, path: Path) -> InputError:
    """One clear InputError for an SQLite failure, by its result code: busy, read-only,
    disk full, cannot open, I/O error, damaged; never a guess that the file is damaged
    when SQLite says something else."""
    code = getattr(exc, "sqlite_errorcode", None)
    base = None if code is None else int(code) & 0xFF
    text = str(exc)
    if base in (_SQLITE_BUSY, _SQLITE_LOCKED) or "locked" in text or "busy" in text:
        return InputError("the log is busy (another process holds it too long)", path=path,
                          hint="retry in a moment")
    if base == _SQLITE_FULL or "disk is full" in text:
        return InputError("the disk is full: the log could not be written (nothing was "
                          "changed)", path=path, hint="free some space and run the command "
                          "again")
    if base in (_SQLITE_READONLY, _SQLITE_PERM) or "readonly" in text:
        return InputError("the log cannot be written: the file or its folder is read-only "
                          "(nothing was changed)", path=path,
                          hint="reading (log list, log show, trend, qualify) still works; make "
                          "the file and its folder writable to change the log")
    if base == _SQLITE_CANTOPEN or "unable to open" in text:
        return InputError("cannot open the log file (its folder is missing, not readable, or "
                          "read-only while SQLite needs to write beside the file)", path=path,
                          hint="check the path and the folder's permissions")
    if base == _SQLITE_IOERR or "disk I/O error" in text:
        return InputError(f"a disk read or write failed ({text}); nothing was changed",
                          path=path, hint="check free space, permissions and the disk, then "
                          "retry")
    if base in (_SQLITE_CORRUPT, _SQLITE_NOTADB) or isinstance(exc, sqlite3.DatabaseError) \
            and not isinstance(exc, sqlite3.OperationalError):
        return InputError(f"the log file is damaged ({text})", path=path,
                          hint="restore it from a backup or an export")
    return InputError(f"cannot use the log: {text}", path=path,
                      hint="`cavchar log check` checks the file")


def resolve_log_path(path: str | os.PathLike | None = None) -> Path:
    """The log file: ``path`` if given, else ``$CAVCHAR_LOG``, else ``./cavchar.sqlite``."""
    if path is not None and str(path) != "":
        return Path(path)
    env = os.environ.get(LOG_ENV, "")
    return Path(env) if env else Path.cwd() / DEFAULT_LOG_NAME


def _closest(name: str, known: Sequence[str], what: str, option: str) -> InputError:
    lower = {k.lower(): k for k in known}
    near = [lower[k] for k in difflib.get_close_matches(name.lower(), list(lower), n=3)]
    listed = ", ".join(sorted(known)[:10]) or "none yet"
    plural = "cavities" if what == "cavity" else f"{what}s"
    hint = f"did you mean {' or '.join(near)}?" if near else f"known {plural}: {listed}"
    return InputError(f"unknown {what} {name!r}", hint=f"{hint}; add one with {option}")


class CooldownLog:
    """An open cooldown log.  Use :func:`open_log`; close with ``close()`` or ``with``."""

    def __init__(self, path: Path, connection: sqlite3.Connection) -> None:
        self.path = path
        self._con = connection

    # -- plumbing -----------------------------------------------------------------
    def __enter__(self) -> CooldownLog:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        """Close the database connection."""
        self._con.close()

    @contextmanager
    def _guard(self) -> Iterator[None]:
        """Turn SQLite failures into one clear InputError naming the file."""
        try:
            yield
        except sqlite3.Error as exc:
            raise sqlite_input_error(exc, self.path) from None

    @contextmanager
    def transaction(self) -> Iterator[sqlite3.Connection]:
        """One write transaction (``BEGIN IMMEDIATE``): all of it lands or none of it."""
        con = self._con
        with self._guard():
            con.execute("BEGIN IMMEDIATE")
            try:
                yield con
            except BaseException:
                if con.in_transaction:
                    con.execute("ROLLBACK")
                raise
            con.execute("COMMIT")

    def _query(self, sql: str, params: Sequence = ()) -> list[tuple]:
        with self._guard():
            return self._con.execute(sql, params).fetchall()

    def integrity_check(self) -> str:
        """``PRAGMA integrity_check``: ``"ok"`` for a sound file."""
        return "; ".join(r[0] for r in self._query("PRAGMA integrity_check"))

    # -- cavities and cooldowns ---------------------------------------------------
    def cavities(self) -> list[Cavity]:
        """Every cavity in the log, by name."""
        return [Cavity(*r) for r in self._query("SELECT * FROM cavities ORDER BY name")]

    def cooldowns(self) -> list[Cooldown]:
        """Every cooldown in the log, by start date."""
        rows = self._query("SELECT * FROM cooldowns ORDER BY start_date, id")
        return [Cooldown(*r[:4], json.loads(r[4]), *r[5:]) for r in rows]

    def cavity(self, name: str) -> Cavity:
        """The cavity called ``name``; InputError (with near names) if there is none."""
        rows = self._query("SELECT * FROM cavities WHERE name = ?", (name,))
        if not rows:
            known = [r[0] for r in self._query("SELECT name FROM cavities")]
            raise _closest(name, known, "cavity", "`cavchar log cavity NAME`")
        return Cavity(*rows[0])

    def cooldown(self, label: str) -> Cooldown:
        """The cooldown labelled ``label``; InputError (with near labels) if there is none."""
        rows = self._query("SELECT * FROM cooldowns WHERE label = ?", (label,))
        if not rows:
            known = [r[0] for r in self._query("SELECT label FROM cooldowns")]
            raise _closest(label, known, "cooldown", "`cavchar log cooldown LABEL`")
        r = rows[0]
        return Cooldown(*r[:4], json.loads(r[4]), *r[5:])

    def add_cavity(self, name: str, *, freq_hz: float | None = None, notes: str = "",
                   exist_ok: bool = False) -> Cavity:
        """Register a cavity (mode frequency in Hz); with ``exist_ok`` return the old one."""
        _check_name(name, "cavity name")
        with self.transaction() as con:
            _insert_cavity(con, name, freq_hz, notes, exist_ok)
        return self.cavity(name)

    def add_cooldown(self, label: str, *, start_date: str | None = None,
                     stage_temp_k: float | None = None, stage_temps: Mapping | None = None,
                     notes: str = "", exist_ok: bool = False) -> Cooldown:
        """Register a cooldown (base stage temperature and named stage temperatures in K)."""
        _check_name(label, "cooldown label")
        with self.transaction() as con:
            _insert_cooldown(con, label, start_date, stage_temp_k, stage_temps or {}, notes,
                             exist_ok)
        return self.cooldown(label)

    # -- fits ---------------------------------------------------------------------
    def find_duplicate(self, entry: FitEntry) -> FitRecord | None:
        """The logged fit with the same input SHA-256 and settings, if any."""
        if entry.input_sha256 is None:
            return None
        rows = self._query(
            f"SELECT {_FIT_COLUMNS} FROM {_FIT_FROM} WHERE f.input_sha256 = ? "
            "AND f.settings_sha256 = ? ORDER BY f.id LIMIT 1",
            (entry.input_sha256, entry.settings_sha256))
        return _fit_record(rows[0]) if rows else None

    def add_fit(self, entry: FitEntry, cavity: str, cooldown: str, *,
                stage_temp_k: float | None = None, create: bool = False,
                on_duplicate: str = "error", logged_at: str | None = None,
                force_freq: bool = False,
                freq_tolerance: float = DEFAULT_FREQ_TOLERANCE) -> int:
        """Log one fit in one transaction and return its id.

        Parameters
        ----------
        entry
            The fit (see :func:`entry_from_result`).
        cavity, cooldown
            Names that must already be in the log, unless ``create`` (then a
            missing cavity takes the fit's mode frequency).
        stage_temp_k
            Stage temperature of the measurement [K]; default: the fit's own
            setting, else the cooldown's base temperature.
        on_duplicate
            ``"error"`` (InputError naming the earlier fit), ``"skip"`` (warn and
            return the earlier fit's id) or ``"keep"`` (log it again).
        force_freq, freq_tolerance
            A fit whose mode frequency differs from the cavity's by more than
            ``freq_tolerance`` (relative) is refused unless ``force_freq``
            (:func:`cavchar.tracking.rules.check_fit_frequency`); a fit without a
            frequency takes the cavity's.
        """
        if on_duplicate not in ("error", "skip", "keep"):
            raise ValueError(f"on_duplicate must be error, skip or keep, not {on_duplicate!r}")
        with self.transaction() as con:  # the duplicate check runs under the write lock
            return self._add_fit_locked(con, entry, cavity, cooldown, stage_temp_k=stage_temp_k,
                                        create=create, on_duplicate=on_duplicate,
                                        logged_at=logged_at, force_freq=force_freq,
                                        freq_tolerance=freq_tolerance)[0]

    def _add_fit_locked(self, con: sqlite3.Connection, entry: FitEntry, cavity: str,
                        cooldown: str, *, stage_temp_k: float | None, create: bool,
                        on_duplicate: str, logged_at: str | None, force_freq: bool = False,
                        freq_tolerance: float = DEFAULT_FREQ_TOLERANCE) -> tuple[int, bool]:
        """add_fit inside an open transaction; returns (fit id, whether it was added)."""
        _check_entry(entry)
        if on_duplicate != "keep":
            earlier = self.find_duplicate(entry)
            if earlier is not None:
                message = (f"this fit is already in the log as fit {earlier.id} "
                           f"(cavity {earlier.cavity}, cooldown {earlier.cooldown}, "
                           "same input SHA-256 and settings)")
                if on_duplicate == "error":
                    raise InputError(message, hint="--keep-duplicate logs it again")
                if on_duplicate == "skip":
                    warnings.warn(message + "; not logged again", CavcharWarning, stacklevel=3)
                return earlier.id, False
        if create:
            _insert_cavity(con, cavity, entry.freq_hz, "", exist_ok=True)
            _insert_cooldown(con, cooldown, None, None, {}, "", exist_ok=True)
        cav = self.cavity(cavity)
        cool = self.cooldown(cooldown)
        freq = entry.freq_hz if entry.freq_hz is not None else cav.freq_hz
        check_fit_frequency(entry.freq_hz, cav.freq_hz, cav.name, tolerance=freq_tolerance,
                            force=force_freq, source=entry.source)
        if cav.freq_hz is None and freq is not None:
            con.execute("UPDATE cavities SET freq_hz = ? WHERE id = ?", (freq, cav.id))
        stage = next((t for t in (stage_temp_k, entry.stage_temp_k, cool.stage_temp_k)
                      if t is not None), None)
        cur = con.execute(
            "INSERT INTO fits (cavity_id, cooldown_id, kind, model, settings, seed, summary, "
            "input_sha256, settings_sha256, tool_version, fitted_at, logged_at, freq_hz, "
            "stage_temp_k, source, n_draws_total, parameters) "
            "VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
            (cav.id, cool.id, entry.kind, entry.model, canonical_json(entry.settings),
             None if entry.seed is None else canonical_json(entry.seed),
             canonical_json(entry.summary), entry.input_sha256, entry.settings_sha256,
             entry.tool_version, entry.fitted_at, logged_at or _now(), freq, stage,
             entry.source, entry.n_draws_total, canonical_json(list(entry.parameters))))
        fit_id = int(cur.lastrowid)
        _write_draws(con, fit_id, entry.draws)
        return fit_id, True

    def fits(self, *, cavity: str | None = None, cooldown: str | None = None,
             kind: str | None = None, summaries: bool = True) -> list[FitRecord]:
        """Logged fits (oldest first), optionally of one cavity, cooldown or kind.

        With ``summaries=False`` the stored summaries are not read (``summary`` is
        ``{}``), which saves time over thousands of fits.
        """
        where, params = [], []
        if cavity is not None:
            where.append("f.cavity_id = ?")
            params.append(self.cavity(cavity).id)
        if cooldown is not None:
            where.append("f.cooldown_id = ?")
            params.append(self.cooldown(cooldown).id)
        if kind is not None:
            where.append("f.kind = ?")
            params.append(kind)
        columns = _FIT_COLUMNS if summaries else _FIT_COLUMNS.replace("f.summary", "'{}'")
        sql = f"SELECT {columns} FROM {_FIT_FROM}"
        if where:
            sql += " WHERE " + " AND ".join(where)
        return [_fit_record(r) for r in self._query(sql + " ORDER BY f.id", params)]

    def summaries_of(self, fit_ids: Sequence[int]) -> dict[int, dict]:
        """The stored summaries of many fits: {fit id: summary dict}."""
        ids = [check_fit_id(i) for i in fit_ids]
        out: dict[int, dict] = {}
        for start in range(0, len(ids), 500):
            chunk = ids[start:start + 500]
            marks = ",".join("?" * len(chunk))
            rows = self._query(f"SELECT id, summary FROM fits WHERE id IN ({marks})", chunk)
            out.update((i, json.loads(text)) for i, text in rows)
        return out

    def fit(self, fit_id: int) -> FitRecord:
        """The fit with this id; InputError if there is none."""
        rows = self._query(f"SELECT {_FIT_COLUMNS} FROM {_FIT_FROM} WHERE f.id = ?",
                           (check_fit_id(fit_id),))
        if not rows:
            raise InputError(f"no fit {fit_id} in the log", path=self.path,
                             hint="`cavchar log list` shows the fit ids")
        return _fit_record(rows[0])

    def draws(self, fit_id: int, parameters: Sequence[str] | None = None
              ) -> dict[str, np.ndarray]:
        """Stored draws of one fit: {parameter: (n,) float64} (joint rows aligned)."""
        rows = self._query("SELECT parameter, data FROM draws WHERE fit_id = ?",
                           (check_fit_id(fit_id),))
        found = {p: decode_draws(b) for p, b in rows}
        if parameters is None:
            return found
        return {p: found[p] for p in parameters if p in found}

    def draws_of(self, fit_ids: Sequence[int], parameter: str) -> dict[int, np.ndarray]:
        """One parameter's draws for many fits in one query: {fit id: (n,) float64}."""
        ids = [check_fit_id(i) for i in fit_ids]
        out: dict[int, np.ndarray] = {}
        for start in range(0, len(ids), 500):  # stay below SQLite's variable limit
            chunk = ids[start:start + 500]
            marks = ",".join("?" * len(chunk))
            rows = self._query(f"SELECT fit_id, data FROM draws WHERE parameter = ? "
                               f"AND fit_id IN ({marks})", [parameter, *chunk])
            out.update((i, decode_draws(b)) for i, b in rows)
        return out

    def set_mark(self, fit_id: int, mark: str | None, reason: str = "") -> FitRecord:
        """Mark a fit ``"preferred"`` (it stands for its cooldown), ``"excluded"`` (never
        used) or clear the mark (``None``); returns the updated fit."""
        if mark is not None and mark not in MARKS:
            raise InputError(f"unknown mark {mark!r}", hint="preferred or excluded")
        fit = self.fit(fit_id)
        with self.transaction() as con:
            con.execute("UPDATE fits SET mark = ?, mark_reason = ? WHERE id = ?",
                        (mark, str(reason or ""), fit.id))
        return self.fit(fit.id)

    def set_notes(self, fit_id: int, *, notes: str | None = None,
                  add_tags: Sequence[str] = (), remove_tags: Sequence[str] = ()) -> FitRecord:
        """Replace a fit's notes (if ``notes`` is given) and add or remove tags."""
        for tag in [*add_tags, *remove_tags]:
            if not isinstance(tag, str) or not tag.strip() or tag != tag.strip() or "," in tag:
                raise InputError(f"tag {tag!r} must be non-empty text without outer spaces "
                                 "or commas")
        fit = self.fit(fit_id)
        tags = [t for t in fit.tags if t not in remove_tags]
        tags += [t for t in add_tags if t not in tags]
        with self.transaction() as con:
            con.execute("UPDATE fits SET notes = ?, tags = ? WHERE id = ?",
                        (fit.notes if notes is None else str(notes), canonical_json(tags),
                         fit.id))
        return self.fit(fit.id)

    def delete_fits(self, fit_ids: Sequence[int]) -> int:
        """Delete fits (and their draws) in one transaction; returns how many went."""
        ids = [check_fit_id(i) for i in fit_ids]
        for i in ids:
            self.fit(i)  # InputError for an unknown id, before anything is deleted
        with self.transaction() as con:
            for i in ids:
                con.execute("DELETE FROM draws WHERE fit_id = ?", (i,))
                con.execute("DELETE FROM fits WHERE id = ?", (i,))
        return len(ids)


def _check_name(name: str, what: str) -> None:
    if not isinstance(name, str) or not name.strip() or name != name.strip():
        raise InputError(f"{what} {name!r} must be non-empty text without outer spaces")


def _insert_cavity(con: sqlite3.Connection, name: str, freq_hz: float | None, notes: str,
                   exist_ok: bool, created_at: str | None = None) -> None:
    if freq_hz is not None and not (np.isfinite(freq_hz) and freq_hz > 0):
        raise InputError(f"mode frequency of cavity {name!r} must be positive, not {freq_hz}")
    verb = "INSERT OR IGNORE" if exist_ok else "INSERT"
    try:
        con.execute(f"{verb} INTO cavities (name, freq_hz, notes, created_at) VALUES (?,?,?,?)",
                    (name, freq_hz, notes, created_at or _now()))
    except sqlite3.IntegrityError:
        raise InputError(f"cavity {name!r} is already in the log") from None


def _insert_cooldown(con: sqlite3.Connection, label: str, start_date: str | None,
                     stage_temp_k: float | None, stage_temps: Mapping, notes: str,
                     exist_ok: bool, created_at: str | None = None) -> None:
    for stage, value in [("base", stage_temp_k), *stage_temps.items()]:
        if value is not None and not (np.isfinite(value) and value >= 0):
            raise InputError(f"stage temperature {stage!r} of cooldown {label!r} must be >= 0 K")
    verb = "INSERT OR IGNORE" if exist_ok else "INSERT"
    try:
        con.execute(f"{verb} INTO cooldowns (label, start_date, stage_temp_k, stage_temps, notes,"
                    " created_at) VALUES (?,?,?,?,?,?)",
                    (label, start_date, stage_temp_k, canonical_json(dict(stage_temps)), notes,
                     created_at or _now()))
    except sqlite3.IntegrityError:
        raise InputError(f"cooldown {label!r} is already in the log") from None


def _check_entry(entry: FitEntry) -> None:
    if not entry.draws:
        raise InputError("the fit has no posterior draws of "
                         f"{', '.join(KEY_PARAMETERS)} to log")
    lengths = {len(np.asarray(v)) for v in entry.draws.values()}
    if len(lengths) != 1 or 0 in lengths:
        raise InputError("the fit's draws of the key parameters differ in length or are empty")
    for name, values in entry.draws.items():
        if not np.all(np.isfinite(np.asarray(values, dtype=float))):
            raise InputError(f"the fit's draws of {name} contain NaN or infinity")


def _write_draws(con: sqlite3.Connection, fit_id: int, draws: Mapping[str, np.ndarray]) -> None:
    con.executemany("INSERT INTO draws (fit_id, parameter, data) VALUES (?,?,?)",
                    [(fit_id, name, encode_draws(np.asarray(v))) for name, v in draws.items()])


def _initialise(con: sqlite3.Connection, path: Path) -> None:
    """Check the file is a cavchar log (or empty) and bring its schema up to date."""
    app_id = con.execute("PRAGMA application_id").fetchone()[0]
    version = con.execute("PRAGMA user_version").fetchone()[0]
    tables = [r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")]
    if app_id != APPLICATION_ID and (tables or version):
        raise InputError("this SQLite file is not a cavchar log (it holds tables "
                         f"{', '.join(sorted(tables)[:6]) or 'none'})", path=path,
                         hint="give another --log-file or set CAVCHAR_LOG")
    if version > SCHEMA_VERSION:
        raise InputError(f"the log has schema version {version}, newer than this cavchar "
                         f"knows ({SCHEMA_VERSION})", path=path, hint="update cavchar")
    if version == SCHEMA_VERSION:
        return
    con.execute("BEGIN IMMEDIATE")
    try:
        version = con.execute("PRAGMA user_version").fetchone()[0]  # another process may
        for step in range(version, SCHEMA_VERSION):                  # have migrated meanwhile
            for statement in _MIGRATIONS[step]:
                con.execute(statement)
        con.execute(f"PRAGMA application_id = {APPLICATION_ID}")
        con.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")
        con.execute("COMMIT")
    except BaseException:
        if con.in_transaction:
            con.execute("ROLLBACK")
        raise


def open_log(path: str | os.PathLike | None = None, *, create: bool = True,
             busy_timeout_s: float = 30.0, readonly: bool = False) -> CooldownLog:
    """Open (and, with ``create``, make) the cooldown log.

    Parameters
    ----------
    path
        Log file; default ``$CAVCHAR_LOG`` or ``./cavchar.sqlite``
        (see :func:`resolve_log_path`).
    create
        Make a new log if the file does not exist; otherwise that is an InputError.
    busy_timeout_s
        How long a write waits for another process's transaction [s].
    readonly
        Open for reading only (listing, trends, qualification): works in a
        read-only folder and on a read-only file, never changes the file (an
        older schema is brought up to date in a copy in memory).

    Raises
    ------
    InputError
        Missing file (without ``create``, always when ``readonly``), a file that
        is not SQLite or is damaged, an SQLite file of some other program, a
        newer schema, or a file or folder that cannot be written (when not
        ``readonly``), each said as it is.
    """
    file = resolve_log_path(path)
    if file.is_dir():
        raise InputError("the log path is a folder, not a file", path=file)
    if file.exists() and file.stat().st_size > 0:
        try:
            with open(file, "rb") as handle:
                head = handle.read(16)
        except OSError as exc:
            raise InputError(f"cannot read the log file ({exc.strerror})", path=file) from None
        if head != _SQLITE_MAGIC:
            raise InputError("this file is not an SQLite log (damaged or another kind of "
                             "file)", path=file, hint="give another --log-file")
    elif not file.exists():
        if readonly or not create:
            raise InputError("there is no cooldown log here", path=file,
                             hint="log a fit first (`cavchar log add`) or give --log-file")
        if not file.parent.exists():
            raise InputError("the folder of the log does not exist", path=file)
    if readonly:
        return _open_readonly(file)
    try:
        con = sqlite3.connect(file, timeout=busy_timeout_s, isolation_level=None)
    except sqlite3.Error as exc:
        raise sqlite_input_error(exc, file) from None
    log = CooldownLog(file, con)
    try:
        with log._guard():
            con.execute("PRAGMA foreign_keys = ON")
            if con.execute("PRAGMA journal_mode").fetchone()[0].lower() != "wal":
                con.execute("PRAGMA journal_mode = WAL")
            con.execute("PRAGMA synchronous = FULL")
            _initialise(con, file)
    except BaseException:
        con.close()
        raise
    return log


def _open_readonly(file: Path) -> CooldownLog:
    """Open an existing log for reading only.

    ``mode=ro`` first; a WAL file in a folder where SQLite cannot create its
    shared-memory file beside it is then read with ``immutable=1`` (nobody can be
    writing to it there: a writer would need that file too).  An older schema
    is migrated in an in-memory copy, never in the file.
    """
    from urllib.parse import quote

    base = "file:" + quote(str(file.resolve()))
    last: sqlite3.Error | None = None
    for flags in ("?mode=ro", "?mode=ro&immutable=1"):
        con = None
        try:
            con = sqlite3.connect(base + flags, uri=True, isolation_level=None)
            con.execute("SELECT count(*) FROM sqlite_master").fetchone()
            break
        except sqlite3.Error as exc:
            if con is not None:
                con.close()
            con, last = None, exc
    if con is None:
        assert last is not None
        raise sqlite_input_error(last, file)
    log = CooldownLog(file, con)
    try:
        with log._guard():
            version = con.execute("PRAGMA user_version").fetchone()[0]
            if version < SCHEMA_VERSION:
                memory = sqlite3.connect(":memory:", isolation_level=None)
                con.backup(memory)
                con.close()
                log = CooldownLog(file, memory)
                con = memory
            _initialise(con, file)
    except BaseException:
        con.close()
        raise
    return log


def log_fit_result(result: FitResult, cavity: str, cooldown: str,
                   path: str | os.PathLike | None = None, *, create: bool = False,
                   on_duplicate: str = "skip", stage_temp_k: float | None = None,
                   source: str | None = None, force_freq: bool = False) -> int:
    """Log a FitResult (for the ``--log`` option of the fit commands); returns the fit id.

    A fit already in the log is not added again (a warning says so) unless
    ``on_duplicate="keep"``; a fit at another mode frequency than the cavity's is
    refused unless ``force_freq``.
    """
    from cavchar.tracking.entries import entry_from_result

    entry = entry_from_result(result, source=source)
    with open_log(path) as log:
        return log.add_fit(entry, cavity, cooldown, stage_temp_k=stage_temp_k, create=create,
                           on_duplicate=on_duplicate, force_freq=force_freq)
