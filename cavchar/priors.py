"""Prior distributions: small immutable objects with a vectorized log density.

Every prior has

* ``logpdf(x)``: log density at ``x`` (any shape, same shape back), ``-inf``
  outside the support and for NaN input, never NaN;
* ``sample(rng, size)``: draws from a :class:`numpy.random.Generator`
  (inverse-CDF sampling, so one seed gives the same draws everywhere);
* ``ppf(q)``: the quantile function;
* ``support``: ``(low, high)``;
* ``to_dict()`` / :func:`prior_from_dict`: plain-JSON form used in result files.

Families and their densities (normalised on their support):

* :class:`LogUniform` ``p(x) = 1 / (x ln(high/low))`` on ``[low, high]``
  (flat in ``ln x``: the scale-free choice for a lifetime or a photon number);
* :class:`Uniform` ``p(x) = 1 / (high - low)`` on ``[low, high]``;
* :class:`Normal` ``p(x) = phi((x - mean)/sd) / (sd Z)``, truncated to
  ``[low, high]`` with ``Z = Phi(b) - Phi(a)``;
* :class:`LogNormal` ``p(x) = phi(ln(x/median)/sigma_log) / (x sigma_log)``;
* :class:`Beta` ``p(x) = u^(a-1) (1-u)^(b-1) / (B(a, b) (high - low))`` with
  ``u = (x - low)/(high - low)`` on ``[low, high]`` (a probability-like
  parameter on a bounded range, e.g. a readout error on [0, 0.5]).

Text form (:func:`parse_prior`): ``"loguniform:10us,100s"``,
``"uniform:0,0.5"``, ``"normal:1.2ms,0.1ms"`` (optionally ``,low,high``),
``"lognormal:1ms,0.5"`` (median with unit, then the width of ``ln x``),
``"beta:1,5"`` or ``"beta:1,5,0,0.5"`` (shapes a, b, optionally the range), and
``"stage:20mK[,width]"`` for a thermal photon number centred on the Planck
occupation of a stage (see :func:`stage_occupation_prior`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

from cavchar.errors import InputError

__all__ = [
    "Prior",
    "LogUniform",
    "Uniform",
    "Normal",
    "LogNormal",
    "Beta",
    "parse_prior",
    "prior_from_dict",
    "stage_occupation_prior",
    "DEFAULT_STAGE_WIDTH",
]

_LOG_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)

#: default width (standard deviation of ln n_th) of the stage-temperature prior:
#: one e-fold, so the 95% prior range spans a factor of about 50 in n_th
DEFAULT_STAGE_WIDTH = 1.0

_SYNTAX = ("write FAMILY:ARGS, e.g. loguniform:10us,100s  uniform:0,1  normal:1.2ms,0.1ms  "
           "lognormal:1ms,0.5  beta:1,5,0,0.5  stage:20mK,1.0")


def _finite(value: float, what: str, prior: str) -> float:
    value = float(value)
    if not math.isfinite(value):
        raise InputError(f"{prior} prior: {what} must be a finite number, got {value!r}",
                         hint=_SYNTAX)
    return value


def _interval(low: float, high: float, prior: str) -> tuple[float, float]:
    """Finite bounds ``low < high`` of a ``prior`` family as floats; InputError otherwise."""
    low = _finite(low, "lower bound", prior)
    high = _finite(high, "upper bound", prior)
    if not low < high:
        raise InputError(f"{prior} prior needs low < high, got low={low:g}, high={high:g}",
                         hint="give the smaller bound first")
    return low, high


class Prior:
    """Base class of the prior families (see the module docstring)."""

    family: str = ""

    @property
    def support(self) -> tuple[float, float]:
        """``(low, high)``: the bounds of the family (families without bounds override it)."""
        return (self.low, self.high)  # type: ignore[attr-defined]

    def logpdf(self, x: ArrayLike) -> np.ndarray:  # pragma: no cover - overridden
        """Log density at ``x`` (any shape, same shape back); ``-inf`` outside the support."""
        raise NotImplementedError

    def ppf(self, q: ArrayLike) -> np.ndarray:  # pragma: no cover - overridden
        """Quantile function: the ``x`` with ``P(X <= x) = q`` for ``q`` in [0, 1] (any shape)."""
        raise NotImplementedError

    def sample(self, rng: np.random.Generator, size: int | tuple[int, ...] = 1) -> np.ndarray:
        """Draws by inverse-CDF sampling: ``ppf(U)`` with ``U ~ Uniform(0, 1)`` from ``rng``."""
        return self.ppf(rng.uniform(size=size))

    def to_dict(self) -> dict[str, Any]:  # pragma: no cover - overridden
        """Plain-JSON description: ``{"family": ..., <parameters>}`` (infinite bounds as None)."""
        raise NotImplementedError

    def _store(self, **values: float) -> None:
        """Set validated parameters (and cached constants) on the frozen instance."""
        for key, value in values.items():
            object.__setattr__(self, key, value)

    def _inside(self, x: np.ndarray) -> np.ndarray:
        low, high = self.support
        return (x >= low) & (x <= high)  # False for NaN


@dataclass(frozen=True)
class LogUniform(Prior):
    """Log-uniform (reciprocal) prior on ``[low, high]``, ``0 < low < high < inf``.

    Density ``1 / (x ln(high/low))``; flat in ``ln x``.
    """

    low: float
    high: float
    family = "loguniform"

    def __post_init__(self) -> None:
        low = _finite(self.low, "lower bound", "log-uniform")
        high = _finite(self.high, "upper bound", "log-uniform")
        if not 0.0 < low < high:
            raise InputError(f"log-uniform prior needs 0 < low < high, got low={low:g}, "
                             f"high={high:g}", hint="give two positive bounds, smaller first")
        self._store(low=low, high=high, _log_norm=math.log(math.log(high / low)))

    def logpdf(self, x: ArrayLike) -> np.ndarray:
        """Log density ``-ln x - ln ln(high/low)`` inside ``[low, high]``, ``-inf`` outside."""
        x = np.asarray(x, dtype=float)
        inside = self._inside(x)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(inside, -np.log(np.where(inside, x, 1.0)) - self._log_norm, -np.inf)

    def ppf(self, q: ArrayLike) -> np.ndarray:
        """Quantile ``low (high/low)^q`` (inverse of the log-uniform CDF)."""
        q = np.asarray(q, dtype=float)
        return self.low * np.exp(q * math.log(self.high / self.low))

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form ``{"family": "loguniform", "low": ..., "high": ...}``."""
        return {"family": self.family, "low": self.low, "high": self.high}


