"""Benchmark: probe records at irregular (Poisson) times against a regular clock, same run.

Run: ``python tests/benchmarks/bench_irregular_probes.py [--probes 200000] [--sets 32]
[--fit] [--only-quantized]``.

Targets (irregular-probe issue): per-probe cost of the log-likelihood for
Poisson-timed probes within 2x of a regular clock at the same mean spacing
(both exact); whole fit of 2x10^5 Poisson-timed probes < 60 s on a quiet machine.

Per-probe cost: the batched forward pass (``--sets`` parameter sets at once,
the way the sampler calls it) on the same outcomes, timed interleaved
(regular, grid route, eigen route, and the grid route with other base steps:
the options measured to choose ``GRID_SUBSTEPS``), medians of repeats, with
the machine's load average printed beside them.  The routes agree to 1e-9
(checked here).  Invented scenario: T_c = 80 ms, n_th = 0.15, parity probe
(V = 0.9, readout errors 0.02 / 0.03), mean spacing 100 us.

The quantized route (``cavchar.models.probes.quantized``: each interval mapped to one
of K geometric-bin means, the "indexed" kernels) runs at N = 6, 8, 10 and K = 64,
128, 256 beside the regular clock and the grid, with its log-likelihood error against
the grid (offset, and spread over sets as wide as a posterior); ``--only-quantized``
skips the other variants.  ``--fit`` times whole fits in the modes of ``--fit-mode``
(default exact, then quantized).

``--options`` adds the kernel variants of ``grid_variants.py`` (parameter sets
per loop body, series terms per probe, no eigen branch, sets as arrays), each
checked against the kept kernel and timed in the same run.

Measured on the shared 2-core machine (docs/probe-records.md, "Irregular probe
times"): before, regular clock 12.7 ns per probe per set at load 0.9-1.4, grid
route 3.18x, eigen route 5.22x; in the --options run (load 3.4-5.0, N = 8, series
form) the kept grid kernel 3.25x, two sets per loop body 3.91x, four 6.08x,
terms per probe 3.86x, no eigen branch 3.30x, sets as arrays 8.21x: none pays.
The eigen-basis remainder (kept): 2.69x / 3.02x / 2.59x against the series form's
2.74x / 3.14x / 3.32x for N = 6 / 8 / 10 (load 2.5); this benchmark then gave
the grid route 2.92-2.99x (regular 6.6-6.8 ns, load about 2-4).  The 2x target
is not met (scalar floor about 1 + 4K/N for the series, 2 + 5/N in the eigen
basis).  Whole ``cavchar fit probes`` of 2x10^5 Poisson-timed probes: 49.3 s at
load 1.8-2.1 and 94.2 s at load 2.3-3.2 (kernels cached; 81.9 s before the
eigen-basis remainder at load 4.2-4.9, 138.6 s before the trajectory fix at
load 3.2-4.9).

Quantized route (one run, 9 interleaved repeats, load 1.2-1.4; regular clock 4.6 /
6.1 / 9.2 ns for N = 6 / 8 / 10): grid 2.62x / 2.83x / 2.72x; quantized K = 64
1.18x / 1.25x / 1.18x, K = 128 1.21x / 1.27x / 1.21x, K = 256 1.24x / 1.33x / 1.33x
(2.1-2.3x faster than the grid; an earlier run at load 2.1-2.8: 1.13-1.36x).  log L
minus exact: offset +0.51 / +0.26 / +0.25 nats, spread over the sets 8.7e-3 / 4.3e-3 /
1.1e-3 nats for K = 64 / 128 / 256 (57 / 107 / 202 bins used).  Whole fit of 2x10^5
Poisson probes, same session (load 1.4-1.7): exact 20.9 s and 20.3 s (16 s in the
sampler), quantized 13.8 s, 13.9 s and 13.5 s (mode auto) (7.7 s in the sampler), bias
bound 0.00097 posterior sd; medians 0.02 sd apart (Monte Carlo error of two samplings).
The machine was quieter then than for the numbers above.
"""

from __future__ import annotations

import argparse
import math
import os
import statistics
import time

import numpy as np

LIFETIME, N_TH, INTERVAL = 0.08, 0.15, 1e-4
RESPONSE = dict(visibility=0.9, phase_per_photon=math.pi, readout_error_0=0.02,
                readout_error_1=0.03)


def load() -> str:
    return " ".join(f"{x:.1f}" for x in os.getloadavg())


