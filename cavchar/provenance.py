"""Where a result came from: input file hash, command line, versions, date.

The provenance block of a result JSON lets anyone redo a fit: the same input
(checked by its SHA-256), the same settings and seed (recorded with the
sampler settings), and the versions of the
libraries that did the sampling.
"""

from __future__ import annotations

import hashlib
import os
import platform
from collections.abc import Sequence
from importlib import metadata
from pathlib import Path

from cavchar.errors import InputError
from cavchar.result_types import InputFile, Provenance, utc_timestamp

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
) -> Provenance:
    """The provenance of a result made now.

    Parameters
    ----------
    input_path
        The input file (or several); each is hashed with :func:`sha256_of_file`.
    command_line
        The command as argv strings, as the caller received it (the command-line
        interface passes its own ``argv``); None when the fit was called from Python
        without one.  Never read from ``sys.argv``.

    Returns
    -------
    Provenance
        Inputs with their SHA-256, the command line, versions (cavchar, python,
        numpy, scipy, emcee, pandas), ``created_at`` (UTC, ISO 8601) and the platform.
        The seed is recorded with the sampler settings, not here.
    """
    if input_path is None:
        paths: list[str | os.PathLike] = []
    elif isinstance(input_path, str | os.PathLike):
        paths = [input_path]
    else:
        paths = list(input_path)
    inputs = tuple(InputFile(str(Path(p)), sha256_of_file(p)) for p in paths)
    return Provenance(inputs=inputs,
                      command_line=None if command_line is None else tuple(command_line),
                      versions=library_versions(), created_at=utc_timestamp(),
                      platform=platform.platform())
