"""Parameter specifications: the single source of truth for each fitted parameter.

A :class:`ParameterSpec` holds a parameter's name, unit, label, prior and
whether it is sampled in log space.  A :class:`ParameterSpace` is the ordered
tuple of specs of one model; it maps between physical values ``x`` (SI units,
what likelihoods see) and sampler coordinates ``u`` (what the sampler moves):

    u = ln x   (log_scale parameters)        u = x   (others)

and gives the log prior density in sampler coordinates, Jacobian included:

    ln p_u(u) = ln p_x(x(u)) + ln |dx/du| = ln p_x(e^u) + u   (log_scale)

so that a log-uniform prior on ``x`` is flat in ``u``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from cavchar.errors import InputError
from cavchar.priors import LogUniform, Prior, Uniform, prior_from_dict

__all__ = ["ParameterSpec", "ParameterSpace", "UNIT_DIMENSIONS"]

#: unit symbol -> dimension name of :mod:`cavchar.units`
UNIT_DIMENSIONS: dict[str, str] = {"s": "time", "Hz": "frequency", "K": "temperature",
                                   "1/s": "rate", "/s": "rate", "W": "power", "rad": "phase",
                                   "": "dimensionless"}


@dataclass(frozen=True)
class ParameterSpec:
    """One fitted parameter.

    Parameters
    ----------
    name
        Column name in results, e.g. ``"lifetime"``, ``"n_thermal"``.
    unit
        SI unit symbol (``"s"``, ``"Hz"``, ``"K"``, ``"1/s"``, ``""`` ...).
    label
        Short printed label, e.g. ``"T_c"``.
    prior
        A :class:`cavchar.priors.Prior` on the physical value.
    log_scale
        Sample ``ln x`` instead of ``x`` (needs a prior with support in ``x >= 0``;
        the part of the prior at ``x <= 0``, if any, is then cut off).
    dimension
        Dimension name for formatting (:func:`cavchar.units.format_quantity`);
        inferred from ``unit`` when not given.
    """

    name: str
    unit: str
    label: str
    prior: Prior
    log_scale: bool = False
    dimension: str = field(default="")

    def __post_init__(self) -> None:
        if not self.name or not isinstance(self.name, str):
            raise ValueError("a parameter needs a non-empty name")
        if not isinstance(self.prior, Prior):
            raise TypeError(f"prior of {self.name!r} must be a cavchar.priors.Prior")
        if not self.dimension:
            object.__setattr__(self, "dimension", UNIT_DIMENSIONS.get(self.unit, "dimensionless"))
        if self.log_scale and self.prior.support[1] <= 0:
            raise InputError(f"parameter {self.name!r} is sampled in log space but its prior "
                             f"has no mass at positive values (support {self.prior.support})",
                             hint="give a prior on positive values")

    def to_sampler(self, x: ArrayLike) -> np.ndarray:
        """Physical value -> sampler coordinate (``ln x`` for log-scale; -inf for x <= 0)."""
        x = np.asarray(x, dtype=float)
        if not self.log_scale:
            return x
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(x > 0, np.log(np.where(x > 0, x, 1.0)), -np.inf)

    def to_physical(self, u: ArrayLike) -> np.ndarray:
        """Sampler coordinate -> physical value (``exp u`` for log-scale)."""
        u = np.asarray(u, dtype=float)
        return np.exp(u) if self.log_scale else u

    def log_prior(self, u: ArrayLike) -> np.ndarray:
        """Log prior density in sampler coordinates, Jacobian ``+u`` included for log-scale."""
        u = np.asarray(u, dtype=float)
        if not self.log_scale:
            return self.prior.logpdf(u)
        lp = self.prior.logpdf(np.exp(u))
        with np.errstate(invalid="ignore"):
            return np.where(np.isfinite(lp), lp + u, -np.inf)

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON description."""
        return {"name": self.name, "unit": self.unit, "label": self.label,
                "dimension": self.dimension, "log_scale": bool(self.log_scale),
                "prior": self.prior.to_dict()}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> ParameterSpec:
        """Inverse of :meth:`to_dict`."""
        return cls(name=data["name"], unit=data["unit"], label=data["label"],
                   prior=prior_from_dict(data["prior"]), log_scale=bool(data["log_scale"]),
                   dimension=data.get("dimension", ""))


