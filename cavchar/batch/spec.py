"""The batch file: shared defaults, per-entry overrides, glob patterns; every error at once.

Format (TOML, described for users in docs/batch.md)::

    seed = 7                      # batch seed (default 1)

    [defaults]                    # every entry takes these unless it sets its own
    freq = "9.264GHz"
    cavity = "C-7"

    [defaults.ringdown]           # defaults of one kind only
    signal = "power"

    [[entry]]
    kind = "jumps"                # jumps, sampled, probes or ringdown
    file = "records/jumps_*.csv"  # a glob: one entry per matching file
    cooldown = "2031A"
    stage_temp = "18mK"

Reading never stops at the first problem: :func:`read_batch_file` collects every
bad entry (missing file, unknown option, bad unit, missing response table ...)
with its line and raises one :class:`BatchFileError` listing them all.
"""

from __future__ import annotations

import glob
import hashlib
import os
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from cavchar.batch.options import ENTRY_FIELDS, KINDS, build_argv, fit_arguments
from cavchar.errors import InputError
from cavchar.io.toml import loads_toml

__all__ = ["BatchEntry", "BatchPlan", "BatchFileError", "read_batch_file", "plan_entries",
           "entry_seed", "DEFAULT_BATCH_SEED"]

DEFAULT_BATCH_SEED = 1
_TOP_KEYS = ("seed", "defaults", "entry")
_LABEL = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]*$")


class BatchFileError(InputError):
    """Every problem of a batch file at once (exit code 2); ``problems`` lists them."""

    def __init__(self, problems: Sequence[InputError], path: str | os.PathLike | None) -> None:
        self.problems = list(problems)
        count = len(self.problems)
        head = f"{count} problem{'s' if count != 1 else ''} in the batch file; nothing was fitted"
        self.head = head
        super().__init__(head + ":\n" + "\n".join("  " + str(p) for p in self.problems))

    def __str__(self) -> str:
        return self.message


@dataclass(frozen=True)
class BatchEntry:
    """One record (or one set of ring-down traces sharing T_c) of a batch.

    ``argv`` is the argument list of the equivalent ``cavchar fit`` command
    without ``--seed``; ``seed`` the sampler seed derived by :func:`entry_seed`
    (or given); ``inputs`` every file the fit reads (records, response table).
    """

    label: str
    kind: str
    files: tuple[str, ...]
    argv: tuple[str, ...]
    seed: int
    cavity: str | None = None
    cooldown: str | None = None
    check_every: int | None = None
    line: int | None = None
    inputs: tuple[str, ...] = ()

    @property
    def command(self) -> str:
        """The single-record command that redoes this fit alone (stored in the result)."""
        from cavchar.batch.options import command_text

        return command_text(self.kind, list(self.argv), self.seed)

    def key(self, input_hashes: Sequence[str]) -> str:
        """SHA-256 of what decides the fit: kind, options, seed and the inputs' SHA-256."""
        text = "\0".join([self.kind, *self._options(), f"seed={self.seed}",
                          f"check_every={self.check_every}", *input_hashes])
        return hashlib.sha256(text.encode()).hexdigest()

    def _options(self) -> list[str]:
        """The argument list with the record paths left out (a moved file is the same fit)."""
        return [a for a in self.argv if a not in self.files]


@dataclass(frozen=True)
class BatchPlan:
    """A read batch file: its entries, in file order, and the batch seed."""

    entries: tuple[BatchEntry, ...]
    seed: int = DEFAULT_BATCH_SEED
    path: str | None = None


def entry_seed(batch_seed: int, label: str) -> int:
    """The sampler seed of an entry: the first 31 bits of SHA-256("batch seed:label").

    It depends on the batch seed and the entry's label only, not on the entry's
    place in the file or on the worker that fits it.
    """
    digest = hashlib.sha256(f"{int(batch_seed)}:{label}".encode()).digest()
    return int.from_bytes(digest[:4], "big") >> 1


# ------------------------------------------------------------------ line numbers


def _line_index(text: str) -> dict[tuple, int]:
    """(section, key) -> 1-based line, for ``[defaults]``, ``[defaults.KIND]``, the
    n-th ``[[entry]]`` and the top level; the section itself under key None."""
    index: dict[tuple, int] = {}
    section: tuple = ("top",)
    entries = 0
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if line.startswith("[[") and line.split("]]")[0][2:].strip() == "entry":
            section = ("entry", entries)
            entries += 1
            index[(section, None)] = number
        elif line.startswith("[") and not line.startswith("[["):
            name = line[1:].split("]")[0].strip()
            parts = tuple(p.strip().strip('"') for p in name.split("."))
            section = parts
            index.setdefault((section, None), number)
        else:
            match = re.match(r'^"?([A-Za-z0-9_\-]+)"?\s*=', line)
            if match:
                index.setdefault((section, match.group(1)), number)
    return index


# ------------------------------------------------------------------ reading


