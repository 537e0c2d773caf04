"""Checks of doe.robust.search on analytic functions posing as surrogates."""
import math

import numpy as np
import pytest
from scipy.special import ndtr

from doe.errors import DoeError
from doe.robust.scatter import fragility, propagate, scatter_draws
from doe.robust.search import find_settings
from doe.robust.tradeoff import nondominated, tradeoff_set, write_tradeoff
from doe.space import LinearConstraint, Parameter, Space
from doe.study.reader import ResponseLimit


def as_predictor(**funcs):
    """An exact 'surrogate': each response is f(X) with std 0 (or a given std function)."""
    def predict(X):
        out = {}
        for name, f in funcs.items():
            if isinstance(f, tuple):
                out[name] = (f[0](X), f[1](X))
            else:
                y = f(X)
                out[name] = (y, np.zeros_like(y))
        return out
    return predict


def peak_plateau(X):
    # a narrow high peak (height 1, width 0.01 at x = 0.2) and a broad plateau (0.8 on about [0.58, 0.82])
    x = X[:, 0]
    return np.exp(-(x - 0.2) ** 2 / (2 * 0.01**2)) + 0.8 * np.exp(-(((x - 0.7) / 0.15) ** 8))


@pytest.mark.parametrize("tol,where", [(0.0, 0.2), (0.002, 0.2), (0.05, 0.7)])
def test_robust_optimum_moves_to_plateau_when_scatter_grows(tol, where):
    # Under a scatter sigma the peak's expected height is 1/sqrt(1 + (sigma/0.01)^2) (Gaussian convolution):
    # 0.98 for sigma = 0.002, 0.196 for sigma = 0.05, so the plateau (0.8) wins only at 0.05.
    space = Space((Parameter("x", "mm", 0.0, 1.0, tol), Parameter("unused", "deg", 0.0, 1.0, tol)))
    res = find_settings(as_predictor(y=peak_plateau), space, "y", "maximize", k=1.0, seed=3)
    assert res.nominal.point["x"] == pytest.approx(0.2, abs=2e-3)  # the peak, located to 20 % of its width
    # the plateau is flat to 1e-3 on about +-0.06 around 0.7 (8th power): accept anywhere on its top
    assert res.robust.point["x"] == pytest.approx(where, abs=2e-3 if where == 0.2 else 0.06)
    if tol > 0:
        assert res.robust.std > 0


def test_mean_and_spread_against_lognormal_moments():
    # f = exp(a1 x1 + a2 x2), x_i ~ N(mu_i, tol_i^2): lognormal with s^2 = sum a_i^2 tol_i^2,
    # mean exp(m + s^2/2), variance (exp(s^2) - 1) exp(2m + s^2)
    # (Johnson, Kotz & Balakrishnan 1994, Continuous Univariate Distributions vol. 1, ch. 14, eq. 14.8a-b)
    a = np.array([0.8, -0.5])
    tol = np.array([0.2, 0.3])
    space = Space((Parameter("a", "-", -1, 1, tol[0]), Parameter("b", "-", -1, 1, tol[1])))
    x0 = np.array([[0.3, -0.2]])
    n = 8192
    sp = propagate(as_predictor(y=lambda X: np.exp(X @ a)), space, x0, scatter_draws(2, n, 11), ["y"])["y"]
    m, s2 = (x0 @ a).item(), float(np.sum(a**2 * tol**2))
    mean = math.exp(m + s2 / 2)
    std = math.sqrt((math.exp(s2) - 1) * math.exp(2 * m + s2))
    # Monte-Carlo error: 4 standard errors, sigma/sqrt(n) for the mean and about sigma/sqrt(2n)
    # for the std (near-normal here, s = 0.22), the plain Monte-Carlo bound; on a smooth integrand scrambled
    # Sobol' draws converge faster than n^-1/2 (Owen 1997, Ann. Statist. 25:1541), so the bound is safe
    assert sp.mean[0] == pytest.approx(mean, abs=4 * std / math.sqrt(n))
    assert sp.std[0] == pytest.approx(std, abs=4 * std / math.sqrt(2 * n) * 1.5)  # 1.5: lognormal kurtosis


