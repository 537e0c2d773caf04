"""Batch proposals under the hyperparameter posterior: exact rank-one conditioning, valid picks, and
sequential batches that beat a one-shot Latin hypercube on a published function."""
import numpy as np
import pytest

from doe.surrogate.hyperposterior import NUGGET, HyperPosterior, _Draw, _Target
from doe.design.plans import maximin_lhs
from doe.design.sequential import _condition, _draw_state, propose_batch, run_sequential
from doe.testing import functions as tf


def _fit(mode="plugin", n=10):
    X = maximin_lhs(n, 2, seed=1)
    y = np.sin(4 * X[:, 0]) * np.cos(3 * X[:, 1])
    return HyperPosterior(mode=mode, n_draws=4, thin=1, burn=2, seed=0).fit(X, y)


def test_rank_one_updates_equal_conditioning_on_the_picked_points():
    # The posterior covariance after adding runs does not depend on their values (Rasmussen & Williams 2006,
    # eq. 2.24); two rank-one updates must equal a fresh conditioning on the enlarged design
    hp = _fit()
    rng = np.random.default_rng(2)
    C, R = rng.random((40, 2)) - 0.5, rng.random((30, 2)) - 0.5
    state = _draw_state(hp.draws_[0], C, R)
    for i in (5, 17):
        _condition(state, i)
    t = hp.target_
    Z = np.vstack([t.Z, C[[5, 17]]])
    bigger = _Draw(_Target(Z, np.r_[t.yn, 0.0, 0.0], t.family, t.trend, t.learn_noise, NUGGET), hp.theta_map_)
    kern = bigger._signal_kernel()
    vC = np.linalg.solve(bigger.L_, kern(Z, C))
    vR = np.linalg.solve(bigger.L_, kern(Z, R))
    # exact algebra in double precision on a well-conditioned 12 x 12 system
    np.testing.assert_allclose(state["cov_cr"], kern(C, R) - vC.T @ vR, atol=1e-9)
    np.testing.assert_allclose(state["var_c"], np.clip(kern.diag(C) - np.sum(vC**2, axis=0), 0, None), atol=1e-9)


def test_batch_picks_are_distinct_new_and_deterministic():
    hp = _fit("mixture")
    a = propose_batch(hp, 5, seed=3)
    b = propose_batch(hp, 5, seed=3)
    np.testing.assert_array_equal(a, b)
    assert a.shape == (5, 2) and np.all((a >= 0) & (a <= 1))
    dist = np.linalg.norm(a[:, None] - np.vstack([a, hp.X_unit_])[None], axis=2)
    dist[np.arange(5), np.arange(5)] = np.inf
    assert dist.min() > 0.02          # a pick's own variance drops to the nugget: no repeats, no copies of runs
    pending = propose_batch(hp, 2, seed=3, exclude=a[:3])
    assert np.min(np.linalg.norm(pending[:, None] - a[None, :3], axis=2)) > 0.02


def test_sequential_batches_beat_a_one_shot_latin_hypercube_on_the_borehole_function():
    # Borehole function (Harper & Gupta 1983; as given by Forrester, Sobester & Keane 2008, and Surjanovic &
    # Bingham, VLSE): 8 inputs, few of them active. 40 runs either way: 16 maximin-LHS first runs then six
    # batches of 4 by integrated variance reduction under the posterior mode, against a fresh maximin LHS of
    # 40; both final designs fitted alike, RMSE on 1000 uniform held-out points. Measured when written:
    # ratios 0.68 and 0.65 for seeds 0 and 1 (0.88 and 0.76 for seeds 2 and 3); the issue asks for <= 0.85.
    f = tf.get("borehole")
    d = f.dim
    Ut = np.random.default_rng(5).random((1000, d))
    yt = f.on_unit(Ut)

    def rmse(U, y, seed):
        model = HyperPosterior(mode="plugin", seed=seed).fit(U, y)
        return float(np.sqrt(np.mean((model.predict(Ut) - yt) ** 2)))

    ratios = []
    for seed in (0, 1):
        U, y, _ = run_sequential(f.on_unit, d, 2 * d, 5 * d, 4, seed=seed, mode="plugin")
        assert len(U) == 5 * d and len(np.unique(U.round(12), axis=0)) == 5 * d
        L = maximin_lhs(5 * d, d, seed=seed)
        ratios.append(rmse(U, y, seed) / rmse(L, f.on_unit(L), seed))
    assert np.mean(ratios) <= 0.85, ratios


def test_covariance_state_of_any_surrogate_equals_the_kernel_state():
    # a surrogate without one kernel (two fidelities) is scored through predict_cov; on a plug-in surrogate,
    # which has both, the two states must agree before and after a pick (same algebra, double precision)
    from doe.design.sequential import _covariance_state
    from doe.surrogate.gp import ResponseSurrogate

    X = maximin_lhs(12, 2, seed=1)
    m = ResponseSurrogate(kernel="matern52", trend="constant", restarts=1, seed=0).fit(X, np.sin(4 * X[:, 0]) + X[:, 1])
    rng = np.random.default_rng(3)
    C, R = rng.random((30, 2)), rng.random((20, 2))
    a, b = _draw_state(m, C - 0.5, R - 0.5), _covariance_state(m, C, R)
    for s in (a, b):
        _condition(s, 7)
    for key in ("cov_cr", "var_c", "var_r"):
        np.testing.assert_allclose(a[key], b[key], atol=1e-9)
    assert a["eps"] == pytest.approx(b["eps"], rel=1e-9)
