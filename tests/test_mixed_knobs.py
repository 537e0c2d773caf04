"""Choice knobs (named levels) and stepped knobs: study file, sliced plans, plan and results files."""
from __future__ import annotations

import numpy as np
import pytest

from doe.cli import main
from doe.design.plans import is_latin, make_plan, sliced_lhs
from doe.errors import DoeError, PlanError, ResultsError
from doe.runs.results import read_plan, read_results, write_plan
from doe.space import LinearConstraint, Parameter, Space
from doe.study.reader import read_study_text

from conftest import BASE_STUDY, write_study

MIXED = BASE_STUDY.replace('''[[responses]]''', '''[[parameters]]
name = "section"
levels = ["base", "sections/high_lift.dat"]

[[parameters]]
name = "flap"
levels = ["on", "off", "half"]

[[parameters]]
name = "gurney"
unit = "mm"
values = [10, 0, 5]

[[responses]]''', 1).replace("high = 10.0\n", "high = 10.0\nstep = 2.0\n", 1).replace("{python}", "python3")


def mixed_space(constraints=()):
    return Space((Parameter("x1", "deg", 0.0, 10.0), Parameter.choice("section", ["base", "high_lift"]),
                  Parameter.stepped("gurney", "mm", [0, 5, 10]), Parameter("x2", "mm", 20.0, 120.0),
                  Parameter.choice("flap", ["on", "off", "half"])), tuple(constraints))


def test_study_reads_choice_and_stepped_knobs():
    study = read_study_text(MIXED)
    kinds = {p.name: p.kind for p in study.space.parameters}
    assert kinds == {"x1": "stepped", "x2": "continuous", "section": "choice", "flap": "choice", "gurney": "stepped"}
    assert study.space.parameter("x1").values == (0.0, 2.0, 4.0, 6.0, 8.0, 10.0)
    assert study.space.parameter("gurney").values == (0.0, 5.0, 10.0)
    assert study.space.parameter("flap").levels == ("on", "off", "half")
    assert study.space.parameter("x1").tolerance == 0.2  # a stepped knob keeps its setup scatter


def test_scaling_snaps_steps_and_keeps_level_indices():
    space = mixed_space()
    U = np.array([[0.26, 1.0, 0.26, 0.5, 2.0], [0.0, 0.0, 0.74, 1.0, 1.0]])
    X = space.from_unit(U)
    np.testing.assert_array_equal(X, [[2.6, 1.0, 5.0, 70.0, 2.0], [0.0, 0.0, 5.0, 120.0, 1.0]])
    np.testing.assert_array_equal(space.to_unit(X)[:, [1, 4]], X[:, [1, 4]])  # indices, not scaled


def test_constraint_on_a_choice_is_refused():
    with pytest.raises(DoeError, match="choice knob 'section'"):
        mixed_space([LinearConstraint("c", {"section": 1.0}, max=1.0)])
    text = MIXED.replace("[[responses]]", '[[constraints]]\nname = "c"\nterms = { flap = 1.0 }\nmax = 3.0\n\n'
                         "[[responses]]", 1)
    with pytest.raises(DoeError, match=r"constraints\]\] #1 terms: 'flap' is a choice knob"):
        read_study_text(text, "study.toml")


@pytest.mark.parametrize("sizes", [[5, 5, 5], [3, 4, 4, 3], [1, 2], [2, 3, 2, 3, 2, 3], [8]])
def test_sliced_lhs_each_slice_and_whole_design_latin(sizes):
    # Qian 2012, "Sliced Latin hypercube designs", JASA 107:393, definition of an SLHD (sec. 2):
    # the whole design is a Latin hypercube of n runs, and each slice, with its values collapsed to
    # its own strata, is a Latin hypercube of its runs (McKay, Beckman & Conover 1979 for "Latin").
    U, slice_of = sliced_lhs(sizes, 4, seed=7)
    assert is_latin(U)
    for t, size in enumerate(sizes):
        assert (slice_of == t).sum() == size
        assert is_latin(U[slice_of == t])


def test_sliced_lhs_deals_fine_strata_at_random():
    a, _ = sliced_lhs([4, 4], 1, seed=1)
    b, _ = sliced_lhs([4, 4], 1, seed=2)
    assert not np.allclose(a, b)
    fine = [np.floor(sliced_lhs([4, 4], 1, seed=s)[0][:4, 0] * 8).astype(int) for s in range(20)]
    assert len({tuple(sorted(f)) for f in fine}) > 5  # slice 0 does not always get the same fine strata


