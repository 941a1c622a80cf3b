"""Noise-free ring-down curves: closed forms, Jacobians against finite differences,
the Rice law against scipy.stats.rice, and the initial-state parser."""

import numpy as np
import pytest
from scipy import optimize, stats

from cavchar.decay import initial_distribution, rice_logpdf, ringdown_mean
from cavchar.errors import InputError

TIMES = np.linspace(0.0, 5e-3, 40)
CASES = {
    "power": [1.2e-3, 2.0, 0.1],
    "db": [1.2e-3, 2.0, 0.1],
    "amplitude": [1.2e-3, 1.5, 0.2],
    "iq": [1.2e-3, 0.8, -0.6, 350.0, 0.05, -0.02],
    "mean_n": [1.2e-3, 0.3, 2.0],
}


@pytest.mark.parametrize("signal", sorted(CASES))
def test_jacobian_against_finite_differences(signal):
    # source: scipy.optimize.approx_fprime (forward differences, relative steps);
    # tolerance 1e-5 relative covers its truncation error at step 1e-8 * |theta|
    theta = np.array(CASES[signal])
    model, jac = ringdown_mean(signal, TIMES, theta, t0=1e-4)
    for part in (np.real, np.imag) if np.iscomplexobj(model) else (np.real,):
        for i in range(TIMES.size):
            def f(t, i=i, part=part):
                return part(ringdown_mean(signal, TIMES, t, t0=1e-4)[0])[i]
            step = 1e-7 * np.maximum(np.abs(theta), 1e-3)
            ref = optimize.approx_fprime(theta, f, step)
            np.testing.assert_allclose(part(jac[i]), ref, rtol=2e-5,
                                       atol=2e-5 * np.max(np.abs(ref)) + 1e-12)


def test_closed_forms():
    t_c = 2e-3
    tau = TIMES
    # energy decays as exp(-t/T_c); the field magnitude as exp(-t/(2 T_c)) (textbook)
    power, _ = ringdown_mean("power", tau, [t_c, 1.0, 0.0])
    np.testing.assert_allclose(power, np.exp(-tau / t_c), rtol=1e-14)
    amp, _ = ringdown_mean("amplitude", tau, [t_c, 1.0, 0.0])
    np.testing.assert_allclose(amp, np.exp(-tau / (2 * t_c)), rtol=1e-14)
    # <n>(t) relaxes to n_th: d<n>/dt = -kappa(<n> - n_th) (Walls & Milburn sec. 6.1)
    mean, _ = ringdown_mean("mean_n", tau, [t_c, 0.2, 3.0])
    np.testing.assert_allclose(mean, 0.2 + 2.8 * np.exp(-tau / t_c), rtol=1e-14)


def test_rice_logpdf_against_scipy():
    # source: scipy.stats.rice with shape b = nu / sigma and scale sigma; the large-nu
    # case (nu / sigma = 80) checks the scaled Bessel function where I_0 would overflow
    for nu, sigma in ((0.0, 1.0), (2.0, 0.7), (40.0, 0.5)):
        m = np.clip(nu + sigma * np.linspace(-4.0, 6.0, 50), 0.01, None)
        ref = stats.rice.logpdf(m, nu / sigma, scale=sigma)
        np.testing.assert_allclose(rice_logpdf(m, nu, sigma), ref, rtol=1e-9, atol=1e-9)


def test_initial_distribution():
    np.testing.assert_array_equal(initial_distribution(2), [0.0, 0.0, 1.0])
    np.testing.assert_array_equal(initial_distribution([0.25, 0.75]), [0.25, 0.75])
    for bad in (1.5, -1, [0.5, 0.6]):
        with pytest.raises(InputError):
            initial_distribution(bad)


def test_figures_of_merit():
    # Q = 2 pi nu T_c and FWHM = 1/(2 pi T_c) (Pozar, Microwave Engineering, sec. 6.1);
    # from memory: a 1 ms energy lifetime at 5 GHz is Q ~ 3.1e7 and a 159 Hz linewidth
    from cavchar.quantities import amplitude_decay_time, linewidth, quality_factor

    assert quality_factor(5e9, 1e-3) == pytest.approx(3.1416e7, rel=1e-4)
    assert linewidth(1e-3) == pytest.approx(159.155, rel=1e-5)
    assert amplitude_decay_time(1e-3) == pytest.approx(2e-3)


def test_bose_einstein_batched_matches_scipy_geometric():
    # source: scipy.stats.geom with success probability 1/(1+n_th), shifted to start at 0
    from cavchar.dynamics import bose_einstein

    n = np.arange(12)
    n_th = np.array([0.0, 0.05, 0.7, 3.0])
    batch = bose_einstein(n_th, n)
    assert batch.shape == (4, 12)
    for row, value in zip(batch, n_th):
        ref = stats.geom.pmf(n + 1, 1 / (1 + value)) if value > 0 else (n == 0).astype(float)
        np.testing.assert_allclose(row, ref, rtol=1e-12, atol=1e-300)
        np.testing.assert_allclose(bose_einstein(float(value), n), row)


@pytest.mark.parametrize("signal", ["power", "db", "amplitude", "iq", "mean_n", "populations"])
def test_ringdown_curve_against_the_closed_forms(signal):
    # source: the closed forms of the module docstring written out by hand here, with
    # c = A e^{i phase} = A (cos phase + i sin phase); exact up to rounding (rel 1e-12)
    from cavchar.decay import RingdownCurve

    curve = RingdownCurve(1.2e-3, amplitude=0.8, floor=0.05, t0=2e-4, n_thermal=0.3,
                          initial=[0.0, 0.25, 0.75], detuning=350.0, phase=0.7,
                          offset=0.05 - 0.02j)
    tau = TIMES - 2e-4
    u = np.exp(-tau / 1.2e-3)
    c = 0.8 * (np.cos(0.7) + 1j * np.sin(0.7))
    expected = {
        "power": 0.8 * u + 0.05,
        "db": 10 * np.log10(0.8 * u + 0.05),
        "amplitude": 0.8 * np.sqrt(u),
        "iq": c * np.sqrt(u) * np.exp(-2j * np.pi * 350.0 * tau) + 0.05 - 0.02j,
        "mean_n": 0.3 + (1.75 - 0.3) * u,  # n0 = 0 * 0 + 1 * 0.25 + 2 * 0.75
    }
    names = {"power": ["lifetime", "amplitude", "floor"],
             "amplitude": ["lifetime", "amplitude", "noise"],
             "iq": ["lifetime", "amplitude_re", "amplitude_im", "detuning", "offset_re",
                    "offset_im"],
             "mean_n": ["lifetime", "n_thermal", "initial_mean"],
             "populations": ["lifetime", "n_thermal"]}
    assert list(curve.parameters(signal)) == names.get(signal, names["power"])
    if signal == "populations":
        with pytest.raises(InputError, match="populations"):
            curve.mean(signal, TIMES)
        return
    model, jacobian = curve.mean(signal, TIMES, noise=0.1)
    np.testing.assert_allclose(model, expected[signal], rtol=1e-12)
    assert jacobian.shape == (TIMES.size, len(curve.parameters(signal)))
