"""Sobol indices with choice and stepped knobs (doe.sensitivity.levels)."""
from __future__ import annotations

import numpy as np
import pytest

from doe.design.plans import sliced_lhs
from doe.errors import SensitivityError
from doe.sensitivity.levels import discrete_values, level_effects, level_sobol_indices
from doe.space import Parameter, Space
from doe.surrogate.mixed import MixedSurrogate
from doe.testing.functions import additive_levels, additive_levels_indices

SPACE = Space((Parameter("x1", "-", 0.0, 1.0), Parameter("x2", "-", 0.0, 1.0),
               Parameter.choice("section", ["a", "b", "c"])))


def test_additive_function_variances_by_hand():
    # g(x) + h(c) = 2 sin(pi x1) + (2 x2 - 1)^2 + h(c), x ~ U(0, 1)^2, three equally likely levels.
    # V1 = 4 (1/2 - 4/pi^2) from E[sin^2(pi x)] = 1/2, E[sin(pi x)] = 2/pi; V2 = 1/5 - 1/9 = 4/45 from
    # E[u^4] = 1/5, E[u^2] = 1/3 for u = 2x - 1 ~ U(-1, 1); Vc = mean(h^2) - mean(h)^2 with h = (0, 0.8, -0.5).
    # Additive: no interaction terms, S_i = ST_i = V_i / V (Sobol' 1993, Math. Model. Comput. Exp. 1:407).
    V = additive_levels_indices()["V"]
    assert V["x1"] == pytest.approx(4 * (0.5 - 4 / np.pi**2), rel=1e-14)
    assert V["x2"] == pytest.approx(4 / 45, rel=1e-14)
    assert V["c"] == pytest.approx((0.64 + 0.25) / 3 - (0.3 / 3) ** 2, rel=1e-14)
    rng = np.random.default_rng(0)     # and the function has that variance: 2e5 draws, sd of the estimate ~0.4 %
    X = np.column_stack([rng.random((200_000, 2)), rng.integers(0, 3, 200_000)])
    assert np.var(additive_levels(X)) == pytest.approx(sum(V.values()), rel=0.015)


def test_carrier_gives_every_level_the_same_weight():
    U = np.linspace(0.0, 1.0, 3001)
    X = discrete_values(Space((Parameter.choice("c", ["a", "b", "c"]), Parameter.stepped("g", "mm", [0, 5, 10]),
                               Parameter("x", "-", 0.0, 1.0))), np.column_stack([2 * U, 10 * U, U]))
    np.testing.assert_array_equal(np.bincount(X[:, 0].astype(int)), [1000, 1000, 1001])   # top end: last level
    assert sorted(set(X[:, 1])) == [0.0, 5.0, 10.0]
    np.testing.assert_array_equal(X[:, 2], U)                                              # continuous untouched


def test_direct_route_matches_the_analytic_indices():
    exact = additive_levels_indices()["S"]
    R = level_sobol_indices(additive_levels, SPACE, seed=1)["y"]
    S = np.array([exact["x1"], exact["x2"], exact["c"]])
    # estimator only: its own 95 % half-widths are about 0.01; 0.02 leaves room for that
    np.testing.assert_allclose(R.S1, S, atol=0.02)
    np.testing.assert_allclose(R.ST, S, atol=0.02)


def test_stepped_knob_share():
    # Y = g / 5 + x with g uniform on {0, 5, 10} mm and x ~ U(0, 1): Var(g / 5) = 2/3, Var(x) = 1/12,
    # S_g = (2/3) / (2/3 + 1/12) = 0.8889 (linear additive model: Saltelli et al. 2008, Primer, ch. 1)
    space = Space((Parameter.stepped("g", "mm", [0, 5, 10]), Parameter("x", "-", 0.0, 1.0)))
    R = level_sobol_indices(lambda X: X[:, 0] / 5 + X[:, 1], space, seed=2)["y"]
    np.testing.assert_allclose(R.ST, [8 / 9, 1 / 9], atol=0.02)


