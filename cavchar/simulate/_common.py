"""What every simulator of :mod:`cavchar.simulate` shares: the seed, the checks
of the physical parameters and the truth written into a simulated record's metadata."""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from cavchar.errors import InputError

__all__ = ["Seed", "rng_from", "check_physics", "truth_metadata"]

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