def read_batch_file(path: str | os.PathLike, *, seed: int | None = None) -> BatchPlan:
    """Read and check a batch file; every problem is reported at once.

    Parameters
    ----------
    path
        The TOML batch file; relative record paths and glob patterns are taken
        from its folder.
    seed
        Batch seed overriding the file's ``seed`` key.

    Raises
    ------
    BatchFileError
        Listing every bad entry with its line (missing file, a glob that matches
        nothing, unknown kind or option, bad unit or prior, missing response
        table, repeated label).
    """
    file = Path(path)
    try:
        text = file.read_text(encoding="utf-8")
    except OSError as exc:
        raise InputError(f"cannot read the batch file: {exc.strerror or exc}", path=file) \
            from None
    data = loads_toml(text, path=file, what="the batch file",
                      hint="see docs/batch.md for the format")
    lines = _line_index(text)
    problems: list[InputError] = []
    for key in data:
        if key not in _TOP_KEYS:
            problems.append(InputError(f"unknown top-level key {key!r}", path=file,
                                       line=lines.get((("top",), key)),
                                       hint="seed, [defaults] or [[entry]]"))
    batch_seed = data.get("seed", DEFAULT_BATCH_SEED) if seed is None else seed
    if isinstance(batch_seed, bool) or not isinstance(batch_seed, int) or batch_seed < 0:
        problems.append(InputError(f"the batch seed must be a non-negative integer, not "
                                   f"{batch_seed!r}", path=file,
                                   line=lines.get((("top",), "seed"))))
        batch_seed = DEFAULT_BATCH_SEED
    raw_entries = data.get("entry", [])
    if not isinstance(raw_entries, list) or not raw_entries:
        problems.append(InputError("no [[entry]] in the batch file", path=file,
                                   hint="add one [[entry]] table per record or glob pattern"))
        raw_entries = []
    defaults = data.get("defaults", {})
    if not isinstance(defaults, dict):
        problems.append(InputError("[defaults] must be a table", path=file))
        defaults = {}
    entries = _plan(raw_entries, defaults, int(batch_seed), file.parent.absolute(), problems,
                    lambda i, key: _where(lines, i, key, defaults), file)
    if problems:
        raise BatchFileError(problems, file)
    return BatchPlan(tuple(entries), int(batch_seed), str(file))


def _where(lines: dict, index: int | None, key: str | None, defaults: Mapping) -> int | None:
    if index is None:
        return None
    section = ("entry", index)
    if key is not None and (section, key) in lines:
        return lines[(section, key)]
    return lines.get((section, None))


def plan_entries(items: Iterable[Mapping[str, Any]], *, seed: int = DEFAULT_BATCH_SEED,
                 defaults: Mapping[str, Any] | None = None,
                 base: str | os.PathLike | None = None) -> BatchPlan:
    """A :class:`BatchPlan` from entries given as dicts (the keys of a batch file's
    ``[[entry]]`` tables); relative paths are taken from ``base`` (default: the
    current folder).  Every problem is reported at once (:class:`BatchFileError`)."""
    problems: list[InputError] = []
    entries = _plan(list(items), dict(defaults or {}), int(seed),
                    Path(base).absolute() if base is not None else Path.cwd(), problems,
                    lambda i, key: None, None, numbered=True)
    if problems:
        raise BatchFileError(problems, None)
    return BatchPlan(tuple(entries), int(seed), None)


def _plan(raw_entries: list, defaults: dict, batch_seed: int, folder: Path,
          problems: list[InputError], where, file: Path | None,
          numbered: bool = False) -> list[BatchEntry]:
    kind_defaults = {k: v for k, v in defaults.items() if isinstance(v, dict)}
    shared = {k: v for k, v in defaults.items() if not isinstance(v, dict)}
    for name in kind_defaults:
        if name not in KINDS:
            problems.append(InputError(f"[defaults.{name}] names no kind", path=file,
                                       hint="one of " + ", ".join(KINDS)))
    entries: list[BatchEntry] = []
    seen: dict[str, int | None] = {}
    for index, raw in enumerate(raw_entries):
        prefix = f"entry {index + 1}: " if numbered else ""

        def bad(message: str, key: str | None = None, hint: str | None = None,
                _index: int = index, _prefix: str = prefix) -> None:
            problems.append(InputError(_prefix + message, path=file, line=where(_index, key),
                                       hint=hint))

        if not isinstance(raw, Mapping):
            bad("an entry must be a table of options")
            continue
        kind = raw.get("kind", shared.get("kind"))
        if kind not in KINDS:
            bad(f"unknown kind {kind!r}" if kind is not None else "the entry has no kind",
                "kind", "kind = one of " + ", ".join(f'"{k}"' for k in KINDS))
            continue
        merged = {**shared, **kind_defaults.get(kind, {}), **raw}
        merged.pop("kind", None)
        for made in _expand(merged, kind, folder, bad):
            label, files, fields, options = made
            if label in seen:
                bad(f"the label {label!r} is used twice (first at line {seen[label]})"
                    if seen[label] else f"the label {label!r} is used twice", "label",
                    "give each entry its own label")
                continue
            seen[label] = where(index, "label") or where(index, None)
            entry = _entry(label, kind, files, fields, options, batch_seed, index, bad,
                           where(index, None), folder)
            if entry is not None:
                entries.append(entry)
    return entries