def test_choice_share_from_a_surrogate_of_ten_runs_per_level():
    # issue 18 check: a surrogate of at most 20 runs per level (here 10 per level, sliced Latin hypercube,
    # Qian 2012) gives every index of g(x) + h(c) within 0.03 of the values computed by hand above
    exact = additive_levels_indices()["S"]
    S = np.array([exact["x1"], exact["x2"], exact["c"]])
    U, slice_of = sliced_lhs([10, 10, 10], 2, seed=3)
    X = np.column_stack([U, slice_of])
    gp = MixedSurrogate((0, 0, 3), seed=0).fit(X, additive_levels(X))
    res = level_sobol_indices(lambda Z: gp.predict(SPACE.to_unit(Z)), SPACE, seed=0,
                              paths=lambda Z, n, s: gp.sample_paths(SPACE.to_unit(Z), n, s))
    R = res["y"]
    assert res.route == "surrogate"
    np.testing.assert_allclose(R.S1, S, atol=0.03)
    np.testing.assert_allclose(R.ST, S, atol=0.03)
    assert np.all(R.ST_pm95 > 0) and np.all(R.ST_pm95 < 0.05)      # intervals given, and informative
    assert R.ranking() == ["x1", "section", "x2"]
    assert any("equally likely" in n for n in R.notes)


def test_needs_a_space():
    with pytest.raises(SensitivityError, match="needs the Space"):
        level_sobol_indices(additive_levels, None)


def test_level_effects_of_the_additive_function():
    # E[Y | c] = E[2 sin(pi x1)] + E[(2 x2 - 1)^2] + h(c) = 4/pi + 1/3 + h(c), h = (0, 0.8, -0.5): exact
    # differences h(a) - h(b) because every level sees the same settings of x1, x2
    eff = level_effects(additive_levels, SPACE, "section", points=1024, seed=4)
    np.testing.assert_allclose(eff.difference[1, 0], 0.8, atol=1e-12)
    np.testing.assert_allclose(eff.difference[2, 1], -1.3, atol=1e-12)
    np.testing.assert_allclose(eff.difference_pm95, 0.0, atol=1e-9)   # nothing left to be unsure of
    # the means carry the sampling error of E[g]: scrambled Sobol' with 1024 points, well under 0.005
    np.testing.assert_allclose(eff.mean, 4 / np.pi + 1 / 3 + np.array([0.0, 0.8, -0.5]), atol=0.005)
    assert np.all(eff.mean_pm95 > 0.005) and np.all(eff.mean_pm95 < 0.1)   # a Monte-Carlo bound: conservative


def test_level_effects_from_a_surrogate_cover_the_truth():
    U, slice_of = sliced_lhs([8, 8, 8], 2, seed=5)
    X = np.column_stack([U, slice_of])
    gp = MixedSurrogate((0, 0, 3), seed=0).fit(X, additive_levels(X))
    eff = level_effects(lambda Z: gp.predict(SPACE.to_unit(Z)), SPACE, "section", seed=1,
                        paths=lambda Z, n, s: gp.sample_paths(SPACE.to_unit(Z), n, s))
    truth = np.subtract.outer([0.0, 0.8, -0.5], [0.0, 0.8, -0.5])
    assert np.all(np.abs(eff.difference - truth) <= eff.difference_pm95 + 1e-9)    # 95 % intervals hold here
    assert np.all(eff.difference_pm95[~np.eye(3, dtype=bool)] < 0.1)              # and say something
    with pytest.raises(SensitivityError, match="'x1' is not a choice knob"):
        level_effects(additive_levels, SPACE, "x1")


def test_study_direct_route_with_a_choice_knob_gets_level_names():
    # The direct route of a study (the evaluator at Saltelli points) with a choice knob: the evaluator is
    # handed level names as from a plan, and the indices of g(x) + h(c) match the values computed by hand
    # in test_additive_function_variances_by_hand (Sobol' 1993), within the estimator's own 0.02.
    from conftest import study_text
    from doe.runs.evaluators.base import Evaluator, Outcome
    from doe.study.reader import read_study_text
    from doe.workflow.sensitivity import study_sensitivity

    class Additive(Evaluator):
        kind = "function"

        def evaluate(self, run_id, point):
            c = ["a", "b", "c"].index(point["section"])     # a name, or ValueError
            return Outcome({"y": float(additive_levels(np.array([[point["x1"], point["x2"], c]]))[0])})

    text = study_text("direct-levels", [("x1", "-", 0.0, 1.0), ("x2", "-", 0.0, 1.0)], [("y", "-")])
    text = text.replace("[[responses]]", '[[parameters]]\nname = "section"\nlevels = ["a", "b", "c"]\n\n'
                        "[[responses]]", 1) + "\n[sensitivity]\nbase_samples = 1024\n"
    study = read_study_text(text)
    R = study_sensitivity(study, direct=True, evaluator=Additive(["y"]), seed=1)["y"]
    exact = additive_levels_indices()["S"]
    np.testing.assert_allclose(R.ST, [exact["x1"], exact["x2"], exact["c"]], atol=0.02)
    assert any("equally likely" in n for n in R.notes)