def test_mean_spread_and_probability_against_brute_force_monte_carlo():
    # brute-force Monte Carlo on the underlying function (1e6 plain draws) against the
    # propagated figures (4096 scrambled Sobol' draws)
    def f(X):
        return np.sin(3 * X[:, 0]) + X[:, 1] ** 2 + X[:, 0] * X[:, 1]

    tol = np.array([0.1, 0.25])
    space = Space((Parameter("a", "-", -1, 1, tol[0]), Parameter("b", "-", -1, 1, tol[1])))
    x0 = np.array([0.4, 0.5])
    rng = np.random.default_rng(123)
    Y = f(x0 + rng.standard_normal((1_000_000, 2)) * tol)
    sp = propagate(as_predictor(y=f), space, x0[None, :], scatter_draws(2, 4096, 5), ["y"])["y"]
    se = Y.std() / math.sqrt(4096)  # standard error of the smaller sample dominates
    assert sp.mean[0] == pytest.approx(Y.mean(), abs=4 * se)
    assert sp.std[0] == pytest.approx(Y.std(), abs=4 * se * 1.5)  # std error ~ sigma/sqrt(2n), margin for kurtosis
    p_brute = np.mean(Y <= 1.3)
    p = sp.probability(None, 1.3)[0]
    # binomial standard error sqrt(p(1-p)/n) of the 4096-draw estimate, 4 of them
    assert p == pytest.approx(p_brute, abs=4 * math.sqrt(p_brute * (1 - p_brute) / 4096))


def test_probability_counts_surrogate_error():
    # no scatter, surrogate mean 1.0 with std 0.2: P(y <= 1.3) = Phi(1.5) (normal distribution function)
    space = Space((Parameter("a", "-", 0, 1, 0.0),))
    pred = as_predictor(y=(lambda X: np.ones(len(X)), lambda X: np.full(len(X), 0.2)))
    sp = propagate(pred, space, [[0.5]], scatter_draws(1, 64, 0), ["y"])["y"]
    assert sp.probability(None, 1.3)[0] == pytest.approx(ndtr(1.5), rel=1e-12)
    assert sp.probability(0.9, 1.3)[0] == pytest.approx(ndtr(1.5) - ndtr(-0.5), rel=1e-12)


def bowl(X):
    return -((X[:, 0] - 0.8) ** 2) - (X[:, 1] - 0.8) ** 2


def test_linear_constraint_and_response_limit_are_respected():
    # the bowl's top (0.8, 0.8) breaks x1 + x2 <= 1; the constrained optimum is (0.5, 0.5) (Lagrange)
    rule = LinearConstraint("sum", {"a": 1.0, "b": 1.0}, max=1.0)
    space = Space((Parameter("a", "-", 0, 1, 0.02), Parameter("b", "-", 0, 1, 0.02)), (rule,))
    res = find_settings(as_predictor(y=bowl, g=lambda X: X[:, 0] - X[:, 1]), space, "y", "maximize", k=1.0,
                        limits=(ResponseLimit("g", max=0.1),), probability=0.95, samples=512, seed=2)
    nom = res.nominal.point
    assert nom["a"] + nom["b"] <= 1.0 + 1e-9
    assert nom["a"] == pytest.approx(0.5, abs=5e-3) and nom["b"] == pytest.approx(0.5, abs=5e-3)  # DE tolerance
    assert res.nominal.feasible and res.robust.feasible
    # a - b ~ N(a0 - b0, 2 * 0.02^2): P(a - b <= 0.1) must be at least 0.95 at the robust point (normal law)
    r = res.robust.point
    assert ndtr((0.1 - (r["a"] - r["b"])) / (0.02 * math.sqrt(2))) >= 0.95 - 0.02  # MC estimate, 512 draws
    lim = res.robust.limits[0]
    assert lim["response"] == "g" and lim["probability"] >= 0.95 and lim["met_with_probability"]


def test_minimize_goal_and_determinism():
    space = Space((Parameter("a", "-", 0, 1, 0.05), Parameter("b", "-", 0, 1, 0.05)))
    pred = as_predictor(y=lambda X: -bowl(X))
    r1 = find_settings(pred, space, "y", "minimize", k=2.0, seed=9)
    r2 = find_settings(pred, space, "y", "minimize", k=2.0, seed=9)
    assert r1.to_dict() == r2.to_dict()
    assert r1.nominal.point["a"] == pytest.approx(0.8, abs=5e-3)
    # robust value of a minimised objective is mean + k std
    assert r1.robust.robust_value == pytest.approx(r1.robust.mean + 2.0 * r1.robust.std, rel=1e-12)


