"""The mixed-input Gaussian process (continuous knobs times an exchangeable level correlation)."""
from __future__ import annotations

import numpy as np
import pytest

from doe.design.plans import sliced_lhs
from doe.errors import NotFittedError, SurrogateError
from doe.surrogate.mixed import (LevelKernel, MixedSurrogate, SeparateSurrogates, UnrestrictedLevelKernel,
                                 best_level_surrogate, hypersphere_correlation)
from doe.testing.functions import hartmann3, hartmann3_levels


def _points(n=7, seed=0):
    rng = np.random.default_rng(seed)
    return np.column_stack([rng.random((n, 2)) - 0.5, rng.integers(0, 3, n), rng.integers(0, 2, n)])


@pytest.mark.parametrize("family,unrestricted", [("sqexp", False), ("matern52", False), ("matern32", False),
                                                  ("matern52", True), ("sqexp", True)])
def test_kernel_gradient_matches_finite_differences(family, unrestricted):
    if unrestricted:     # 3 angles for the 3-level choice, 1 for the 2-level one
        kern = UnrestrictedLevelKernel((0, 0, 3, 2), family, np.array([0.4, 0.7]),
                                       level_angle=np.array([0.5, 2.0, 1.0, 2.2]))
    else:
        kern = LevelKernel((0, 0, 3, 2), family, np.array([0.4, 0.7]), level_scale=np.array([0.5, 2.0]))
    X = _points()
    K, dK = kern(X, eval_gradient=True)
    assert dK.shape == (7, 7, 6 if unrestricted else 4)
    theta, h = kern.theta.copy(), 1e-6
    for i in range(len(theta)):
        up, down = kern.clone_with_theta(theta + h * np.eye(len(theta))[i]), kern.clone_with_theta(
            theta - h * np.eye(len(theta))[i])
        # central difference in ln(theta): truncation error O(h^2) ~ 1e-12, round-off ~ 1e-16 / h ~ 1e-10
        np.testing.assert_allclose(dK[..., i], (up(X) - down(X)) / (2 * h), atol=1e-8)


def test_kernel_is_exchangeable_and_positive_definite():
    kern = LevelKernel((0, 0, 3), "matern52", 0.5, level_scale=0.7)
    X = np.array([[0.1, 0.2, 0], [0.1, 0.2, 1], [0.1, 0.2, 2], [0.3, -0.2, 0]])
    K = kern(X)
    rho = np.exp(-0.7)
    # same continuous point, different levels: the correlation is rho for every pair of levels (exchangeable;
    # Qian, Wu & Wu 2008, Technometrics 50:383, the EC special case; compound symmetry in Roustant et al. 2020)
    np.testing.assert_allclose([K[0, 1], K[0, 2], K[1, 2]], rho, rtol=1e-14)
    np.testing.assert_allclose(kern(X[3:], X[1:2])[0, 0], rho * kern(X[3:], X[:1])[0, 0], rtol=1e-14)
    assert np.linalg.eigvalsh(kern(_points(30, 3)[:, :3])).min() > -1e-12
    np.testing.assert_array_equal(kern.diag(X), 1.0)


def _sliced(per, seed, column=0):
    U, slice_of = sliced_lhs([per] * 3, 2, seed=seed)
    X = np.column_stack([U, slice_of])
    return X, hartmann3_levels(X, column=column)


def test_levels_reproduce_hartmann3():
    # the mixed problem is Hartmann 3-D (Dixon & Szego 1978) with x1 held at 0.2, 0.5, 0.8
    X = np.array([[0.3, 0.9, 0], [0.55, 0.85, 2]])
    np.testing.assert_array_equal(hartmann3_levels(X), hartmann3([[0.2, 0.3, 0.9], [0.8, 0.55, 0.85]]))


def test_interpolates_and_loo_matches_refits():
    X, y = _sliced(6, 1)
    gp = MixedSurrogate((0, 0, 3), seed=0).fit(X, y)
    mean, std = gp.predict(X, return_std=True)
    # with the 1e-6 nugget the fit passes within about sqrt(1e-6) response std devs of each run
    np.testing.assert_allclose(mean, y, atol=2e-3 * y.std())
    assert std.max() < 2e-3 * y.std()
    # closed-form leave-one-out (Rasmussen & Williams 2006, eq. 5.12) equals refitting without the run,
    # hyperparameters fixed (Dubrule 1983)
    for i in (0, 7):
        keep = np.arange(len(y)) != i
        fixed = MixedSurrogate((0, 0, 3), seed=0)
        fixed.levels_ = gp.levels_
        fixed.y_mean_, fixed.y_std_ = gp.y_mean_, gp.y_std_
        from sklearn.gaussian_process import GaussianProcessRegressor
        refit = GaussianProcessRegressor(gp.gp_.kernel_, alpha=gp.gp_.alpha, optimizer=None).fit(
            fixed._scaled(X[keep]), (y[keep] - gp.y_mean_) / gp.y_std_)
        pred = refit.predict(fixed._scaled(X[i:i + 1]))[0] * gp.y_std_ + gp.y_mean_
        assert gp.loo_.predicted[i] == pytest.approx(pred, rel=1e-6, abs=1e-9)