@dataclass(frozen=True)
class Uniform(Prior):
    """Uniform prior on ``[low, high]`` (finite bounds, ``low < high``)."""

    low: float
    high: float
    family = "uniform"

    def __post_init__(self) -> None:
        low, high = _interval(self.low, self.high, "uniform")
        self._store(low=low, high=high, _log_norm=math.log(high - low))

    def logpdf(self, x: ArrayLike) -> np.ndarray:
        """Log density ``-ln(high - low)`` inside ``[low, high]``, ``-inf`` outside."""
        x = np.asarray(x, dtype=float)
        return np.where(self._inside(x), -self._log_norm, -np.inf)

    def ppf(self, q: ArrayLike) -> np.ndarray:
        """Quantile ``low + q (high - low)``."""
        q = np.asarray(q, dtype=float)
        return self.low + q * (self.high - self.low)

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form ``{"family": "uniform", "low": ..., "high": ...}``."""
        return {"family": self.family, "low": self.low, "high": self.high}


@dataclass(frozen=True)
class Normal(Prior):
    """Normal prior ``N(mean, sd^2)``, optionally truncated to ``[low, high]``.

    The truncation mass ``Z = Phi(b) - Phi(a)`` (``a, b`` the standardised
    bounds) is computed from the tail on the far side of the mean, in log form
    (``scipy.special.log_ndtr``), so a truncation many sd away stays accurate.
    """

    mean: float
    sd: float
    low: float = -math.inf
    high: float = math.inf
    family = "normal"

    def __post_init__(self) -> None:
        mean = _finite(self.mean, "mean", "normal")
        sd = _finite(self.sd, "standard deviation", "normal")
        if sd <= 0:
            raise InputError(f"normal prior needs a positive standard deviation, got {sd:g}")
        low, high = float(self.low), float(self.high)
        if math.isnan(low) or math.isnan(high) or not low < high:
            raise InputError(f"normal prior needs low < high, got low={low:g}, high={high:g}")
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):  # extreme
            a, b = (low - mean) / sd, (high - mean) / sd                      # values: NaN
            if a > 0:  # both bounds above the mean: use the upper tail, where digits live
                a, b = -b, -a
            # now a <= 0 side carries the mass: Z = Phi(b) - Phi(a) with a < b, a <= 0
            log_b = special.log_ndtr(b)
            log_a = special.log_ndtr(a)
            log_z = float(log_b + np.log1p(-np.exp(log_a - log_b)))
        if not log_z > -700.0:  # mass below ~1e-304: nothing left to sample from
            raise InputError(f"normal prior N({mean:g}, {sd:g}) has almost no mass in "
                             f"[{low:g}, {high:g}]", hint="widen the bounds or move the mean")
        self._store(mean=mean, sd=sd, low=low, high=high,
                    _log_norm=log_z + math.log(sd) + _LOG_SQRT_2PI)

    def logpdf(self, x: ArrayLike) -> np.ndarray:
        """Log density ``-z^2/2 - ln(sd Z sqrt(2 pi))``, ``z = (x - mean)/sd``, inside the
        bounds."""
        x = np.asarray(x, dtype=float)
        z = (x - self.mean) / self.sd
        with np.errstate(invalid="ignore"):
            return np.where(self._inside(x), -0.5 * z * z - self._log_norm, -np.inf)

    def ppf(self, q: ArrayLike) -> np.ndarray:
        """Quantile of the truncated normal, ``mean + sd Phi^-1(Phi(a) + q (Phi(b) - Phi(a)))``.

        Computed on the lower-tail side of the mean (mirrored when both bounds lie above it)
        so that Phi is never evaluated close to 1; clipped to ``[low, high]``."""
        q = np.asarray(q, dtype=float)
        a, b = (self.low - self.mean) / self.sd, (self.high - self.mean) / self.sd
        if a > 0:  # mirror so the tail arithmetic happens where Phi is not close to 1
            pa, pb = special.ndtr(-b), special.ndtr(-a)
            z = -special.ndtri(pb - q * (pb - pa))
        else:
            pa, pb = special.ndtr(a), special.ndtr(b)
            z = special.ndtri(pa + q * (pb - pa))
        return np.clip(self.mean + self.sd * z, self.low, self.high)

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form with keys family, mean, sd, low, high; infinite bounds as None."""
        def bound(v: float) -> float | None:
            return v if math.isfinite(v) else None

        return {"family": self.family, "mean": self.mean, "sd": self.sd,
                "low": bound(self.low), "high": bound(self.high)}


