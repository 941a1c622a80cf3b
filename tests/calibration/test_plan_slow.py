"""Full forms of the planner checks that are too long for CI (run with -m slow)."""

from __future__ import annotations

import pytest


@pytest.mark.slow
def test_probe_forecast_matches_the_simulated_spread_full():
    # source: Cramér–Rao bound reached by maximum likelihood (Casella & Berger ch. 10);
    # 200 simulated probe records: relative Monte Carlo error of the spread 5%, and of the
    # information estimate (8 records of 100000 probes) about 1%, so 15% is ~3 errors
    from cavchar.models.probes.response import FringeResponse
    from cavchar.plan.forecast import plan_probes

    response = FringeResponse(visibility=0.9, readout_error_0=0.02, readout_error_1=0.04)
    table = plan_probes(1e-3, 0.1, 0.3e-3, response, target_lifetime=0.1, check_records=200,
                        information_records=8, max_information_probes=800_000, seed=18)
    rows = table.set_index("quantity")
    print(rows[["expected_relative_sd", "simulated_to_expected", "simulated_sd_error"]])
    for name in ("lifetime", "n_thermal"):
        assert abs(rows.loc[name, "simulated_to_expected"] - 1) < 0.15, name