def records(n_probes: int, seed: int = 1):
    """A Poisson-timed record and a regular one with the same mean spacing."""
    from cavchar.models.probes.response import FringeResponse
    from cavchar.simulate import simulate_probe_record

    resp = FringeResponse(**RESPONSE)
    rng = np.random.default_rng(seed)
    poisson = np.cumsum(rng.exponential(INTERVAL, n_probes))
    rec_p, _ = simulate_probe_record(LIFETIME, N_TH, poisson, resp, seed=seed)
    rec_r, _ = simulate_probe_record(LIFETIME, N_TH, INTERVAL * np.arange(n_probes), resp,
                                     seed=seed)
    return rec_p, rec_r, resp


def per_probe(n_probes: int, k: int, repeats: int) -> None:
    from cavchar.models.probes import likelihood as pm

    rec_p, rec_r, resp = records(n_probes)
    theta = np.column_stack([LIFETIME * np.linspace(0.9, 1.1, k), N_TH * np.linspace(0.9, 1.1, k)])
    class Series(pm.ProbeLikelihood):
        """The grid route with its remainder by the uniformization series throughout."""

        def transitions(self, *args):
            pm.EIGEN_GRID = False
            try:
                return super().transitions(*args)
            finally:
                pm.EIGEN_GRID = True

    variants = {"regular clock": pm.ProbeLikelihood(rec_r, resp),
                "Poisson, grid route": pm.ProbeLikelihood(rec_p, resp),
                "Poisson, grid, series only": Series(rec_p, resp),
                "Poisson, eigen route": pm.ProbeLikelihood(rec_p, resp, irregular="eigen")}
    default = pm.GRID_SUBSTEPS
    for sub in (16, 32):
        pm.GRID_SUBSTEPS = sub
        variants[f"Poisson, grid h = mean/{sub}"] = pm.ProbeLikelihood(rec_p, resp)
    pm.GRID_SUBSTEPS = default
    values = {name: like(theta) for name, like in variants.items()}  # compiles, warms up
    ref = values["Poisson, eigen route"]
    for name, v in values.items():
        if name.startswith("Poisson") and not np.allclose(v, ref, rtol=1e-9, atol=0):
            raise SystemExit(f"{name} disagrees with the eigen route: {v - ref}")
    times: dict[str, list[float]] = {name: [] for name in variants}
    print(f"load average before: {load()}")
    for _ in range(repeats):  # interleaved: load changes hit every variant alike
        for name, like in variants.items():
            t0 = time.perf_counter()
            like(theta)
            times[name].append(time.perf_counter() - t0)
    print(f"load average after: {load()}")
    base = statistics.median(times["regular clock"])
    levels = variants["regular clock"].levels_for(theta[:, 0], theta[:, 1])
    print(f"\n{n_probes} probes, {k} parameter sets per call, {levels.min()}-{levels.max()} "
          f"levels, median of {repeats} interleaved repeats:")
    for name, ts in times.items():
        med = statistics.median(ts)
        extra = ""
        like = variants[name]
        if like.steps.kind == "irregular" and like.irregular == "grid":
            tr = like.transitions(1 / theta[:, 0], theta[:, 1], levels)
            how = ("eigen-basis remainder" if tr.eigen_table is not None else
                   f"series terms {tr.terms.min()}-{tr.terms.max()}")
            extra = (f"  (table of {like.steps.steps.size} matrices, {how}, "
                     f"{np.mean(like.steps.step_index < 0):.1e} of the intervals beyond it)")
        print(f"  {name:28s} {med / (n_probes * k) * 1e9:6.1f} ns per probe per set, "
              f"{med / base:4.2f}x regular{extra}")


