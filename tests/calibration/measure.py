"""Print the numbers of the calibration suite (docs/planning-and-calibration.md quotes them).

Run from the repository root::

    python tests/calibration/measure.py            # quick forms + small-record coverage
    python tests/calibration/measure.py --mcmc     # also the SBC ranks through the samplers
    python tests/calibration/measure.py --mcmc --no-coverage

Everything is seeded: the output is the same on every run.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from calibration_tools import (  # noqa: E402
    control_results,
    log_uniform_posterior,
    ranks,
    record_statistics,
    uniformity,
)
from test_coverage_jumps import coverage  # noqa: E402
from test_efficiency_jumps import _bound  # noqa: E402
from test_sbc_jumps import _conjugate_ranks  # noqa: E402


def _show(name, result):
    p = ", ".join(f"{x:.3g}" for x in result["p_chi2"])
    q = ", ".join(f"{x:.3g}" for x in result["p_scale"])
    f = ", ".join(f"{x:.2f}" for x in result["scale"])
    print(f"  {name:<32} chi-square p = {p};  scale p = {q};  scale = {f}")


def main() -> None:
    print("SBC, exact records, conjugate posterior (600 simulations, 99 draws, 10 bins):")
    truth, draws = _conjugate_ranks(600, 99, 0.2, seed=20)
    _show("posterior as computed", uniformity(ranks(truth, draws), 99, 10))
    for f, wrong in control_results(truth, draws, 99, 10).items():
        _show(f"posterior sd x {f:g} (control)", wrong)
    if "--mcmc" in sys.argv:
        from test_sbc_jumps import _mcmc_ranks, _quick_settings

        print("SBC, exact records through the sampler (40 simulations, 49 draws, 5 bins):")
        truth, draws = _mcmc_ranks(40, 49, seed=31, settings=_quick_settings(), use_fit=False)
        _show("posterior as sampled", uniformity(ranks(truth, draws), 49, 5))
        for f, wrong in control_results(truth, draws, 49, 5).items():
            _show(f"posterior sd x {f:g} (control)", wrong)
    if "--mcmc" in sys.argv:
        import warnings

        from test_sbc_probes_ringdown import _quick_settings as ring_settings
        from test_sbc_probes_ringdown import _ringdown_ranks

        print("SBC, power ring-downs through fit_ringdown (40 simulations, 49 draws, 5 bins):")
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            truth, draws = _ringdown_ranks(40, 49, seed=61, settings=ring_settings())
        _show("posterior as sampled", uniformity(ranks(truth, draws), 49, 5))
        for f, wrong in control_results(truth, draws, 49, 5).items():
            _show(f"posterior sd x {f:g} (control)", wrong)
        print(f"  ({len(caught)} warnings from the fits: "
              + "; ".join(sorted({str(w.message)[:60] for w in caught})) + ")")
    print("Efficiency: exact posterior sd / Cramér–Rao bound (T_c, n_th):")
    for n, dur in ((0.01, 200.0), (0.05, 50.0), (0.5, 5.0)):
        rng = np.random.default_rng(3)
        st = record_statistics(1.2e-3, n, dur, rng)
        d, w = log_uniform_posterior(st, rng, 40_000)
        sd = np.sqrt(w @ (d - w @ d) ** 2)
        r = sd / _bound(1.2e-3, n, dur)
        print(f"  n_th = {n:<5} {dur:>5.0f} s, {st.up + st.down:>5} jumps: {r[0]:.3f}, {r[1]:.3f}")
    if "--no-coverage" in sys.argv:
        return
    print("Coverage at T_c = 1.2 ms, n_th = 0.05 (68% T_c, 68% n_th, 95% T_c, 95% n_th):")
    for dur, m in ((0.02, 3000), (0.05, 3000), (0.2, 3000), (1.0, 3000), (12.0, 3000)):
        jumps = 2 * 0.05 * 1.05 / 1.2e-3 * dur
        c = coverage(dur, m, seed=7)
        print(f"  {dur:>5} s (~{jumps:6.0f} jumps, {m} records): "
              f"{100 * c[0, 0]:.1f} {100 * c[0, 1]:.1f} {100 * c[1, 0]:.1f} {100 * c[1, 1]:.1f}")


if __name__ == "__main__":
    main()
