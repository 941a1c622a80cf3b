"""Compare two cooldowns of one cavity through the cooldown log (invented demo data).

Simulates the jump records of the demo's cooldowns 2031-A and 2031-B (cavity
"Kestrel", invented: see examples/README.md), fits both, logs them in a fresh
SQLite log and asks how likely it is that the lifetime fell by more than 10 %.

    python examples/compare_cooldowns.py
"""

from __future__ import annotations

import tempfile
from pathlib import Path

from cavchar import (
    DEMO_SCENARIO,
    SamplerSettings,
    cooldown_trend,
    fit_jumps,
    log_fit_result,
    open_log,
    probability_text,
    simulate_jump_record,
)


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        log_path = Path(tmp) / "lab.sqlite"
        with open_log(log_path) as log:
            log.add_cavity(DEMO_SCENARIO.cavity, freq_hz=DEMO_SCENARIO.freq_hz)
            for plan in DEMO_SCENARIO.cooldowns[:2]:
                log.add_cooldown(plan.label, start_date=plan.start_date,
                                 stage_temp_k=plan.stage_temp_k, notes=plan.note)
        for seed, plan in enumerate(DEMO_SCENARIO.cooldowns[:2], start=21):
            record = simulate_jump_record(plan.lifetime_s, DEMO_SCENARIO.n_thermal(plan), 600.0,
                                          seed=seed)
            result = fit_jumps(record, freq_hz=DEMO_SCENARIO.freq_hz,
                               stage_temp_k=plan.stage_temp_k,
                               settings=SamplerSettings(seed=seed, quiet=True))
            log_fit_result(result, DEMO_SCENARIO.cavity, plan.label, log_path)
            print(f"{plan.label} ({plan.note}): true T_c = {plan.lifetime_s * 1e3:.1f} ms")
            print(f"  {result.one_line('lifetime')}")
            print(f"  {result.one_line('n_thermal')}")
        with open_log(log_path) as log:
            trend = cooldown_trend(log, DEMO_SCENARIO.cavity, reference="2031-A", fraction=0.1)
        for row in trend.rows:
            life = row.stats["lifetime"]
            line = (f"{row.cooldown}: T_c median {life.median * 1e3:.1f} ms, "
                    f"95% [{life.lo95 * 1e3:.1f}, {life.hi95 * 1e3:.1f}] ms")
            if row.drop_probability is not None:
                fell = probability_text(row.drop_probability, life.n_draws)
                line += f"; P(fell by > 10% vs 2031-A): {fell}"
            print(line)


if __name__ == "__main__":
    main()
