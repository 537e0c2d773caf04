"""Lap time and other vehicle figures as the objective and limits of the robust search.

The "surrogates" are invented analytic aero maps of one knob (labelled invented); the known
answers are brute force: the vehicle model's own lap time on a fine grid of the knob, computed
in the test (the model itself is checked against hand calculations in tests/test_vehicle*.py).
"""
import json
import sys
from pathlib import Path

import numpy as np
import pytest

from doe.errors import DoeError, StudyError
from doe.robust.search import find_settings
from doe.space import Parameter, Space
from doe.study.reader import read_study_text
from doe.vehicle import VehicleLimit, VehicleObjective, balance_shift, lap_times
from doe.workflow.robust import study_responses, study_robust

sys.path.insert(0, str(Path(__file__).parent))
from test_robust_study import HEAD, SNIPPET, invented_aero  # noqa: E402

STUDY = read_study_text(HEAD + SNIPPET)
CAR, TRACK = STUDY.vehicle.car, STUDY.track
A_REAR, B_DRAG = 1.5, 0.6        # invented: rear downforce and drag grow with the knob


def wing(X):
    """Invented one-knob wing: CLA rear -1.5 x (m^2), CDA 0.6 + 0.6 x^2 (m^2), CLA front -0.05 m^2."""
    x = np.asarray(X, dtype=float)[:, 0]
    z = np.zeros(len(x))
    return {"cf": (z - 0.05, z + 0.002), "cr": (-A_REAR * x, z + 0.004), "cd": (0.6 + B_DRAG * x**2, z + 0.002)}


SPACE = Space((Parameter("x", "-", 0.0, 1.0, 0.02),))
GRID = np.linspace(0.0, 1.0, 4001)


def brute_lap(x):
    return lap_times(CAR, TRACK, -0.05 + 0 * x, -A_REAR * x, 0.6 + B_DRAG * x**2)


def test_lap_time_optimum_is_interior_and_found():
    lap = brute_lap(GRID)
    best = GRID[np.argmin(lap)]
    assert 0.2 < best < 0.9                      # the drag-downforce trade has an interior optimum here
    res = find_settings(wing, SPACE, "lap_time_s", "minimize", k=1.0, samples=16, seed=0, maxiter=15, restarts=1,
                        vehicle_objective=VehicleObjective(CAR, TRACK), aero_responses=("cf", "cr", "cd"))
    x_nom = res.nominal.point["x"]
    # brute force on a grid of step 2.5e-4; the lap time is flat near the optimum, so compare times too
    assert abs(x_nom - best) < 0.01
    assert float(brute_lap(np.array([x_nom]))[0]) - lap.min() < 1e-4
    assert res.objective == "lap_time_s" and res.unit == "s"
    assert res.nominal.figures["lap_time_s"]["unit"] == "s"
    # with the surrogate's uncertainty carried through, the lap time has a spread
    assert res.nominal.figures["lap_time_s"]["std"] > 0


def test_balance_window_moves_the_optimum_to_its_edge():
    speed = 150.0 / 3.6
    shift = balance_shift(CAR, -0.05 + 0 * GRID, -A_REAR * GRID, speed)
    floor = float(balance_shift(CAR, -0.05, -A_REAR * 0.4, speed))    # the window binds at x = 0.4
    ok = shift >= floor
    best = GRID[ok][np.argmin(brute_lap(GRID)[ok])]
    res = find_settings(wing, SPACE, "lap_time_s", "minimize", samples=16, seed=0, maxiter=15, restarts=1,
                        limits=[VehicleLimit("balance_shift", min=floor)],
                        vehicle_objective=VehicleObjective(CAR, TRACK, balance_speed_kph=150.0),
                        aero_responses=("cf", "cr", "cd"))
    assert abs(res.nominal.point["x"] - best) < 0.005 and abs(best - 0.4) < 1e-3
    # the robust point keeps the window with 90 % chance under scatter: it sits inside, slower
    assert res.robust.point["x"] < res.nominal.point["x"]
    lim = [x for x in res.robust.limits if x["response"] == "balance_shift"][0]
    assert lim["probability"] >= 0.9 - 1e-9 and lim["met_with_probability"]
    assert res.robust.feasible
    # the nominal point sits on the window's edge: the limit holds at the setting, but under scatter only
    # about half the time (normal scatter about the edge), and the JSON keeps the two apart
    nom = [x for x in res.nominal.limits if x["response"] == "balance_shift"][0]
    assert nom["met_at_setting"] and not nom["met_with_probability"] and 0.3 < nom["probability"] < 0.7
    assert nom["value_at_setting"] >= floor - 1e-9 and res.nominal.feasible


