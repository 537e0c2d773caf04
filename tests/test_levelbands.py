"""Honest bands for the surrogates over choice knobs: the widening factors and what they do to predictions."""
from __future__ import annotations

import json

import numpy as np
import pytest
from scipy.linalg import cho_solve

from doe.design.plans import sliced_lhs
from doe.surrogate.levelbands import (BandWidening, log_marginal_likelihood, loo_band_ratio, sampled_band_ratio,
                                      theta_setter)
from doe.surrogate.levelset import level_unit_sample
from doe.surrogate.mixed import MixedSurrogate, SeparateSurrogates
from doe.testing.functions import hartmann3_levels

LEVELS = (0, 0, 3)


def _runs(per_level, seed=0, column=0):
    U, sl = sliced_lhs([per_level] * 3, 2, seed=seed)
    X = np.column_stack([U, sl])
    return X, hartmann3_levels(X, column=column)


@pytest.fixture(scope="module")
def few():
    """Mixed GP of 6 runs per level (Hartmann 3-D, first input held): kernel settings poorly pinned down."""
    X, y = _runs(6)
    return MixedSurrogate(LEVELS, seed=0).fit(X, y), X, y


def test_loo_ratio_is_the_cross_validation_variance_estimate(few):
    model, _, _ = few
    gp = model.gp_
    # Bachoc 2013 (Comput. Stat. Data Anal. 66:55), the cross-validation estimate of the variance scale:
    # sigma2_CV / sigma2 = y' K^-1 diag(K^-1)^-1 K^-1 y / n, from the kernel matrix itself (memory: the form)
    K = gp.kernel_(gp.X_train_) + gp.alpha * np.eye(len(gp.X_train_))
    Kinv = np.linalg.inv(K)
    a = Kinv @ gp.y_train_
    expected = np.sqrt(np.mean(a**2 / np.diag(Kinv)))
    # closed form against an explicit inverse: round-off of a 18 x 18 solve, condition number ~1e6
    assert loo_band_ratio(model._plugin_loo if model.band_ is not None else model.loo_) == pytest.approx(
        expected, rel=1e-6)


@pytest.mark.parametrize("kind", ["mixed", "separate"])
def test_fast_likelihood_matches_scikit_learn(few, kind):
    model, X, y = few
    gp = model.gp_ if kind == "mixed" else SeparateSurrogates(LEVELS, seed=0).fit(X, y).models_[(1,)].gp_
    kernel = gp.kernel_.clone_with_theta(gp.kernel_.theta)
    set_theta = theta_setter(kernel)
    rng = np.random.default_rng(4)
    for _ in range(5):
        theta = gp.kernel_.theta + rng.normal(0, 0.5, len(gp.kernel_.theta))
        set_theta(theta)
        np.testing.assert_allclose(kernel.theta, theta, rtol=1e-14, atol=1e-14)      # log(exp(t)): round-off
        # the reference library's own log marginal likelihood (scikit-learn, GaussianProcessRegressor); the same
        # Cholesky of the same matrix: round-off only
        assert log_marginal_likelihood(kernel, gp.X_train_, gp.y_train_, gp.alpha) == pytest.approx(
            gp.log_marginal_likelihood(theta), rel=1e-9, abs=1e-9)


def test_sampled_ratio_shrinks_when_runs_pin_the_settings_down():
    # the posterior of the kernel settings concentrates as runs are added (Rasmussen & Williams 2006, sec. 5.2),
    # so the band's widening over the fitted one falls towards 1
    ratios = []
    for per_level in (5, 20):
        X, y = _runs(per_level, seed=1)
        model = MixedSurrogate(LEVELS, seed=0).fit(X, y)
        Z = model._scaled(level_unit_sample(LEVELS, 64, seed=2))
        ratio, evaluations = sampled_band_ratio(model.gp_, Z, 2, seed=0)
        theta = model.gp_.kernel_.theta.copy()
        assert evaluations > 100 and np.array_equal(model.gp_.kernel_.theta, theta)   # the fit is left as it was
        ratios.append(ratio)
    assert ratios[0] > 1.1 and ratios[1] < ratios[0]


def test_widening_scales_band_paths_and_loo_about_the_same_mean(few):
    _, X, y = few
    model = MixedSurrogate(LEVELS, seed=0).fit(X, y)
    U = level_unit_sample(LEVELS, 32, seed=5)
    mean0, std0 = model.predict(U, return_std=True)
    loo0 = model.loo_.std.copy()
    model.widen(level_unit_sample(LEVELS, 64, seed=1), seed=0)
    f = model.band_factor_
    mean1, std1 = model.predict(U, return_std=True)
    assert f > 1 and np.array_equal(mean0, mean1)
    np.testing.assert_allclose(std1, f * std0, rtol=1e-12)
    np.testing.assert_allclose(model.loo_.std, f * loo0, rtol=1e-12)
    draws = model.sample_paths(U[:4], 2000, seed=3)
    # the sample variance of 2000 normal draws is within 4 standard errors sqrt(2 / 1999) of the truth
    np.testing.assert_allclose(draws.var(axis=0, ddof=1) / std1[:4] ** 2, 1.0, atol=4 * np.sqrt(2 / 1999))
    back = MixedSurrogate.from_dict(json.loads(json.dumps(model.to_dict())), X, y)
    assert back.band_factor_ == f
    np.testing.assert_allclose(back.predict(U, return_std=True)[1], std1, rtol=1e-10)


def test_separate_surrogates_widen_per_combination_and_rebuild():
    X, y = _runs(6, column=2)
    model = SeparateSurrogates(LEVELS, seed=0).fit(X, y)
    U = level_unit_sample(LEVELS, 32, seed=5)
    std0 = model.predict(U, return_std=True)[1]
    model.widen(level_unit_sample(LEVELS, 128, seed=1), seed=0)
    std1 = model.predict(U, return_std=True)[1]
    factors = np.array([model.factor((int(c),)) for c in U[:, 2]])
    assert set(model.bands_) == {(0,), (1,), (2,)} and np.all(factors >= 1)
    np.testing.assert_allclose(std1, factors * std0, rtol=1e-12)
    back = SeparateSurrogates.from_dict(json.loads(json.dumps(model.to_dict())), X, y)
    np.testing.assert_allclose(back.predict(U, return_std=True)[1], std1, rtol=1e-10)
    assert BandWidening.from_dict(model.bands_[(0,)].to_dict()) == model.bands_[(0,)]


def test_widened_band_holds_most_held_out_errors(few):
    _, X, y = few
    model = MixedSurrogate(LEVELS, seed=0).fit(X, y).widen(level_unit_sample(LEVELS, 128, seed=1), seed=0)
    rng = np.random.default_rng(12345)
    T = np.column_stack([rng.random((300, 2)), np.repeat([0, 1, 2], 100)])
    mean, std = model.predict(T, return_std=True)
    inside = np.mean(np.abs(hartmann3_levels(T) - mean) <= 2 * std)
    # a 2-sigma band of normal errors holds 95.4 %; the target is 90-99 % (benchmarks/bench_mixed.py measures
    # this over plan seeds: 97 % at 6 runs per level on this function against 91 % plug-in)
    assert 0.9 <= inside <= 1.0
