"""Benchmark: the shared sampler driver against bare emcee, same run.

Run: ``python tests/benchmarks/bench_sampler.py [--repeats 3]``.

Target (inference layer): a cheap 2-parameter posterior reaches >= 4000 effective
draws (bulk and tail ESS, Vehtari et al. 2021) in about 1-2 s, and the driver
(MAP fit, start ball, convergence checks, priors and transforms in every call)
adds little to emcee's own cost.  The peer is a bare ``emcee.EnsembleSampler``
with the same walkers, moves and number of steps on the same log density with
its bounds written inline.  Prints medians of repeats and the ratio.
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np

MU = np.array([1.0, -2.0])
ICOV = np.linalg.inv(np.array([[1.0, 0.8], [0.8, 2.0]]))


def gauss(x: np.ndarray) -> np.ndarray:
    d = x - MU
    return -0.5 * np.einsum("ki,ij,kj->k", d, ICOV, d)


def lifetime_like(x: np.ndarray) -> np.ndarray:
    # an invented log-normal-shaped posterior of (T_c, n_th), both sampled in log space
    return (-0.5 * (np.log(x[:, 0] / 2.5e-3) / 0.02) ** 2
            - 0.5 * (np.log(x[:, 1] / 0.04) / 0.15) ** 2)


def run_driver(case: str, moves: str, seed: int):
    from cavchar.inference import SamplerSettings, sample_posterior
    from cavchar.parameters import ParameterSpec
    from cavchar.priors import LogUniform, Uniform

    if case == "gauss":
        specs = [ParameterSpec("a", "", "a", Uniform(-50, 50)),
                 ParameterSpec("b", "", "b", Uniform(-50, 50))]
        loglike, guess = gauss, [0.5, 0.5]
    else:
        specs = [ParameterSpec("lifetime", "s", "T_c", LogUniform(1e-6, 10), log_scale=True),
                 ParameterSpec("n_thermal", "", "n_th", LogUniform(1e-6, 10), log_scale=True)]
        loglike, guess = lifetime_like, [1e-3, 0.01]
    start = time.perf_counter()
    run = sample_posterior(loglike, specs, guess,
                           SamplerSettings(seed=seed, quiet=True, moves=moves, target_ess=4000))
    elapsed = time.perf_counter() - start
    d = run.diagnostics
    ess = min(min(d["ess_bulk"].values()), min(d["ess_tail"].values()))
    return elapsed, d["n_steps"], ess


def run_bare_emcee(n_steps: int, moves: str, seed: int) -> float:
    import emcee

    def logp(x):
        inside = np.all(np.abs(x) <= 50, axis=1)
        return np.where(inside, gauss(x), -np.inf)

    move = {"de": emcee.moves.DEMove(), "stretch": None}[moves]
    sampler = emcee.EnsembleSampler(32, 2, logp, vectorize=True, moves=move)
    p0 = MU + 0.1 * np.random.default_rng(seed).standard_normal((32, 2))
    start = time.perf_counter()
    sampler.run_mcmc(p0, n_steps, progress=False)
    return time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    print(f"{'case':<10} {'moves':<8} {'steps':>6} {'min ESS':>8} {'driver s':>9} "
          f"{'emcee s':>8} {'ratio':>6} {'s per 4000 ESS':>15}")
    for case, moves in (("gauss", "de"), ("gauss", "stretch"), ("lifetime", "de")):
        results = [run_driver(case, moves, seed) for seed in range(1, args.repeats + 1)]
        t_driver = statistics.median(r[0] for r in results)
        steps = int(statistics.median(r[1] for r in results))
        ess = statistics.median(r[2] for r in results)
        peer_moves = moves if moves in ("de", "stretch") else "de"
        t_bare = statistics.median(run_bare_emcee(steps, peer_moves, s)
                                   for s in range(1, args.repeats + 1))
        per_4000 = t_driver * 4000 / ess
        print(f"{case:<10} {moves:<8} {steps:>6} {ess:>8.0f} {t_driver:>9.2f} {t_bare:>8.2f} "
              f"{t_driver / t_bare:>6.2f} {per_4000:>15.2f}")
    print("ratio = driver wall time / bare emcee for the same number of steps (median of "
          f"{args.repeats}); target: >= 4000 ESS in about 1-2 s")


if __name__ == "__main__":
    main()