@pytest.mark.parametrize("runs", [18, 23, 6, 31])
def test_plan_balanced_over_levels_and_sliced_latin(runs):
    space = mixed_space()
    plan = make_plan(space, runs, seed=4)
    frame = plan.frame
    counts = frame.groupby(["section", "flap"]).size()
    # issue 18 check: every level combination gets its share within one run (6 combinations)
    assert len(counts) == 6 and counts.max() - counts.min() <= 1 and counts.sum() == runs
    assert set(frame["section"]) == {"base", "high_lift"} and set(frame["flap"]) == {"on", "off", "half"}
    # Qian 2012 (JASA 107:393): continuous knobs Latin within each level combination and over the plan
    cont = space.settable()
    X1 = cont.to_unit(frame[cont.names].to_numpy(dtype=float))[:, [0, 2]]
    assert is_latin(X1)
    for _, part in frame.groupby(["section", "flap"]):
        assert is_latin(cont.to_unit(part[cont.names].to_numpy(dtype=float))[:, [0, 2]])
    assert set(frame["gurney"]) <= {0.0, 5.0, 10.0}
    assert plan.method == "sliced_lhs" and "Qian 2012" in " ".join(plan.quality.notes)
    assert frame.equals(make_plan(space, runs, seed=4).frame)


def test_plan_prefix_is_nearly_balanced():
    frame = make_plan(mixed_space(), 24, seed=2).frame
    first = frame.iloc[:6].groupby(["section", "flap"]).size()
    assert len(first) == 6  # the first 6 runs visit every level combination once


def test_constrained_mixed_plan_feasible_and_balanced():
    c = LinearConstraint("roof", {"x1": 10.0, "x2": 1.0}, max=150.0)
    space = mixed_space([c])
    plan = make_plan(space, 20, seed=1)
    counts = plan.frame.groupby(["section", "flap"]).size()
    assert counts.max() - counts.min() <= 1
    X = plan.frame[["x1", "x2"]].to_numpy(dtype=float)
    assert np.all(X @ [10.0, 1.0] <= 150.0 + 1e-9)
    assert "Latin) property does not hold" in " ".join(plan.quality.notes)


def test_stepped_plan_without_choices_on_grid():
    space = Space((Parameter("a", "deg", 0.0, 1.0), Parameter.stepped("g", "mm", [0, 5, 10])))
    frame = make_plan(space, 12, seed=3).frame
    assert set(frame["g"]) <= {0.0, 5.0, 10.0}
    assert frame["g"].value_counts().max() - frame["g"].value_counts().min() <= 1  # Latin strata, rounded


def test_plan_bad_inputs():
    with pytest.raises(PlanError, match="cannot cover the 6 combinations"):
        make_plan(mixed_space(), 5)
    with pytest.raises(PlanError, match="'sobol' does not take choice knobs"):
        make_plan(mixed_space(), 12, method="sobol")
    with pytest.raises(DoeError, match="no continuous or stepped knob"):
        make_plan(Space((Parameter.choice("c", ["a", "b"]),)), 4)
    with pytest.raises(DoeError, match="at least two different levels"):
        Parameter.choice("c", ["a"])


def test_default_runs_shared_over_levels():
    plan = make_plan(mixed_space(), None, seed=0)
    assert len(plan.frame) == 30  # 10 per continuous or stepped knob (3), a multiple of the 6 combinations


def _write_mixed(tmp_path):
    study_path = write_study(tmp_path, MIXED)
    study = read_study_text(MIXED, study_path)
    frame = make_plan(study.space, 12, seed=5).frame
    return study, frame


def test_plan_csv_has_level_names_and_reads_back(tmp_path):
    study, frame = _write_mixed(tmp_path)
    write_plan(frame, tmp_path / "plan.csv")
    lines = (tmp_path / "plan.csv").read_text().splitlines()
    assert lines[0] == "run_id,x1,x2,section,flap,gurney"
    assert lines[1].split(",")[3] in ("base", "sections/high_lift.dat")
    back = read_plan(tmp_path / "plan.csv", study)
    assert list(back["section"]) == list(frame["section"]) and list(back["flap"]) == list(frame["flap"])
    np.testing.assert_allclose(back["x2"], frame["x2"], rtol=1e-9)


