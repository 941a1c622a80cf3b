"""Prior families against scipy.stats (outside reference: scipy 1.x distributions)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from cavchar.errors import InputError
from cavchar.priors import (
    LogNormal,
    LogUniform,
    Normal,
    Uniform,
    parse_prior,
    prior_from_dict,
    stage_occupation_prior,
)

# (cavchar prior, the same law in scipy.stats)
CASES = [
    (LogUniform(1e-5, 100.0), stats.loguniform(1e-5, 100.0)),
    (Uniform(-2.0, 3.0), stats.uniform(loc=-2.0, scale=5.0)),
    (Normal(1.2e-3, 1e-4), stats.norm(1.2e-3, 1e-4)),
    (Normal(1.0, 2.0, 0.0, math.inf), stats.truncnorm(-0.5, math.inf, loc=1.0, scale=2.0)),
    (Normal(0.0, 1.0, 4.0, 9.0), stats.truncnorm(4.0, 9.0)),  # far tail truncation
    (Normal(0.0, 1.0, -9.0, -6.0), stats.truncnorm(-9.0, -6.0)),
    (LogNormal(1e-3, 0.5), stats.lognorm(s=0.5, scale=1e-3)),
]
IDS = ["loguniform", "uniform", "normal", "halfnormal", "normal-far-tail", "normal-low-tail",
       "lognormal"]


@pytest.mark.parametrize(("prior", "ref"), CASES, ids=IDS)
def test_logpdf_matches_scipy(prior, ref):
    # points spread over the central 99.8% of the law (checked against scipy.stats logpdf)
    x = ref.ppf(np.linspace(0.001, 0.999, 41))
    np.testing.assert_allclose(prior.logpdf(x), ref.logpdf(x), rtol=1e-9, atol=1e-9)


@pytest.mark.parametrize(("prior", "ref"), CASES, ids=IDS)
def test_ppf_matches_scipy(prior, ref):
    q = np.linspace(0.01, 0.99, 25)
    np.testing.assert_allclose(prior.ppf(q), ref.ppf(q), rtol=1e-7)


@pytest.mark.parametrize(("prior", "ref"), CASES, ids=IDS)
def test_sampling_ks_against_scipy(prior, ref):
    # KS test of 4000 draws against scipy's CDF at a fixed seed; a correct sampler fails
    # at the 1e-3 level only once in a thousand seeds.
    draws = prior.sample(np.random.default_rng(20240611), 4000)
    assert stats.kstest(draws, ref.cdf).pvalue > 1e-3


def test_ks_negative_control_detects_wrong_law():
    # Negative control: the same KS check must reject draws of a law 30% wider.  The CDFs
    # differ by up to D = Phi(1) - Phi(1/1.3) = 0.062, twice the 1e-3 critical value
    # 1.95/sqrt(4000) = 0.031 of the KS statistic, so the rejection is not marginal.
    draws = LogNormal(1e-3, 0.65).sample(np.random.default_rng(20240611), 4000)
    assert stats.kstest(draws, stats.lognorm(s=0.5, scale=1e-3).cdf).pvalue < 1e-3


@pytest.mark.parametrize("prior", [c[0] for c in CASES], ids=IDS)
def test_outside_support_and_nan_are_minus_inf(prior):
    low, high = prior.support
    x = np.array([np.nan, low - 1.0 if math.isfinite(low) else -np.inf,
                  high + 1.0 if math.isfinite(high) else np.inf, -np.inf, np.inf])
    out = prior.logpdf(x)
    assert not np.isnan(out).any()
    if isinstance(prior, Uniform | LogUniform) or (isinstance(prior, Normal) and
                                                   math.isfinite(low)):
        assert np.all(out[:2] == -np.inf)
    assert out[0] == -np.inf


def test_logpdf_keeps_shape():
    x = np.full((3, 4), 1e-3)
    assert LogNormal(1e-3, 0.5).logpdf(x).shape == (3, 4)
    assert Uniform(0, 1).logpdf(0.5).shape == ()


@pytest.mark.parametrize("bad", [
    lambda: LogUniform(0.0, 1.0), lambda: LogUniform(2.0, 1.0), lambda: LogUniform(1.0, np.inf),
    lambda: Uniform(1.0, 1.0), lambda: Normal(0.0, 0.0), lambda: Normal(0.0, 1.0, 2.0, 1.0),
    lambda: Normal(0.0, 1.0, 60.0, 70.0), lambda: LogNormal(-1.0, 0.5),
    lambda: LogNormal(1.0, 0.0),
])
def test_bad_bounds_raise_input_error(bad):
    with pytest.raises(InputError):
        bad()


def test_parse_prior_units():
    p = parse_prior("loguniform:10us,100s", "time")
    assert p == LogUniform(10e-6, 100.0) or (math.isclose(p.low, 1e-5) and p.high == 100.0)
    n = parse_prior("normal:1.2ms,0.1ms", "time")
    assert isinstance(n, Normal) and math.isclose(n.mean, 1.2e-3) and math.isclose(n.sd, 1e-4)
    t = parse_prior("normal:1.2ms,0.5ms,0,inf", "time")
    assert t.low == 0.0 and t.high == math.inf
    ln = parse_prior("lognormal:1ms,0.5", "time")
    assert math.isclose(ln.median, 1e-3) and ln.sigma_log == 0.5
    u = parse_prior("Uniform: 0, 0.5", "dimensionless")
    assert u == Uniform(0.0, 0.5)


@pytest.mark.parametrize("text", ["loguniform:1ms", "loguniform:1ms,2ms,3ms", "gamma:1,2",
                                  "normal", "loguniform:1GHz,2GHz", "uniform:a,b",
                                  "stage:20mK"])
def test_parse_prior_errors(text):
    with pytest.raises(InputError):
        parse_prior(text, "time")


def test_stage_prior_centred_on_planck_occupation():
    # 5 GHz at 50 mK: n = 8.3044e-03 (derived with scipy.constants)
    p = stage_occupation_prior(5e9, 0.050, 0.7)
    assert math.isclose(p.median, 8.3044e-3, rel_tol=1e-4)
    assert p.sigma_log == 0.7
    q = parse_prior("stage:50mK,0.7", "dimensionless", freq_hz=5e9)
    assert q == p
    with pytest.raises(InputError):
        stage_occupation_prior(5e9, 0.0)


@pytest.mark.parametrize("prior", [c[0] for c in CASES], ids=IDS)
def test_dict_round_trip(prior):
    import json

    data = json.loads(json.dumps(prior.to_dict(), allow_nan=False))
    assert prior_from_dict(data) == prior
