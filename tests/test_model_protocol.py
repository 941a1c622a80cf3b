"""Every likelihood model follows one interface (cavchar.models.protocol): specs, a pure
batched log-likelihood ``(k, ndim) -> (k,)`` and an initial guess.

Checked for each model built from a simulated record: the runtime protocol; the
shape contract; purity (the same parameter sets give bit-identical values, in any
batch order and one at a time, and the input array is not written); ``-inf``, never
NaN, outside the support; a finite value at the initial guess.  The jump models are
also checked against an outside closed form: the exact-record log-likelihood equals
the sum of the exponential dwell densities and jump probabilities of the birth–death
chain written out path by path (any text on continuous-time Markov chains, e.g.
Guttorp, Stochastic Modeling of Scientific Data, ch. 3).
"""

from __future__ import annotations

import numpy as np
import pytest

from cavchar.models.protocol import LikelihoodModel


def _jump_models():
    from cavchar.fits.jumps import JumpPriors, _specs
    from cavchar.models.jumps import (
        ExactJumpModel,
        SampledJumpModel,
        jump_statistics,
        sampled_transitions,
    )
    from cavchar.simulate import simulate_jump_record, simulate_sampled_record

    specs = _specs(JumpPriors())
    exact = simulate_jump_record(5e-3, 0.2, 2.0, seed=3)
    stats = jump_statistics(exact.time, exact.photons, exact.end_time, exact.segment)
    sampled = simulate_sampled_record(5e-3, 0.2, np.arange(2000) * 1e-3, seed=4)
    trans = sampled_transitions(sampled.time, sampled.photons, sampled.segment)
    return {"jumps-exact": (ExactJumpModel(stats, specs), exact),
            "jumps-sampled": (SampledJumpModel(trans, specs, trans.n_max + 8, (5e-3, 0.2)),
                              sampled)}


def _ringdown_models():
    from cavchar.fits.ringdown import build_ringdown_model
    from cavchar.fits.ringdown_data import prepare
    from cavchar.simulate import simulate_ringdown

    t = np.linspace(0.0, 10e-3, 300)
    cases = {
        "power": dict(amplitude=2.0, floor=0.05, noise=0.02),
        "power2": dict(amplitude=2.0, floor=0.05, noise=0.02),
        "db": dict(amplitude=2.0, floor=0.05, noise=0.1),
        "amplitude": dict(amplitude=2.0, noise=0.05),
        "iq": dict(amplitude=2.0, noise=0.05, detuning=300.0),
        "mean-n": dict(amplitude=3.0, n_th=0.1, noise=0.05),
    }
    out = {}
    for i, (signal, options) in enumerate(cases.items()):
        simulated = "power" if signal == "power2" else signal
        trace = simulate_ringdown(simulated, t, 2e-3, seed=10 + i, **options)
        model, _ = build_ringdown_model(prepare(trace, signal))
        out[f"ringdown-{signal}"] = (model, None)
    trace = simulate_ringdown("populations", np.linspace(0, 8e-3, 12), 2e-3, initial=2,
                              shots=400, n_th=0.05, seed=30)
    model, _ = build_ringdown_model(prepare(trace, "populations"), initial=2)
    out["ringdown-populations"] = (model, None)
    return out


MODELS = {**_jump_models(), **_ringdown_models()}


@pytest.mark.parametrize("name", sorted(MODELS))
def test_every_model_follows_the_protocol(name):
    model, _ = MODELS[name]
    assert isinstance(model, LikelihoodModel)
    ndim = len(model.specs)
    guess = np.asarray(model.initial_guess(), dtype=float)
    assert guess.shape == (ndim,)
    rng = np.random.default_rng(1)
    # parameter sets around the guess (within a factor 1.3 of each value)
    theta = guess * np.exp(rng.uniform(-0.25, 0.25, size=(7, ndim)))
    theta[0] = guess
    kept = theta.copy()
    kept.flags.writeable = False  # a model that writes into its input fails here
    first = model.log_likelihood(kept)
    assert first.shape == (7,) and np.isfinite(first[0])
    # pure: the same sets give the same values in another order, and one at a time
    order = rng.permutation(7)
    assert np.array_equal(model.log_likelihood(kept[order]), first[order])
    singles = np.array([model.log_likelihood(kept[i:i + 1])[0] for i in range(7)])
    np.testing.assert_allclose(singles, first, rtol=1e-12, atol=1e-9)
    assert np.array_equal(model.log_likelihood(kept), first)
    # outside the support: -inf, not NaN (a negative lifetime is impossible everywhere)
    bad = kept[:2].copy()
    bad[:, 0] = -1.0
    outside = model.log_likelihood(bad)
    assert outside.shape == (2,) and np.all(outside == -np.inf)


def test_exact_jump_model_equals_the_path_density():
    model, record = MODELS["jumps-exact"]
    tc, nth = 4e-3, 0.25
    a, b = nth / tc, (1 + nth) / tc
    n = record.photons.astype(int)
    ends = np.append(record.time[1:], record.end_time)
    total = 0.0
    for k in range(n.size):  # dwell k: survive at total rate, then the observed jump
        rate_out = a * (n[k] + 1) + b * n[k]
        total -= rate_out * (ends[k] - record.time[k])
        if k + 1 < n.size:
            total += np.log(a * (n[k] + 1) if n[k + 1] > n[k] else b * n[k])
    assert model.log_likelihood(np.array([[tc, nth]]))[0] == pytest.approx(total, rel=1e-10)