def test_results_with_levels_read_and_checked_cell_by_cell(tmp_path):
    study, frame = _write_mixed(tmp_path)
    frame["y"] = np.arange(len(frame), dtype=float)
    write_plan(frame, tmp_path / "r.csv")
    table = read_results(tmp_path / "r.csv", study)
    X = table.X()
    assert set(X[:, 2]) <= {0.0, 1.0} and set(X[:, 3]) <= {0.0, 1.0, 2.0}  # level indices
    assert list(table.frame["flap"]) == list(frame["flap"])
    bad = frame.copy()
    bad.loc[4, "flap"] = "of"
    write_plan(bad, tmp_path / "bad.csv")
    with pytest.raises(ResultsError, match=r"bad\.csv:6: column 'flap': 'of' is not a level of flap "
                                           r"\(levels: on, off, half\)"):
        read_results(tmp_path / "bad.csv", study)


@pytest.mark.parametrize("value,ok", [(6.0000001, True), (5.0, False), (6.1, False)])
def test_stepped_results_on_grid_within_tolerance(tmp_path, value, ok):
    # STEP_RTOL = 1e-6 of the knob's range: a value within 1e-5 deg of a step of the 0..10 deg knob counts
    # as that step (printing round-off); anything else is off the grid.
    study, frame = _write_mixed(tmp_path)
    frame["y"] = 1.0
    frame.loc[2, "x1"] = value
    write_plan(frame, tmp_path / "r.csv", float_format="%.10g")
    if ok:
        assert read_results(tmp_path / "r.csv", study).frame.loc[2, "x1"] == 6.0
    else:
        with pytest.raises(ResultsError, match=rf"r\.csv:4: column 'x1': '{value:g}' deg is not a step of x1"):
            read_results(tmp_path / "r.csv", study)


def test_bad_level_in_plan_is_one_line_exit_2(tmp_path, capsys):
    study, frame = _write_mixed(tmp_path)
    frame.loc[0, "section"] = "sections/other.dat"
    write_plan(frame, tmp_path / "plan.csv")
    code = main(["evaluate", str(tmp_path / "study.toml"), "--plan", str(tmp_path / "plan.csv"),
                 "--out", str(tmp_path / "r.csv"), "--no-progress"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1
    assert "plan.csv:2: column 'section'" in err[0] and "not a level of section" in err[0]


def test_cli_plan_writes_level_names(tmp_path, capsys):
    write_study(tmp_path, MIXED)
    code = main(["plan", str(tmp_path / "study.toml"), "--out", str(tmp_path / "p.csv")])
    assert code == 0, capsys.readouterr().err
    lines = (tmp_path / "p.csv").read_text().splitlines()
    assert len(lines) == 9  # [plan] runs = 8, over 6 level combinations
    assert {ln.split(",")[4] for ln in lines[1:]} == {"on", "off", "half"}


def test_screening_with_a_choice_knob(tmp_path):
    # Morris screening of y = x1 + h(section) with x2 inert. For a term linear in x1 every elementary effect
    # equals its coefficient times the full range (Morris 1991, Technometrics 33:161, sec. 2), so mu_star of
    # x1 is 1 and sigma 0; x2 has none. The choice's grid column is split so every level is reached, and the
    # evaluator is handed level names, as from a plan.
    from conftest import study_text
    from doe.runs.evaluators.base import Evaluator, Outcome
    from doe.workflow.sensitivity import study_screening

    seen = set()

    class Function(Evaluator):
        kind = "function"

        def evaluate(self, run_id, point):
            seen.add(point["section"])
            return Outcome({"y": point["x1"] + {"a": 0.0, "b": 3.0, "c": -2.0}[point["section"]]})

    text = study_text("screen-levels", [("x1", "-", 0.0, 1.0), ("x2", "-", 0.0, 1.0)], [("y", "-")])
    study = read_study_text(text.replace("[[responses]]", '[[parameters]]\nname = "section"\n'
                                         'levels = ["a", "b", "c"]\n\n[[responses]]', 1))
    res = study_screening(study, trajectories=10, seed=3, evaluator=Function(["y"]))
    m = res.measures["y"]
    i = {n: k for k, n in enumerate(res.parameters)}
    assert m["mu_star"][i["x1"]] == pytest.approx(1.0, abs=1e-9) and m["sigma"][i["x1"]] == pytest.approx(0, abs=1e-9)
    assert m["mu_star"][i["x2"]] == pytest.approx(0.0, abs=1e-12) and res.inert == ["x2"]
    assert m["mu_star"][i["section"]] > 1.0 and seen == {"a", "b", "c"}
