"""Where a result came from: input file hash, command line, seed, versions, date.

The provenance block of a result JSON lets anyone redo a fit: the same input
(checked by its SHA-256), the same settings and seed, and the versions of the
libraries that did the sampling.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import os
import platform
import sys
from collections.abc import Sequence
from importlib import metadata
from pathlib import Path
from typing import Any

from cavchar.errors import InputError

__all__ = ["sha256_of_file", "library_versions", "collect_provenance", "RUN_SPECIFIC_FIELDS"]

_LIBRARIES = ("numpy", "scipy", "emcee", "pandas")


#: the fields of a result file that differ between two runs with the same input, settings
#: and seed (on the same platform and versions); everything else is the same bit for bit
RUN_SPECIFIC_FIELDS = ("provenance.created_at", "diagnostics.elapsed_s")


def sha256_of_file(path: str | os.PathLike, chunk_bytes: int = 1 << 20) -> str:
    """SHA-256 of a file's bytes as 64 hex digits (read in 1 MiB chunks, any size).

    Raises
    ------
    InputError
        If the file cannot be read.
    """
    digest = hashlib.sha256()
    try:
        with open(path, "rb") as handle:
            for block in iter(lambda: handle.read(chunk_bytes), b""):
                digest.update(block)
    except OSError as exc:
        raise InputError(f"cannot read the file to hash it: {exc.strerror or exc}",
                         path=path) from None
    return digest.hexdigest()


def library_versions() -> dict[str, str | None]:
    """Versions of cavchar, Python and the numerical libraries (None if not installed)."""
    import cavchar

    out: dict[str, str | None] = {"cavchar": cavchar.__version__,
                                  "python": platform.python_version()}
    for name in _LIBRARIES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = None
    return out


def collect_provenance(
    input_path: str | os.PathLike | Sequence[str | os.PathLike] | None = None,
    *,
    command_line: Sequence[str] | None = None,
    seed: int | None = None,
) -> dict[str, Any]:
    """The provenance block of a result (plain JSON).

    Parameters
    ----------
    input_path
        The input file (or several); each is hashed with :func:`sha256_of_file`.
    command_line
        The command as typed (default: ``sys.argv``).
    seed
        The sampler seed.

    Returns
    -------
    dict
        ``input_path``, ``input_sha256`` (lists when several inputs were given),
        ``command_line``, ``seed``, ``versions`` (cavchar, python, numpy, scipy,
        emcee, pandas), ``cavchar_version``, ``created_at`` (UTC, ISO 8601), ``platform``.
    """
    if input_path is None:
        paths: list[str] | str | None = None
        hashes: list[str] | str | None = None
    elif isinstance(input_path, str | os.PathLike):
        paths = str(Path(input_path))
        hashes = sha256_of_file(input_path)
    else:
        paths = [str(Path(p)) for p in input_path]
        hashes = [sha256_of_file(p) for p in input_path]
    versions = library_versions()
    return {
        "input_path": paths,
        "input_sha256": hashes,
        "command_line": list(sys.argv if command_line is None else command_line),
        "seed": seed,
        "versions": versions,
        "cavchar_version": versions["cavchar"],
        "created_at": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
        "platform": platform.platform(),
    }
