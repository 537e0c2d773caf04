"""Sobol indices (doe.sensitivity.sobol) against analytic indices and a reference library."""
import json
import math
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats
from scipy.stats import qmc

from doe.testing import functions as tf
from doe.sensitivity.inputs import InputDistribution
from doe.errors import SensitivityError
from doe.sensitivity.sobol import sobol_indices
from doe.sensitivity.words import describe, to_dict
from doe.workflow.sensitivity import surrogate_callables
from doe.space import Parameter, Space
from doe.surrogate.gp import ResponseSurrogate
from doe.surrogate.set import SurrogateSet

sys.path.insert(0, str(Path(__file__).parent))
from gp_reference import fit_reference_gp  # noqa: E402


def ishigami_analytic(a=7.0, b=0.1):
    # Ishigami & Homma 1990; Sobol' & Levitan 1999, Comput. Phys. Commun. 117:52 (computed):
    # V1 = (1 + b pi^4/5)^2 / 2, V2 = a^2/8, V13 = 8 b^2 pi^8 / 225, V = V1 + V2 + V13
    v1 = 0.5 * (1 + b * math.pi**4 / 5) ** 2
    v2 = a**2 / 8
    v13 = 8 * b**2 * math.pi**8 / 225
    v = v1 + v2 + v13
    return np.array([v1, v2, 0.0]) / v, np.array([v1 + v13, v2, v13]) / v


def g_analytic(a):
    # Saltelli & Sobol' 1995, Reliab. Eng. Syst. Saf. 50:225: V_i = 1/(3(1+a_i)^2), V = prod(1+V_i) - 1,
    # S_i = V_i/V, ST_i = V_i prod_{j != i}(1+V_j)/V
    a = np.asarray(a, dtype=float)
    vi = 1 / (3 * (1 + a) ** 2)
    v = np.prod(1 + vi) - 1
    st = np.array([vi[i] * np.prod(np.delete(1 + vi, i)) for i in range(len(a))]) / v
    return vi / v, st


G_A = (0, 1, 4.5, 9, 99, 99, 99, 99)


def box(*spans):
    return Space(tuple(Parameter(f"x{i + 1}", "-", lo, hi, tol) for i, (lo, hi, tol) in enumerate(spans)))


def test_analytic_values_match_published():
    # Sobol' & Levitan 1999 (via REFERENCES.md): S = (0.3139, 0.4424, 0), ST = (0.5576, 0.4424, 0.2437)
    s1, st = ishigami_analytic()
    np.testing.assert_allclose(s1, [0.3139, 0.4424, 0.0], atol=1e-4)  # published to 4 decimals
    np.testing.assert_allclose(st, [0.5576, 0.4424, 0.2437], atol=1e-4)
    # Saltelli & Sobol' 1995 (via REFERENCES.md): G-function a = (0, 1, 4.5, 9, 99 x4)
    s1, st = g_analytic(G_A)
    np.testing.assert_allclose(s1[:4], [0.7162, 0.1791, 0.0237, 0.0072], atol=1e-4)
    np.testing.assert_allclose(st[:4], [0.7871, 0.2422, 0.0343, 0.0105], atol=1e-4)


# ---------------------------------------------------------------------------
@pytest.fixture(scope="module")
def ishigami_direct():
    f = tf.get("ishigami")
    return sobol_indices(f, InputDistribution.uniform(f.space()), seed=0)


def test_ishigami_direct_within_001(ishigami_direct):
    s1, st = ishigami_analytic()
    res = ishigami_direct["y"]
    # 0.01: the accuracy for the direct route; Saltelli 2010 / Jansen estimators at N = 2^15
    np.testing.assert_allclose(res.S1, s1, atol=0.01)
    np.testing.assert_allclose(res.ST, st, atol=0.01)
    assert np.all(np.abs(res.S1 - s1) <= res.S1_pm95) and np.all(np.abs(res.ST - st) <= res.ST_pm95)
    assert np.all(res.S1_pm95_surrogate == 0) and ishigami_direct.route == "direct"
    assert res.ranking() == ["x1", "x2", "x3"] and res.unresolved == []


