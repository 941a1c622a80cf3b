"""Fit one photon-number jump record with the Python API (invented demo data).

Simulates the jump record of the demo's first cooldown (cavity "Kestrel",
an invented cavity: see examples/README.md) at a fixed seed, writes it as a
CSV file, fits it and prints the results; with a folder argument it also
writes the result JSON and an HTML report there.

    python examples/fit_a_record.py            # prints the summary
    python examples/fit_a_record.py out/       # ... and writes out/result.json, out/report.html
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

from cavchar import (
    DEMO_SCENARIO,
    SamplerSettings,
    fit_jumps,
    probability_text,
    simulate_jump_record,
    write_jump_record,
)


def main(out_dir: str | None = None) -> None:
    plan = DEMO_SCENARIO.cooldown("2031-A")
    n_th = DEMO_SCENARIO.n_thermal(plan)
    record = simulate_jump_record(plan.lifetime_s, n_th, 600.0, seed=7)
    with tempfile.TemporaryDirectory() as tmp:
        path = write_jump_record(record, Path(tmp) / "jumps.csv")
        result = fit_jumps(path, freq_hz=DEMO_SCENARIO.freq_hz, stage_temp_k=plan.stage_temp_k,
                           settings=SamplerSettings(seed=1, quiet=True))
    print(f"record: {record.n_jumps} jumps in {record.observed_time:.0f} s")
    print(f"true values: T_c = {plan.lifetime_s * 1e3:.1f} ms, n_th = {n_th:.3f}")
    for name in ("lifetime", "quality_factor", "linewidth", "n_thermal",
                 "effective_temperature"):
        print(result.one_line(name))
    planck = result.planck
    p_hot = probability_text(planck.prob_hotter_than_stage, planck.n_draws)
    print(f"P(mode hotter than its {plan.stage_temp_k * 1e3:.0f} mK stage): {p_hot} "
          f"({planck.verdict})")
    dwell = result.checks["dwell_times"]
    print(f"dwell-time check: misfit = {dwell['misfit']}")
    print(f"converged: {result.converged}")
    if out_dir is not None:
        from cavchar.report import write_report

        out = Path(out_dir)
        result.to_json(out / "result.json", force=True)
        write_report([result], out / "report.html", force=True,
                     truths=[{"lifetime": plan.lifetime_s, "n_thermal": n_th}])
        print(f"wrote {out / 'result.json'} and {out / 'report.html'}")


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else None)
