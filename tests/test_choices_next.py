"""Choice knobs in plan augmentation (``doe plan --add-to``), ``doe next`` and the built-in evaluator's points."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from doe.design.plans import augment_plan, is_latin, make_plan
from doe.space import LinearConstraint, Parameter, Space


def two_choice_space(constraints=()):
    return Space((Parameter("x1", "deg", 0.0, 10.0), Parameter.choice("section", ["base", "high_lift"]),
                  Parameter("x2", "mm", 20.0, 120.0), Parameter.choice("flap", ["on", "off"]),
                  Parameter.stepped("gurney", "mm", [0, 5, 10])), tuple(constraints))


def _unit(space, frame, names=("x1", "x2")):
    cont = space.settable()
    return cont.to_unit(frame[cont.names].to_numpy(dtype=float))[:, [cont.names.index(n) for n in names]]


# ---------------------------------------------------------------------------
# augmentation
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_augmenting_a_sliced_plan_by_its_size_keeps_it_sliced_latin(seed):
    # Qian 2012, "Sliced Latin hypercube designs", JASA 107:393, sec. 2: the whole design Latin in n strata and
    # each slice Latin in its own; doubling every slice leaves one free stratum of each kind per old run, so
    # both properties can hold again (McKay, Beckman & Conover 1979 for "Latin").
    space = two_choice_space()
    first = make_plan(space, 12, seed=seed)
    more = augment_plan(space, first.frame, 12, seed=seed + 10)
    frame = more.frame
    pd.testing.assert_frame_equal(frame.iloc[:12].reset_index(drop=True), first.frame)   # old runs kept as they were
    assert list(frame["run_id"][12:]) == [f"r{i:03d}" for i in range(13, 25)]
    counts = frame.groupby(["section", "flap"]).size()
    assert len(counts) == 4 and set(counts) == {6}
    assert is_latin(_unit(space, frame))
    for _, part in frame.groupby(["section", "flap"]):
        assert is_latin(_unit(space, part))
    assert set(frame["gurney"]) <= {0.0, 5.0, 10.0}
    assert "Qian 2012" in " ".join(more.quality.notes)


@pytest.mark.parametrize("old, add", [(10, 5), (8, 3), (7, 9)])
def test_augmentation_keeps_every_level_combination_within_one(old, add):
    space = two_choice_space()
    frame = augment_plan(space, make_plan(space, old, seed=3).frame, add, seed=4).frame
    counts = frame.groupby(["section", "flap"]).size()
    assert counts.sum() == old + add and counts.max() - counts.min() <= 1   # issue 18: share within one
    # each new run takes a stratum of width 1/(its combination's final size) that no other run of its
    # combination holds (the slice part of Qian 2012's construction; exact by construction, whatever the old plan)
    is_new = frame["run_id"].isin(frame["run_id"].iloc[old:]).to_numpy()
    for _, part in frame.groupby(["section", "flap"]):
        mine = is_new[part.index]
        strata = np.floor(_unit(space, part) * len(part)).astype(int)
        for j in range(2):
            held = set(strata[~mine, j])
            assert len(set(strata[mine, j])) == mine.sum() and not held & set(strata[mine, j])


def test_augmentation_tops_up_an_unbalanced_plan():
    space = two_choice_space()
    plan = make_plan(space, 16, seed=5).frame
    lopsided = plan[~((plan["section"] == "base") & (plan["flap"] == "on"))].iloc[:-2]   # 10 runs, one combination empty
    frame = augment_plan(space, lopsided, 6, seed=1).frame
    counts = frame.groupby(["section", "flap"]).size()
    assert counts[("base", "on")] == 4 and counts.max() - counts.min() <= 1
    # the empty combination gets four fresh runs, Latin among themselves (one slice of a sliced LHS)
    part = frame[(frame["section"] == "base") & (frame["flap"] == "on")]
    assert is_latin(_unit(space, part))


def test_augmentation_inside_constraints_and_reproducible():
    c = LinearConstraint("roof", {"x1": 10.0, "x2": 1.0}, max=150.0)
    space = two_choice_space([c])
    first = make_plan(space, 8, seed=1)
    more = augment_plan(space, first.frame, 6, seed=2)
    X = more.frame[["x1", "x2"]].to_numpy(dtype=float)
    assert np.all(X @ [10.0, 1.0] <= 150.0 + 1e-9)
    counts = more.frame.groupby(["section", "flap"]).size()
    assert counts.sum() == 14 and counts.max() - counts.min() <= 1
    assert set(more.frame["gurney"]) <= {0.0, 5.0, 10.0}
    # no new run repeats or crowds a run of its combination: greedy maximin (Johnson, Moore & Ylvisaker 1990)
    # spreads 3-4 runs per combination; 0.05 of the unit cube is a floor (common practice, no source)
    for _, part in more.frame.groupby(["section", "flap"]):
        U = _unit(space, part, ("x1", "x2", "gurney"))
        d = np.sqrt(((U[:, None] - U[None]) ** 2).sum(-1)) + np.eye(len(U)) * 9
        assert d.min() > 0.05
    assert more.frame.equals(augment_plan(space, first.frame, 6, seed=2).frame)


# ---------------------------------------------------------------------------
# doe next
def test_allocation_fills_the_fewest_first_and_breaks_ties_by_score():
    from doe.design.level_proposals import allocate_runs

    # balanced plan: the share stays within one (issue 18), the extra runs go to the largest scores
    np.testing.assert_array_equal(allocate_runs([4, 4, 4, 4], [0.1, 0.4, 0.3, 0.2], 6), [1, 2, 2, 1])
    # a combination that lost runs is topped up before any other gets one, whatever the scores
    np.testing.assert_array_equal(allocate_runs([2, 4, 4, 3], [0.0, 9.0, 9.0, 0.0], 3), [2, 0, 0, 1])
    # then every combination has 4: the higher scores first, equal scores in combination order
    np.testing.assert_array_equal(allocate_runs([2, 4, 4, 3], [0.0, 9.0, 9.0, 0.0], 6), [3, 1, 1, 1])


@pytest.fixture(scope="module")
def mixed_fit():
    from doe.surrogate.mixed import MixedSurrogate

    rng = np.random.default_rng(0)
    X = np.column_stack([rng.random(18), rng.random(18), np.repeat([0, 1, 2], 6)])
    y = np.sin(4 * X[:, 0]) + X[:, 1] ** 2 + 0.3 * X[:, 2]
    return MixedSurrogate([0, 0, 3], restarts=0, seed=1).fit(X, y)


def test_combination_view_is_the_mixed_gp_posterior(mixed_fit):
    # Reference library: scikit-learn's GaussianProcessRegressor.predict(return_cov=True) on the mixed GP's own
    # fitted kernel and data gives the posterior covariance (Rasmussen & Williams 2006, eqs. 2.25-2.26).
    from doe.design.level_proposals import CombinationGP

    view = CombinationGP(mixed_fit, (2,), mixed_fit.loo_)
    U = np.random.default_rng(5).random((7, 2))
    Z = np.column_stack([U - 0.5, np.full(7, 2.0)])
    mean, cov = mixed_fit.gp_.predict(Z, return_cov=True)
    s = mixed_fit.y_std_
    np.testing.assert_allclose(view.predict(U), mean * s + mixed_fit.y_mean_, rtol=0, atol=1e-9)   # round-off
    np.testing.assert_allclose(view.predict_cov(U), cov * s**2, rtol=0, atol=1e-9 * s**2)
    np.testing.assert_allclose(view.predict(U, return_std=True)[1], np.sqrt(np.clip(np.diag(cov), 0, None)) * s,
                               rtol=1e-6, atol=1e-8)
    assert len(view.X_unit_) == 6 and np.all(view.y_ == mixed_fit.y_[12:])
    # kriging believer: conditioning on a point at its own mean leaves the mean and removes the variance there
    # (down to the nugget), the same as refitting scikit-learn's GP on the data plus that point, kernel kept
    from sklearn.gaussian_process import GaussianProcessRegressor

    more = view.conditioned(U[:1])
    gp = GaussianProcessRegressor(mixed_fit.gp_.kernel_, alpha=mixed_fit.gp_.alpha, optimizer=None)
    gp.fit(np.vstack([mixed_fit.gp_.X_train_, Z[:1]]), np.concatenate([mixed_fit.gp_.y_train_, [mean[0]]]))
    np.testing.assert_allclose(more.predict_cov(U), gp.predict(Z, return_cov=True)[1] * s**2, rtol=0,
                               atol=1e-9 * s**2)
    # the variance drop at the new point itself: v - v^2 / (v + noise^2) (Cohn 1996; the nugget is the noise)
    v = view.predict(U[:1], return_std=True)[1][0] ** 2
    expected = v - v**2 / (v + view.noise_std_**2)
    np.testing.assert_allclose(more.predict(U[:1], return_std=True)[1][0] ** 2, expected, rtol=1e-6)
    capped = view.capped(0.05)
    assert np.all(np.asarray(capped._kernel.k1.k2.length_scale) <= 0.05)
    assert np.mean(capped.predict(U, return_std=True)[1]) > np.mean(view.predict(U, return_std=True)[1])


def test_separate_per_level_gps_are_used_as_they_are():
    from doe.design.level_proposals import combination_set, propose_level_runs
    from doe.design.plans import _unit_rows
    from doe.surrogate.levelset import LevelResponseSurrogate
    from doe.surrogate.set import SurrogateSet

    space = Space((Parameter("x1", "-", 0, 1), Parameter.stepped("x2", "-", [0, 0.5, 1]),
                   Parameter.choice("c", ["A", "B"])))
    plan = make_plan(space, 12, seed=1).frame
    U = _unit_rows(space, plan)
    y = np.where(U[:, 2] == 0, np.sin(6 * U[:, 0]), U[:, 1] ** 2) + U[:, 0]    # the levels share little
    model = LevelResponseSurrogate([0, 0, 2], space.names, restarts=1).fit(U, y, np.ones(3))
    assert model.kind_ == "separate"
    sset = SurrogateSet(space, {"y": model}, {"y": "-"}, {"y": "minimize"}, list(plan["run_id"]), 0.9)
    assert combination_set(sset, (1,)).models["y"] is model.model_.models_[(1,)]
    frame = propose_level_runs(sset, 3, criterion="variance", seed=0).frame
    assert sorted(frame["c"].value_counts()) == [1, 2] and set(frame["x2"]) <= {0.0, 0.5, 1.0}
    assert list(frame["run_id"]) == ["r013", "r014", "r015"]


def test_optimum_aim_fills_an_empty_combination_first_by_variance():
    from doe.design.level_proposals import propose_level_runs
    from doe.design.plans import _unit_rows
    from doe.surrogate.levelset import LevelResponseSurrogate
    from doe.surrogate.set import SurrogateSet

    space = Space((Parameter("x1", "-", 0, 1), Parameter("x2", "-", 0, 1), Parameter.choice("c", ["A", "B", "C"])))
    plan = make_plan(space, 15, seed=1).frame
    plan = plan[plan["c"] != "C"]                                   # level C has no run yet
    U = _unit_rows(space, plan)
    y = np.sin(5 * U[:, 0]) * np.cos(3 * U[:, 1]) + 0.5 * U[:, 2]
    model = LevelResponseSurrogate([0, 0, 3], space.names, restarts=2).fit(U, y, np.ones(3))
    assert model.kind_ == "mixed"            # one GP per level cannot predict at a level without runs
    sset = SurrogateSet(space, {"y": model}, {"y": "-"}, {"y": "minimize"}, list(plan["run_id"]), 0.9)
    made = propose_level_runs(sset, 4, aim="optimum", seed=0)
    assert list(made.frame["c"]) == ["C"] * 4                       # 5, 5, 0 runs: the fewest first
    assert made.criterion == "ei" and made.to_dict()["criterion"] == "ei"
    assert "largest predictive uncertainty" in made.picks[0].reason


def _choice_study(tmp_path):
    from test_choices_chain import BUILTIN, _folder

    # the chain test's cut-down copy of studies/demo_choices.toml (invented car and class: two sections, the flap
    # on or off, a continuous knob and a stepped one), 12 runs (3 per level combination), no optimiser restarts
    return _folder(tmp_path, BUILTIN.replace("runs = 16", "runs = 12") + "\n[fit]\nrestarts = 0\n")


def test_cli_next_and_add_to_with_choice_knobs(tmp_path, capsys):
    import json

    from doe.cli import main
    from doe.runs.results import read_plan
    from doe.study.reader import load_study

    path = _choice_study(tmp_path)
    assert main(["plan", str(path), "--out", str(tmp_path / "plan.csv")]) == 0
    assert main(["evaluate", str(path), "--plan", str(tmp_path / "plan.csv"), "--out", str(tmp_path / "res.csv"),
                 "--no-progress"]) == 0
    assert main(["next", str(path), "--results", str(tmp_path / "res.csv"), "--runs", "5",
                 "--out", str(tmp_path / "next.csv")]) == 0, capsys.readouterr().err
    study = load_study(path)
    new = read_plan(tmp_path / "next.csv", study)
    header = (tmp_path / "next.csv").read_text().splitlines()[0]
    assert header == "run_id,wing_section,flap,wing_aoa,flap_angle"
    assert list(new["run_id"]) == ["r013", "r014", "r015", "r016", "r017"]
    old = read_plan(tmp_path / "plan.csv", study)
    counts = pd.concat([old, new]).groupby(["wing_section", "flap"]).size()
    assert len(counts) == 4 and counts.max() - counts.min() <= 1          # issue 18: share within one
    assert len(new.groupby(["wing_section", "flap"])) == 4                 # the first four visit every combination
    assert set(new["flap_angle"]) <= {10.0, 20.0, 30.0, 40.0}
    why = json.loads((tmp_path / "next.why.json").read_text())
    assert why["criterion"] == "ivr_posterior" and why["runs"][0]["reason"].startswith("level combination wing_section ")
    assert why["runs"][0]["point"]["wing_section"] in ("naca2412", "sections/high_lift_invented.dat")
    # the proposed runs extend the plan, and the plan can also be extended by a sliced augmentation
    assert main(["plan", str(path), "--add-to", str(tmp_path / "plan.csv"), "--runs", "4",
                 "--out", str(tmp_path / "more.csv")]) == 0
    more = read_plan(tmp_path / "more.csv", study)
    assert set(more.groupby(["wing_section", "flap"]).size()) == {4}


# ---------------------------------------------------------------------------
# the built-in evaluator at points with level indices
def test_builtin_evaluator_takes_level_indices_as_well_as_names(tmp_path):
    from doe.runs.evaluators import make_evaluator
    from doe.study.reader import load_study
    from doe.workflow.sensitivity import evaluate_points

    study = load_study(_choice_study(tmp_path))
    evaluator = make_evaluator(study)
    X = np.array([[0, 0, 4.0, 20.0], [1, 1, 8.0, 40.0], [1, 0, 0.0, 10.0]])   # choices as level indices
    table = evaluate_points(study, X, evaluator)
    assert list(table.frame["status"]) == ["ok"] * 3
    named = [{"wing_section": study.space.parameter("wing_section").levels[int(x[0])],
              "flap": ["on", "off"][int(x[1])], "wing_aoa": x[2], "flap_angle": x[3]} for x in X]
    by_name = evaluator.evaluate_many(["a", "b", "c"], named)
    np.testing.assert_array_equal(table.frame["cla_total"], [o.values["cla_total"] for o in by_name])
    assert table.frame["cla_total"].iloc[1] < table.frame["cla_total"].iloc[0]   # more angle, high-lift: less lift
    bad = [evaluator.evaluate(r, {**named[0], "flap": v}) for r, v in (("d", 2.0), ("e", "maybe"))]
    assert [o.status for o in bad] == ["failed", "failed"]
    assert "flap must be a level name or a level index 0 to 1, got 2.0" in bad[0].message
    assert "'maybe' is not a level of flap (levels: on, off)" in bad[1].message
    assert all("\n" not in o.message for o in bad)


# ---------------------------------------------------------------------------
# calibration with choice knobs
def test_calibration_with_choices_recovers_the_truth_exactly(tmp_path):
    # external check as in tests/test_calibration.py: recovery of a known truth from noise-free data made by the
    # model with the coefficients changed; each run's section and flap change the geometry solved, so the
    # residuals vanish only when every run is solved with its own levels
    from dataclasses import replace

    from test_choices_chain import BUILTIN, _folder

    from doe.aero.choices import ChoiceModel
    from doe.aero.model import COEFFICIENT_RANGES
    from doe.calibration.settings import builtin_settings_for
    from doe.runs.results import ResultsTable
    from doe.study.reader import load_study
    from doe.workflow.calibration import calibrate_study

    coarse = BUILTIN.replace("flap_chord = 60.0", "flap_chord = 60.0\nbody_panels = 40\nwing_panels = 20\n"
                                                  "flap_panels = 2")
    study = load_study(_folder(tmp_path, coarse))
    truth = {"body_3d_factor": 0.16, "viscous_lift_factor": 0.82}     # moved from 0.12 and 0.88
    settings, conversion = builtin_settings_for(study)
    plan = make_plan(study.space, 12, seed=2).frame
    choices = {p.name: p.levels for p in study.space.choices}
    out = ChoiceModel(replace(settings, coefficients=replace(settings.coefficients, **truth)), choices,
                      study.folder).evaluate({p: plan[p].to_numpy(float) * f for p, f in conversion.items()},
                                             {k: [v.index(x) for x in plan[k]] for k, v in choices.items()})
    frame = plan.assign(**{r: out.values[r] for r in study.response_names}, status="ok")
    table = ResultsTable(frame, study.space.names, study.response_names, levels=choices)
    cal = calibrate_study(study, table, coefficients=list(truth))
    for e in cal.estimates:
        lo, hi = COEFFICIENT_RANGES[e.name]
        # deterministic model, exact data: only the optimiser's tolerances are left (1e-6 of the range)
        assert abs(e.value - truth[e.name]) < 1e-6 * (hi - lo), e
    assert all(d.rms < 1e-8 for d in cal.discrepancy_after.values())
    assert cal.discrepancy_before["cla_total"].rms > 1e-3                  # the defaults are visibly off


def test_stepped_knobs_do_not_make_next_runs_repeat_a_run():
    # all knobs stepped: the criterion's point snaps to a step, which could be a setting already run; the
    # proposal skips those while other settings are left (12 settings per level, 5 run, 4 asked for)
    from doe.design.level_proposals import propose_level_runs
    from doe.design.plans import _unit_rows
    from doe.surrogate.levelset import LevelResponseSurrogate
    from doe.surrogate.set import SurrogateSet

    space = Space((Parameter.stepped("g", "mm", [0, 5, 10]), Parameter.stepped("h", "mm", [0, 1, 2, 3]),
                   Parameter.choice("c", ["A", "B"])))
    plan = make_plan(space, 10, seed=1).frame
    U = _unit_rows(space, plan)
    model = LevelResponseSurrogate([0, 0, 2], space.names, restarts=1).fit(U, U[:, 0] ** 2 + U[:, 1] + 0.3 * U[:, 2],
                                                                           np.array([10, 3, 1.0]))
    sset = SurrogateSet(space, {"y": model}, {"y": "-"}, {"y": "minimize"}, list(plan["run_id"]), 0.9)
    new = propose_level_runs(sset, 8, criterion="ivr", seed=0).frame
    old = set(map(tuple, plan[["g", "h", "c"]].values.tolist()))
    settings = list(map(tuple, new[["g", "h", "c"]].values.tolist()))
    assert not old & set(settings) and len(set(settings)) == 8