def test_g_function_direct_and_scipy_cross_check():
    f = tf.get("g_function")
    res = sobol_indices(f, InputDistribution.uniform(f.space()), base_samples=2**13, seed=3)["y"]
    s1, st = g_analytic(G_A)
    # 0.01: estimator error at N = 2^13 on the G-function is a few 1e-3 (bootstrap half-widths below)
    np.testing.assert_allclose(res.S1, s1, atol=0.01)
    np.testing.assert_allclose(res.ST, st, atol=0.01)
    # reference library: scipy.stats.sobol_indices (Saltelli 2010 first order, Jansen total) on the same function
    ref = stats.sobol_indices(func=lambda X: f(X.T), n=2**13, dists=[stats.uniform(0, 1)] * 8,
                              rng=np.random.default_rng(4))
    np.testing.assert_allclose(res.S1, ref.first_order, atol=0.01)  # two independent estimates, each within ~0.005
    np.testing.assert_allclose(res.ST, ref.total_order, atol=0.01)


def test_linear_model_exact_indices_uniform_and_scatter():
    # Saltelli et al. 2008, Global Sensitivity Analysis: The Primer, ch. 1:
    # Y = sum c_i X_i with independent inputs: S_i = ST_i = c_i^2 sigma_i^2 / sum_j c_j^2 sigma_j^2
    c = np.array([2.0, -1.0, 0.5, 0.0])
    space = box((0, 1, 0.1), (0, 3, 0.3), (-2, 2, 0.4), (0, 1, 0.05))
    model = lambda X: X @ c  # noqa: E731
    cases = {
        "uniform": (InputDistribution.uniform(space), space.upper - space.lower, 1 / 12),
        "normal": (InputDistribution.around(space, [0.5, 1.5, 0.0, 0.5], "normal"), space.tolerances, 1.0),
    }
    for kind, (inputs, spread, factor) in cases.items():
        var = c**2 * spread**2 * factor
        exact = var / var.sum()
        res = sobol_indices(model, inputs, base_samples=2**12, seed=1)["y"]
        # 0.005: a linear model has no interactions; estimator error at N = 2^12 is ~1e-3
        np.testing.assert_allclose(res.S1, exact, atol=0.005, err_msg=kind)
        np.testing.assert_allclose(res.ST, exact, atol=0.005, err_msg=kind)
        assert res.std == pytest.approx(math.sqrt(var.sum()), rel=0.02)  # sample sd over 2N points


def test_truncated_normal_uses_truncated_variance():
    # reference library: scipy.stats.truncnorm variance; the linear model's indices follow it (Primer, ch. 1)
    c = np.array([1.0, 1.0])
    space = box((0, 1, 0.5), (0, 1, 0.05))
    inputs = InputDistribution.around(space, [0.5, 0.5])  # truncnormal by default
    sd1 = 0.5 * math.sqrt(stats.truncnorm(-1, 1).var())
    exact = np.array([sd1**2, 0.05**2]) / (sd1**2 + 0.05**2)
    res = sobol_indices(lambda X: X @ c, inputs, base_samples=2**12, seed=2)["y"]
    np.testing.assert_allclose(res.ST, exact, atol=0.005)  # as in the linear test above


def test_fixed_parameter_has_zero_indices():
    space = box((0, 1, 0.1), (0, 1, 0.0))
    res = sobol_indices(lambda X: X[:, 0] + X[:, 1], InputDistribution.around(space, [0.5, 0.5]),
                        base_samples=2**10, seed=0)["y"]
    assert res.fixed.tolist() == [False, True]
    assert res.S1[1] == 0 and res.ST[1] == 0 and res.ranking() == ["x1"]
    # the only varying input explains everything; 0.01: estimator error at N = 2^10 for one input
    assert res.S1[0] == pytest.approx(1.0, abs=0.01) and res.ST[0] == pytest.approx(1.0, abs=0.01)


