"""Benchmark: populations at 1,000 times for N = 20 levels, cavchar vs QuTiP mesolve.

Run: ``python tests/benchmarks/bench_dynamics.py`` (prints medians and the ratio).
Target (foundation issue): >= 100x faster than mesolve, agreement < 1e-8.
"""

from __future__ import annotations

import numpy as np
from timing import median_time


def main() -> None:
    import qutip

    from cavchar.dynamics import DampedModePropagator

    kappa, n_th, n_levels = 1 / 2.0e-3, 0.3, 20
    times = np.linspace(0, 10e-3, 1000)
    p0 = np.zeros(n_levels)
    p0[5] = 1.0

    def ours():
        return DampedModePropagator(kappa, n_th, n_levels, n_max=5).populations(p0, times)

    a = qutip.destroy(n_levels)
    c_ops = [np.sqrt(kappa * (1 + n_th)) * a, np.sqrt(kappa * n_th) * a.dag()]
    e_ops = [qutip.fock_dm(n_levels, n) for n in range(n_levels)]

    def peer():
        res = qutip.mesolve(a.dag() * a, qutip.fock_dm(n_levels, 5), times, c_ops, e_ops=e_ops,
                            options={"atol": 1e-13, "rtol": 1e-11})
        return np.array(res.expect).T

    t_ours, p_ours = median_time(ours, 21)
    t_peer, p_peer = median_time(peer, 3)
    print(f"populations, N={n_levels}, 1000 times: cavchar {t_ours * 1e3:.3f} ms, "
          f"QuTiP mesolve {t_peer * 1e3:.1f} ms, ratio {t_peer / t_ours:.0f}x, "
          f"max |difference| {np.max(np.abs(p_ours - p_peer)):.2e}")


if __name__ == "__main__":
    main()
