"""TOML text of cavchar's settings files (batch files, acceptance specs) read into a dict."""

from __future__ import annotations

import os
import re
import tomllib
from typing import Any

from cavchar.errors import InputError

__all__ = ["loads_toml"]


def loads_toml(text: str, *, path: str | os.PathLike | None, what: str,
               hint: str | None = None) -> dict[str, Any]:
    """``tomllib.loads(text)``, with one :class:`~cavchar.errors.InputError` naming
    ``path`` (and the line, when the parser gives it) for text that is not valid TOML.

    ``what`` names the file in the message (e.g. ``"the batch file"``); ``hint``
    says where its format is described.
    """
    where = None if path is None else str(path)
    try:
        return tomllib.loads(text)
    except RecursionError:
        raise InputError(f"{what} is nested too deeply to read", path=where, hint=hint) from None
    except tomllib.TOMLDecodeError as exc:
        match = re.search(r"line (\d+)", str(exc))
        raise InputError(f"{what} is not valid TOML ({exc})", path=where,
                         line=int(match.group(1)) if match else None, hint=hint) from None