def test_coverage_of_direct_intervals_over_seeds():
    # Coverage study: reported 95 % intervals must contain the analytic value (Sobol' & Levitan 1999;
    # Saltelli & Sobol' 1995) in at least 90 % of repeated seeds.
    hits = []
    for name, exact in (("ishigami", ishigami_analytic()), ("g_function", g_analytic(G_A))):
        f = tf.get(name)
        inputs = InputDistribution.uniform(f.space())
        for seed in range(12):
            res = sobol_indices(f, inputs, base_samples=2**9, seed=seed)["y"]
            hits.extend(np.abs(res.S1 - exact[0]) <= res.S1_pm95)
            hits.extend(np.abs(res.ST - exact[1]) <= res.ST_pm95)
    assert np.mean(hits) >= 0.90


def test_same_seed_same_numbers_and_seed_zero_is_seeded():
    f = tf.get("ishigami")
    inputs = InputDistribution.uniform(f.space())
    a = sobol_indices(f, inputs, base_samples=2**9, seed=0)["y"]
    b = sobol_indices(f, inputs, base_samples=2**9, seed=0)["y"]
    c = sobol_indices(f, inputs, base_samples=2**9, seed=1)["y"]
    np.testing.assert_array_equal(a.ST_pm95, b.ST_pm95)  # exact: same seed, same bootstrap
    assert not np.array_equal(a.ST, c.ST)


def test_saltelli_sample_prefix_is_stable_when_doubled():
    # the base-sample growth reuses evaluations: SALib's Saltelli sample of 2N starts with that of N
    from SALib.sample import sobol as sobol_sample

    problem = {"num_vars": 3, "names": ["a", "b", "c"], "bounds": [[0, 1]] * 3}
    small = sobol_sample.sample(dict(problem), 256, calc_second_order=False, seed=5)
    large = sobol_sample.sample(dict(problem), 1024, calc_second_order=False, seed=5)
    np.testing.assert_array_equal(small, large[: len(small)])


# ---------------------------------------------------------------------------
def project_surrogate(space, U, y, seed=0):
    """doe.surrogate.gp's GP (squared-exponential kernel fixed to keep the test fast) as sensitivity callables."""
    gp = ResponseSurrogate(kernel="sqexp", trend="constant", noise="fixed", restarts=1, seed=seed).fit(U, y)
    return surrogate_callables(SurrogateSet(space, {"y": gp}, {"y": "-"}, {"y": "none"}, list(map(str, range(len(y))))))


@pytest.fixture(scope="module")
def ishigami_surrogate():
    f = tf.get("ishigami")
    space = f.space()
    U = qmc.LatinHypercube(3, seed=0).random(200)
    model, paths = project_surrogate(space, U, f(space.from_unit(U)))
    return sobol_indices(model, InputDistribution.uniform(space), paths=paths, seed=0), model, paths


def test_ishigami_surrogate_within_003(ishigami_surrogate):
    result = ishigami_surrogate[0]
    res = result["y"]
    s1, st = ishigami_analytic()
    # 0.03: the accuracy for the surrogate route from at most 200 runs
    np.testing.assert_allclose(res.S1, s1, atol=0.03)
    np.testing.assert_allclose(res.ST, st, atol=0.03)
    assert np.all(np.abs(res.S1 - s1) <= res.S1_pm95) and np.all(np.abs(res.ST - st) <= res.ST_pm95)
    assert result.route == "surrogate" and result.n_paths == 64 and result.path_base_samples == 256
    assert np.any(res.ST_pm95_surrogate > 0)


def test_surrogate_share_vanishes_without_posterior_spread():
    f = tf.get("ishigami")
    inputs = InputDistribution.uniform(f.space())
    exact_paths = lambda X, n, seed: np.tile(f(X), (n, 1))  # noqa: E731 - a posterior with no spread
    res = sobol_indices(f, inputs, paths=exact_paths, base_samples=2**10, seed=0)["y"]
    np.testing.assert_array_equal(res.ST_pm95_surrogate, 0.0)  # exact: the control variate cancels
    np.testing.assert_array_equal(res.ST_pm95, res.ST_pm95_mc)