@dataclass(frozen=True)
class ParameterSpace:
    """The ordered parameters of one model and the batched maps between coordinates.

    All batched methods take arrays of shape ``(k, ndim)`` (or ``(ndim,)``) and
    return the same leading shape.
    """

    specs: tuple[ParameterSpec, ...]

    def __init__(self, specs: Sequence[ParameterSpec]) -> None:
        specs = tuple(specs)
        if not specs:
            raise ValueError("a parameter space needs at least one parameter")
        names = [s.name for s in specs]
        if len(set(names)) != len(names):
            raise ValueError(f"duplicate parameter names in {names}")
        object.__setattr__(self, "specs", specs)
        object.__setattr__(self, "_log_mask", np.array([s.log_scale for s in specs]))
        # Fast path: a uniform prior on u (Uniform on x, or LogUniform on a log-scale x, whose
        # density with the Jacobian is constant in u) is a box; the rest are evaluated per spec.
        lo, hi, const, generic = np.full(len(specs), -np.inf), np.full(len(specs), np.inf), 0.0, []
        for i, spec in enumerate(specs):
            prior = spec.prior
            if isinstance(prior, Uniform) and not spec.log_scale:
                lo[i], hi[i] = prior.low, prior.high
                const -= np.log(prior.high - prior.low)
            elif isinstance(prior, LogUniform) and spec.log_scale:
                lo[i], hi[i] = np.log(prior.low), np.log(prior.high)
                const -= np.log(hi[i] - lo[i])
            else:
                generic.append(i)
        object.__setattr__(self, "_box", (lo, hi, const, tuple(generic)))

    @property
    def names(self) -> list[str]:
        """Parameter names in order."""
        return [s.name for s in self.specs]

    @property
    def ndim(self) -> int:
        """Number of parameters."""
        return len(self.specs)

    def to_sampler(self, x: ArrayLike) -> np.ndarray:
        """Physical ``(..., ndim)`` -> sampler coordinates ``(..., ndim)``."""
        x = np.array(x, dtype=float)
        mask = self._log_mask
        if mask.any():
            with np.errstate(divide="ignore", invalid="ignore"):
                v = x[..., mask]
                x[..., mask] = np.where(v > 0, np.log(np.where(v > 0, v, 1.0)), -np.inf)
        return x

    def to_physical(self, u: ArrayLike) -> np.ndarray:
        """Sampler coordinates ``(..., ndim)`` -> physical ``(..., ndim)``."""
        u = np.array(u, dtype=float)
        mask = self._log_mask
        if mask.any():
            with np.errstate(over="ignore"):
                u[..., mask] = np.exp(u[..., mask])
        return u

    def log_prior(self, u: ArrayLike) -> np.ndarray:
        """Joint log prior in sampler coordinates (independent priors), shape ``(...,)``.

        ``-inf`` outside the support, never NaN.
        """
        u = np.asarray(u, dtype=float)
        lo, hi, const, generic = self._box
        with np.errstate(invalid="ignore"):
            total = np.where(np.all((u >= lo) & (u <= hi), axis=-1), const, -np.inf)
        for i in generic:
            total = total + self.specs[i].log_prior(u[..., i])
        return np.where(np.isnan(total), -np.inf, total) if generic else total

    def sample_prior(self, rng: np.random.Generator, size: int) -> np.ndarray:
        """Independent prior draws in physical units, shape ``(size, ndim)``."""
        return np.column_stack([s.prior.sample(rng, size) for s in self.specs])