def test_mixed_gp_beats_one_gp_per_level_when_levels_share_structure():
    # Hartmann 3-D with x1 at three values: three related surfaces (doe.testing.functions.hartmann3_levels);
    # 12 runs per level on a sliced Latin hypercube (Qian 2012), held-out RMSE on 900 uniform points.
    X, y = _sliced(12, 2)
    rng = np.random.default_rng(99)
    T = np.column_stack([rng.random((900, 2)), np.repeat([0, 1, 2], 300)])
    truth = hartmann3_levels(T)
    mixed = MixedSurrogate((0, 0, 3), seed=0).fit(X, y)
    separate = SeparateSurrogates((0, 0, 3), seed=0).fit(X, y)
    rmse_mixed = np.sqrt(np.mean((mixed.predict(T) - truth) ** 2))
    rmse_separate = np.sqrt(np.mean((separate.predict(T) - truth) ** 2))
    # measured 0.28 against 0.60 (seed 2; benchmarks/bench_mixed.py gives the spread over seeds)
    assert rmse_mixed < 0.75 * rmse_separate
    assert mixed.level_correlations_[0] > 0.5      # it learned that the levels share structure


def test_unrelated_levels_get_a_small_correlation():
    # Hartmann 3-D with x3 held instead: level surfaces correlated -0.6 to 0.2, nothing to share
    X, y = _sliced(12, 2, column=2)
    assert MixedSurrogate((0, 0, 3), seed=0).fit(X, y).level_correlations_[0] < 0.2


def test_bad_use_is_a_plain_error():
    X, y = _sliced(4, 0)
    with pytest.raises(NotFittedError):
        MixedSurrogate((0, 0, 3)).predict(X)
    with pytest.raises(SurrogateError, match="must give 0 for each continuous column"):
        MixedSurrogate((3, 1)).fit(X[:, [2, 0]], y)
    with pytest.raises(SurrogateError, match="column 2 is a choice of 3 levels"):
        MixedSurrogate((0, 0, 3)).fit(np.column_stack([X[:, :2], X[:, 2] + 0.5]), y)
    with pytest.raises(SurrogateError, match="kernel='rbf'"):
        MixedSurrogate((0, 0, 3), kernel="rbf").fit(X, y)
    sep = SeparateSurrogates((0, 0, 3)).fit(X[X[:, 2] < 2], y[X[:, 2] < 2])
    with pytest.raises(SurrogateError, match=r"level combination \(2,\) has no runs"):
        sep.predict(X)


def test_sample_paths_have_the_posterior_spread():
    X, y = _sliced(5, 4)
    gp = MixedSurrogate((0, 0, 3), seed=0).fit(X, y)
    rng = np.random.default_rng(5)
    T = np.column_stack([rng.random((40, 2)), rng.integers(0, 3, 40)])
    mean, std = gp.predict(T, return_std=True)
    draws = gp.sample_paths(T, 2000, seed=1)
    # 2000 draws: the sample mean is within 4 standard errors (std / sqrt(2000)) of the posterior mean,
    # the sample sd within 10 % of the posterior sd (its relative standard error is 1/sqrt(2 * 2000) = 1.6 %)
    assert np.all(np.abs(draws.mean(0) - mean) < 4 * std / np.sqrt(2000) + 1e-9)
    np.testing.assert_allclose(draws.std(0), std, rtol=0.1)
    np.testing.assert_array_equal(draws, gp.sample_paths(T, 2000, seed=1))


def test_separate_loo_is_each_levels_own_and_choice_by_loo():
    X, y = _sliced(8, 1, column=2)
    sep = SeparateSurrogates((0, 0, 3), seed=0).fit(X, y)
    for level, model in sep.models_.items():
        rows = X[:, 2] == level[0]
        np.testing.assert_array_equal(sep.loo_.predicted[rows], model.loo_.predicted)
    model, table = best_level_surrogate((0, 0, 3), X, y, seed=0)
    kept = min(table, key=lambda t: t["rmse_loo"])
    assert kept["chosen"] and isinstance(model, MixedSurrogate if kept["model"] == "mixed" else SeparateSurrogates)
    few = (X[:, 2] < 2) | (np.cumsum(X[:, 2] == 2) <= 2)       # level 2 keeps 2 runs: too few on its own
    model, table = best_level_surrogate((0, 0, 3), X[few], y[few], seed=0)
    assert isinstance(model, MixedSurrogate) and "needs at least 3" in table[1]["why"]


