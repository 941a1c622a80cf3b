"""One decay rate shared by several traces, each with its own amplitude and floor.

Least-squares start of the joint fits (repeated ring-downs of one mode): the
profiled objective of :func:`cavchar.models.ringdown.least_squares.profile_objective`
summed over the traces, minimized over the shared rate.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import optimize

from cavchar.models.ringdown.exponential_sums import ExponentialSums
from cavchar.models.ringdown.least_squares import (
    fit_exponentials,
    gram_matrices,
    profile_objective,
    validate_trace,
)

__all__ = ["SharedRateFit", "fit_shared_rate"]


@dataclass(frozen=True)
class SharedRateFit:
    """Result of :func:`fit_shared_rate`: one rate, per-trace amplitudes and floors."""

    rate: float
    amplitudes: np.ndarray
    floors: np.ndarray
    rss: np.ndarray
    n_points: np.ndarray

    @property
    def lifetime(self) -> float:
        """Energy lifetime ``T_c = 1 / rate`` in s."""
        return 1.0 / self.rate


def fit_shared_rate(
    traces: Sequence[tuple[ArrayLike, ArrayLike, ArrayLike | None]],
    *,
    floor: bool = True,
    fitted_sigma: bool = True,
) -> SharedRateFit:
    """One decay rate shared by several traces, each with its own amplitude and floor.

    Parameters
    ----------
    traces
        ``(tau, y, sigma)`` per trace: times since that trace's reference time
        in s, values, and per-point sigma or ``None``.
    floor
        Fit a floor per trace.
    fitted_sigma
        Noise scale unknown per trace: minimize ``sum_j (n_j/2) ln RSS_j``
        (the profile likelihood); else ``sum_j RSS_j`` (chi-square).

    The start is the rate of the best single-trace fit of the longest trace,
    refined by a bounded Brent search on the compressed sums.
    """
    data = [validate_trace(tau, y, s, 2 + int(floor)) for tau, y, s in traces]
    first = max(range(len(data)), key=lambda i: data[i][0].size)
    t, y, _ = data[first]
    sig = traces[first][2]
    single = fit_exponentials(t, y, 1, floor=floor, sigma=sig, t0=0.0)
    r0 = float(single.rates[0])
    sums = [ExponentialSums(tau, yy, ww, rate_limit=20.0 * r0) for tau, yy, ww in data]
    sol = optimize.minimize_scalar(
        lambda x: float(profile_objective(sums, np.array([[math.exp(x)]]), floor,
                                          fitted_sigma)[0]),
        bounds=(math.log(r0 / 8), math.log(r0 * 8)), method="bounded",
        options={"xatol": 1e-10})
    rate = math.exp(sol.x)
    amps, floors, rss = [], [], []
    for s in sums:
        gram, rhs = gram_matrices(s, np.array([[rate]]), floor)
        coef = np.linalg.solve(gram[0], rhs[0])
        amps.append(coef[0])
        floors.append(coef[1] if floor else 0.0)
        rss.append(s.sum_yy - rhs[0] @ coef)
    return SharedRateFit(rate=rate, amplitudes=np.array(amps), floors=np.array(floors),
                         rss=np.array(rss), n_points=np.array([s.n for s in sums]))
