"""Benchmark: whole probe-record fits (converged, calibrated response, 2 free parameters).

Run: ``python tests/benchmarks/bench_fit_probes.py [--walkers 32] [--only exact|coarse]``.

Targets (probe-record issue): 2x10^5 probes in the exact mode < 300 s; 10^6
probes < 120 s (here with the coarse mode, whose bias is measured against the
exact likelihood on posterior draws and printed in posterior sd, < 0.2);
peak memory of the 10^6-probe fit < 1 GB.

Peer in the same run: hmmlearn's ``CategoricalHMM.score`` (scaling
implementation) timed on the same record; multiplied by the number of
likelihood evaluations the fit made, it prices the same fit with hmmlearn as
the likelihood.  Invented scenario: T_c = 80 ms, n_th = 0.15, parity probe
(V = 0.9, readout errors 0.02 / 0.03) every 100 us.
"""

from __future__ import annotations

import argparse
import json
import math
import subprocess
import sys
import time

import numpy as np
from timing import median_seconds, peak_rss_mb

LIFETIME, N_TH, INTERVAL = 0.08, 0.15, 1e-4
RESPONSE = dict(visibility=0.9, phase_per_photon=math.pi, readout_error_0=0.02,
                readout_error_1=0.03)


def make_record(n_probes: int, seed: int = 1):
    from cavchar.models.probes.response import FringeResponse
    from cavchar.simulate import simulate_probe_record

    resp = FringeResponse(**RESPONSE)
    rec, _ = simulate_probe_record(LIFETIME, N_TH, INTERVAL * np.arange(n_probes), resp,
                                   seed=seed)
    return rec, resp


def hmmlearn_score_time(rec, n_levels: int, repeats: int = 3) -> float:
    from hmmlearn.hmm import CategoricalHMM

    from cavchar.dynamics import stationary_distribution, transition_matrices_batch
    from cavchar.models.probes.response import FringeResponse

    p1 = FringeResponse(**RESPONSE).prob_one(None, n_levels)[0][0, 0]
    ref = CategoricalHMM(n_components=n_levels, n_features=2, init_params="",
                         implementation="scaling")
    ref.startprob_ = stationary_distribution(N_TH, n_levels)
    ref.transmat_ = transition_matrices_batch([1 / LIFETIME], [N_TH], n_levels, [INTERVAL])[0, 0]
    ref.emissionprob_ = np.column_stack([1 - p1, p1])
    x = rec.outcome.astype(int)[:, None]
    return median_seconds(lambda: ref.score(x), repeats)


def run_fit(n_probes: int, mode: str, walkers: int) -> dict:
    """One fit in this process; returns timings, result numbers and peak memory."""
    import warnings

    from cavchar.fits.probes import fit_probes
    from cavchar.inference import SamplerSettings
    from cavchar.models.probes import likelihood as probes_model

    rec, resp = make_record(n_probes)
    calls = {"sets": 0}
    original = probes_model.ProbeLikelihood.evaluate

    def counting(self, theta, forward):
        calls["sets"] += int(np.atleast_2d(theta).shape[0])
        return original(self, theta, forward)

    probes_model.ProbeLikelihood.evaluate = counting
    t0 = time.perf_counter()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = fit_probes(rec, response=resp, seed=1, mode=mode,
                            settings=SamplerSettings(n_walkers=walkers, quiet=True))
    elapsed = time.perf_counter() - t0
    probes_model.ProbeLikelihood.evaluate = original
    summary = result.summary()
    out = {
        "probes": n_probes, "mode": result.settings["fit"]["mode"], "walkers": walkers,
        "elapsed_s": elapsed, "sampler_s": result.diagnostics["elapsed_s"],
        "steps": result.diagnostics["n_steps"], "converged": result.converged,
        "evaluated_sets": calls["sets"],
        "levels_99.9%": result.checks["truncation"]["levels_99.9%"],
        "refits": result.checks.get("coarse_refits", []),
        "peak_mb": peak_rss_mb(),
        "warnings": [str(w.message) for w in caught],
    }
    for name, truth in (("lifetime", LIFETIME), ("n_thermal", N_TH)):
        row = summary.loc[name]
        out[name] = {"median": row["median"], "lo95": row["lo95"], "hi95": row["hi95"],
                     "covers": bool(row["lo95"] <= truth <= row["hi95"])}
    if "coarse_bias" in result.checks:
        c = result.checks["coarse_bias"]
        out["coarse"] = {"block_probes": c["block_probes"], "bias_bound_sd": c["bias_bound_sd"],
                         "shift_sd": c["shift_sd"], "weight_ess": c["weight_ess"],
                         "n_checked": c["n_checked"]}
    return out


def child(args) -> None:
    print(json.dumps(run_fit(args.probes, args.mode, args.walkers)))


def report(res: dict, t_hmm: float, target: float) -> None:
    print(f"\n{res['probes']} probes, {res['mode']} mode, {res['walkers']} walkers: "
          f"{res['elapsed_s']:.1f} s total ({res['sampler_s']:.1f} s in the sampler, "
          f"{res['steps']} steps, converged: {res['converged']}), peak memory "
          f"{res['peak_mb']:.0f} MB")
    for name in ("lifetime", "n_thermal"):
        r = res[name]
        print(f"  {name}: median {r['median']:.4g}, 95% [{r['lo95']:.4g}, {r['hi95']:.4g}], "
              f"covers truth: {r['covers']}")
    peer = res["evaluated_sets"] * t_hmm
    print(f"  likelihood evaluations: {res['evaluated_sets']}; the same number with hmmlearn's "
          f"score ({t_hmm * 1e3:.1f} ms each, exact, 8 levels; the fit used up to "
          f"{res['levels_99.9%']}): "
          f"{peer:.0f} s -> ratio {peer / res['elapsed_s']:.1f}x")
    if "coarse" in res:
        c = res["coarse"]
        shifts = ", ".join(f"{k} {v:+.3f}" for k, v in c["shift_sd"].items())
        print(f"  coarse mode: blocks of {c['block_probes']} probes; measured bias (importance-"
              f"weighted exact minus coarse mean, posterior sd): {shifts}; bound "
              f"{c['bias_bound_sd']:.3f} (weights' ESS {c['weight_ess']:.0f} of "
              f"{c['n_checked']}) (target < 0.2)")
        if res["refits"]:
            print(f"  coarse refits with halved blocks after: {res['refits']}")
    print(f"RESULT {res['probes']} probes {res['mode']}: {res['elapsed_s']:.1f} s "
          f"(target < {target:.0f} s), peak {res['peak_mb']:.0f} MB (target < 1024 MB)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawTextHelpFormatter)
    ap.add_argument("--walkers", type=int, default=32)
    ap.add_argument("--only", choices=("exact", "coarse"), default=None)
    ap.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--probes", type=int, default=0, help=argparse.SUPPRESS)
    ap.add_argument("--mode", default="exact", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        child(args)
        return
    cases = [(200_000, "exact", 300.0), (1_000_000, "auto", 120.0)]
    for n, mode, target in cases:
        if args.only and (args.only == "exact") != (mode == "exact"):
            continue
        rec, _ = make_record(n)
        t_hmm = hmmlearn_score_time(rec, 8)
        out = subprocess.run([sys.executable, __file__, "--child", "--probes", str(n), "--mode",
                              mode, "--walkers", str(args.walkers)], capture_output=True,
                             text=True, check=True)
        report(json.loads(out.stdout.strip().splitlines()[-1]), t_hmm, target)


if __name__ == "__main__":
    main()
