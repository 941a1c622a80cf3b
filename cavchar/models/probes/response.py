"""Probe response models: the probability of outcome 1 given the photon number.

Two families:

:class:`FringeResponse` (Ramsey fringe of a dispersive probe)
    ``P(1 | n, s) = e0 + (1 - e0 - e1) (1 + V cos(phi0 n + phi_r + s)) / 2``

    with visibility ``V`` in [0, 1], phase per photon ``phi0`` (rad), phase
    offset ``phi_r`` (rad), probe setting ``s`` (rad) and readout errors
    ``e0 = P(read 1 | ideal 0)``, ``e1 = P(read 0 | ideal 1)`` with
    ``e0, e1 >= 0`` and ``e0 + e1 < 1``.  ``phi0 = pi`` is a photon-number
    parity probe.  Each parameter is fixed (a float: calibrated) or fitted (a
    :class:`cavchar.priors.Prior`).  A parameter left out is *unstated*: as a
    model (simulation, likelihood) it takes its default value (``V = 1``,
    ``phi0 = pi``, ``phi_r = 0``, ``e0 = e1 = 0``), but a fit
    (:meth:`FringeResponse.for_fit`, used by :func:`cavchar.fits.probes.fit_probes`)
    fits an unstated visibility or readout error with the weakly-informative
    prior of :data:`DEFAULT_FIT_PRIORS`, so a perfect probe is never assumed
    silently.  :attr:`FringeResponse.roles` says which parameter was stated,
    fitted or left at its default.

    Only two combinations of ``V, e0, e1`` enter the likelihood: the fringe's
    mean ``(1 + e0 - e1)/2`` and half-amplitude ``(1 - e0 - e1) V / 2``.  So when
    nothing is stated a fit holds ``V = 1`` and fits *effective* readout errors,
    which absorb any visibility below 1 (see :meth:`FringeResponse.for_fit`); when
    a user states priors on all three, their split along the one-dimensional ridge
    follows the priors.  The lifetime and thermal photon number depend only on the
    two combinations.

:class:`TableResponse` (calibrated table)
    ``P(1 | n[, s])`` read from a file (:func:`cavchar.io.read_response_table`);
    nothing is fitted.  A table must cover every photon number the truncation
    of the hidden chain needs and every setting of the record; otherwise
    :class:`cavchar.errors.InputError` says which are missing.

Both give :meth:`prob_one` ``(k, n_free) -> (k, S, N)`` for a batch of k
parameter sets, S settings and N photon numbers, and a support mask.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from cavchar.errors import InputError
from cavchar.parameters import ParameterSpec
from cavchar.priors import Beta, Prior, Uniform

__all__ = ["FringeResponse", "TableResponse", "Response", "SETTING_TOLERANCE",
           "DEFAULT_FIT_PRIORS", "DEFAULT_VALUES", "ROLE_TEXT"]

#: two settings closer than this (rad) are the same setting
SETTING_TOLERANCE = 1e-6

#: name, unit, printed label of the fringe parameters, in their fixed order
_FRINGE = (
    ("visibility", "", "V"),
    ("phase_per_photon", "rad", "phi0"),
    ("phase_offset", "rad", "phi_r"),
    ("readout_error_0", "", "e0"),
    ("readout_error_1", "", "e1"),
)

#: value of an unstated fringe parameter in a model (simulation, likelihood)
DEFAULT_VALUES = {"visibility": 1.0, "phase_per_photon": math.pi, "phase_offset": 0.0,
                  "readout_error_0": 0.0, "readout_error_1": 0.0}

#: prior a fit gives an unstated visibility or readout error (weakly informative):
#: V uniform on [0, 1]; e0, e1 Beta(1, 5) on [0, 0.5] (density 10 (1 - 2e)^4, falling from
#: e = 0: median 0.065, 95% below 0.225; a readout wrong half of the time or more is a
#: swapped label, not an error, hence the range)
DEFAULT_FIT_PRIORS: dict[str, Prior] = {
    "visibility": Uniform(0.0, 1.0),
    "readout_error_0": Beta(1.0, 5.0, 0.0, 0.5),
    "readout_error_1": Beta(1.0, 5.0, 0.0, 0.5),
}

#: role of a fringe parameter -> plain words (result files store the keys)
ROLE_TEXT = {"stated": "stated value", "stated prior": "fitted, stated prior",
             "default prior": "fitted, default prior (not stated)",
             "default": "default value (not stated)",
             "absorbed": "not fitted, held at 1 (not stated; the fitted readout errors "
                         "absorb any visibility below 1)"}


@dataclass(frozen=True)
class FringeResponse:
    """Ramsey-fringe response (see the module docstring for the equation).

    Parameters
    ----------
    visibility, phase_per_photon, phase_offset, readout_error_0, readout_error_1
        Each a float (fixed, SI: rad for the phases), a Prior (fitted) or None
        (unstated: :data:`DEFAULT_VALUES` in a model, :data:`DEFAULT_FIT_PRIORS`
        for V, e0, e1 in a fit).
    roles
        Role of each parameter (keys of :data:`ROLE_TEXT`); worked out from the
        arguments when not given.
    """

    visibility: float | Prior | None = None
    phase_per_photon: float | Prior | None = None
    phase_offset: float | Prior | None = None
    readout_error_0: float | Prior | None = None
    readout_error_1: float | Prior | None = None
    roles: dict[str, str] | None = field(default=None, compare=False, repr=False)
    kind: str = field(default="fringe", init=False)

    def __post_init__(self) -> None:
        roles = {}
        for name, _, _ in _FRINGE:
            value = getattr(self, name)
            if value is None:
                roles[name] = "default"
                object.__setattr__(self, name, DEFAULT_VALUES[name])
                continue
            roles[name] = "stated prior" if isinstance(value, Prior) else "stated"
            if isinstance(value, Prior):
                continue
            try:
                value = float(value)
            except (TypeError, ValueError):
                raise InputError(f"response parameter {name} must be a number or a prior, "
                                 f"got {value!r}") from None
            if not math.isfinite(value):
                raise InputError(f"response parameter {name} must be finite, got {value}")
            object.__setattr__(self, name, value)
        fixed = self.fixed_values
        if "visibility" in fixed and not 0.0 <= fixed["visibility"] <= 1.0:
            raise InputError(f"visibility {fixed['visibility']} is outside [0, 1]",
                             hint="a negative visibility is a phase offset of pi")
        for name in ("readout_error_0", "readout_error_1"):
            if name in fixed and not 0.0 <= fixed[name] < 1.0:
                raise InputError(f"{name} {fixed[name]} is outside [0, 1)")
        if fixed.get("readout_error_0", 0.0) + fixed.get("readout_error_1", 0.0) >= 1.0:
            raise InputError("readout errors e0 + e1 must stay below 1")
        object.__setattr__(self, "roles", {**roles, **dict(self.roles or {})})

    @property
    def unstated(self) -> tuple[str, ...]:
        """Parameters left at their default value (not stated)."""
        return tuple(n for n, _, _ in _FRINGE if self.roles[n] == "default")

    def for_fit(self) -> FringeResponse:
        """The response a fit uses: unstated V, e0, e1 get :data:`DEFAULT_FIT_PRIORS`
        (fitted); unstated phases keep their default values (reported as such).

        An unstated visibility is not fitted when both readout errors are: only the
        fringe's mean ``(1 + e0 - e1)/2`` and half-amplitude ``(1 - e0 - e1) V / 2`` are
        measurable, and ``V = 1`` with effective errors ``e0' = e0 + (1 - e0 - e1)(1 -
        V)/2``, ``e1' = e1 + (1 - e0 - e1)(1 - V)/2`` gives every fringe any ``(V, e0,
        e1)`` gives.  Fitting all three would leave a flat ridge in the posterior (slow to
        sample, its split set by the priors) and change nothing in T_c or n_th.  The
        visibility's role is then ``"absorbed"``."""
        values = {n: getattr(self, n) for n, _, _ in _FRINGE}
        roles = dict(self.roles)
        errors_fitted = all(roles[n] != "stated" for n in ("readout_error_0",
                                                           "readout_error_1"))
        if roles["visibility"] == "default" and errors_fitted:
            roles["visibility"] = "absorbed"
        for name, prior in DEFAULT_FIT_PRIORS.items():
            if roles[name] == "default":
                values[name], roles[name] = prior, "default prior"
        return FringeResponse(**values, roles=roles)

    def with_values(self, values: dict[str, float]) -> FringeResponse:
        """A fully fixed response: the fitted parameters set to ``values`` (one draw)."""
        fixed = {n: float(values[n]) if n in values else getattr(self, n) for n, _, _ in _FRINGE}
        return FringeResponse(**fixed, roles=dict(self.roles))

    @property
    def free_names(self) -> tuple[str, ...]:
        """Names of the response parameters given a prior (fitted), in the fringe's order."""
        return tuple(n for n, _, _ in _FRINGE if isinstance(getattr(self, n), Prior))

    @property
    def fixed_values(self) -> dict[str, float]:
        """The response parameters given as numbers (held fixed), name -> value."""
        return {n: getattr(self, n) for n, _, _ in _FRINGE
                if not isinstance(getattr(self, n), Prior)}

    def parameter_specs(self) -> tuple[ParameterSpec, ...]:
        """Specs of the fitted parameters (sampled linearly), in the fixed order."""
        return tuple(ParameterSpec(n, unit, label, getattr(self, n), log_scale=False)
                     for n, unit, label in _FRINGE if isinstance(getattr(self, n), Prior))

    def values(self, free: ArrayLike | None) -> dict[str, np.ndarray]:
        """All five parameters as (k,) arrays from the free ones ``(k, n_free)``."""
        names = self.free_names
        free = np.zeros((1, 0)) if free is None else np.atleast_2d(np.asarray(free, float))
        if free.shape[1] != len(names):
            raise ValueError(f"expected {len(names)} free response parameters {names}")
        k = free.shape[0]
        out = {n: np.full(k, v) for n, v in self.fixed_values.items()}
        out.update({n: free[:, i] for i, n in enumerate(names)})
        return out

    def prob_one(
        self, free: ArrayLike | None, n_levels: int, settings: ArrayLike = (0.0,)
    ) -> tuple[np.ndarray, np.ndarray]:
        """``P(1 | n, s)`` for a batch of parameter sets.

        Parameters
        ----------
        free : array (k, n_free) or None
            Values of the fitted parameters (order of :attr:`free_names`).
        n_levels : int
            Photon numbers 0..N-1.
        settings : array (S,)
            Probe settings in rad.

        Returns
        -------
        p_one : ndarray (k, S, N), clipped to [0, 1]
        valid : ndarray (k,) of bool
            False where the parameters leave the physical region
            (V outside [0, 1], e0 or e1 < 0, e0 + e1 >= 1, non-finite).
        """
        v = self.values(free)
        s = np.asarray(settings, dtype=float).reshape(-1)
        n = np.arange(n_levels, dtype=float)
        vis, phi0, phir = v["visibility"], v["phase_per_photon"], v["phase_offset"]
        e0, e1 = v["readout_error_0"], v["readout_error_1"]
        valid = ((vis >= 0) & (vis <= 1) & (e0 >= 0) & (e1 >= 0) & (e0 + e1 < 1)
                 & np.isfinite(phi0) & np.isfinite(phir))
        phase = phi0[:, None, None] * n[None, None, :] + phir[:, None, None] + s[None, :, None]
        ideal = 0.5 * (1.0 + vis[:, None, None] * np.cos(phase))
        p = e0[:, None, None] + (1.0 - e0 - e1)[:, None, None] * ideal
        p = np.where(valid[:, None, None], p, 0.5)
        return np.clip(p, 0.0, 1.0), valid

    def check_coverage(self, n_levels: int, settings: ArrayLike) -> None:
        """A fringe covers every photon number and setting: nothing to check."""

    def describe(self) -> dict[str, Any]:
        """Plain-JSON description (fixed values and the priors of fitted ones)."""
        out: dict[str, Any] = {"kind": "fringe"}
        for n, _, _ in _FRINGE:
            value = getattr(self, n)
            out[n] = value.to_dict() if isinstance(value, Prior) else value
        out["roles"] = dict(self.roles)
        return out