def test_surrogate_share_grows_with_posterior_spread():
    # reference library: scikit-learn's GaussianProcessRegressor (tests/gp_reference.py), not doe.surrogate.gp
    f = tf.get("ishigami")
    space = f.space()
    inputs = InputDistribution.uniform(space)
    half = []
    for runs in (40, 120):
        X = space.from_unit(qmc.LatinHypercube(3, seed=1).random(runs))
        model, paths = fit_reference_gp(space, X, f(X), seed=1)
        res = sobol_indices(model, inputs, paths=paths, base_samples=2**10, n_paths=32, seed=1)["y"]
        half.append(res.ST_pm95_surrogate.max())
    assert half[0] > 2 * half[1]  # fewer runs, a wider posterior: a clearly wider surrogate share


def test_surrogate_indices_are_centred_on_the_mean_index_over_paths():
    # Marrel, Iooss, Laurent & Roustant (2009), Reliab. Eng. Syst. Saf. 94:742, eq. (12): the index of a GP is
    # estimated by its mean over posterior sample paths, not by the index of the posterior mean. Paths
    # f_p = x1 + a_p (x2 - 1/2) on U(0,1)^2 have, exactly, ST_x2 = a_p^2 / (1 + a_p^2) (additive: V1 = 1/12,
    # V2 = a_p^2/12); the mean function x1 has ST_x2 = 0.
    space = box((0, 1, 0), (0, 1, 0))
    drawn = []

    def paths(X, n, seed):
        a = np.random.default_rng(seed).standard_normal(n)
        drawn.append(a)
        return X[:, 0] + a[:, None] * (X[:, 1] - 0.5)

    res = sobol_indices(lambda X: X[:, 0], InputDistribution.uniform(space), paths=paths, base_samples=2**10,
                        n_paths=64, seed=0)["y"]
    a = drawn[0]
    exact = np.mean(a**2 / (1 + a**2))
    # Jansen's estimator on the 256-row path sample is close to exact for an additive function (measured errors
    # below 1e-4 over 4 seeds); 0.005 leaves room for other samples
    assert res.ST[1] == pytest.approx(exact, abs=0.005) and res.ST[0] == pytest.approx(1 - exact, abs=0.005)
    assert abs(res.ST[1] - exact) <= res.ST_pm95[1]


def test_too_few_runs_to_rank_is_stated():
    # two knobs of equal effect under a wide posterior: the total-index intervals of the top two overlap
    space = box((0, 1, 0), (0, 1, 0), (0, 1, 0))
    f = lambda X: X[:, 0] + X[:, 1] + 0.1 * X[:, 2]  # noqa: E731
    wide = lambda X, n, seed: f(X) + 0.5 * np.random.default_rng(seed).standard_normal((n, 1)) * np.sin(  # noqa: E731
        6 * X[:, :1].T + np.arange(n)[:, None])
    res = sobol_indices(f, InputDistribution.uniform(space), paths=wide, base_samples=2**10, seed=0)["y"]
    assert res.too_few_runs
    text = describe(res)
    assert "Too few runs to rank the knobs" in text
    # one clear leader and no posterior spread: the ranking stands
    g = lambda X: 3 * X[:, 0] + X[:, 1]  # noqa: E731
    sure = sobol_indices(g, InputDistribution.uniform(space), paths=lambda X, n, seed: np.tile(g(X), (n, 1)),
                         base_samples=2**10, seed=0)["y"]
    assert not sure.too_few_runs and "Too few runs" not in describe(sure)
    assert not sobol_indices(f, InputDistribution.uniform(space), base_samples=2**10, seed=0)["y"].too_few_runs


def test_unresolved_ranking_and_statement():
    space = box((0, 1, 0), (0, 1, 0), (0, 1, 0), (0, 1, 0))
    c = np.array([1.0, 1.0, 3.0, 0.0])
    res = sobol_indices(lambda X: X @ c, InputDistribution.uniform(space), base_samples=2**9, seed=0)["y"]
    assert res.ranking()[0] == "x3"
    assert ("x1", "x2") in res.unresolved or ("x2", "x1") in res.unresolved  # equal effects cannot be ordered
    assert not any("x3" in p for p in res.unresolved)
    text = describe(res, "net downforce", {"x3": "wing angle of attack"})
    assert text.startswith("wing angle of attack explains about 82 % of the variation in net downforce")
    assert "x4 is negligible" in text and "do not settle the order of x1 and x2" in text


