"""Ring-down likelihood models against independent computations.

Outside checks named beside each test: numerical quadrature (scipy.integrate)
of the analytically marginalized parameters, scipy.stats (Rice, multinomial,
normal, Student-t laws), the rate equations of cavchar.dynamics and the
mean photon numbers checked against QuTiP's mesolve (Johansson, Nation, Nori,
Comput. Phys. Commun. 184, 1234 (2013)), real-valued least squares
(numpy.linalg.lstsq) for the complex IQ marginal.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, special, stats

from cavchar.dynamics import populations, truncation_levels
from cavchar.models.ringdown import (
    DecaySeries,
    DecibelDecay,
    IQDecay,
    MagnitudeDecay,
    MeanPhotonDecay,
    PopulationDecay,
    PowerDecay,
    TwoExponentialPower,
    build_model,
    compare_exponentials,
    fock_populations,
    profile_check,
    rice_logpdf,
)


def _power_trace(rng, n=40, lifetime=0.3, amp=1.0, floor=0.2, sigma=0.2, span=1.0):
    t = np.linspace(0, span, n)
    return t, amp * np.exp(-t / lifetime) + floor + rng.normal(0, sigma, n)


# ---------------------------------------------------------------- power model


def _gauss_legendre(low, high, n):
    x, w = special.roots_legendre(n)
    half = 0.5 * (high - low)
    return low + half * (x + 1), half * w


def _gaussian_loglike(y, mean, sigma):
    """ln prod_i N(y_i | mean_i, sigma^2) written out (the definition of the normal law)."""
    n = y.shape[-1]
    r = (y - mean) / sigma
    return -0.5 * np.sum(r * r, axis=-1) - n * np.log(np.sqrt(2 * np.pi) * sigma)


def _lsq(t, y, lifetime):
    design = np.column_stack([np.exp(-t / lifetime), np.ones_like(t)])
    coef, rss = np.linalg.lstsq(design, y, rcond=None)[:2]
    return coef, rss[0], np.linalg.inv(design.T @ design)


def test_power_marginal_known_sigma_against_quadrature():
    rng = np.random.default_rng(3)
    t, y = _power_trace(rng)
    a_max = 1.1  # binding: the box probability matters
    model = PowerDecay([DecaySeries.from_times(t, y, 0.2)], amplitude_max=a_max)
    for lifetime in (0.2, 0.45):
        ll = model.log_likelihood(np.array([[lifetime]]))[0]
        coef, _, inv = _lsq(t, y, lifetime)
        sd_f = 0.2 * math.sqrt(inv[1, 1])
        a, wa = _gauss_legendre(0.0, a_max, 160)
        f, wf = _gauss_legendre(coef[1] - 10 * sd_f, coef[1] + 10 * sd_f, 160)
        aa, ff = np.meshgrid(a, f, indexing="ij")
        mean = aa[..., None] * np.exp(-t / lifetime) + ff[..., None]
        dens = np.exp(_gaussian_loglike(y, mean, 0.2) - ll) / a_max
        # source: 2-D Gauss-Legendre quadrature of likelihood x prior over A in [0, A_max]
        # and F (the F range covers +-10 sd; 160 nodes resolve the Gaussian to ~1e-12)
        assert wa @ dens @ wf == pytest.approx(1.0, abs=1e-8)


def test_power_marginal_unknown_sigma_against_quadrature():
    rng = np.random.default_rng(4)
    t, y = _power_trace(rng)
    series = DecaySeries.from_times(t, y, None)
    a_max = 1.1  # binding box: the Student-t box term matters
    model = PowerDecay([series], amplitude_max=a_max)
    for lifetime in (0.25, 0.4):
        ll = model.log_likelihood(np.array([[lifetime]]))[0]
        coef, rss, inv = _lsq(t, y, lifetime)
        s_hat = math.sqrt(rss / (t.size - 2))
        ls, wl = _gauss_legendre(math.log(s_hat) - 1.2, math.log(s_hat) + 1.5, 60)
        a, wa = _gauss_legendre(0.0, a_max, 120)
        sd_f = 2 * s_hat * math.sqrt(inv[1, 1])
        f, wf = _gauss_legendre(coef[1] - 16 * sd_f, coef[1] + 16 * sd_f, 240)
        aa, ff = np.meshgrid(a, f, indexing="ij")
        mean = aa[..., None] * np.exp(-t / lifetime) + ff[..., None]
        total = 0.0
        for log_sigma, w in zip(ls, wl, strict=True):
            # prior 1/sigma d sigma = d ln sigma; flat F; uniform A on [0, A_max]
            dens = np.exp(_gaussian_loglike(y, mean, math.exp(log_sigma)) - ll) / a_max
            total += w * (wa @ dens @ wf)
        # source: 3-D Gauss-Legendre quadrature over (ln sigma, A, F); ranges of +-10
        # posterior sd or more, node counts doubled without change at 1e-12
        assert total == pytest.approx(1.0, abs=1e-9)


def test_power_compressed_equals_brute_force_and_batches():
    rng = np.random.default_rng(5)
    t, y = _power_trace(rng, n=30_000, lifetime=0.2, amp=3.0, floor=0.1, sigma=0.5)
    model = PowerDecay([DecaySeries.from_times(t, y, None)])
    assert model.sums[0].compressed and model.sums[0].n_bins < 200
    lifetimes = model.initial_guess()[0] * np.linspace(0.9, 1.1, 9)[:, None]
    # the compression is exact to rounding: |d ln L| is rounding of sums of 3e4 terms
    assert profile_check(model, lifetimes) < 1e-7
    bad = np.array([[0.0], [-1.0], [np.nan], [np.inf], [0.2]])
    out = model.log_likelihood(bad)
    assert out.shape == (5,) and not np.isnan(out).any()
    assert np.all(np.isneginf(out[:4])) and np.isfinite(out[4])


def test_power_several_traces_add_up():
    rng = np.random.default_rng(6)
    series = []
    for amp, floor, sigma in ((1.0, 0.1, None), (2.0, -0.1, 0.05)):
        t, y = _power_trace(rng, n=300, lifetime=0.25, amp=amp, floor=floor, sigma=0.05)
        series.append(DecaySeries.from_times(t, y, sigma))
    joint = PowerDecay(series, amplitude_max=[10.0, 10.0])
    single = [PowerDecay([s], amplitude_max=10.0) for s in series]
    theta = np.array([[0.22], [0.25], [0.28]])
    expected = sum(m.log_likelihood(theta) for m in single)
    assert np.allclose(joint.log_likelihood(theta), expected, rtol=0, atol=1e-8)


def test_power_nuisance_draws_follow_the_conditional_laws():
    rng = np.random.default_rng(7)
    t, y = _power_trace(rng, n=60, sigma=0.1)
    lifetime = 0.3
    e = np.exp(-t / lifetime)
    design = np.column_stack([e, np.ones_like(t)])
    coef, rss = np.linalg.lstsq(design, y, rcond=None)[:2]
    gram_inv = np.linalg.inv(design.T @ design)
    a_max = coef[0] + 1.0 * math.sqrt(gram_inv[0, 0]) * 0.1  # cuts the upper tail
    draws = np.full((20_000, 1), lifetime)

    known = PowerDecay([DecaySeries.from_times(t, y, 0.1)], amplitude_max=a_max)
    amp = known.draw_nuisance(draws, np.random.default_rng(1))["amplitude"]
    sd = 0.1 * math.sqrt(gram_inv[0, 0])
    law = stats.truncnorm(-coef[0] / sd, (a_max - coef[0]) / sd, loc=coef[0], scale=sd)
    # source: scipy.stats.truncnorm; KS test at 20000 draws, p > 1e-3 (fails 0.1% by chance)
    assert stats.kstest(amp, law.cdf).pvalue > 1e-3

    unknown = PowerDecay([DecaySeries.from_times(t, y, None)], amplitude_max=a_max)
    nuis = unknown.draw_nuisance(draws, np.random.default_rng(2))
    nu = t.size - 2
    scale = math.sqrt(rss[0] / nu * gram_inv[0, 0])
    lo, hi = stats.t.cdf(-coef[0] / scale, nu), stats.t.cdf((a_max - coef[0]) / scale, nu)

    def truncated_t_cdf(a):
        return (stats.t.cdf((a - coef[0]) / scale, nu) - lo) / (hi - lo)

    # source: scipy.stats.t, truncated to the box [0, A_max]
    assert stats.kstest(nuis["amplitude"], truncated_t_cdf).pvalue > 1e-3
    # sigma^2 | A: (RSS + (A - A_hat)^2 / V_AA) / chi^2_{n-1}; its mean over A is near RSS/(n-3)
    assert np.mean(nuis["sigma"] ** 2) == pytest.approx(rss[0] / (t.size - 3), rel=0.03)
    # floor | A: linear regression on A, check the mean relation (MC sd ~ 0.1/sqrt(2e4))
    slope = -(design.T @ design)[0, 1] / (design.T @ design)[1, 1]
    resid = nuis["floor"] - (coef[1] + slope * (nuis["amplitude"] - coef[0]))
    assert abs(resid.mean()) < 5 * resid.std() / math.sqrt(resid.size)


def test_two_exponential_model_and_comparison():
    rng = np.random.default_rng(9)
    t = np.linspace(0, 2.0, 800)
    sigma = 0.01
    one = np.exp(-t / 0.3) + 0.05 + rng.normal(0, sigma, t.size)
    two = 0.6 * np.exp(-t / 0.6) + 0.6 * np.exp(-t / 0.06) + 0.05 + rng.normal(0, sigma, t.size)
    # Kass & Raftery (1995) scale on the BIC difference: clear cases are decided
    c1 = compare_exponentials(DecaySeries.from_times(t, one, sigma))
    c2 = compare_exponentials(DecaySeries.from_times(t, two, None))
    assert c1.preferred == "one exponential"
    assert c2.preferred == "two exponentials" and c2.strength == "very strong"
    assert "preferred" in c2.describe()

    model = TwoExponentialPower(DecaySeries.from_times(t[:50], two[:50], sigma))
    theta = np.array([0.6, 0.06, 0.6, 0.6])
    ll = model.log_likelihood(theta[None])[0]
    base = 0.6 * np.exp(-t[:50] / 0.6) + 0.6 * np.exp(-t[:50] / 0.06)

    def integrand(f):
        return math.exp(np.sum(stats.norm.logpdf(two[:50], base + f, sigma)) - ll)

    # source: quadrature over the flat-prior floor
    value, _ = integrate.quad(integrand, -1, 1, points=[0.05], epsabs=1e-12, limit=200)
    assert value == pytest.approx(1.0, abs=1e-7)
    assert np.isneginf(model.log_likelihood(np.array([[0.06, 0.6, 0.6, 0.6]]))[0])  # T1 > T2
    # long trace: compressed sums against the compiled direct pass
    t_long = np.linspace(0, 2.0, 20_000)
    y_long = (0.6 * np.exp(-t_long / 0.6) + 0.6 * np.exp(-t_long / 0.06) + 0.05
              + rng.normal(0, sigma, t_long.size))
    long = TwoExponentialPower(DecaySeries.from_times(t_long, y_long, None))
    assert long.sums.compressed
    thetas = np.array([[0.6, 0.06, 0.6, 0.6], [0.62, 0.059, 0.59, 0.61]])
    assert profile_check(long, thetas) < 1e-6  # rounding of sums of 2e4 terms


# ------------------------------------------------------------------- dB model


def test_db_model_against_normal_law():
    rng = np.random.default_rng(10)
    t = np.linspace(0, 1, 200)
    mu = 10 * np.log10(1e-3 * np.exp(-t / 0.2) + 1e-6)
    y = mu + rng.normal(0, 0.5, t.size)
    model = DecibelDecay(DecaySeries.from_times(t, y, 0.5))
    theta = np.array([[0.2, 1e-3, 1e-6], [0.25, 2e-3, 2e-6]])
    ref = [np.sum(stats.norm.logpdf(y, 10 * np.log10(a * np.exp(-t / T) + f), 0.5))
           for T, a, f in theta]  # source: scipy.stats.norm
    assert np.allclose(model.log_likelihood(theta), ref, rtol=0, atol=1e-9)
    start = model.initial_guess()
    assert start[0] == pytest.approx(0.2, rel=0.1)

    unknown = DecibelDecay(DecaySeries.from_times(t, y, None))
    ll = unknown.log_likelihood(theta[:1])[0]
    rss = np.sum((y - 10 * np.log10(1e-3 * np.exp(-t / 0.2) + 1e-6)) ** 2)

    def integrand(ls):
        s = math.exp(ls)
        return math.exp(-t.size * math.log(math.sqrt(2 * math.pi) * s) - rss / (2 * s * s) - ll)

    value, _ = integrate.quad(integrand, math.log(0.1), math.log(3), epsabs=1e-12, limit=200)
    assert value == pytest.approx(1.0, abs=1e-8)  # source: quadrature over ln sigma


# ------------------------------------------------------ magnitude and IQ models


def test_rice_against_scipy():
    m = np.array([0.01, 0.3, 1.0, 2.5, 40.0])
    nu = np.array([0.0, 0.5, 1.0, 3.0, 41.0])
    sigma = 0.7
    # source: scipy.stats.rice with b = nu/sigma, scale = sigma
    ref = stats.rice.logpdf(m, nu / sigma, scale=sigma)
    assert np.allclose(rice_logpdf(m, nu, sigma), ref, rtol=1e-12, atol=1e-12)
    assert np.isneginf(rice_logpdf(np.array([0.0]), 1.0, 1.0)[0])


def test_magnitude_model_likelihood_and_moments():
    rng = np.random.default_rng(12)
    t = np.linspace(0, 1, 400)
    lifetime, a, sigma = 0.15, 2.0, 0.3
    nu = a * np.exp(-t / (2 * lifetime))  # field decays in 2 T_c
    z = nu + sigma * (rng.standard_normal(t.size) + 1j * rng.standard_normal(t.size))
    model = MagnitudeDecay(DecaySeries.from_times(t, np.abs(z)))
    theta = np.array([lifetime, a, sigma])
    ref = np.sum(stats.rice.logpdf(np.abs(z), nu / sigma, scale=sigma))
    assert model.log_likelihood(theta[None])[0] == pytest.approx(ref, abs=1e-9)
    mean = model.expected(theta)[0]
    sd = model.noise_scale(theta)[0]
    # source: scipy.stats.rice moments
    assert np.allclose(mean, stats.rice.mean(nu / sigma, scale=sigma), rtol=1e-10)
    assert np.allclose(sd, stats.rice.std(nu / sigma, scale=sigma), rtol=1e-8)
    assert model.initial_guess()[0] == pytest.approx(lifetime, rel=0.15)


def _iq_trace(rng, n=300, lifetime=0.2, detuning=7.0, alpha=None, offset=0.2 - 0.1j,
              sigma=0.05):
    alpha = 1.5 * np.exp(0.4j) if alpha is None else alpha
    t = np.linspace(0, 1, n)
    clean = alpha * np.exp(-t / (2 * lifetime)) * np.exp(-2j * np.pi * detuning * t) + offset
    return t, clean + sigma * (rng.standard_normal(n) + 1j * rng.standard_normal(n))


def test_iq_marginal_against_real_least_squares():
    rng = np.random.default_rng(13)
    t, z = _iq_trace(rng)
    sigma = 0.05
    model = IQDecay(DecaySeries.from_times(t, z, None), alpha_max=1e3)
    assert model.initial_guess()[1] == pytest.approx(7.0, abs=0.05)
    for lifetime, detuning in ((0.2, 7.0), (0.22, 7.03)):
        ll = model.log_likelihood(np.array([[lifetime, detuning, sigma]]))[0]
        # independent route: real design matrix in (Re alpha, Im alpha, Re c, Im c)
        phi = np.exp(-(0.5 / lifetime + 2j * np.pi * detuning) * t)
        cols = [phi, 1j * phi, np.ones_like(phi), 1j * np.ones_like(phi)]
        x = np.vstack([np.column_stack([c.real for c in cols]),
                       np.column_stack([c.imag for c in cols])])
        yy = np.concatenate([z.real, z.imag])
        coef, rss = np.linalg.lstsq(x, yy, rcond=None)[:2]
        logdet = np.linalg.slogdet(x.T @ x)[1]
        n = t.size
        ref = (-n * math.log(2 * math.pi * sigma**2) - rss[0] / (2 * sigma**2)
               + 2 * math.log(2 * math.pi * sigma**2) - 0.5 * logdet
               - math.log(math.pi * 1e6))  # disk prior density; P(disk) = 1 here
        assert ll == pytest.approx(ref, abs=1e-8)


def test_iq_disk_probability_by_monte_carlo():
    rng = np.random.default_rng(14)
    t, z = _iq_trace(rng, n=40, sigma=0.4)
    wide = IQDecay(DecaySeries.from_times(t, z, None), alpha_max=1e3)
    alpha_max = 1.6
    tight = IQDecay(DecaySeries.from_times(t, z, None), alpha_max=alpha_max)
    theta = np.array([[0.2, 7.0, 0.4]])
    # ln P(|alpha| <= alpha_max) = difference of the two marginals (+ prior densities)
    logp = (tight.log_likelihood(theta)[0] + math.log(math.pi * alpha_max**2)
            - wide.log_likelihood(theta)[0] - math.log(math.pi * 1e6))
    draws = wide.draw_nuisance(np.repeat(theta, 40_000, axis=0), np.random.default_rng(3))
    frac = np.mean(draws["amplitude"] <= alpha_max)
    # Monte Carlo estimate of the disk probability; 5 binomial sd
    assert math.exp(logp) == pytest.approx(frac, abs=5 * math.sqrt(frac * (1 - frac) / 4e4))
    assert 0.05 < frac < 0.95  # the check is not trivial


def test_iq_compressed_equals_brute_force():
    rng = np.random.default_rng(15)
    t, z = _iq_trace(rng, n=30_000, sigma=0.3)
    model = IQDecay(DecaySeries.from_times(t, z, None))
    start = model.initial_guess()
    theta = start * np.array([[1.0, 1.0, 1.0], [1.05, 1.0, 1.0], [0.97, 1.0001, 1.02]])
    assert model.sums.compressed
    assert profile_check(model, theta) < 1e-6  # rounding of sums of 3e4 complex terms


# ---------------------------------------------------- mean photon number model


def test_mean_photon_marginal_against_quadrature():
    rng = np.random.default_rng(16)
    t = np.linspace(0, 1.0, 30)
    sigma = np.full(t.size, 0.05)
    y = 0.1 + (2.0 - 0.1) * np.exp(-t / 0.25) + rng.normal(0, 0.05, t.size)
    model = MeanPhotonDecay(DecaySeries.from_times(t, y, sigma))
    theta = np.array([0.25, 0.1])
    ll = model.log_likelihood(theta[None])[0]
    e = np.exp(-t / 0.25)

    def integrand(a):
        return math.exp(np.sum(stats.norm.logpdf(y, 0.1 + a * e, sigma)) - ll)

    value, _ = integrate.quad(integrand, 0, 4, epsabs=1e-12, points=[1.9])
    assert value == pytest.approx(1.0, abs=1e-8)  # source: quadrature over flat a = n0 - n_th
    fixed = MeanPhotonDecay(DecaySeries.from_times(t, y, sigma), n0=2.0)
    ref = np.sum(stats.norm.logpdf(y, 0.1 + 1.9 * e, sigma))
    assert fixed.log_likelihood(theta[None])[0] == pytest.approx(ref, abs=1e-9)
    draws = model.draw_nuisance(np.repeat(theta[None], 4000, axis=0), np.random.default_rng(1))
    assert np.mean(draws["n_initial"]) == pytest.approx(2.0, abs=0.1)
    assert np.isneginf(model.log_likelihood(np.array([[0.25, -0.01]]))[0])


# ------------------------------------------------------------ populations model


@pytest.mark.parametrize("lifetime, n_th, p0", [
    (0.2, 0.05, [0, 0, 0, 1]),
    (0.5, 1.5, [0, 0, 0, 0, 0, 1]),
    (0.1, 1e-4, [0.2, 0.5, 0.3]),
    (0.3, 0.0, [0, 1]),
])
def test_fock_populations_against_rate_equations(lifetime, n_th, p0):
    times = np.array([0.0, 0.01, 0.07, 0.2, 0.6, 3.0])
    k = 10
    # source: cavchar.dynamics (eigen / expm solution of the truncated rate equations),
    # truncated where the neglected tail is below 1e-15
    levels = max(truncation_levels(n_th, len(p0), tail=1e-15), k)
    ref = populations(1 / lifetime, n_th, p0, times, n_levels=levels)[:, :k]
    ours = fock_populations([lifetime], [n_th], p0, times, k)[0]
    assert np.max(np.abs(ours - ref)) < 1e-12


def test_fock_mean_photon_number_against_qutip_values():
    # damped-mode rate equations (Walls & Milburn, Quantum Optics, sec. 6.1): from |3>,
    # T_c = 0.13 s, n_th = 0.05 (derived, and agreeing with QuTiP mesolve to 1e-7 at its
    # default tolerances; Johansson, Nation, Nori, Comput. Phys. Commun. 184, 1234 (2013)):
    # <n> at 0.05, 0.13, 0.5 s
    times = np.array([0.05, 0.13, 0.5])
    pops = fock_populations([0.13], [0.05], [0, 0, 0, 1], times, 60)[0]
    mean = pops @ np.arange(60)
    assert np.allclose(mean, [2.058101575054, 1.135244351456, 0.113017130566], atol=1e-11)


def test_population_likelihood_against_multinomial():
    rng = np.random.default_rng(17)
    tau = np.array([0.0, 0.05, 0.1, 0.3, 1.0])
    p0 = [0, 0, 1]
    true = fock_populations([0.2], [0.1], p0, tau, 6)[0]
    shots = 400
    counts = np.array([rng.multinomial(shots, np.append(p, 1 - p.sum()))[:6] for p in true])
    model = PopulationDecay(tau, counts, p0)
    theta = np.array([[0.2, 0.1], [0.25, 0.08]])
    ref = []
    for life, nth in theta:
        p = fock_populations([life], [nth], p0, tau, 6)[0]
        total = 0.0
        for c, pi in zip(counts, p, strict=True):
            rest = max(1 - pi.sum(), 0.0)
            # source: scipy.stats.multinomial (with the unobserved rest as a category)
            total += stats.multinomial.logpmf(np.append(c, shots - c.sum()), shots,
                                              np.append(pi, rest))
        ref.append(total)
    assert np.allclose(model.log_likelihood(theta), ref, atol=1e-8)
    slow = PopulationDecay(tau, counts, p0, method="rate-equations")
    assert np.allclose(slow.log_likelihood(theta), ref, atol=1e-8)


def test_build_model_dispatch():
    rng = np.random.default_rng(18)
    t, y = _power_trace(rng, n=200, sigma=0.02)
    s = DecaySeries.from_times(t, y, None)
    assert isinstance(build_model("power", s), PowerDecay)
    assert isinstance(build_model("power2", s), TwoExponentialPower)
    with pytest.raises(ValueError):
        build_model("nonsense", s)
