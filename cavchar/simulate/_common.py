"""What every simulator of :mod:`cavchar.simulate` shares: the seed, the checks
of the physical parameters and the truth written into a simulated record's metadata."""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from cavchar.errors import InputError

__all__ = ["Seed", "rng_from", "check_physics", "truth_metadata", "check_size", "MAX_ROWS",
           "MAX_JUMPS", "MAX_CELLS"]

#: largest number of rows (probes, samples, trace points) a simulation writes: 2e7 rows
#: are about 0.5 GB in memory and a few GB of CSV, far beyond any use of invented data
MAX_ROWS = 20_000_000
#: largest expected number of photon-number jumps of a simulated path (about 0.3 GB)
MAX_JUMPS = 20_000_000
#: largest number of values of a simulated ring-down (points x traces x levels)
MAX_CELLS = 50_000_000

Seed = int | np.random.Generator | None


def rng_from(seed: Seed) -> np.random.Generator:
    """The generator of ``seed`` (an int, a Generator, which is used as it is, or None)."""
    return np.random.default_rng(seed)


def check_physics(lifetime: float, n_th: float) -> float:
    """``kappa = 1 / lifetime`` in 1/s after checking lifetime > 0 (s) and n_th >= 0."""
    if not (math.isfinite(lifetime) and lifetime > 0):
        raise InputError(f"the lifetime must be a positive time, not {lifetime} s")
    if not (math.isfinite(n_th) and n_th >= 0):
        raise InputError(f"the thermal photon number must be >= 0, not {n_th}")
    return 1.0 / lifetime


def check_size(count: float, what: str, limit: float, hint: str) -> None:
    """Refuse a simulation whose size, estimated before anything is allocated, is
    above ``limit`` (``count`` may be a float estimate, or inf/nan after an overflow)."""
    if not (math.isfinite(count) and count <= limit):
        shown = f"{count:.3g}" if math.isfinite(count) else "too many"
        raise InputError(f"the simulation would make {shown} {what}, more than the "
                         f"{limit:,.0f} cavchar simulates at once", hint=hint)


def truth_metadata(lifetime: float, n_th: float, seed: Seed,
                   extra: Mapping | None) -> dict[str, str]:
    """Metadata of a simulated record: true lifetime (s), true n_th, the seed (when an
    int) and ``extra`` (``key -> str(value)``, added last)."""
    meta = {"simulated": "invented data from cavchar.simulate",
            "true_lifetime": f"{lifetime!r} s", "true_n_thermal": repr(float(n_th))}
    if isinstance(seed, int):
        meta["seed"] = str(seed)
    meta.update({str(k): str(v) for k, v in (extra or {}).items()})
    return meta
