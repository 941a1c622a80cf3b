"""Benchmarks of the ring-down fit (power traces).

Run: ``python tests/benchmarks/bench_ringdown.py [--quick]`` (prints medians and ratios).

Targets (ring-down issue):

* least-squares start on a 10^6-sample power trace no slower than
  ``scipy.optimize.curve_fit`` from a good guess on the same data;
* whole posterior (converged, >= 2,000 effective draws) of a 10^6-sample power
  trace < 10 s on 2 cores, of a 10^4-sample trace < 2 s;
* the effect of the compressed exponential sums on the posterior, against a
  brute-force run (every likelihood call a full pass over the data) on a
  smaller trace with the same seed.
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np
from timing import median_time


def _trace(n, seed, lifetime=0.2, amp=3.0, floor=0.1, sigma=0.5, span=1.0):
    rng = np.random.default_rng(seed)
    t = np.arange(n) * (span / n)
    return t, amp * np.exp(-t / lifetime) + floor + rng.normal(0, sigma, n)


def bench_least_squares(n: int, repeats: int) -> float:
    from scipy.optimize import curve_fit

    from cavchar.models.ringdown.least_squares import fit_exponentials

    t, y = _trace(n, 1)

    def model(t, a, r, f):
        return a * np.exp(-r * t) + f

    def ours():
        return fit_exponentials(t, y)

    def peer():  # a good guess: within a few percent of the truth
        return curve_fit(model, t, y, p0=[3.0 * 1.03, 5.0 * 0.97, 0.1 * 1.1])

    ours()  # compile / warm caches
    t_ours, fit = median_time(ours, repeats)
    t_peer, (p, cov) = median_time(peer, repeats)
    dev = np.max(np.abs(fit.params - p) / np.sqrt(np.diag(cov)))
    print(f"least squares, n = {n:.0e}: variable projection {t_ours:.3f} s, curve_fit from a "
          f"good guess {t_peer:.3f} s, ratio curve_fit/ours {t_peer / t_ours:.2f} "
          f"(target >= 1); optima differ by {dev:.1e} sd")
    return t_peer / t_ours


def _posterior(t, y, seed, compress=True):
    from cavchar.inference import SamplerSettings, sample_posterior
    from cavchar.models.ringdown import DecaySeries, PowerDecay
    model = PowerDecay([DecaySeries.from_times(t, y, None)], compress=compress)
    spec = model.specs[0]
    settings = SamplerSettings(seed=seed, quiet=True, target_ess=2000, chunk=200)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = sample_posterior(model.log_likelihood, [spec], model.initial_guess(), settings)
    draws = run.draws[:, 0]
    nuisance = model.draw_nuisance(run.draws, np.random.default_rng(seed))
    return model, run, draws, nuisance


def _fit(t, y, seed):
    import dataclasses

    from cavchar.fits.ringdown import DEFAULT_SETTINGS, fit_ringdown
    from cavchar.records import RingdownTrace

    settings = dataclasses.replace(DEFAULT_SETTINGS, quiet=True)  # target ESS 2000
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return fit_ringdown(RingdownTrace(t, y, "power"), settings=settings, seed=seed)


def bench_posterior(n: int, repeats: int, target: float) -> float:
    """The whole user path: read checks, least squares, posterior, nuisance draws,
    derived quantities, residual diagnostics, the two-exponential comparison."""
    t, y = _trace(n, 2)
    _fit(*_trace(30_000, 3), seed=1)  # compile the kernels (short and long paths) once
    elapsed, result = median_time(lambda: _fit(t, y, seed=4), repeats)
    d = result.diagnostics
    draws = result.samples["lifetime"]
    print(f"whole posterior (fit_ringdown), n = {n:.0e}: {elapsed:.2f} s (target < {target:g} "
          f"s), {d['n_steps']} steps x {d['n_walkers']} walkers, {d['n_draws']} draws, bulk ESS "
          f"{d['ess_bulk']['lifetime']:.0f}, tail ESS {d['ess_tail']['lifetime']:.0f}, "
          f"converged {result.converged}, sampler {d['elapsed_s']:.2f} s; T_c = "
          f"{draws.median() * 1e3:.4f} ms +- {draws.std() * 1e3:.4f} ms; compression "
          f"{result.checks['compression']}")
    return elapsed


def bench_against_brute_force(n: int) -> None:
    t, y = _trace(n, 5)
    t0 = time.perf_counter()
    fast_model, fast_run, fast, _ = _posterior(t, y, seed=7, compress=True)
    t_fast = time.perf_counter() - t0
    t0 = time.perf_counter()
    slow_model, slow_run, slow, _ = _posterior(t, y, seed=7, compress=False)
    t_slow = time.perf_counter() - t0
    sd = np.std(slow)
    qs = [0.025, 0.16, 0.5, 0.84, 0.975]
    dq = np.max(np.abs(np.quantile(fast, qs) - np.quantile(slow, qs))) / sd
    theta = fast_run.draws[:: max(1, fast_run.draws.shape[0] // 500)]
    dll = np.max(np.abs(fast_model.log_likelihood(theta)
                        - fast_model.log_likelihood(theta, direct=True)))
    k = np.full((16, 1), np.median(fast))
    e_fast, _ = median_time(lambda: fast_model.log_likelihood(k), 50)
    e_slow, _ = median_time(lambda: slow_model.log_likelihood(k), 5)
    # a log-density perturbed by at most d changes every posterior probability by a
    # factor within exp(+-2 d)
    ess = min(fast_run.diagnostics["ess_bulk"]["lifetime"],
              slow_run.diagnostics["ess_bulk"]["lifetime"])
    print(f"compressed vs brute force, n = {n:.0e}, same seed: max |d ln L| over the draws "
          f"{dll:.1e}, so posterior probabilities agree within a factor exp(+-{2 * dll:.1e}); "
          f"largest quantile shift (2.5..97.5%) {dq:.1e} posterior sd (Monte Carlo error "
          f"~{1.5 / np.sqrt(ess):.1e} sd); run {t_fast:.2f} s vs {t_slow:.2f} s; one call "
          f"(16 walkers) "
          f"{e_fast * 1e6:.0f} us vs {e_slow * 1e3:.2f} ms, ratio {e_slow / e_fast:.0f}x")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true", help="fewer repeats")
    args = parser.parse_args()
    repeats = 3 if args.quick else 5
    bench_least_squares(10**6, repeats)
    bench_posterior(10**4, repeats, 2.0)
    bench_posterior(10**6, max(1, repeats // 2), 10.0)
    bench_against_brute_force(10**4)


if __name__ == "__main__":
    main()
