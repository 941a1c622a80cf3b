"""The documented tolerances and spellings of the cooldown log, in one place.

* **Mode frequency.**  A fit logged to a cavity must be of the cavity's mode:
  its frequency may differ from the cavity's by at most
  :data:`DEFAULT_FREQ_TOLERANCE` (relative, 1e-3).  Why 1e-3: a frequency given
  rounded (``6.8GHz`` for a mode at 6.8012 GHz, 1.8e-4) or shifted between
  cooldowns (kHz to MHz at GHz frequencies, common practice) passes; another
  mode or another cavity (mode spacings of tens of MHz and more for cm-sized
  cavities) does not; and an error of 1e-3 in the frequency moves the
  effective temperature ``T_eff = h nu / (k_B ln(1 + 1/n_th))`` by 0.1 %,
  far below the width of any n_th posterior.  A fit without a frequency takes
  the cavity's.
* **Base stage temperature.**  Within a cooldown, the base stage temperature
  ``T_base`` is the lowest stage temperature of the cavity's fits in it.  A
  fit counts as taken at base temperature when
  ``T <= (1 + BASE_TOLERANCE) T_base + BASE_SLACK_K`` (20 % plus 1 mK: the
  spread of mixing-chamber thermometry between runs, common practice, while
  a stage-temperature sweep's first step above base is larger).
* **Kinds.**  Filters take the fit command's word (``jumps``, ``probes``,
  ``ringdown``: all variants) or the full logged kind (``jumps-exact``,
  ``probes-coarse``, ``ringdown-power``, ...).
"""

from __future__ import annotations

import math

from cavchar.errors import InputError

__all__ = ["DEFAULT_FREQ_TOLERANCE", "BASE_TOLERANCE", "BASE_SLACK_K", "KIND_WORDS",
           "check_fit_frequency", "base_limit", "kind_matches", "check_kind", "kind_word"]

#: relative difference of a fit's mode frequency from its cavity's that is accepted
DEFAULT_FREQ_TOLERANCE = 1e-3
#: a fit is at base temperature when T <= (1 + BASE_TOLERANCE) T_base + BASE_SLACK_K
BASE_TOLERANCE = 0.2
BASE_SLACK_K = 1e-3
#: the fit commands' words for the data shapes (``cavchar fit jumps|probes|ringdown``)
KIND_WORDS = ("jumps", "probes", "ringdown")


def check_fit_frequency(fit_freq_hz: float | None, cavity_freq_hz: float | None,
                        cavity: str, *, tolerance: float = DEFAULT_FREQ_TOLERANCE,
                        force: bool = False, source: str | None = None) -> None:
    """Refuse a fit whose mode frequency is not its cavity's.

    Parameters
    ----------
    fit_freq_hz, cavity_freq_hz
        Mode frequencies [Hz]; nothing is checked when either is unknown (a fit
        without a frequency takes the cavity's).
    cavity
        The cavity's name (for the message).
    tolerance
        Accepted relative difference ``|nu_fit - nu_cavity| / nu_cavity``.
    force
        Accept the fit anyway (the user says it is the same mode).

    Raises
    ------
    InputError
        The frequencies differ by more than ``tolerance`` and ``force`` is false.
    """
    if fit_freq_hz is None or cavity_freq_hz is None or force:
        return
    if not (math.isfinite(tolerance) and tolerance >= 0):
        raise InputError(f"the frequency tolerance must be a number >= 0, not {tolerance}")
    difference = abs(fit_freq_hz - cavity_freq_hz) / cavity_freq_hz
    if difference > tolerance:
        from cavchar.units import format_quantity

        raise InputError(
            f"the fit's mode frequency {format_quantity(fit_freq_hz, 'frequency', 7)} differs "
            f"from cavity {cavity}'s {format_quantity(cavity_freq_hz, 'frequency', 7)} by "
            f"{difference:.2g} (relative; accepted: {tolerance:g}): it is not this cavity's "
            "mode", path=source,
            hint="log it to the right cavity, or add --force-freq if it is the same mode")


def base_limit(base_k: float) -> float:
    """Highest stage temperature [K] that still counts as the base temperature ``base_k``."""
    return (1.0 + BASE_TOLERANCE) * base_k + BASE_SLACK_K


def kind_word(kind: str) -> str:
    """The fit command's word of a logged kind: ``"ringdown-power"`` -> ``"ringdown"``
    (its family, :meth:`cavchar.result_types.FitKind.parse`)."""
    from cavchar.result_types import FitKind

    try:
        family = FitKind.parse(kind).family
    except ValueError:  # no family word ("", "-x")
        return str(kind)
    return family if family in KIND_WORDS else str(kind)


def kind_matches(kind: str, wanted: str | None) -> bool:
    """Whether a logged ``kind`` is selected by the filter ``wanted`` (None: all)."""
    if wanted is None:
        return True
    return kind == wanted or (wanted in KIND_WORDS and kind_word(kind) == wanted)


def check_kind(wanted: str | None, known: set[str] | None = None) -> None:
    """InputError for a kind filter that can select nothing (names the accepted words)."""
    if wanted is None or wanted in KIND_WORDS:
        return
    if known is not None and wanted in known:
        return
    if "-" in wanted and kind_word(wanted) in KIND_WORDS:
        return  # a full kind that the log does not hold yet: selects nothing, not wrong
    listed = ", ".join([*KIND_WORDS, *sorted(known or ())])
    raise InputError(f"unknown fit kind {wanted!r}", hint=f"use one of: {listed}")
