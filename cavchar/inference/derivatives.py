"""The one numerical Hessian of cavchar: gradient and Hessian of a batched function by
central differences, for the sampler's start (local covariance at the MAP) and for the
planner (observed information, Newton steps of simulation studies).

Formulas: e.g. Press, Teukolsky, Vetterling & Flannery, *Numerical Recipes*, 3rd ed.,
sect. 5.7 (central differences; error O(h^2)).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from numpy.typing import ArrayLike

__all__ = ["numerical_hessian"]


def numerical_hessian(func: Callable[[np.ndarray], np.ndarray], x0: ArrayLike,
                      steps: ArrayLike) -> tuple[np.ndarray, np.ndarray, float]:
    """Gradient, Hessian and value of a batched function by central differences.

    One batched call ``func((k, p)) -> (k,)`` at ``1 + 2p + 2p(p-1)`` points:
    ``H_ii = (f(x+h_i) - 2 f(x) + f(x-h_i)) / h_i^2``,
    ``H_ij = (f(++) - f(+-) - f(-+) + f(--)) / (4 h_i h_j)``.
    """
    x0 = np.asarray(x0, dtype=float)
    h = np.asarray(steps, dtype=float)
    p = x0.size
    eye = np.eye(p) * h
    points = [x0]
    points += [x0 + eye[i] for i in range(p)] + [x0 - eye[i] for i in range(p)]
    pairs = [(i, j) for i in range(p) for j in range(i + 1, p)]
    for i, j in pairs:
        points += [x0 + eye[i] + eye[j], x0 + eye[i] - eye[j],
                   x0 - eye[i] + eye[j], x0 - eye[i] - eye[j]]
    f = np.asarray(func(np.array(points)), dtype=float)
    f0, fp, fm = f[0], f[1:1 + p], f[1 + p:1 + 2 * p]
    grad = (fp - fm) / (2 * h)
    hess = np.diag((fp - 2 * f0 + fm) / h**2)
    for k, (i, j) in enumerate(pairs):
        c = f[1 + 2 * p + 4 * k:1 + 2 * p + 4 * k + 4]
        hess[i, j] = hess[j, i] = (c[0] - c[1] - c[2] + c[3]) / (4 * h[i] * h[j])
    return grad, hess, float(f0)