def test_hypersphere_gives_a_correlation_matrix():
    # Zhou, Qian & Zhou 2011 (Technometrics 53:266), eqs. 7-8: T = L L^T with unit rows of L, so unit diagonal
    # and positive semi-definite for any angles; with two levels the correlation is cos(a)
    rng = np.random.default_rng(0)
    for n in (2, 3, 5):
        a = rng.uniform(0.05, np.pi - 0.05, n * (n - 1) // 2)
        T, dT = hypersphere_correlation(a, n)
        np.testing.assert_allclose(np.diag(T), 1.0, rtol=1e-14)
        assert np.linalg.eigvalsh(T).min() > -1e-12 and np.allclose(T, T.T)
        h = 1e-6      # central differences: error ~1e-12 truncation, ~1e-10 round-off
        num = np.stack([(hypersphere_correlation(a + h * e, n)[0] - hypersphere_correlation(a - h * e, n)[0]) / (2 * h)
                        for e in np.eye(len(a))], axis=-1)
        np.testing.assert_allclose(dT, num, atol=1e-8)
    assert hypersphere_correlation([1.0], 2)[0][0, 1] == pytest.approx(np.cos(1.0), rel=1e-14)


def test_unrestricted_correlation_fits_and_predicts():
    X, y = _sliced(12, 2)
    rng = np.random.default_rng(99)
    T = np.column_stack([rng.random((900, 2)), np.repeat([0, 1, 2], 300)])
    truth = hartmann3_levels(T)
    full = MixedSurrogate((0, 0, 3), seed=0, correlation="unrestricted").fit(X, y)
    (C,) = full.level_matrices_
    assert C.shape == (3, 3) and np.all(C[np.triu_indices(3, 1)] > 0.5)   # related levels: strong correlations
    separate = SeparateSurrogates((0, 0, 3), seed=0).fit(X, y)
    # same problem as test_mixed_gp_beats_one_gp_per_level_when_levels_share_structure
    assert np.sqrt(np.mean((full.predict(T) - truth) ** 2)) < 0.75 * np.sqrt(np.mean((separate.predict(T) - truth) ** 2))
    assert np.isnan(full.level_correlations_).all()
    with pytest.raises(SurrogateError, match="correlation='full'"):
        MixedSurrogate((0, 0, 3), correlation="full").fit(X, y)


@pytest.mark.parametrize("correlation", ["exchangeable", "unrestricted"])
def test_saved_record_rebuilds_the_same_surrogate(correlation):
    import json

    X, y = _sliced(6, 3)
    gp = MixedSurrogate((0, 0, 3), seed=0, correlation=correlation).fit(X, y)
    record = json.loads(json.dumps(gp.to_dict()))                     # plain JSON values
    back = MixedSurrogate.from_dict(record, X, y)
    T = _sliced(5, 9)[0]
    m0, s0 = gp.predict(T, return_std=True)
    m1, s1 = back.predict(T, return_std=True)
    # same hyperparameters and data, refactorised: equal to round-off
    np.testing.assert_allclose(m1, m0, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(s1, s0, rtol=1e-6, atol=1e-12)
    assert back.loo_.rmse == pytest.approx(gp.loo_.rmse, rel=1e-9)
    with pytest.raises(SurrogateError, match="do not fit this kernel"):
        MixedSurrogate.from_dict(dict(record, theta=record["theta"][:-1]), X, y)
    with pytest.raises(SurrogateError, match="incomplete or malformed"):
        MixedSurrogate.from_dict({"levels": [0, 0, 3]}, X, y)


def test_saved_separate_surrogates_rebuild():
    import json

    X, y = _sliced(6, 3)
    sep = SeparateSurrogates((0, 0, 3), seed=0).fit(X, y)
    back = SeparateSurrogates.from_dict(json.loads(json.dumps(sep.to_dict())), X, y)
    T = _sliced(5, 9)[0]
    np.testing.assert_allclose(back.predict(T), sep.predict(T), rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(back.loo_.predicted, sep.loo_.predicted, rtol=1e-9)
    with pytest.raises(SurrogateError, match="level combinations differ"):
        SeparateSurrogates.from_dict(sep.to_dict(), X[X[:, 2] < 2], y[X[:, 2] < 2])


def test_plain_statements_at_the_bounds():
    X, y = _sliced(8, 1, column=2)
    assert any("share almost nothing" in t for t in MixedSurrogate((0, 0, 3)).fit(X, y).statements_)
    flat = MixedSurrogate((0, 0, 3)).fit(X, np.sin(6 * X[:, 1]) + X[:, 2])      # nothing along column 0
    assert any(t.startswith("column 0: its length scale is at the upper bound") for t in flat.statements_)