def kernel_options(n_probes: int, k: int, repeats: int, n_levels: int = 8) -> None:
    """The kernel variants of ``grid_variants.py`` at a fixed truncation, timed interleaved
    beside the regular-clock kernel and the kept grid kernel (same outcomes, same sets)."""
    import sys
    from pathlib import Path

    from cavchar.models.probes import hmm_kernels as hk
    from cavchar.models.probes import likelihood as pm

    sys.path.insert(0, str(Path(__file__).parent))
    import grid_variants as gv

    rec_p, rec_r, resp = records(n_probes)
    theta = np.column_stack([LIFETIME * np.linspace(0.9, 1.1, k), N_TH * np.linspace(0.9, 1.1, k)])
    kappa, n_th, levels = 1 / theta[:, 0], theta[:, 1], np.full(k, n_levels)
    regular, grid = pm.ProbeLikelihood(rec_r, resp), pm.ProbeLikelihood(rec_p, resp)
    saved = pm.GRID_QUANTILE, pm.GRID_MAX_STEPS
    pm.GRID_QUANTILE, pm.GRID_MAX_STEPS = 1.0, 100_000  # a table covering every interval
    full = pm.ProbeLikelihood(rec_p, resp)
    pm.GRID_QUANTILE, pm.GRID_MAX_STEPS = saved
    emis = hk.emission_table(grid.prob_one(None, n_levels, k))
    emis = np.ascontiguousarray(np.broadcast_to(emis, (k,) + emis.shape[1:]))
    p0 = grid.initial_law(n_th, levels)
    offs = np.zeros((k, emis.shape[1]))
    tr_r = regular.transitions(kappa, n_th, levels)
    tr_g = grid.transitions(kappa, n_th, levels)
    tr_f = full.transitions(kappa, n_th, levels)
    seq = grid.sequence
    runs = {"regular clock": lambda: hk.forward_loglik(tr_r, p0, emis, regular.sequence),
            "grid (kept)": lambda: hk.forward_loglik(tr_g, p0, emis, seq),
            "grid (kept), full table": lambda: hk.forward_loglik(tr_f, p0, emis, seq)}

    def variant(tr, lanes=1, **options):
        args, groups = gv.to_lanes(tr, p0, emis, offs, lanes)
        rthr = gv.thresholds(tr.rates)
        out = np.empty((groups, lanes))
        t0 = time.perf_counter()
        fn = gv.build(n_levels, lanes=lanes, **options)
        fn(*args, seq.codes, seq.starts, out, rthr)
        print(f"  compiled {lanes} lane(s) {options or ''} in {time.perf_counter() - t0:.0f} s")
        return lambda: (fn(*args, seq.codes, seq.starts, out, rthr), out.reshape(-1)[:k])[1]

    runs["2 sets per loop body"] = variant(tr_g, lanes=2)
    runs["4 sets per loop body"] = variant(tr_g, lanes=4)
    runs["terms per probe"] = variant(tr_g, per_probe_terms=True)
    runs["no eigen branch, full table"] = variant(tr_f, no_eigen=True)
    args4, groups4 = gv.to_lanes(tr_f, p0, emis, offs, 4)
    out4 = np.empty((groups4, 4))

    def loop4():
        gv.loop_lanes4(*args4[:6], *args4[10:], seq.codes, seq.starts, out4)
        return out4.reshape(-1)[:k]

    runs["4 sets as arrays, full table"] = loop4
    ref = runs["grid (kept)"]()
    for name, fn in runs.items():
        if name != "regular clock" and not np.allclose(fn(), ref, rtol=1e-11, atol=0):
            raise SystemExit(f"{name} disagrees with the kept grid kernel")
    times: dict[str, list[float]] = {name: [] for name in runs}
    before = load()
    for _ in range(repeats):
        for name, fn in runs.items():
            t0 = time.perf_counter()
            fn()
            times[name].append(time.perf_counter() - t0)
    base = statistics.median(times["regular clock"])
    print(f"\nkernel options, N = {n_levels}, {n_probes} probes, {k} sets, median of {repeats} "
          f"interleaved repeats; load average {before} before, {load()} after "
          f"(series terms {tr_g.terms.min()}-{tr_g.terms.max()}, table {tr_g.matrices.shape[1]} "
          f"matrices, full table {tr_f.matrices.shape[1]}):")
    for name, ts in times.items():
        med = statistics.median(ts)
        print(f"  {name:30s} {med / (n_probes * k) * 1e9:6.1f} ns per probe per set, "
              f"{med / base:4.2f}x regular")