def test_far_from_data_flag_and_confirm_runs():
    space = Space((Parameter("a", "-", 0, 1, 0.02), Parameter("b", "-", 0, 1, 0.02)))
    pred = as_predictor(y=bowl)
    g = np.linspace(0.0, 0.3, 5)
    corner_runs = np.array([[u, v] for u in g for v in g])      # runs only near (0, 0)
    res = find_settings(pred, space, "y", "maximize", runs_X=corner_runs, seed=1)
    assert res.robust.flag and "nearest run" in res.robust.flag_reason
    assert res.robust.nearest_run == pytest.approx(math.hypot(0.5, 0.5), abs=1e-2)
    assert len(res.robust.confirm_runs) == 5                   # the point and +-1 tolerance on each parameter
    around = res.robust.point["a"] + np.array([[-0.05, -0.05], [0.0, 0.0], [0.05, 0.05], [-0.05, 0.05],
                                               [0.05, -0.05]])
    res2 = find_settings(pred, space, "y", "maximize", runs_X=around, seed=1)
    assert not res2.robust.flag


def test_fragility_against_analytic_derivatives():
    # f = -3 (a - 0.5)^2 - 2 b: at (0.5, 0.5) slope 0 and curvature -6 in a; slope -2 in b
    # (calculus; central differences are exact for a quadratic)
    space = Space((Parameter("a", "deg", 0, 1, 0.1), Parameter("b", "mm", 0, 1, 0.0)))
    f = as_predictor(y=lambda X: -3 * (X[:, 0] - 0.5) ** 2 - 2 * X[:, 1])
    fr = {x.parameter: x for x in fragility(f, space, "y", "maximize", [0.5, 0.5])}
    assert fr["a"].slope == pytest.approx(0.0, abs=1e-12)
    assert fr["a"].curvature == pytest.approx(-6.0, rel=1e-9)
    assert fr["a"].drop == pytest.approx(3 * 0.1**2, rel=1e-9)
    assert fr["b"].step == pytest.approx(0.01)                   # 1 % of the range when tolerance is 0
    assert fr["b"].slope == pytest.approx(-2.0, rel=1e-9)
    assert fr["b"].drop_per_unit == pytest.approx(2.0, rel=1e-9)
    assert fr["a"].rank == 1 and fr["b"].rank == 2              # 0.03 lost on a, 0.02 on b


def brute_nondominated(F):
    """O(n^2) definition: i is kept when no j is <= everywhere and < somewhere (Deb 2001, def. 2.5)."""
    n = len(F)
    keep = np.ones(n, dtype=bool)
    for i in range(n):
        le = np.all(F <= F[i], axis=1)
        lt = np.any(F < F[i], axis=1)
        keep[i] = not np.any(le & lt)
    return keep


def test_nondominated_against_brute_force_with_ties():
    rng = np.random.default_rng(0)
    F = np.round(rng.random((400, 3)) * 6) / 6          # many ties and duplicates
    assert np.array_equal(nondominated(F), brute_nondominated(F))


def test_tradeoff_set_equals_brute_force_filter_on_a_grid(tmp_path):
    # downforce-like (maximise) against drag-like (minimise), and a balance aimed at 0.45
    space = Space((Parameter("a", "deg", 0, 10, 0.2), Parameter("b", "mm", 0, 100, 2.0)),
                  (LinearConstraint("box", {"a": 1.0, "b": 0.05}, max=12.0),))
    down = lambda X: X[:, 0] * (1 + 0.004 * X[:, 1]) - 0.02 * X[:, 0] ** 2
    drag = lambda X: 0.3 + 0.01 * X[:, 0] ** 1.5 + 0.0003 * X[:, 1]
    bal = lambda X: 0.3 + 0.02 * X[:, 0] - 0.001 * X[:, 1]
    pred = as_predictor(down=down, drag=drag, bal=bal)
    A, B = np.meshgrid(np.linspace(0, 10, 41), np.linspace(0, 100, 41))
    grid = np.column_stack([A.ravel(), B.ravel()])
    ok = grid[space.feasible(grid)]
    for names, goals, F in (
            (["down", "drag"], {"down": "maximize", "drag": "minimize"},
             np.column_stack([-down(ok), drag(ok)])),
            (["down", "drag", "bal"], {"down": "maximize", "drag": "minimize", "bal": "none"},
             np.column_stack([-down(ok), drag(ok), np.abs(bal(ok) - 0.45)]))):
        table = tradeoff_set(pred, space, names, goals, targets={"bal": 0.45}, candidates=grid)
        expected = ok[brute_nondominated(F)]
        got = table[["a", "b"]].to_numpy()
        assert sorted(map(tuple, got)) == sorted(map(tuple, expected))
    write_tradeoff(table, tmp_path / "t.csv")
    assert (tmp_path / "t.csv").read_text().splitlines()[0] == "a,b,down,down_std,drag,drag_std,bal,bal_std"


