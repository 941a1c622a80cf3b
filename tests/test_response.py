"""Probe response models (cavchar.models.probes.response).

Checks against the closed form of a Ramsey fringe (written out by hand here)
and its textbook limits: a parity probe (phi0 = pi, V = 1) reads 1 for even and
0 for odd photon numbers; readout errors e0, e1 turn these into 1 - e1 and e0.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from cavchar.errors import InputError
from cavchar.models.probes.response import FringeResponse, TableResponse
from cavchar.priors import Uniform


def test_parity_probe_limits():
    r = FringeResponse(visibility=1.0, phase_per_photon=math.pi)
    p, ok = r.prob_one(None, 6)
    assert ok.all()
    np.testing.assert_allclose(p[0, 0], [1, 0, 1, 0, 1, 0], atol=1e-15)
    r = FringeResponse(visibility=1.0, phase_per_photon=math.pi, readout_error_0=0.03,
                       readout_error_1=0.08)
    p, _ = r.prob_one(None, 4)
    np.testing.assert_allclose(p[0, 0], [0.92, 0.03, 0.92, 0.03], atol=1e-15)


def test_fringe_equation_with_settings_and_free_parameters():
    r = FringeResponse(visibility=Uniform(0, 1), phase_per_photon=0.7,
                       phase_offset=Uniform(-4, 4), readout_error_0=0.02, readout_error_1=0.05)
    assert r.free_names == ("visibility", "phase_offset")
    assert [s.name for s in r.parameter_specs()] == ["visibility", "phase_offset"]
    free = np.array([[0.8, 0.3], [0.4, -1.0]])
    settings = np.array([0.0, math.pi / 2])
    p, ok = r.prob_one(free, 5, settings)
    assert p.shape == (2, 2, 5) and ok.all()
    for k in range(2):
        for j, s in enumerate(settings):
            for n in range(5):
                ideal = (1 + free[k, 0] * math.cos(0.7 * n + free[k, 1] + s)) / 2
                assert p[k, j, n] == pytest.approx(0.02 + (1 - 0.07) * ideal, abs=1e-15)


def test_fringe_support_mask():
    r = FringeResponse(visibility=Uniform(-1, 2), readout_error_0=Uniform(0, 1),
                       readout_error_1=0.4)
    _, ok = r.prob_one(np.array([[0.5, 0.1], [1.2, 0.1], [-0.1, 0.1], [0.5, 0.7],
                                 [np.nan, 0.1]]), 3)
    np.testing.assert_array_equal(ok, [True, False, False, False, False])


def test_fixed_values_are_checked():
    with pytest.raises(InputError, match="visibility"):
        FringeResponse(visibility=1.5)
    with pytest.raises(InputError, match="e0 \\+ e1"):
        FringeResponse(readout_error_0=0.6, readout_error_1=0.5)
    with pytest.raises(InputError):
        FringeResponse(phase_per_photon="fast")


def test_table_coverage_names_missing_photon_numbers_and_settings(tmp_path):
    path = tmp_path / "resp.csv"
    rows = ["photons,p_one,setting"]
    for s in (0.0, 1.5):
        for n, p in enumerate([0.9, 0.2, 0.8, 0.3]):
            rows.append(f"{n},{p},{s}")
    path.write_text("\n".join(rows) + "\n")
    table = TableResponse.from_file(path)
    assert table.max_photons == 3
    p, ok = table.prob_one(None, 4, [1.5, 0.0])
    np.testing.assert_allclose(p[0], [[0.9, 0.2, 0.8, 0.3]] * 2)
    with pytest.raises(InputError, match="missing photon numbers: 4, 5") as err:
        table.prob_one(None, 6, [0.0])
    assert str(path) in str(err.value)
    with pytest.raises(InputError, match="setting\\(s\\) 0.7 rad"):
        table.check_coverage(3, [0.0, 0.7])


def test_table_without_setting_applies_to_every_setting():
    table = TableResponse(np.array([0.95, 0.1, 0.9]))
    p, _ = table.prob_one(np.zeros((3, 0)), 3, [0.0, 2.0])
    assert p.shape == (3, 2, 3)
    np.testing.assert_allclose(p[2, 1], [0.95, 0.1, 0.9])
    with pytest.raises(InputError):
        TableResponse(np.array([0.5, 1.2]))
