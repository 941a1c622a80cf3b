"""Exception and warning classes of cavchar.

Every error a user can cause is an :class:`InputError` (exit code 2) that names
the file, the line and what to do about it.  The command line turns these into
one message and an exit code; nothing a user does should end in a traceback.
"""

from __future__ import annotations

from pathlib import Path

__all__ = [
    "CavcharError",
    "InputError",
    "ConvergenceError",
    "CavcharWarning",
    "UnitSlipWarning",
    "ConvergenceWarning",
    "PriorDominatedWarning",
    "ModelMisfitWarning",
]


class CavcharError(Exception):
    """Base class of every cavchar error; ``exit_code`` is what the CLI returns."""

    exit_code: int = 1


class InputError(CavcharError):
    """Bad input or usage: a file, an option or a value the user gave.

    Parameters
    ----------
    message
        What is wrong, in plain words.
    path
        The file concerned, if any.
    line
        1-based line number in that file (header = line 1), if known.
    hint
        What to do about it.
    """

    exit_code = 2

    def __init__(
        self,
        message: str,
        *,
        path: str | Path | None = None,
        line: int | None = None,
        hint: str | None = None,
    ) -> None:
        self.message = message
        self.path = None if path is None else str(path)
        self.line = line
        self.hint = hint
        super().__init__(str(self))

    def __str__(self) -> str:
        where = ""
        if self.path is not None:
            where = self.path + (f", line {self.line}" if self.line is not None else "") + ": "
        elif self.line is not None:
            where = f"line {self.line}: "
        text = where + self.message
        if self.hint:
            text += f" ({self.hint})"
        return text


class ConvergenceError(CavcharError):
    """The sampler did not converge within its step budget (exit code 3)."""

    exit_code = 3

    def __init__(self, message: str, *, diagnostics: dict | None = None,
                 suggested_max_steps: int | None = None) -> None:
        self.diagnostics = diagnostics or {}
        #: a step budget that would likely suffice (None: more steps would not help)
        self.suggested_max_steps = suggested_max_steps
        super().__init__(message)


class CavcharWarning(UserWarning):
    """Base class of cavchar's warnings (diagnostics are warnings, not prints)."""


class ConvergenceWarning(CavcharWarning):
    """The chain is usable but a convergence diagnostic is marginal."""


class PriorDominatedWarning(CavcharWarning):
    """The data carry little information; the posterior mostly reflects the prior."""


class ModelMisfitWarning(CavcharWarning):
    """A posterior predictive or residual check flags a misfit of the model."""


class UnitSlipWarning(CavcharWarning):
    """A stated setting or a fitted value lies outside what any superconducting cavity has:
    most likely a unit slip (a time column in ms read as s, a frequency without prefix)."""
