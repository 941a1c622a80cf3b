"""The numerical derivatives of cavchar: gradient and Hessian of a batched function by
central differences, for the sampler's start (MAP search, local covariance at the MAP)
and for the planner (observed information, Newton steps of simulation studies).

Formulas: e.g. Press, Teukolsky, Vetterling & Flannery, *Numerical Recipes*, 3rd ed.,
sect. 5.7 (central differences; error O(h^2)).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from numpy.typing import ArrayLike

__all__ = ["numerical_gradient", "numerical_hessian"]


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


def numerical_gradient(func: Callable[[np.ndarray], np.ndarray], x0: ArrayLike,
                       lo: ArrayLike, hi: ArrayLike) -> tuple[np.ndarray, float]:
    """Gradient and value of a batched function inside a box, by central differences.

    One batched call ``func((k, p)) -> (k,)`` at ``1 + 2p`` points, step
    ``h_i = 1e-5 max(1, |x_i|)``: ``g_i = (f(x+h_i) - f(x-h_i)) / (2 h_i)``; one-sided
    (``(f(x+h_i) - f(x)) / h_i`` or ``(f(x) - f(x-h_i)) / h_i``) where a step would leave
    ``[lo, hi]`` (that point is then not asked for) or its value is not finite; 0 where
    neither side is usable.  Returns ``(gradient (p,), f(x0))``; the value may be
    non-finite (the gradient is then meaningless).
    """
    x0 = np.asarray(x0, dtype=float)
    p = x0.size
    h = 1e-5 * np.maximum(1.0, np.abs(x0))
    up, down = x0 + h, x0 - h
    inside_up, inside_down = up <= np.asarray(hi), down >= np.asarray(lo)
    up, down = np.where(inside_up, up, x0), np.where(inside_down, down, x0)
    points = np.vstack([x0, np.tile(x0, (2 * p, 1))])
    points[1 + np.arange(p), np.arange(p)] = up
    points[1 + p + np.arange(p), np.arange(p)] = down
    with np.errstate(invalid="ignore"):
        f = np.asarray(func(points), dtype=float)
    f0, f_up, f_down = float(f[0]), f[1:1 + p], f[1 + p:]
    ok_up, ok_down = np.isfinite(f_up) & inside_up, np.isfinite(f_down) & inside_down
    grad = np.zeros(p)
    both, only_up, only_down = ok_up & ok_down, ok_up & ~ok_down, ok_down & ~ok_up
    grad[both] = (f_up[both] - f_down[both]) / (up[both] - down[both])
    grad[only_up] = (f_up[only_up] - f0) / (up[only_up] - x0[only_up])
    grad[only_down] = (f0 - f_down[only_down]) / (x0[only_down] - down[only_down])
    return grad, f0