@dataclass(frozen=True)
class LogNormal(Prior):
    """Log-normal prior: ``ln x ~ N(ln median, sigma_log^2)``, support ``(0, inf)``."""

    median: float
    sigma_log: float
    family = "lognormal"

    def __post_init__(self) -> None:
        median = _finite(self.median, "median", "log-normal")
        sigma = _finite(self.sigma_log, "width", "log-normal")
        if median <= 0 or sigma <= 0:
            raise InputError(f"log-normal prior needs median > 0 and width > 0, got "
                             f"median={median:g}, width={sigma:g}")
        self._store(median=median, sigma_log=sigma, _mu=math.log(median))

    @property
    def support(self) -> tuple[float, float]:
        """``(0, inf)``."""
        return (0.0, math.inf)

    def logpdf(self, x: ArrayLike) -> np.ndarray:
        """Log density ``-z^2/2 - ln x - ln(sigma_log sqrt(2 pi))``.

        Here ``z = ln(x/median)/sigma_log``; ``-inf`` for ``x <= 0``."""
        x = np.asarray(x, dtype=float)
        inside = (x > 0) & (x < math.inf)
        with np.errstate(divide="ignore", invalid="ignore"):
            lx = np.log(np.where(inside, x, 1.0))
            z = (lx - self._mu) / self.sigma_log
            out = -0.5 * z * z - lx - math.log(self.sigma_log) - _LOG_SQRT_2PI
        return np.where(inside, out, -np.inf)

    def ppf(self, q: ArrayLike) -> np.ndarray:
        """Quantile ``median exp(sigma_log Phi^-1(q))``."""
        q = np.asarray(q, dtype=float)
        return np.exp(self._mu + self.sigma_log * special.ndtri(q))

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form ``{"family": "lognormal", "median": ..., "sigma_log": ...}``."""
        return {"family": self.family, "median": self.median, "sigma_log": self.sigma_log}


@dataclass(frozen=True)
class Beta(Prior):
    """Beta prior with shapes ``a, b > 0`` stretched onto ``[low, high]`` (default [0, 1]).

    Density ``u^(a-1) (1-u)^(b-1) / (B(a, b) (high - low))``, ``u = (x - low)/(high - low)``;
    quantiles from the inverse regularized incomplete beta function
    (``scipy.special.betaincinv``).  ``a = 1, b > 1`` gives a density that falls from
    ``low`` (finite there): it favours small values without excluding zero.
    """

    a: float
    b: float
    low: float = 0.0
    high: float = 1.0
    family = "beta"

    def __post_init__(self) -> None:
        a = _finite(self.a, "shape a", "beta")
        b = _finite(self.b, "shape b", "beta")
        if a <= 0 or b <= 0:
            raise InputError(f"beta prior needs shapes a > 0 and b > 0, got a={a:g}, b={b:g}")
        low, high = _interval(self.low, self.high, "beta")
        self._store(a=a, b=b, low=low, high=high,
                    _log_norm=float(special.betaln(a, b)) + math.log(high - low))

    def logpdf(self, x: ArrayLike) -> np.ndarray:
        """Log density ``(a-1) ln u + (b-1) ln(1-u) - ln B(a, b) - ln(high - low)``.


        Here ``u = (x - low)/(high - low)``; ``-inf`` outside ``[low, high]``."""
        x = np.asarray(x, dtype=float)
        inside = self._inside(x)
        u = np.clip((np.where(inside, x, self.low) - self.low) / (self.high - self.low), 0, 1)
        with np.errstate(divide="ignore", invalid="ignore"):
            out = (special.xlogy(self.a - 1.0, u) + special.xlog1py(self.b - 1.0, -u)
                   - self._log_norm)
        return np.where(inside & ~np.isnan(out), out, -np.inf)

    def ppf(self, q: ArrayLike) -> np.ndarray:
        """Quantile ``low + (high - low) I^-1_q(a, b)`` (inverse regularized incomplete beta)."""
        q = np.asarray(q, dtype=float)
        return self.low + (self.high - self.low) * special.betaincinv(self.a, self.b, q)

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form with keys family, a, b, low, high."""
        return {"family": self.family, "a": self.a, "b": self.b, "low": self.low,
                "high": self.high}


