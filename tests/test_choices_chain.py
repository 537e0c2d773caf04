"""A study with choice knobs through the whole chain: fit, sensitivity, robust search, trade-off and report,
on the built-in model (doe run) and from recorded results with level names in their columns."""
from __future__ import annotations

import json
import re
import shutil
from html import unescape
from pathlib import Path

import numpy as np
import pytest

from doe.cli import main
from doe.report.build import fmt
from doe.report.figures import format_with_interval
from doe.study.reader import load_study
from doe.surrogate.set import load_surrogates

ROOT = Path(__file__).resolve().parents[1]

# A cut-down copy of studies/demo_choices.toml (invented car and class): two sections, the flap on or off, a
# continuous knob and a stepped one (a flap bracket with holes every 10 deg), 16 runs (4 per level combination)
# and cheap analysis settings, so the chain runs in seconds; an invented car and track for lap times, and the
# car as it runs now (a baseline naming its levels).
HEAD = """
[study]
name = "choice-chain"

[[parameters]]
name = "wing_section"
levels = ["naca2412", "sections/high_lift_invented.dat"]

[[parameters]]
name = "flap"
levels = ["on", "off"]

[[parameters]]
name = "wing_aoa"
unit = "deg"
low = 0.0
high = 12.0
tolerance = 0.25

[[parameters]]
name = "flap_angle"
unit = "deg"
values = [10, 20, 30, 40]
tolerance = 0.5

[[responses]]
name = "cla_total"
unit = "m^2"
goal = "minimize"

[[responses]]
name = "cda_total"
unit = "m^2"
goal = "minimize"

[sensitivity]
base_samples = 256
paths = 16

[robust]
samples = 16
baseline = { wing_section = "naca2412", flap = "off", wing_aoa = 4.0, flap_angle = 20 }

[vehicle]                 # invented car: lap times from cla_total (half on each axle) and cda_total
mass_kg = 1150.0
tyre_mu = 1.35
power_kw = 160.0
wheelbase_m = 2.55
cg_to_front_axle_m = 0.98
aero_front_share = 0.5

[track]                   # invented: one straight and one corner
[[track.segments]]
kind = "straight"
length_m = 400.0
[[track.segments]]
kind = "corner"
radius_m = 40.0
angle_deg = 180.0
"""

BUILTIN = """
[evaluator]
kind = "builtin"
chord = 0.24
span = 1.30
endplate_height = 0.15
speed = 44.0
flap_chord = 60.0

[plan]
runs = 16
seed = 7
"""

RECORDED = """
[evaluator]
kind = "recorded"
file = "recorded.csv"
"""


def _folder(tmp_path: Path, tail: str) -> Path:
    (tmp_path / "sections").mkdir(parents=True, exist_ok=True)
    shutil.copy(ROOT / "studies" / "sections" / "high_lift_invented.dat", tmp_path / "sections")
    (tmp_path / "study.toml").write_text(HEAD + tail)
    return tmp_path / "study.toml"


@pytest.fixture(scope="module")
def builtin_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("choices")
    study = _folder(folder, BUILTIN)
    assert main(["run", str(study), "--out", str(folder / "out"), "--no-progress"]) == 0
    return folder


def _text(path: Path) -> str:
    return re.sub(r"\s+", " ", unescape(re.sub(r"<[^>]+>", " ", path.read_text())))


def test_builtin_run_fits_level_surrogates_and_reloads_them(builtin_run):
    out = builtin_run / "out"
    fit = json.loads((out / "surrogate" / "fit.json").read_text())
    for rec in fit.values():
        assert {c["kernel"].split()[0] for c in rec["candidates"]} == {"mixed", "separate"}
        assert sum(c["chosen"] for c in rec["candidates"]) == 1
        assert set(rec["length_scales"]) == {"wing_aoa", "flap_angle"}   # the choices have none
        # the band is measured, not plug-in: widened about the fitted mean, the factor and why in words
        assert rec["uncertainty"] == "widened" and ("widened about" in rec["uncertainty_reason"]
                                                    or "fitted band is kept" in rec["uncertainty_reason"])
    study = load_study(builtin_run / "study.toml")
    sset = load_surrogates(out / "surrogate", study)
    from doe.workflow.fit import fit_surrogates
    from doe.runs.results import read_results
    table = read_results(out / "results.csv", study)
    fresh = fit_surrogates(study, table, seed=study.plan.seed)
    X = np.array([[0, 0, 3.3, 20.0], [1, 1, 9.1, 40.0], [1, 0, 0.5, 10.0]])
    for name in study.response_names:
        np.testing.assert_allclose(sset.predict(X)[name][0], fresh.predict(X)[name][0], rtol=1e-9, atol=1e-12)


