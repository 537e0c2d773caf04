"""Space-filling plans: stratification, reproducibility, published discrepancy values."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.stats import qmc

from doe.errors import PlanError
from doe.design.plans import (augment_plan, centered_l2_discrepancy, default_runs, is_latin, make_plan,
                       maximin_lhs, phi_p, plan_quality)
from doe.space import LinearConstraint, Parameter, Space


def box(d):
    return Space(tuple(Parameter(f"x{i}", "-", 0.0, 1.0 + i) for i in range(d)))


@pytest.mark.parametrize("n,d", [(5, 1), (12, 2), (40, 4), (33, 7), (100, 3)])
def test_latin_one_point_per_stratum(n, d):
    # McKay, Beckman & Conover 1979, Technometrics 21:239: in every column floor(n*u)
    # over the n runs is a permutation of 0..n-1.
    plan = make_plan(box(d), n, seed=11)
    U = box(d).to_unit(plan.frame[box(d).names].to_numpy())
    strata = np.floor(U * n).astype(int)
    for j in range(d):
        assert sorted(strata[:, j]) == list(range(n))
    assert plan.quality.latin


def test_same_seed_same_plan_other_seed_other_plan():
    a = make_plan(box(3), 20, seed=5).frame
    b = make_plan(box(3), 20, seed=5).frame
    c = make_plan(box(3), 20, seed=6).frame
    pd.testing.assert_frame_equal(a, b)
    assert not np.allclose(a[["x0", "x1", "x2"]], c[["x0", "x1", "x2"]])


def test_seed_zero_is_a_seed():
    a = make_plan(box(2), 10, seed=0).frame
    b = make_plan(box(2), 10, seed=0).frame
    pd.testing.assert_frame_equal(a, b)


def test_centred_discrepancy_matches_scipy():
    # Reference library: scipy.stats.qmc.discrepancy(method="CD") returns the squared
    # centred L2 discrepancy (Hickernell 1998, Math. Comp. 67:299). Same formula, so
    # agreement to rounding (1e-12) is expected.
    rng = np.random.default_rng(2)
    for n, d in [(10, 2), (30, 5), (64, 3)]:
        U = rng.random((n, d))
        assert centered_l2_discrepancy(U) == pytest.approx(qmc.discrepancy(U, method="CD"), rel=1e-12)


@pytest.mark.parametrize("design,expected", [
    # Fang, Li & Sudjianto 2006, Design and Modeling for Computer Experiments (the U1/U2
    # example), with x = (2u - 1) / 12; values rounded to 4 decimals there, hence atol 1e-4.
    ([(1, 3), (2, 6), (3, 2), (4, 5), (5, 1), (6, 4)], 0.0081),
    ([(1, 5), (2, 4), (3, 3), (4, 2), (5, 1), (6, 6)], 0.0105),
])
def test_centred_discrepancy_published_examples(design, expected):
    U = (2 * np.array(design, dtype=float) - 1) / 12
    assert centered_l2_discrepancy(U) == pytest.approx(expected, abs=1e-4)


def test_optimised_lhs_beats_random_lhs_on_its_criterion():
    # The exchange algorithm lowers the Morris-Mitchell phi_p (Morris & Mitchell 1995,
    # J. Stat. Plan. Inf. 43:381) and so raises the smallest distance (maximin,
    # Johnson, Moore & Ylvisaker 1990). Compared with scipy's plain random LHS, same sizes,
    # over 5 seeds each: every optimised plan must beat the median random plan.
    n, d = 30, 4
    random_phi = [phi_p(qmc.LatinHypercube(d, seed=s).random(n)) for s in range(5)]
    random_min = [plan_quality(qmc.LatinHypercube(d, seed=s).random(n)).min_distance for s in range(5)]
    for s in range(5):
        U = maximin_lhs(n, d, seed=100 + s)
        assert is_latin(U)
        assert phi_p(U) < np.median(random_phi)
        assert plan_quality(U).min_distance > np.median(random_min)


def test_sobol_method_and_power_of_two_note():
    plan = make_plan(box(3), 16, seed=1, method="sobol")
    assert len(plan.frame) == 16 and not plan.quality.notes
    plan = make_plan(box(3), 20, seed=1, method="sobol")
    assert any("power of two" in n for n in plan.quality.notes)


def test_default_runs_ten_per_parameter():
    # Loeppky, Sacks & Welch 2009, Technometrics 51:366: about 10 runs per input.
    assert default_runs(4)[0] == 40
    plan = make_plan(box(4), None, seed=1)
    assert len(plan.frame) == 40
    assert any("Loeppky" in n for n in plan.quality.notes)


def test_constrained_plan_is_feasible_and_says_latin_is_lost():
    space = Space((Parameter("h", "mm", 0, 100), Parameter("a", "deg", 0, 20)),
                  (LinearConstraint("roof", {"h": 1.0, "a": 4.0}, max=120.0, unit="mm"),))
    plan = make_plan(space, 25, seed=4)
    X = plan.frame[space.names].to_numpy()
    assert space.feasible(X).all()
    assert any("Latin" in n for n in plan.quality.notes)
    assert plan.quality.min_distance > 0.05


def test_infeasible_constraints_are_an_error():
    space = Space((Parameter("h", "mm", 0, 100),),
                  (LinearConstraint("impossible", {"h": 1.0}, max=-1.0, unit="mm"),))
    with pytest.raises(PlanError, match="no point"):
        make_plan(space, 5, seed=1)


def _fill_distance(U, grid):
    """Largest distance from a grid point to its nearest run (smaller = better coverage)."""
    d = np.sqrt(((grid[:, None, :] - U[None, :, :]) ** 2).sum(-1))
    return d.min(axis=1).max()


def test_augmentation_keeps_old_runs_and_improves_coverage():
    space = box(2)
    first = make_plan(space, 10, seed=8)
    more = augment_plan(space, first.frame, 10, seed=9)
    pd.testing.assert_frame_equal(more.frame.iloc[:10].reset_index(drop=True), first.frame)
    assert list(more.frame["run_id"][10:]) == [f"r{i:03d}" for i in range(11, 21)]
    g = np.linspace(0, 1, 41)
    grid = np.array([(a, b) for a in g for b in g])
    U_old = space.to_unit(first.frame[space.names].to_numpy())
    U_new = space.to_unit(more.frame[space.names].to_numpy())
    assert _fill_distance(U_new, grid) < _fill_distance(U_old, grid)
    # Greedy maximin additions fill better than the same number of random additions
    # (average over 5 random draws).
    rng = np.random.default_rng(0)
    rand = [_fill_distance(np.vstack([U_old, rng.random((10, 2))]), grid) for _ in range(5)]
    assert _fill_distance(U_new, grid) < np.mean(rand)
    # No added run coincides with an old one.
    assert more.quality.min_distance > 0.02


def test_big_constrained_plan_is_feasible_and_says_how_it_was_made():
    # Above GREEDY_LIMIT runs a constrained plan is the feasible part of a Sobol' sequence.
    space = Space((Parameter("h", "mm", 0, 100), Parameter("a", "deg", 0, 20)),
                  (LinearConstraint("roof", {"h": 1.0, "a": 4.0}, max=120.0, unit="mm"),))
    plan = make_plan(space, 1500, seed=4)
    X = plan.frame[space.names].to_numpy()
    assert len(X) == 1500 and space.feasible(X).all()
    assert any("Sobol" in n for n in plan.quality.notes)
    assert plan.quality.min_distance > 0