_FAMILIES = {"loguniform": LogUniform, "log-uniform": LogUniform, "uniform": Uniform,
             "normal": Normal, "lognormal": LogNormal, "log-normal": LogNormal, "beta": Beta}


def prior_from_dict(data: dict[str, Any]) -> Prior:
    """Rebuild a prior from :meth:`Prior.to_dict` output (None bounds mean infinite)."""
    family = data.get("family")
    kwargs = {k: v for k, v in data.items() if k != "family"}
    if family == "normal":
        kwargs["low"] = -math.inf if kwargs.get("low") is None else kwargs["low"]
        kwargs["high"] = math.inf if kwargs.get("high") is None else kwargs["high"]
    if family not in _FAMILIES:
        raise InputError(f"unknown prior family {family!r}", hint=_SYNTAX)
    return _FAMILIES[family](**kwargs)


def stage_occupation_prior(freq_hz: float, stage_temp_k: float,
                           sigma_log: float = DEFAULT_STAGE_WIDTH) -> LogNormal:
    """Prior on the thermal photon number from the stage temperature.

    Log-normal with median ``n(nu, T_stage) = 1/expm1(h nu / k_B T_stage)``
    (the Planck occupation, :func:`cavchar.thermal.planck_occupation`) and
    standard deviation ``sigma_log`` of ``ln n_th``.

    Parameters
    ----------
    freq_hz
        Mode frequency nu in Hz.
    stage_temp_k
        Stage temperature in K (> 0).
    sigma_log
        Width of ``ln n_th`` (dimensionless), default one e-fold.
    """
    from cavchar.thermal import planck_occupation

    freq_hz = _finite(freq_hz, "mode frequency", "stage")
    stage_temp_k = _finite(stage_temp_k, "stage temperature", "stage")
    if freq_hz <= 0 or stage_temp_k <= 0:
        raise InputError("stage prior needs a positive mode frequency and stage temperature",
                         hint="e.g. --freq 6.8GHz and stage:20mK")
    n_stage = float(planck_occupation(freq_hz, stage_temp_k))
    if not n_stage > 0:
        raise InputError(f"the Planck occupation at {stage_temp_k:g} K and {freq_hz:g} Hz "
                         "underflows to 0, so no log-normal prior can be centred on it",
                         hint="use a log-uniform prior on n_th instead")
    return LogNormal(n_stage, sigma_log)


