"""Benchmark: Fisher information of a Fock-population ring-down (40 delays, N = 16 levels) and of
one sampled-record transition, cavchar's analytic eigen derivative vs scipy's Fréchet
derivative of expm (the peer computes the same matrices with ``scipy.linalg.expm_frechet``).

Run: ``python tests/benchmarks/bench_plan.py`` (medians of repeats, ratio, agreement).
"""

from __future__ import annotations

import numpy as np
from scipy import linalg
from timing import median_time


def _peer_derivatives(lifetime, n_thermal, dts, n_levels):
    from cavchar.dynamics import rate_matrix

    kappa = 1 / lifetime
    q = rate_matrix(kappa, n_thermal, n_levels)
    dq = [-q / lifetime, rate_matrix(kappa, 1.0, n_levels) - rate_matrix(kappa, 0.0, n_levels)]
    p, grads = [], [[], []]
    for dt in dts:
        for k, d in enumerate(dq):
            e, f = linalg.expm_frechet(q * dt, d * dt)
            grads[k].append(f)
        p.append(e)
    return np.array(p), np.array(grads)


def main() -> None:
    from cavchar.plan.fisher import _transition_derivatives

    lifetime, n_thermal, n_levels = 1.2e-3, 0.1, 16
    dts = np.linspace(0.05e-3, 5e-3, 40)

    t_ours, (p1, g1) = median_time(
        lambda: _transition_derivatives(lifetime, n_thermal, dts, n_levels), 21)
    t_peer, (p2, g2) = median_time(
        lambda: _peer_derivatives(lifetime, n_thermal, dts, n_levels), 5)
    rows = slice(0, 4)  # the rows the information uses with any weight (thermal bulk + Fock 2)
    diff_p = np.max(np.abs(p1[:, rows] - p2[:, rows]))
    diff_g = np.max(np.abs(g1[:, :, rows] - g2[:, :, rows]) / np.abs(g2[:, :, rows]).max(
        axis=(1, 2, 3), keepdims=True))
    print(f"P(dt) and dP/d(T_c, n_th), N={n_levels}, {dts.size} intervals: cavchar "
          f"{t_ours * 1e3:.2f} ms, scipy expm_frechet {t_peer * 1e3:.1f} ms, ratio "
          f"{t_peer / t_ours:.0f}x; max |dP| difference {diff_p:.1e}, relative derivative "
          f"difference {diff_g:.1e}")


if __name__ == "__main__":
    main()