@dataclass(frozen=True, eq=False)
class TableResponse:
    """Calibrated response table ``P(1 | n[, s])``; nothing fitted.

    Parameters
    ----------
    p_one : array (K, S) or (K,)
        Probability of outcome 1 for photon numbers 0..K-1 (rows) and the
        table's settings (columns).
    settings : array (S,), optional
        Settings in rad of the columns; None: the table holds for any setting.
    source : str, optional
        File the table came from (named in error messages).
    """

    p_one: np.ndarray
    settings: np.ndarray | None = None
    source: str | None = None
    kind: str = field(default="table", init=False)

    def __post_init__(self) -> None:
        p = np.asarray(self.p_one, dtype=float)
        p = p[:, None] if p.ndim == 1 else p
        if p.ndim != 2 or p.size == 0 or not np.all((p >= 0) & (p <= 1)):
            raise InputError("a response table needs probabilities in [0, 1], one row per "
                             "photon number", path=self.source)
        if self.settings is not None:
            s = np.asarray(self.settings, dtype=float).reshape(-1)
            if s.size != p.shape[1]:
                raise InputError("response table: one column of probabilities per setting",
                                 path=self.source)
            object.__setattr__(self, "settings", s)
        elif p.shape[1] != 1:
            raise InputError("response table with several columns needs their settings",
                             path=self.source)
        object.__setattr__(self, "p_one", p)

    @classmethod
    def from_file(cls, path: str | os.PathLike) -> TableResponse:
        """Read a table with columns ``photons``, ``p_one`` and optional ``setting`` (rad)."""
        from cavchar.io.readers import read_response_table

        table = read_response_table(path)
        return cls(table.p_one, table.settings, table.source)

    @property
    def free_names(self) -> tuple[str, ...]:
        """No free parameters: a calibrated table is used as stated."""
        return ()

    @property
    def fixed_values(self) -> dict[str, float]:
        """No fixed scalar parameters: the table holds the whole response."""
        return {}

    @property
    def roles(self) -> dict[str, str]:
        """Role of the response in the fit: the table is ``"stated"``."""
        return {"table": "stated"}

    def for_fit(self) -> TableResponse:
        """A calibrated table is used as it is."""
        return self

    @property
    def max_photons(self) -> int:
        """Largest photon number the table covers."""
        return int(self.p_one.shape[0] - 1)

    def parameter_specs(self) -> tuple[ParameterSpec, ...]:
        """No sampled parameters (empty tuple)."""
        return ()

    def _columns(self, settings: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Column of the table for each setting, and a mask of settings not found."""
        if self.settings is None:
            return np.zeros(settings.size, dtype=np.int64), np.zeros(settings.size, bool)
        dist = np.abs(settings[:, None] - self.settings[None, :])
        col = np.argmin(dist, axis=1)
        return col, dist[np.arange(settings.size), col] > SETTING_TOLERANCE

    def check_coverage(self, n_levels: int, settings: ArrayLike) -> None:
        """Raise InputError naming the photon numbers or settings the table lacks."""
        s = np.asarray(settings, dtype=float).reshape(-1)
        _, missing = self._columns(s)
        if missing.any():
            have = ", ".join(f"{x:.6g}" for x in self.settings)
            need = ", ".join(f"{x:.6g}" for x in s[missing])
            raise InputError(f"the response table has no column for setting(s) {need} rad "
                             f"used in the record (it has {have} rad)", path=self.source,
                             hint="add rows for these settings")
        if n_levels - 1 > self.max_photons:
            lacking = list(range(self.max_photons + 1, n_levels))
            shown = ", ".join(str(x) for x in lacking[:12]) + (" ..." if len(lacking) > 12 else "")
            raise InputError(f"the response table stops at {self.max_photons} photons but the "
                             f"truncation of the photon number needs 0..{n_levels - 1}; "
                             f"missing photon numbers: {shown}", path=self.source,
                             hint="extend the table to higher photon numbers (or fit a "
                                  "fringe response)")

    def prob_one(
        self, free: ArrayLike | None, n_levels: int, settings: ArrayLike = (0.0,)
    ) -> tuple[np.ndarray, np.ndarray]:
        """``P(1 | n, s)`` of shape (k, S, N) (k = rows of ``free``, or 1); all valid."""
        s = np.asarray(settings, dtype=float).reshape(-1)
        self.check_coverage(n_levels, s)
        col, _ = self._columns(s)
        p = self.p_one[:n_levels, col].T  # (S, N)
        k = 1 if free is None else max(1, np.atleast_2d(np.asarray(free)).shape[0])
        return np.broadcast_to(p, (k,) + p.shape).copy(), np.ones(k, dtype=bool)

    def describe(self) -> dict[str, Any]:
        """Plain-JSON description: kind, source, largest photon number, settings (rad) and P(1)."""
        return {"kind": "table", "source": self.source, "max_photons": self.max_photons,
                "settings": None if self.settings is None else self.settings.tolist(),
                "p_one": self.p_one.tolist()}


Response = FringeResponse | TableResponse