def test_interaction_is_named_with_second_order():
    # Y = x1 + x2 * x3 on U(0,1)^3 (Primer ch. 1 style product term): x2 and x3 act mostly together
    space = box((0, 1, 0), (-1, 1, 0), (-1, 1, 0))
    res = sobol_indices(lambda X: 0.3 * X[:, 0] + X[:, 1] * X[:, 2], InputDistribution.uniform(space),
                        base_samples=2**11, second_order=True, seed=0)["y"]
    # exact: V1 = 0.09/12, V23 = (1/3)^2, S1_2 = S1_3 = 0; S2_23 = V23 / V
    v1, v23 = 0.09 / 12, 1 / 9
    assert res.S2[1, 2] == pytest.approx(v23 / (v1 + v23), abs=0.03)  # S2 estimator (Saltelli 2002) at N = 2^11
    text = describe(res)
    assert "mostly through interaction with x3" in text or "mostly through interaction with x2" in text


def test_json_keys_and_finite_values(ishigami_surrogate):
    data = to_dict(ishigami_surrogate[0])
    json.dumps(data, allow_nan=False)
    for p in ("x1", "x2", "x3"):
        assert {"S1", "S1_pm95", "ST", "ST_pm95", "S1_pm95_mc", "S1_pm95_surrogate", "rank"} <= set(data["y"][p])
    meta = data["_meta"]
    assert meta["route"] == "surrogate" and meta["inputs"]["kind"] == "uniform"
    assert meta["responses"]["y"]["ranking"] == ["x1", "x2", "x3"]
    assert "x1 explains about" in meta["responses"]["y"]["statement"]


def test_bad_input_raises_our_errors():
    space = box((0, 1, 0.1), (0, 1, 0.1))
    uni = InputDistribution.uniform(space)
    with pytest.raises(SensitivityError, match="power of two"):
        sobol_indices(lambda X: X[:, 0], uni, base_samples=1000)
    with pytest.raises(SensitivityError, match="non-finite"):
        sobol_indices(lambda X: np.where(X[:, 0] > 0.5, np.nan, 1.0), uni, base_samples=64)
    with pytest.raises(SensitivityError, match="outside"):
        InputDistribution.around(space, [0.5, 2.0])
    with pytest.raises(SensitivityError, match="no value for 'x2'"):
        InputDistribution.around(space, {"x1": 0.5})
    with pytest.raises(SensitivityError, match="no parameter has a spread"):
        InputDistribution.around(space, [0.5, 0.5], scale=[0, 0])


def test_evaluation_budget_is_kept():
    f = tf.get("ishigami")
    result = sobol_indices(f, InputDistribution.uniform(f.space()), max_evaluations=3000, seed=0)
    assert result.evaluations <= 3000 and result.base_samples == 512 and not result.reached


def test_few_failed_points_drop_their_base_rows():
    # Primer ch. 1 linear model again; the model "fails" (NaN) in a sliver x1 > 0.997 of the box
    space = box((0, 1, 0), (0, 1, 0))
    model = lambda X: np.where(X[:, 0] > 0.997, np.nan, X[:, 0] + 2 * X[:, 1])  # noqa: E731
    exact = np.array([1.0, 4.0]) / 5.0
    result = sobol_indices(model, InputDistribution.uniform(space), base_samples=2**11, max_failed_share=0.01, seed=0)
    assert 0 < result.dropped_rows < 0.01 * 2**11
    # 0.01: dropping ~0.5 % of rows barely changes the input distribution; estimator error ~3e-3
    np.testing.assert_allclose(result["y"].ST, exact, atol=0.01)
    assert any("base rows were left out" in n for n in result["y"].notes)
    with pytest.raises(SensitivityError, match="non-finite value"):
        sobol_indices(model, InputDistribution.uniform(space), base_samples=2**11, seed=0)