def _parse_bound(text: str, dimension: str) -> float:
    from cavchar.units import parse_quantity

    stripped = text.strip().lower()
    if stripped in ("inf", "+inf"):
        return math.inf
    if stripped == "-inf":
        return -math.inf
    return parse_quantity(text.strip(), dimension)


def parse_prior(text: str, dimension: str, *, freq_hz: float | None = None) -> Prior:
    """Read a prior from text.

    Parameters
    ----------
    text
        ``FAMILY:ARG,ARG...``, for example ``"loguniform:10us,100s"``,
        ``"uniform:0,0.5"``, ``"normal:1.2ms,0.1ms"``, ``"normal:1.2ms,0.1ms,0,inf"``
        (mean, sd, low, high), ``"lognormal:1ms,0.5"`` (median with unit, width
        of ``ln x``), ``"stage:20mK"`` or ``"stage:20mK,0.7"`` (thermal photon
        number from a stage temperature; needs ``freq_hz``).
    dimension
        Dimension of the parameter (see :func:`cavchar.units.parse_quantity`):
        the arguments carry units of it, except the log-normal width.
    freq_hz
        Mode frequency in Hz, needed by the ``stage`` family.

    Raises
    ------
    InputError
        For an unknown family, a wrong number of arguments, a value that does
        not parse or bounds that make no prior.
    """
    from cavchar.units import parse_quantity

    if not isinstance(text, str) or ":" not in text:
        raise InputError(f"cannot read prior {text!r}", hint=_SYNTAX)
    family, _, rest = text.partition(":")
    family = family.strip().lower()
    args = [a.strip() for a in rest.split(",")] if rest.strip() else []

    def need(low: int, high: int) -> None:
        if not low <= len(args) <= high:
            count = str(low) if low == high else f"{low} to {high}"
            raise InputError(f"prior {text!r}: {family} takes {count} arguments, "
                             f"got {len(args)}", hint=_SYNTAX)

    if family in ("loguniform", "log-uniform"):
        need(2, 2)
        return LogUniform(parse_quantity(args[0], dimension), parse_quantity(args[1], dimension))
    if family == "uniform":
        need(2, 2)
        return Uniform(parse_quantity(args[0], dimension), parse_quantity(args[1], dimension))
    if family == "normal":
        need(2, 4)
        mean = parse_quantity(args[0], dimension)
        sd = parse_quantity(args[1], dimension)
        low = _parse_bound(args[2], dimension) if len(args) > 2 else -math.inf
        high = _parse_bound(args[3], dimension) if len(args) > 3 else math.inf
        return Normal(mean, sd, low, high)
    if family in ("lognormal", "log-normal"):
        need(2, 2)
        return LogNormal(parse_quantity(args[0], dimension),
                         parse_quantity(args[1], "dimensionless"))
    if family == "beta":
        if len(args) not in (2, 4):
            raise InputError(f"prior {text!r}: beta takes 2 arguments (shapes a, b) or 4 "
                             f"(a, b, low, high), got {len(args)}", hint=_SYNTAX)
        shapes = [parse_quantity(x, "dimensionless") for x in args[:2]]
        bounds = [parse_quantity(x, dimension) for x in args[2:]] or [0.0, 1.0]
        return Beta(*shapes, *bounds)
    if family == "stage":
        need(1, 2)
        if freq_hz is None:
            raise InputError(f"prior {text!r} needs the mode frequency",
                             hint="give the mode frequency, e.g. --freq 6.8GHz")
        width = (parse_quantity(args[1], "dimensionless") if len(args) > 1
                 else DEFAULT_STAGE_WIDTH)
        return stage_occupation_prior(freq_hz, parse_quantity(args[0], "temperature"), width)
    raise InputError(f"unknown prior family {family!r} in {text!r}", hint=_SYNTAX)
