"""The builtin evaluator: study keys, units, outcomes, pickling, and the `doe section` verb."""
from __future__ import annotations

import json
import math
import pickle
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from doe.aero.section_analysis import analyse_section
from doe.aero.sections import naca4
from doe.cli import main
from doe.errors import StudyError
from doe.runs.evaluators import make_evaluator
from doe.study.reader import load_study, read_study_text

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "studies" / "demo_hatch.toml"

STUDY = """
[study]
name = "t-builtin"

[[parameters]]
name = "flap_angle"
unit = "deg"
low = 20.0
high = 40.0

[[parameters]]
name = "wing_height"
unit = "{hunit}"
low = {hlow}
high = {hhigh}

[[responses]]
name = "cla_total"
unit = "m^2"

[[responses]]
name = "stalled"
unit = "-"

[evaluator]
kind = "builtin"
{extra}
"""


def _study(hunit="mm", hlow=80.0, hhigh=160.0, extra=""):
    return read_study_text(STUDY.format(hunit=hunit, hlow=hlow, hhigh=hhigh, extra=extra), "t.toml")


def test_demo_study_fills_every_response():
    study = load_study(DEMO)
    ev = make_evaluator(study)
    rng = np.random.default_rng(0)
    X = study.space.from_unit(rng.uniform(0.1, 0.6, size=(4, study.space.dim)))
    points = [dict(zip(study.space.names, x)) for x in X]
    outs = ev.evaluate_many([f"r{i}" for i in range(4)], points)
    for out in outs:
        assert out.status == "ok", out.message
        assert out.source == "builtin"
        assert set(out.values) == set(study.response_names)
        assert all(math.isfinite(v) for v in out.values.values())
    one = ev.evaluate("r0", points[0])
    assert one.values == pytest.approx(outs[0].values, rel=1e-12)   # batch and single agree


def test_units_are_converted():
    a = make_evaluator(_study()).evaluate("a", {"flap_angle": 30.0, "wing_height": 120.0})
    b = make_evaluator(_study("m", 0.08, 0.16)).evaluate("b", {"flap_angle": 30.0, "wing_height": 0.12})
    assert a.values == pytest.approx(b.values, rel=1e-12)


def test_settings_and_nested_tables():
    s = _study(extra="speed = 30.0\n[evaluator.car]\nroof_height = 1.40\n[evaluator.coefficients]\nforebody_cd = 0.2\n")
    ev = make_evaluator(s)
    assert ev.model.settings.speed == 30.0
    assert ev.model.settings.car.roof_height == 1.40
    assert ev.model.settings.coefficients.forebody_cd == 0.2


@pytest.mark.parametrize("extra, match", [
    ("spead = 30.0", "unknown key 'spead'"),
    ("[evaluator.car]\nroof_hieght = 1.4", "unknown key 'roof_hieght'"),
    ("[evaluator.coefficients]\nbody_3d_factor = 5.0", "plausible range"),
    ("chord = -0.2", "must be > 0"),
    ("wing_height = 100.0", "is a study parameter"),
])
def test_bad_settings_are_errors(extra, match):
    with pytest.raises(StudyError, match=match):
        _study(extra=extra)


def test_unknown_parameter_unit_and_response():
    text = STUDY.format(hunit="mm", hlow=80, hhigh=160, extra="")
    with pytest.raises(StudyError, match="not an input of the builtin model.*known inputs: flap_angle"):
        read_study_text(text.replace('name = "wing_height"', 'name = "wing_hight"'), "t.toml")
    with pytest.raises(StudyError, match="accepts 'mm', 'm'"):
        _study(hunit="in", hlow=3, hhigh=6)
    with pytest.raises(StudyError, match="not an output"):
        read_study_text(text.replace('name = "stalled"', 'name = "cl_max"'), "t.toml")
    with pytest.raises(StudyError, match="spans"):
        _study(hlow=1.0, hhigh=900.0)


def test_failed_geometry_is_a_failed_outcome():
    s = _study(extra="wing_overhang = -200.0")
    out = make_evaluator(s).evaluate("x", {"flap_angle": 30.0, "wing_height": 80.0})
    assert out.status == "failed" and "mm of the body" in out.message
    assert all(math.isnan(v) for v in out.values.values())


def test_evaluator_is_picklable():
    ev = make_evaluator(_study())
    clone = pickle.loads(pickle.dumps(ev))
    p = {"flap_angle": 25.0, "wing_height": 100.0}
    assert clone.evaluate("a", p).values == ev.evaluate("a", p).values


def test_section_verb_json(capsys):
    assert main(["section", "--naca", "4412", "--alpha", "4", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert {"section", "alpha_deg", "cl", "cm_quarter", "pressure"} <= set(data)
    assert len(data["pressure"]["cp"]) == len(data["pressure"]["x"]) == 70
    assert data["cl"] == pytest.approx(analyse_section(naca4(0.04, 0.4, 0.12), 4.0).cl, rel=1e-12)


def test_section_verb_coords_and_ground(tmp_path, capsys):
    path = tmp_path / "s.dat"
    pts = naca4(0.02, 0.4, 0.12, 120).points[::-1]
    path.write_text("\n".join(f"{x:.8f} {y:.8f}" for x, y in pts) + "\n")
    assert main(["section", "--coords", str(path), "--alpha", "3", "--ground-height", "0.5", "--inverted"]) == 0
    text = capsys.readouterr().out
    assert "0.5 chords above the ground" in text and "cl" in text


def test_section_verb_bad_input(capsys):
    assert main(["section", "--naca", "44", "--alpha", "4"]) == 2
    assert "four digits" in capsys.readouterr().err


def test_plan_and_evaluate_demo(tmp_path):
    doe = [sys.executable, "-m", "doe.cli"]
    plan = tmp_path / "plan.csv"
    res = tmp_path / "results.csv"
    subprocess.run([*doe, "plan", str(DEMO), "--runs", "8", "--out", str(plan)], check=True, cwd=ROOT,
                   capture_output=True)
    subprocess.run([*doe, "evaluate", str(DEMO), "--plan", str(plan), "--out", str(res), "--no-progress"],
                   check=True, cwd=ROOT, capture_output=True)
    import pandas as pd

    frame = pd.read_csv(res)
    study = load_study(DEMO)
    ok = frame[frame["status"] == "ok"]
    assert len(ok) >= 7
    assert ok[study.response_names].notna().all().all()
