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
    # no new run repeats an old one of its combination; greedy maximin keeps them apart (Johnson, Moore &
    # Ylvisaker 1990): the closest new-to-own pair is at least half the old plan's closest own pair
    for _, part in more.frame.groupby(["section", "flap"]):
        U = _unit(space, part, ("x1", "x2", "gurney"))
        d = np.sqrt(((U[:, None] - U[None]) ** 2).sum(-1)) + np.eye(len(U)) * 9
        assert d.min() > 0.05
    assert more.frame.equals(augment_plan(space, first.frame, 6, seed=2).frame)