def test_builtin_run_sensitivity_gives_each_choice_its_share_and_worth(builtin_run):
    sens = json.loads((builtin_run / "out" / "sensitivity.json").read_text())
    cla = sens["cla_total"]
    assert set(cla) == {"wing_section", "flap", "wing_aoa", "flap_angle"}
    # thin-aerofoil theory: a cambered section's zero-lift angle is lower, so at the same angle the high-lift
    # section gives more downforce (Abbott & von Doenhoff 1959, sec. 4.3; docs/choices.md measures the shift)
    worth = sens["_meta"]["levels"]["cla_total"]["wing_section"]["differences"][0]
    assert worth["level"] == "sections/high_lift_invented.dat" and worth["over"] == "naca2412"
    assert worth["difference"] + worth["difference_pm95"] < 0
    assert cla["wing_section"]["ST"] > 0.1 and cla["wing_aoa"]["ST"] > cla["flap_angle"]["ST"]


def test_builtin_run_robust_searches_each_level_and_compares_them(builtin_run):
    rob = json.loads((builtin_run / "out" / "robust.json").read_text())
    combos = [tuple(row["levels"].values()) for row in rob["level_comparison"]]
    assert sorted(combos) == sorted((s, f) for s in ("naca2412", "sections/high_lift_invented.dat")
                                    for f in ("on", "off"))
    best = min(rob["level_comparison"], key=lambda r: r["robust_value"])     # minimise: smallest mean + k std
    assert best["levels"] == rob["choices"]["best"] == rob["robust"]["levels"]
    assert best["mean_minus_best"] == 0.0
    for row in rob["level_comparison"]:
        assert row["robust_value"] >= best["robust_value"]
        assert row["point"]["wing_aoa"] <= 12.0 and "wing_section" not in row["point"]
        assert row["point"]["flap_angle"] in (10.0, 20.0, 30.0, 40.0)      # a stepped knob is set on its steps
    # the best setting holds the choices as level indices in the study's units
    assert rob["robust"]["point"]["wing_section"] in (0.0, 1.0)
    # the flap's angle has nothing to act on without the flap
    assert all(row["not_applying"] == (["flap_angle"] if row["levels"]["flap"] == "off" else [])
               for row in rob["level_comparison"])
    tradeoff = (builtin_run / "out" / "tradeoff.csv").read_text().splitlines()
    assert tradeoff[0].startswith("wing_section,flap,wing_aoa,flap_angle,cla_total")
    assert any("high_lift" in line for line in tradeoff[1:])
    assert {float(line.split(",")[3]) for line in tradeoff[1:]} <= {10.0, 20.0, 30.0, 40.0}


def test_builtin_run_compares_every_pick_with_the_baseline_and_on_the_lap(builtin_run):
    from doe.vehicle import lap_times

    rob = json.loads((builtin_run / "out" / "robust.json").read_text())
    assert rob["baseline"]["levels"] == {"wing_section": "naca2412", "flap": "off"}
    assert rob["baseline"]["point"]["wing_aoa"] == 4.0 and rob["baseline"]["point"]["flap"] == 1.0
    study = load_study(builtin_run / "study.toml")
    car, track = study.vehicle.car, study.track
    for row in rob["level_comparison"]:
        resp, lap = row["responses"], row["figures"]["lap_time_s"]
        assert row["mean_minus_baseline_pm95"] > 0 and "minus_baseline" in resp["cla_total"]
        # the lap time at the pick is the point-mass lap of its CLA (half on each axle) and CDA
        cla, cda = resp["cla_total"]["mean"], resp["cda_total"]["mean"]
        assert lap["value"] == pytest.approx(float(lap_times(car, track, 0.5 * cla, 0.5 * cla, cda)), rel=1e-12)
        # an interval whatever the objective (here cla_total): the surrogate's uncertainty carried to the lap
        assert lap["pm95"] > 0 and lap["unit"] == "s"
        assert (lap["minus_best_pm95"] > 0) == (row["levels"] != rob["choices"]["best"])


