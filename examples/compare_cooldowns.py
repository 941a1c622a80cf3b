"""Compare two cooldowns of one cavity through the cooldown log (invented demo data).

Simulates the jump records of the demo's cooldowns 2031-A and 2031-B (cavity
"Kestrel", invented: see examples/README.md), fits both, logs them in a fresh
SQLite log and asks how likely it is that the lifetime fell by more than 10 %.

    python examples/compare_cooldowns.py
"""

from __future__ import annotations

import tempfile
from pathlib import Path

from cavchar.demo.scenario import SCENARIO
from cavchar.fits.jumps import fit_jumps
from cavchar.inference import SamplerSettings
from cavchar.simulate import simulate_jump_record
from cavchar.tracking import cooldown_trend, log_fit_result, open_log


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        log_path = Path(tmp) / "lab.sqlite"
        with open_log(log_path) as log:
            log.add_cavity(SCENARIO.cavity, freq_hz=SCENARIO.freq_hz)
            for plan in SCENARIO.cooldowns[:2]:
                log.add_cooldown(plan.label, start_date=plan.start_date,
                                 stage_temp_k=plan.stage_temp_k, notes=plan.note)
        for seed, plan in enumerate(SCENARIO.cooldowns[:2], start=21):
            record = simulate_jump_record(plan.lifetime_s, SCENARIO.n_thermal(plan), 600.0,
                                          seed=seed)
            result = fit_jumps(record, freq_hz=SCENARIO.freq_hz,
                               stage_temp_k=plan.stage_temp_k,
                               settings=SamplerSettings(seed=seed, quiet=True))
            log_fit_result(result, SCENARIO.cavity, plan.label, log_path)
            print(f"{plan.label} ({plan.note}): true T_c = {plan.lifetime_s * 1e3:.1f} ms")
            print(f"  {result.one_line('lifetime')}")
            print(f"  {result.one_line('n_thermal')}")
        with open_log(log_path) as log:
            trend = cooldown_trend(log, SCENARIO.cavity, reference="2031-A", fraction=0.1)
        for row in trend.rows:
            life = row.stats["lifetime"]
            line = (f"{row.cooldown}: T_c median {life.median * 1e3:.1f} ms, "
                    f"95% [{life.low_95 * 1e3:.1f}, {life.high_95 * 1e3:.1f}] ms")
            if row.drop_probability is not None:
                line += (f"; P(fell by > 10% vs 2031-A) = {row.drop_probability:.3f} "
                         f"± {row.drop_mc_error:.3f}")
            print(line)


if __name__ == "__main__":
    main()
