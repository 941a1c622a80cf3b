"""Atomic file output that never overwrites an existing file by accident.

Every file cavchar writes goes through this module: the data are written to a
temporary file in the destination folder, flushed to disk (``fsync``) and then
moved into place in one step, so a reader never sees a half-written file and a
crash leaves the old file intact.  An existing file is only replaced when the
caller passes ``force=True`` (``--force`` on the command line); without it the
move uses a hard link, which fails instead of overwriting even if another
process creates the file in the meantime.
"""

from __future__ import annotations

import os
import secrets
from pathlib import Path

from cavchar.errors import InputError

__all__ = ["check_can_write", "write_bytes_atomic", "write_text_atomic"]


def check_can_write(path: str | os.PathLike, force: bool = False) -> Path:
    """Check that ``path`` may be written; return it as a :class:`~pathlib.Path`.

    Call it before a long computation so the user learns about a clash first.

    Parameters
    ----------
    path
        The output file.  Missing parent folders are allowed (they are created
        when the file is written).
    force
        Allow replacing an existing file.

    Raises
    ------
    InputError
        If the file exists and ``force`` is false, if it is a folder, or if a
        parent is not a folder.
    """
    target = Path(path)
    if target.is_dir():
        raise InputError("is a folder, not a file", path=target,
                         hint="give a file name for the output")
    if target.exists() and not force:
        raise InputError("output file already exists", path=target,
                         hint="use --force to overwrite it, or choose another name")
    for parent in target.absolute().parents:
        if parent.exists():
            if not parent.is_dir():
                raise InputError(f"{parent} is not a folder", path=target,
                                 hint="choose an output path inside a folder")
            break
    return target


def _fsync_folder(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:  # some platforms cannot open folders; the file itself is synced
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def write_bytes_atomic(path: str | os.PathLike, data: bytes, force: bool = False) -> Path:
    """Write ``data`` to ``path`` atomically (temporary file + fsync + rename).

    Parameters
    ----------
    path
        Destination file; missing parent folders are created.
    data
        The complete file content.
    force
        Replace an existing file.  Without it an existing file is an
        :class:`InputError` that says to pass ``--force``.

    Returns
    -------
    Path
        The path written.
    """
    target = check_can_write(path, force)
    folder = target.absolute().parent
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create the folder {folder}: {exc.strerror}", path=target,
                         hint="check the path and its permissions") from None
    temp = folder / f".{target.name}.{secrets.token_hex(6)}.tmp"
    try:
        # os.open with mode 0o666 respects the user's umask, unlike mkstemp's 0o600
        fd = os.open(temp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        if force:
            os.replace(temp, target)
        else:
            try:
                os.link(temp, target)  # fails if the target appeared meanwhile
            except FileExistsError:
                raise InputError("output file already exists", path=target,
                                 hint="use --force to overwrite it") from None
            except OSError:  # file system without hard links: check, then rename
                if target.exists():
                    raise InputError("output file already exists", path=target,
                                     hint="use --force to overwrite it") from None
                os.replace(temp, target)
    except OSError as exc:
        raise InputError(f"cannot write the file: {exc.strerror or exc}", path=target,
                         hint="check the folder exists and is writable") from None
    finally:
        if temp.exists():
            temp.unlink()
    _fsync_folder(folder)
    return target


def write_text_atomic(
    path: str | os.PathLike, text: str, force: bool = False, encoding: str = "utf-8"
) -> Path:
    """Write ``text`` to ``path`` atomically; see :func:`write_bytes_atomic`."""
    return write_bytes_atomic(path, text.encode(encoding), force=force)
