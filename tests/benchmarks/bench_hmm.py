"""Benchmark: probe-record forward log-likelihood, cavchar kernels vs hmmlearn, same run.

Run: ``python tests/benchmarks/bench_hmm.py [--probes 1000000] [--levels 8]``.

Targets (probe-record issue): 10^6 binary probes, 8 levels, exact
log-likelihood at least 4x faster per parameter set than hmmlearn's
``CategoricalHMM.score`` (scaling implementation); peak memory of a whole
likelihood + forward-backward + Viterbi pass on 10^6 probes below 1 GB.
Prints medians of repeats and the ratios.  Both sides agree to 1e-8 relative
(checked here too).
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys

import numpy as np
from timing import median_seconds, peak_rss_mb


def make_case(n_probes: int, n_levels: int, k: int, seed: int = 1):
    from cavchar.dynamics import stationary_distribution, transition_matrices_batch
    from cavchar.models.probes import hmm_kernels as hk

    rng = np.random.default_rng(seed)
    dt = 1e-4
    kappa = np.linspace(9.0, 11.0, k)  # T_c near 0.1 s, invented scenario
    n_th = np.linspace(0.25, 0.35, k)
    trans = transition_matrices_batch(kappa, n_th, n_levels, [dt])[:, 0]
    p0 = np.stack([stationary_distribution(x, n_levels) for x in n_th])
    p1 = 0.5 * (1 + 0.8 * np.cos(np.pi * np.arange(n_levels)))[None]  # parity probe, V = 0.8
    y = rng.integers(0, 2, n_probes)
    return dict(hk=hk, kappa=kappa, n_th=n_th, trans=trans, p0=p0, p1=p1, y=y, dt=dt,
                seq=hk.ProbeSequence.from_outcomes(y), emis=hk.emission_table(p1))


def memory_child(n_probes: int, n_levels: int) -> None:
    """Run in a fresh process: likelihood (32 sets), marginals and Viterbi; print peak RSS."""
    import cavchar.models.probes.hmm_kernels  # noqa: F401  (libraries loaded before the baseline)

    base_mb = peak_rss_mb()
    c = make_case(n_probes, n_levels, 32)
    hk = c["hk"]
    tr = hk.Transitions.regular(c["trans"])
    hk.forward_loglik(tr, c["p0"], c["emis"], c["seq"])
    one = tr.select(0)
    post, _ = hk.posterior_marginals(one, c["p0"][0], c["emis"][0], c["seq"])
    path, _ = hk.viterbi(one, c["p0"][0], c["emis"][0], c["seq"])
    r, lam, left = hk.eigen_parts(c["kappa"], c["n_th"], n_levels)
    dts = np.random.default_rng(2).exponential(c["dt"], n_probes)
    hk.forward_loglik(hk.Transitions.eigen(r, lam, left, dts), c["p0"], c["emis"], c["seq"])
    peak_mb = peak_rss_mb()
    print(json.dumps({"peak_mb": peak_mb, "base_mb": base_mb,
                      "mean_n": float((post @ np.arange(n_levels)).mean()),
                      "path_max": int(path.max())}))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawTextHelpFormatter)
    ap.add_argument("--probes", type=int, default=1_000_000)
    ap.add_argument("--levels", type=int, default=8)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--memory-child", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.memory_child:
        memory_child(args.probes, args.levels)
        return
    import numba
    from hmmlearn.hmm import CategoricalHMM

    t, n = args.probes, args.levels
    c = make_case(t, n, 32)
    hk = c["hk"]
    ref = CategoricalHMM(n_components=n, n_features=2, init_params="", implementation="scaling")
    ref.startprob_, ref.transmat_ = c["p0"][0], c["trans"][0]
    ref.emissionprob_ = np.column_stack([1 - c["p1"][0], c["p1"][0]])
    x = c["y"][:, None]
    expected = ref.score(x)
    t_ref = median_seconds(lambda: ref.score(x), args.repeats)

    print(f"{t} probes, {n} levels, {numba.get_num_threads()} numba threads")
    print(f"hmmlearn CategoricalHMM.score (scaling): {t_ref * 1e3:8.1f} ms "
          f"= {t_ref / t * 1e9:6.1f} ns/probe")
    tr_all = hk.Transitions.regular(c["trans"])
    r, lam, left = hk.eigen_parts(c["kappa"], c["n_th"], n)
    dts = np.random.default_rng(3).exponential(c["dt"], t)
    rows = []
    for k in (1, 16, 32):
        sl = slice(0, k)
        tr = hk.Transitions.regular(c["trans"][sl])
        got = hk.forward_loglik(tr, c["p0"][sl], c["emis"], c["seq"])  # compile / warm
        assert abs(got[0] / expected - 1) < 1e-8, (got[0], expected)
        per_set = median_seconds(lambda tr=tr, sl=sl: hk.forward_loglik(
            tr, c["p0"][sl], c["emis"], c["seq"]), args.repeats) / k
        rows.append(("regular, unrolled", k, per_set))
    per_set = median_seconds(lambda: hk.forward_loglik(tr_all, c["p0"], c["emis"], c["seq"],
                                                    unrolled=False), 3) / 32
    rows.append(("regular, loop kernel", 32, per_set))
    tre = hk.Transitions.eigen(r, lam, left, dts)
    hk.forward_loglik(tre, c["p0"], c["emis"], c["seq"])
    per_set = median_seconds(lambda: hk.forward_loglik(tre, c["p0"], c["emis"], c["seq"]), 3) / 32
    rows.append(("irregular (eigen), unrolled", 32, per_set))
    for name, k, per_set in rows:
        print(f"cavchar {name:30s} k={k:2d}: {per_set * 1e3:8.2f} ms/set "
              f"= {per_set / t * 1e9:6.2f} ns/probe/set, ratio vs hmmlearn {t_ref / per_set:5.1f}x")
    best = min(p for name, k, p in rows if name == "regular, unrolled" and k == 32)
    print(f"RESULT exact log-likelihood speed-up (k = 32): {t_ref / best:.1f}x (target >= 4x)")

    one = tr_all.select(0)
    t_fb = median_seconds(
        lambda: hk.posterior_marginals(one, c["p0"][0], c["emis"][0], c["seq"]), 3)
    t_vi = median_seconds(lambda: hk.viterbi(one, c["p0"][0], c["emis"][0], c["seq"]), 3)
    print(f"forward-backward marginals: {t_fb * 1e3:.1f} ms; Viterbi: {t_vi * 1e3:.1f} ms "
          f"(hmmlearn predict_proba/decode for comparison: ", end="")
    t_pp = median_seconds(lambda: ref.predict_proba(x), 1)
    t_de = median_seconds(lambda: ref.decode(x), 1)
    print(f"{t_pp * 1e3:.1f} ms / {t_de * 1e3:.1f} ms)")

    out = subprocess.run([sys.executable, __file__, "--memory-child", "--probes", str(t),
                          "--levels", str(n)], capture_output=True, text=True, check=True)
    mem = json.loads(out.stdout.strip().splitlines()[-1])
    print(f"RESULT peak memory (likelihood of 32 sets, regular and irregular, marginals, "
          f"Viterbi; fresh process): {mem['peak_mb']:.0f} MB, of which "
          f"{mem['base_mb']:.0f} MB libraries before any data (target < 1024 MB)")


if __name__ == "__main__":
    main()
