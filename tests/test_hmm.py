"""Hidden-Markov kernels of cavchar.models.probes.hmm_kernels against outside references.

Outside sources (forward algorithm, Viterbi and forward-backward as in Rabiner,
Proc. IEEE 77, 257 (1989), sections III.A-B):
* hmmlearn 0.3 CategoricalHMM: ``score`` (forward algorithm), ``decode``
  (Viterbi), ``predict_proba`` (forward-backward marginals);
* scipy.linalg.expm for the transition matrix ``P(dt) = expm(Q dt)`` of the
  birth-death generator (rates from the damped-mode rate equations).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import linalg

from cavchar.models.probes import hmm_kernels as hk

hmm = pytest.importorskip("hmmlearn.hmm")


def generator(kappa: float, n_th: float, n: int) -> np.ndarray:
    """Birth-death rate matrix written out here independently of cavchar.dynamics:
    up rate kappa n_th (m+1), down rate kappa (1+n_th) m, reflecting top level."""
    q = np.zeros((n, n))
    for m in range(n - 1):
        q[m, m + 1] = kappa * n_th * (m + 1)
        q[m + 1, m] = kappa * (1 + n_th) * (m + 1)
    return q - np.diag(q.sum(axis=1))


def thermal(n_th: float, n: int) -> np.ndarray:
    p = (n_th / (1 + n_th)) ** np.arange(n)
    return p / p.sum()


def reference_model(p0, trans, emission) -> hmm.CategoricalHMM:
    """hmmlearn model with fixed parameters (init_params="" keeps them)."""
    m = hmm.CategoricalHMM(n_components=len(p0), n_features=emission.shape[1], init_params="",
                           implementation="scaling")
    m.startprob_ = p0
    m.transmat_ = trans
    m.emissionprob_ = emission
    return m


def binary_case(n, seed, t=4000, kappa=2.0, n_th=0.6, dt=0.02):
    """Chain, response and outcomes drawn from the reference model itself."""
    rng = np.random.default_rng(seed)
    trans = linalg.expm(generator(kappa, n_th, n) * dt)  # scipy reference transition matrix
    p0 = thermal(n_th, n)
    p1 = rng.uniform(0.05, 0.95, n)
    ref = reference_model(p0, trans, np.column_stack([1 - p1, p1]))
    y, _ = ref.sample(t, random_state=seed)
    return ref, trans, p0, p1, y[:, 0]


# Tolerance 1e-8 relative (the figure); both sides are double-precision
# recursions over a few thousand probes, so rounding is ~1e-13.
@pytest.mark.parametrize("n,unrolled", [(2, False), (3, True), (5, False), (8, True),
                                        (8, False), (20, False)])
def test_forward_matches_hmmlearn_score(n, unrolled):
    ref, trans, p0, p1, y = binary_case(n, seed=n)
    expected = ref.score(y[:, None])  # hmmlearn forward algorithm
    seq = hk.ProbeSequence.from_outcomes(y)
    emis = hk.emission_table(p1[None])
    for tr in (hk.Transitions.regular(trans[None]),
               hk.Transitions.indexed(trans[None, None], np.zeros(y.size, np.int32))):
        got = hk.forward_loglik(tr, p0, emis, seq, unrolled=unrolled)[0]
        assert got == pytest.approx(expected, rel=1e-8)


@pytest.mark.parametrize("unrolled", [True, False])
def test_eigen_route_matches_hmmlearn_on_regular_spacing(unrolled):
    kappa, n_th, dt, n = 2.0, 0.6, 0.02, 8
    ref, trans, p0, p1, y = binary_case(n, seed=11, kappa=kappa, n_th=n_th, dt=dt)
    r, lam, left = hk.eigen_parts([kappa], [n_th], n)
    tr = hk.Transitions.eigen(r, lam, left, np.full(y.size, dt))
    got = hk.forward_loglik(tr, p0, hk.emission_table(p1[None]), hk.ProbeSequence.from_outcomes(y),
                            unrolled=unrolled)[0]
    assert got == pytest.approx(ref.score(y[:, None]), rel=1e-8)


def test_settings_and_lost_probes_match_hmmlearn_with_a_random_setting_category():
    """Settings drawn at random (probabilities q_s) and probes lost with probability rho
    make an ordinary categorical HMM with 3S symbols, emission
    q_s (1 - rho) P(y | n, s) and q_s rho for "lost"; its hmmlearn score equals our
    log-likelihood plus sum_t log q_{s_t} + n_lost log rho + n_seen log(1 - rho)."""
    rng = np.random.default_rng(5)
    n, s_count, t = 6, 3, 5000
    trans = linalg.expm(generator(1.5, 0.8, n) * 0.05)
    p0 = thermal(0.8, n)
    p1 = rng.uniform(0.05, 0.95, (s_count, n))
    q = np.array([0.5, 0.3, 0.2])
    rho = 0.1
    cat = np.empty((n, 3 * s_count))
    for s in range(s_count):
        cat[:, 3 * s] = q[s] * (1 - rho) * (1 - p1[s])
        cat[:, 3 * s + 1] = q[s] * (1 - rho) * p1[s]
        cat[:, 3 * s + 2] = q[s] * rho
    ref = reference_model(p0, trans, cat)
    x, _ = ref.sample(t, random_state=3)
    x = x[:, 0]
    setting, kind = x // 3, x % 3
    outcome = np.where(kind == 2, np.nan, kind)
    seq = hk.ProbeSequence.from_outcomes(outcome, setting, n_settings=s_count)
    got = hk.forward_loglik(hk.Transitions.regular(trans[None]), p0, hk.emission_table(p1), seq)[0]
    lost = kind == 2
    extra = np.log(q[setting]).sum() + lost.sum() * np.log(rho) + (~lost).sum() * np.log1p(-rho)
    assert got + extra == pytest.approx(ref.score(x[:, None]), rel=1e-8)


def test_viterbi_matches_hmmlearn_decode():
    n = 6
    ref, trans, p0, p1, y = binary_case(n, seed=2, t=3000)
    lp_ref, path_ref = ref.decode(y[:, None], algorithm="viterbi")
    seq = hk.ProbeSequence.from_outcomes(y)
    emis = hk.emission_table(p1[None])
    r, lam, left = hk.eigen_parts([2.0], [0.6], n)
    for tr in (hk.Transitions.regular(trans[None]),
               hk.Transitions.eigen(r, lam, left, np.full(y.size, 0.02))):
        path, lp = hk.viterbi(tr, p0, emis, seq)
        np.testing.assert_array_equal(path, path_ref)
        assert lp == pytest.approx(lp_ref, rel=1e-10)


def test_marginals_sum_to_one_and_match_hmmlearn_predict_proba():
    n = 7
    ref, trans, p0, p1, y = binary_case(n, seed=4, t=3000)
    seq = hk.ProbeSequence.from_outcomes(y)
    post, ll = hk.posterior_marginals(hk.Transitions.regular(trans[None]), p0,
                                      hk.emission_table(p1[None]), seq)
    np.testing.assert_allclose(post.sum(axis=1), 1.0, atol=1e-12)
    # absolute 1e-8 on probabilities: both are normalised recursions in double precision
    np.testing.assert_allclose(post, ref.predict_proba(y[:, None]), atol=1e-8)
    assert ll == pytest.approx(ref.score(y[:, None]), rel=1e-8)


def brute_force_loglik(dts, kappa, n_th, n, p0, p1, y):
    """Plain forward recursion with one scipy expm per probe interval (reference)."""
    q = generator(kappa, n_th, n)
    e = np.column_stack([1 - p1, p1])
    alpha = p0 * e[:, y[0]]
    ll = 0.0
    for t in range(1, y.size):
        alpha = (alpha @ linalg.expm(q * dts[t])) * e[:, y[t]]
        s = alpha.sum()
        ll += np.log(s)
        alpha /= s
    return ll + np.log(alpha.sum())


@pytest.mark.parametrize("unrolled", [True, False])
def test_irregular_spacing_matches_per_step_expm(unrolled):
    rng = np.random.default_rng(8)
    kappa, n_th, n, t = 1.3, 0.9, 8, 400
    dts = rng.exponential(0.05, t)  # Poisson probe times
    p0 = thermal(n_th, n)
    p1 = rng.uniform(0.1, 0.9, n)
    y = rng.integers(0, 2, t)
    expected = brute_force_loglik(dts, kappa, n_th, n, p0, p1, y)
    r, lam, left = hk.eigen_parts([kappa], [n_th], n)
    seq = hk.ProbeSequence.from_outcomes(y)
    emis = hk.emission_table(p1[None])
    tr = hk.Transitions.eigen(r, lam, left, dts)
    assert hk.forward_loglik(tr, p0, emis, seq, unrolled=unrolled)[0] == pytest.approx(
        expected, rel=1e-10)
    # the same chain with one explicit matrix per interval: marginals and Viterbi agree
    mats = np.stack([linalg.expm(generator(kappa, n_th, n) * d) for d in dts])[None]
    tri = hk.Transitions.indexed(mats, np.arange(t))
    post_e, ll_e = hk.posterior_marginals(tr, p0, emis, seq)
    post_i, ll_i = hk.posterior_marginals(tri, p0, emis, seq)
    np.testing.assert_allclose(post_e, post_i, atol=1e-10)
    assert ll_e == pytest.approx(expected, rel=1e-10)
    np.testing.assert_array_equal(hk.viterbi(tr, p0, emis, seq)[0],
                                  hk.viterbi(tri, p0, emis, seq)[0])


def test_eigen_parts_reproduce_scipy_expm():
    kappa, n_th = np.array([0.7, 4.0]), np.array([0.05, 1.5])
    r, lam, left = hk.eigen_parts(kappa, n_th, 10)
    for i in range(2):
        for dt in (1e-4, 0.1, 3.0):
            p = (r[i] * np.exp(lam[i] * dt)) @ left[i]
            np.testing.assert_allclose(p, linalg.expm(generator(kappa[i], n_th[i], 10) * dt),
                                       atol=1e-12)


def test_batch_equals_single_sets_and_unrolled_equals_loops():
    rng = np.random.default_rng(9)
    n, t, k = 8, 3000, 5
    kappa, n_th = rng.uniform(1, 3, k), rng.uniform(0.2, 1.0, k)
    trans = np.stack([linalg.expm(generator(a, b, n) * 0.03) for a, b in zip(kappa, n_th)])
    p0 = np.stack([thermal(b, n) for b in n_th])
    emis = hk.emission_table(rng.uniform(0.05, 0.95, (k, 2, n)))
    y = rng.integers(0, 2, t).astype(float)
    y[rng.random(t) < 0.05] = np.nan
    seq = hk.ProbeSequence.from_outcomes(y, rng.integers(0, 2, t), segment_starts=[0, 1000, 2200])
    tr = hk.Transitions.regular(trans)
    batch = hk.forward_loglik(tr, p0, emis, seq)
    loops = hk.forward_loglik(tr, p0, emis, seq, unrolled=False)
    single = [hk.forward_loglik(tr.select(i), p0[i], emis[i], seq)[0] for i in range(k)]
    np.testing.assert_allclose(batch, single, rtol=1e-13)
    np.testing.assert_allclose(batch, loops, rtol=1e-12)


def test_segments_are_independent_and_start_from_the_initial_law():
    ref, trans, p0, p1, y = binary_case(5, seed=6, t=2000)
    emis = hk.emission_table(p1[None])
    tr = hk.Transitions.regular(trans[None])
    seq = hk.ProbeSequence.from_outcomes(y, segment_starts=[0, 700])
    whole = hk.forward_loglik(tr, p0, emis, seq)
    parts = ref.score(y[:700, None]) + ref.score(y[700:, None])  # hmmlearn on each part
    assert whole[0] == pytest.approx(parts, rel=1e-8)
    _, path_ref = ref.decode(y[700:, None])
    path, _ = hk.viterbi(tr, p0, emis, seq)
    np.testing.assert_array_equal(path[700:], path_ref)


def test_rare_outcomes_force_many_rescalings_and_stay_exact():
    """Emission probabilities near 1e-3 drive alpha below the rescaling threshold every
    ~50 probes; the lazy rescaling must still agree with hmmlearn."""
    rng = np.random.default_rng(12)
    n = 4
    trans = linalg.expm(generator(1.0, 0.3, n) * 0.1)
    p0 = thermal(0.3, n)
    p1 = np.array([1e-3, 2e-3, 5e-4, 3e-3])
    y = rng.integers(0, 2, 3000)  # mostly "impossible-looking" ones
    ref = reference_model(p0, trans, np.column_stack([1 - p1, p1]))
    got = hk.forward_loglik(hk.Transitions.regular(trans[None]), p0, hk.emission_table(p1[None]),
                            hk.ProbeSequence.from_outcomes(y))[0]
    assert got < -5000
    assert got == pytest.approx(ref.score(y[:, None]), rel=1e-8)


@pytest.mark.parametrize("unrolled", [True, False])
def test_impossible_outcomes_give_minus_inf_not_nan(unrolled):
    n = 3
    trans = linalg.expm(generator(1.0, 0.3, n) * 0.1)[None]
    p1 = np.array([[0.0, 0.0, 0.0], [0.5, 0.5, 0.5]])  # a batch: impossible, possible
    y = np.array([0, 1, 0, 0])
    tr = hk.Transitions.regular(np.repeat(trans, 2, axis=0))
    out = hk.forward_loglik(tr, thermal(0.3, n), hk.emission_table(p1[:, None, :]),
                            hk.ProbeSequence.from_outcomes(y), unrolled=unrolled)
    assert out[0] == -np.inf
    assert out[1] == pytest.approx(4 * np.log(0.5))


def test_bad_inputs_are_refused():
    with pytest.raises(ValueError):
        hk.ProbeSequence.from_outcomes([0, 1, 2])
    with pytest.raises(ValueError):
        hk.ProbeSequence.from_outcomes([0, 1, 1], segment_starts=[1])
    with pytest.raises(ValueError):
        hk.Transitions.indexed(np.zeros((1, 2, 3, 3)), [0, 2])


def test_without_a_writable_kernel_folder_the_loop_kernels_run(monkeypatch, tmp_path):
    """No folder for the generated kernels (a read-only home): the loop kernels answer,
    with the same value, and no code is compiled from text in memory."""
    from cavchar.models.probes import _unrolled as _hmm_unrolled

    rng = np.random.default_rng(11)
    n, t = 5, 400
    trans = linalg.expm(generator(2.0, 0.4, n) * 0.03)[None]
    p0 = thermal(0.4, n)[None]
    emis = hk.emission_table(rng.uniform(0.05, 0.95, (1, 2, n)))
    seq = hk.ProbeSequence.from_outcomes(rng.integers(0, 2, t).astype(float))
    tr = hk.Transitions.regular(trans)
    expected = hk.forward_loglik(tr, p0, emis, seq, unrolled=False)
    monkeypatch.setattr(_hmm_unrolled, "_LOADED", {})
    monkeypatch.setattr(_hmm_unrolled, "_cache_dir", lambda: None)
    assert _hmm_unrolled.load(n) is None
    np.testing.assert_array_equal(hk.forward_loglik(tr, p0, emis, seq, unrolled=True), expected)