def test_builtin_run_report_answers_which_level_and_where_with_the_files_numbers(builtin_run):
    out = builtin_run / "out"
    text = _text(out / "report" / "index.html")
    rob = json.loads((out / "robust.json").read_text())
    assert "Which wing_section, flap, and at what setting" in text
    for row in rob["level_comparison"]:
        assert format_with_interval(row["mean"], row["std"]) in text
        cda = row["responses"]["cda_total"]
        assert f"{fmt(cda['mean'])} ({fmt(cda['minus_best'], 3)} ± {fmt(cda['minus_best_pm95'], 2)})" in text
        lap = row["figures"]["lap_time_s"]
        assert f"{fmt(lap['value'], 5)} ({fmt(lap['minus_best'], 3)} ± {fmt(lap['minus_best_pm95'], 2)})" in text
    assert "Against the car as it runs now (wing_section naca2412, flap off)" in text
    sens = json.loads((out / "sensitivity.json").read_text())
    for d in sens["_meta"]["levels"]["cda_total"]["flap"]["differences"]:
        assert f"{fmt(d['difference'])} ± {fmt(d['difference_pm95'])} m^2" in text
    assert (out / "report" / "effects_levels_cla_total.png").exists()


def test_recorded_results_with_level_names_run_the_same_chain(builtin_run, tmp_path):
    study = _folder(tmp_path, RECORDED)
    shutil.copy(builtin_run / "out" / "results.csv", tmp_path / "recorded.csv")
    assert main(["run", str(study), "--out", str(tmp_path / "out"), "--no-progress"]) == 0
    rob = json.loads((tmp_path / "out" / "robust.json").read_text())
    same = json.loads((builtin_run / "out" / "robust.json").read_text())
    assert rob["choices"]["best"] == same["choices"]["best"]
    assert "Which wing_section, flap" in _text(tmp_path / "out" / "report" / "index.html")


def test_recorded_unknown_level_is_one_line_with_file_line_and_column(builtin_run, tmp_path, capsys):
    study = _folder(tmp_path, RECORDED)
    lines = (builtin_run / "out" / "results.csv").read_text().splitlines()
    lines[3] = lines[3].replace("naca2412", "naca9999", 1) if "naca2412" in lines[3] else \
        lines[3].replace("sections/high_lift_invented.dat", "naca9999", 1)
    (tmp_path / "recorded.csv").write_text("\n".join(lines) + "\n")
    assert main(["run", str(study), "--out", str(tmp_path / "out"), "--no-progress"]) == 2
    err = [line for line in capsys.readouterr().err.splitlines() if "error" in line]
    assert len(err) == 1 and "recorded.csv:4: column 'wing_section'" in err[0] and "naca9999" in err[0], err


def test_fit_predicts_at_points_given_with_level_names(builtin_run, tmp_path):
    study = builtin_run / "study.toml"
    (tmp_path / "pts.csv").write_text("run_id,wing_section,flap,wing_aoa,flap_angle\n"
                                      "p1,naca2412,on,5,20\np2,sections/high_lift_invented.dat,off,11,40\n")
    assert main(["fit", str(study), "--results", str(builtin_run / "out" / "results.csv"), "--out",
                 str(tmp_path / "s"), "--predict", str(tmp_path / "pts.csv"), "--predict-out",
                 str(tmp_path / "pred.csv")]) == 0
    import pandas as pd
    pred = pd.read_csv(tmp_path / "pred.csv")
    assert list(pred["wing_section"]) == ["naca2412", "sections/high_lift_invented.dat"]
    sset = load_surrogates(tmp_path / "s", load_study(study))
    mean = sset.predict(np.array([[0, 0, 5, 20], [1, 1, 11, 40]]))["cla_total"][0]
    np.testing.assert_allclose(pred["cla_total_mean"], mean, rtol=1e-9)


def test_a_baseline_level_that_is_not_a_level_is_one_line(tmp_path, capsys):
    study = _folder(tmp_path, BUILTIN)
    study.write_text(study.read_text().replace('wing_section = "naca2412", flap = "off"',
                                               'wing_section = "naca9999", flap = "off"'))
    assert main(["plan", str(study), "--out", str(tmp_path / "plan.csv")]) == 2
    err = [line for line in capsys.readouterr().err.splitlines() if line.strip()]
    assert len(err) == 1 and "baseline" in err[0] and "naca9999" in err[0] and "study.toml:" in err[0], err
