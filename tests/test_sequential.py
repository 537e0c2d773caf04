"""Batch proposals under the hyperparameter posterior: exact rank-one conditioning, valid picks."""
import numpy as np

from doe.surrogate.hyperposterior import NUGGET, HyperPosterior, _Draw, _Target
from doe.design.plans import maximin_lhs
from doe.design.sequential import _condition, _draw_state, propose_batch


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