def test_pick_never_slower_than_the_car_now_or_the_nominal_pick():
    base = np.array([0.1])
    res = find_settings(wing, SPACE, "lap_time_s", "minimize", k=2.0, samples=32, seed=3, maxiter=5, restarts=1,
                        baseline=base, vehicle_objective=VehicleObjective(CAR, TRACK),
                        aero_responses=("cf", "cr", "cd"))
    lap = {key: getattr(res, key).value_at_point for key in ("nominal", "robust", "baseline")}
    # on the surrogate means the nominal pick is the fastest; under scatter the robust one scores best
    assert lap["nominal"] <= lap["baseline"] + 1e-9 and lap["nominal"] <= lap["robust"] + 1e-9
    score = {key: getattr(res, key).robust_value for key in ("nominal", "robust", "baseline")}
    assert score["robust"] <= score["nominal"] + 1e-9 and score["robust"] <= score["baseline"] + 1e-9
    assert res.balance_change["from"] == "baseline" and "understeer" in res.balance_change["sentence"]


def test_figure_limit_needs_a_vehicle_objective():
    with pytest.raises(DoeError, match="vehicle_objective"):
        find_settings(wing, SPACE, "cd", "minimize", limits=[VehicleLimit("top_speed_kph", min=150.0)])


LAP = SNIPPET.replace('objective = "cla_total"', 'objective = "lap_time_s"').replace(
    '{ response = "balance_front", min = 0.30, max = 0.55 }', '{ figure = "balance_shift", min = -0.045 }').replace(
    "# baseline = { flap_angle = 4.0, wing_height = 120.0 }", "baseline = { flap_angle = 4.0, wing_height = 120.0 }")


def test_study_keys_for_vehicle_figures():
    study = read_study_text(HEAD + LAP.replace("tyre_mu = 1.35", "tyre_mu = 1.35\nbalance_speed_kph = 140.0"))
    r = study.robust
    assert (r.objective, r.goal, r.objective_is_figure) == ("lap_time_s", "minimize", True)
    assert r.vehicle_limits == (VehicleLimit("balance_shift", min=-0.045),)
    assert study.vehicle.balance_speed_kph == 140.0
    assert "lap_time_s" not in study_responses(study) and "cla_rear" in study_responses(study)


@pytest.mark.parametrize("old, new, message", [
    ('"lap_time_s"', '"lap_time"', "not a response .* or a vehicle figure"),
    ('objective = "lap_time_s"', 'objective = "balance_shift"', "no better direction"),
    ('figure = "balance_shift"', 'figure = "balance"', "not a vehicle figure"),
    ('figure = "balance_shift"', 'figure = "balance_shift", response = "cda_total"', "not both"),
])
def test_bad_vehicle_figure_keys(old, new, message):
    with pytest.raises(StudyError, match=message):
        read_study_text(HEAD + LAP.replace(old, new))


def test_lap_time_needs_a_track_and_axle_responses():
    no_track = LAP[:LAP.index("[track]")]
    with pytest.raises(StudyError, match="needs a \\[track\\]"):
        read_study_text(HEAD + no_track)
    with pytest.raises(StudyError, match="cla_front_response and cla_rear_response"):
        read_study_text(HEAD + LAP[:LAP.index("[vehicle]")])


def test_study_robust_lap_time_json():
    study = read_study_text(HEAD + LAP)
    res = study_robust(study, invented_aero, maxiter=10)
    data = json.loads(json.dumps(res.to_dict()))
    assert data["objective"] == {"response": "lap_time_s", "unit": "s", "goal": "minimize", "k": 1.0}
    for key in ("nominal", "robust", "baseline"):
        rec = data[key]
        # the objective's mean at the setting and the vehicle table's lap time agree (same model, same means)
        assert rec["figures"]["lap_time_s"]["mean"] == pytest.approx(rec["vehicle"]["lap_time_s"], abs=1e-3)
        assert rec["value_at_point"] == pytest.approx(rec["vehicle"]["lap_time_s"], abs=1e-6)
    assert data["robust"]["figures"]["lap_time_s"]["mean"] <= data["baseline"]["figures"]["lap_time_s"]["mean"]
    assert data["balance_change"]["direction"] in ("towards understeer", "towards oversteer", "unchanged")
    assert {"response": "balance_shift", "unit": "-", "min": -0.045, "max": None} in data["limits"]


def test_refined_tradeoff_reaches_the_true_ends():
    from doe.robust.tradeoff import tradeoff_set

    study = read_study_text(HEAD + SNIPPET)
    goals = {r.name: r.goal for r in study.responses}
    # brute force: the invented map on 2^18 random settings (its optimum is smooth, the sample dense)
    X = study.space.from_unit(np.random.default_rng(0).random((2**18, 2)))
    pred = invented_aero(X)
    best_cla, best_cda = pred["cla_total"][0].min(), pred["cda_total"][0].min()
    coarse = tradeoff_set(invented_aero, study.space, ["cla_total", "cda_total"], goals, samples=64, seed=0)
    fine = tradeoff_set(invented_aero, study.space, ["cla_total", "cda_total"], goals, samples=64, seed=0,
                        refine=True, include=[[10.0, 100.0]])
    assert coarse["cla_total"].min() > best_cla + 5e-3       # 64 points miss the end ...
    assert fine["cla_total"].min() <= best_cla + 1e-4         # ... the refined set reaches it
    assert fine["cda_total"].min() <= best_cda + 1e-4
    assert len(fine) > len(coarse)