def test_bad_input():
    space = Space((Parameter("a", "-", 0, 1, 0.1),))
    pred = as_predictor(y=lambda X: X[:, 0])
    with pytest.raises(DoeError):
        find_settings(pred, space, "y", "largest")
    with pytest.raises(DoeError):
        find_settings(pred, space, "nope", "maximize")
    with pytest.raises(DoeError):
        find_settings(pred, space, "y", "maximize", probability=1.0)
    with pytest.raises(DoeError):
        tradeoff_set(pred, space, ["y"], {"y": "maximize"})


@pytest.mark.parametrize("name", ["branin", "hartmann3"])
def test_nominal_search_finds_published_minima(name):
    # Branin minimum 5/(4 pi) = 0.397887, Hartmann 3-D minimum -3.86278 (Dixon & Szego 1978; definitions
    # as restated by Surjanovic & Bingham, Virtual Library of Simulation Experiments)
    from doe.testing.functions import get

    tf = get(name)
    res = find_settings(as_predictor(y=tf.func), tf.space(), "y", "minimize", seed=0)
    # the published values are given to 6 significant figures
    assert res.nominal.value_at_point == pytest.approx(tf.minimum, abs=2e-5)


def test_limits_given_as_dicts_match_response_limits():
    space = Space((Parameter("a", "-", 0, 1, 0.02), Parameter("b", "-", 0, 1, 0.02)))
    pred = as_predictor(y=bowl, g=lambda X: X[:, 0] + X[:, 1])
    r1 = find_settings(pred, space, "y", "maximize", limits=[{"response": "g", "max": 1.0}], seed=4, maxiter=30)
    r2 = find_settings(pred, space, "y", "maximize", limits=[ResponseLimit("g", max=1.0)], seed=4, maxiter=30)
    assert r1.to_dict() == r2.to_dict()
    with pytest.raises(DoeError):
        find_settings(pred, space, "y", "maximize", limits=[{"response": "g", "min": 2.0, "max": 1.0}])


def zdt1(X):
    # ZDT1 (Zitzler, Deb & Thiele 2000, Evol. Comput. 8(2):173-195, eq. for T1): f1 = x1,
    # g = 1 + 9 mean(x2..xn), f2 = g (1 - sqrt(f1 / g)); its trade-off line is f2 = 1 - sqrt(f1) (g = 1),
    # steep near f1 = 0
    g = 1.0 + 9.0 * np.mean(X[:, 1:], axis=1)
    return X[:, 0], g * (1.0 - np.sqrt(X[:, 0] / g))


def test_refined_tradeoff_follows_a_steep_line_without_steps():
    space = Space(tuple(Parameter(f"x{i}", "-", 0.0, 1.0) for i in range(3)))
    pred = as_predictor(f1=lambda X: zdt1(X)[0], f2=lambda X: zdt1(X)[1])
    goals = {"f1": "minimize", "f2": "minimize"}
    frame = tradeoff_set(pred, space, ["f1", "f2"], goals, samples=256, seed=0, refine=True, levels=8)
    f1, f2 = frame["f1"].to_numpy(), frame["f2"].to_numpy()
    gap = f2 - (1.0 - np.sqrt(f1))                            # >= 0: how far behind the true line
    on_line = gap < 1e-4                                      # polished points (SLSQP to about 1e-6)
    # the ends, the 8 even levels and the points added across steep gaps all land on the line
    assert on_line.sum() >= 10 and f1.min() < 1e-6 and f2.min() < 1e-6
    # between neighbouring points on the line no step in f2 is wider than an even share of its range
    steps = np.abs(np.diff(f2[on_line]))
    assert steps.max() <= 1.0 / 9 + 1e-9