def _expand(merged: dict, kind: str, folder: Path, bad):
    """(label, files, entry fields, options) per record of an entry (globs expanded)."""
    pattern = merged.pop("file", None)
    fields = {k: merged.pop(k) for k in ENTRY_FIELDS if k in merged}
    if pattern is None:
        bad("the entry has no file", "file", 'file = "record.csv" (or a glob pattern)')
        return []
    patterns = pattern if isinstance(pattern, list) else [pattern]
    if not patterns or not all(isinstance(p, str) and p.strip() for p in patterns):
        bad("file must be a path, a glob pattern or a list of paths", "file")
        return []
    if len(patterns) > 1 and kind != "ringdown":
        bad(f"only ring-down entries take several files (one fit sharing T_c); kind {kind} "
            "takes one", "file", "write one entry per file or use a glob pattern")
        return []
    label = fields.get("label")
    if label is not None and (not isinstance(label, str) or not _LABEL.match(label)):
        bad(f"the label {label!r} must start with a letter or digit and hold only letters, "
            "digits, '.', '_' and '-'", "label")
        return []
    is_glob = len(patterns) == 1 and glob.has_magic(patterns[0])
    if is_glob:
        matches = sorted(glob.glob(str(folder / os.path.expanduser(patterns[0]))))
        matches = [m for m in matches if Path(m).is_file()]
        if not matches:
            bad(f"the pattern {patterns[0]!r} matches no file", "file",
                f"patterns are taken from {folder}")
            return []
        out = []
        for match in matches:
            stem = _stem(Path(match))
            name = f"{label}-{stem}" if label else stem
            out.append((_safe(name), [match], fields, dict(merged)))
        return out
    files = [str(folder / os.path.expanduser(p)) for p in patterns]
    missing = [p for p, f in zip(patterns, files) if not Path(f).is_file()]
    if missing:
        bad(f"no such file: {', '.join(missing)}", "file",
            f"paths are taken from {folder}")
        return []
    return [(label or _safe(_stem(Path(files[0]))), files, fields, dict(merged))]


def _stem(path: Path) -> str:
    name = path.name
    for suffix in (".gz", ".csv", ".tsv", ".txt", ".npz", ".parquet"):
        name = name.removesuffix(suffix)
    return name


def _safe(name: str) -> str:
    text = re.sub(r"[^A-Za-z0-9._-]", "_", name).lstrip("._-")
    return text or "record"


def _entry(label: str, kind: str, files: list[str], fields: dict, options: dict,
           batch_seed: int, index: int, bad, line: int | None,
           folder: Path) -> BatchEntry | None:
    ok = True
    for name in ("cavity", "cooldown"):
        value = fields.get(name)
        if value is not None and (not isinstance(value, str) or not value.strip()):
            bad(f"{name} must be a non-empty text", name)
            ok = False
    seed = fields.get("seed")
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, int) or seed < 0):
        bad(f"seed must be a non-negative integer, not {seed!r}", "seed")
        ok = False
    check_every = fields.get("check_every")
    if check_every is not None and (isinstance(check_every, bool)
                                    or not isinstance(check_every, int) or check_every < 1):
        bad(f"check_every must be a positive integer (sampler steps), not {check_every!r}",
            "check_every")
        ok = False
    if "response_table" in options and isinstance(options["response_table"], str):
        options["response_table"] = str(folder / options["response_table"])
    try:
        argv = build_argv(kind, files, options)
    except InputError as exc:
        key = _key_in(exc.message, options)
        bad(exc.message, key, exc.hint)
        return None
    if not ok:
        return None
    seed = int(seed) if seed is not None else entry_seed(batch_seed, label)
    try:
        fit_arguments(kind, argv, seed, check_every)
    except InputError as exc:
        bad(exc.message if exc.path is None else str(exc), _key_in(exc.message, options),
            exc.hint if exc.path is None else None)
        return None
    inputs = list(files)
    table = options.get("response_table")
    if isinstance(table, str):
        inputs.append(table)
    return BatchEntry(label=label, kind=kind, files=tuple(files), argv=tuple(argv), seed=seed,
                      cavity=fields.get("cavity"), cooldown=fields.get("cooldown"),
                      check_every=check_every, line=line, inputs=tuple(inputs))


def _key_in(message: str, options: Mapping) -> str | None:
    """The option a message is about (for its line), if it names one."""
    for key in options:
        for form in (key, key.replace("_", "-")):
            if re.search(rf"(^|[^A-Za-z0-9_-]){re.escape(form)}([^A-Za-z0-9_-]|$)", message):
                return key
    return None