def quantized(n_probes: int, k: int, repeats: int, bins=(64, 128, 256),
              levels=(6, 8, 10)) -> None:
    """The interval-quantized route (``cavchar.models.probes.quantized``) at fixed truncations,
    timed interleaved with the regular clock and the exact grid route (same outcomes, same
    sets), and its log-likelihood error against the exact grid route: the mean offset (the
    same for every set, no effect on the posterior) and its spread over parameter sets as
    wide as the posterior of the whole fit (T_c 0.7-1.5x, n_th 0.6-1.8x the truth: the
    spread is what can shift the posterior)."""
    from cavchar.models.probes import likelihood as pm
    from cavchar.models.probes.quantized import QuantizedProbeLikelihood

    rec_p, rec_r, resp = records(n_probes)
    theta = np.column_stack([LIFETIME * np.linspace(0.9, 1.1, k), N_TH * np.linspace(0.9, 1.1, k)])
    wide = np.column_stack([LIFETIME * np.linspace(0.7, 1.5, k),
                            N_TH * np.linspace(1.8, 0.6, k)])
    for n in levels:
        runs = {"regular clock": pm.ProbeLikelihood(rec_r, resp, n_levels=n),
                "Poisson, exact grid": pm.ProbeLikelihood(rec_p, resp, n_levels=n)}
        for kb in bins:
            runs[f"Poisson, quantized K = {kb}"] = QuantizedProbeLikelihood(
                runs["Poisson, exact grid"], kb)
        for like in runs.values():
            like(theta)  # compiles, warms up
        ref = runs["Poisson, exact grid"](wide)
        times: dict[str, list[float]] = {name: [] for name in runs}
        before = load()
        for _ in range(repeats):
            for name, like in runs.items():
                t0 = time.perf_counter()
                like(theta)
                times[name].append(time.perf_counter() - t0)
        base = statistics.median(times["regular clock"])
        grid = statistics.median(times["Poisson, exact grid"])
        print(f"\nquantized route, N = {n}, {n_probes} probes, {k} sets, median of {repeats} "
              f"interleaved repeats; load average {before} before, {load()} after:")
        for name, ts in times.items():
            med = statistics.median(ts)
            extra = ""
            if "quantized" in name:
                info = runs[name].info
                d = runs[name](wide) - ref
                extra = (f", {grid / med:4.2f}x faster than the grid; {info['bins']} bins used, "
                         f"edge ratio {info['largest_ratio']:.3f}; log L - exact: offset "
                         f"{d.mean():+.3f}, spread (sd over sets) {d.std():.1e}, range "
                         f"{np.ptp(d):.1e} nats")
            print(f"  {name:28s} {med / (n_probes * k) * 1e9:6.1f} ns per probe per set, "
                  f"{med / base:4.2f}x regular{extra}")


def whole_fit(n_probes: int, walkers: int, mode: str = "exact") -> None:
    from cavchar.fits.probes import fit_probes
    from cavchar.inference import SamplerSettings

    rec_p, _, resp = records(n_probes)
    print(f"\nwhole fit ({mode}), {n_probes} Poisson-timed probes, {walkers} walkers; "
          f"load {load()}")
    t0 = time.perf_counter()
    result = fit_probes(rec_p, response=resp, seed=1, mode=mode,
                        settings=SamplerSettings(n_walkers=walkers, quiet=True))
    elapsed = time.perf_counter() - t0
    diag = result.diagnostics
    print(f"  {elapsed:.1f} s total ({diag.elapsed_s:.1f} s in the sampler "
          f"({diag.sampler}), {diag.n_draws or diag.n_steps} "
          f"draws/steps, converged: {result.converged}); "
          f"load after {load()}")
    bias = result.checks.get("quantize_bias")
    if bias:
        print(f"  quantized route: {bias['bins_used']} bins, bias bound "
              f"{bias['bias_bound_sd']:.2g} posterior sd on {bias['n_checked']} draws")
    summary = result.summary()
    for name, truth in (("lifetime", LIFETIME), ("n_thermal", N_TH)):
        row = summary.loc[name]
        print(f"  {name}: median {row['median']:.4g}, 95% [{row['lo95']:.4g}, "
              f"{row['hi95']:.4g}], truth {truth}")


def main() -> None:
    global N_TH
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--probes", type=int, default=200_000)
    ap.add_argument("--sets", type=int, default=32)
    ap.add_argument("--repeats", type=int, default=7)
    ap.add_argument("--fit", action="store_true", help="also time a whole fit")
    ap.add_argument("--options", action="store_true",
                    help="also time the kernel variants of grid_variants.py (about 4 min of "
                    "compiling)")
    ap.add_argument("--walkers", type=int, default=32)
    ap.add_argument("--fit-mode", default="exact,quantized",
                    help="modes of the whole fit, comma-separated (exact, quantized, auto)")
    ap.add_argument("--only-quantized", action="store_true",
                    help="per-probe part: only the quantized route against the regular clock "
                    "and the grid")
    ap.add_argument("--n-thermal", type=float, default=N_TH,
                    help="thermal photon number of the scenario (more levels: see the docs)")
    args = ap.parse_args()
    N_TH = args.n_thermal
    if not args.only_quantized:
        per_probe(args.probes, args.sets, args.repeats)
    quantized(args.probes, args.sets, args.repeats)
    if args.options:
        kernel_options(args.probes, args.sets, args.repeats)
    if args.fit:
        for mode in args.fit_mode.split(","):
            whole_fit(args.probes, args.walkers, mode.strip())


if __name__ == "__main__":
    main()
