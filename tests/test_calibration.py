"""Calibration of the builtin model's coefficients (doe.calibration.solver) and its use as an evaluator.

The check from outside the fit itself is recovery of a known truth: a synthetic "CFD" set is made by
the builtin model with some coefficients changed, plus Gaussian noise of stated size; the calibration
must find the changed values, its Laplace 95 % intervals must cover them, and what it leaves must be
the noise. Intervals: the linearised (Laplace) posterior of Bates & Watts 1988, Nonlinear Regression
Analysis and Its Applications. Coarse panels keep every model call cheap (the recovery does
not depend on the panel count: truth and fit use the same model).
"""
from __future__ import annotations

import contextlib
import io
import json
import math
from pathlib import Path

import numpy as np
import pytest

from doe.aero.model import COEFFICIENT_RANGES
from doe.calibration.result import load_calibration
from doe.calibration.settings import builtin_settings_for
from doe.calibration.solver import CORRELATION_LIMIT, calibrate
from doe.cli import parse_noise
from doe.runs.evaluators.calibration_file import read_calibrated_coefficients
from doe.testing.synthetic import synthetic_results
from doe.cli import main
from doe.errors import CalibrationError, StudyError
from doe.runs.evaluators import make_evaluator
from doe.runs.results import ResultsTable, read_results, write_plan
from doe.study.reader import load_study, read_study_text

ROOT = Path(__file__).resolve().parents[1]
#: The builtin model behind the invented CFD example (three knobs, cla_total and cda_total), plus cla_front.
SHIPPED = (ROOT / "studies" / "recorded_cfd_model.toml").read_text()
CLA_FRONT = '[[responses]]\nname = "cla_front"\nunit = "m^2"\n'
COARSE = """
[evaluator]
kind = "builtin"
body_panels = 40
wing_panels = 20
flap_panels = 2
speed = 44.0
"""


def _head(name: str) -> str:
    """The shipped study's name, parameters and responses (no evaluator), renamed, with cla_front."""
    return SHIPPED.split("\n[evaluator]\n")[0].replace('"recorded-cfd-model"', f'"{name}"') + CLA_FRONT


MODEL_STUDY = _head("t-calib-model") + COARSE

#: The synthetic truth: three coefficients moved well away from their defaults (0.12, -0.15, 0.88).
TRUTH = {"body_3d_factor": 0.16, "base_pressure": -0.20, "viscous_lift_factor": 0.82}
#: Stated noise of the synthetic "CFD", one standard deviation, m^2.
NOISE = {"cla_total": 0.004, "cda_total": 0.002, "cla_front": 0.003}
RUNS, SEED = 30, 3


@pytest.fixture(scope="module")
def model_study(tmp_path_factory):
    folder = tmp_path_factory.mktemp("calib")
    path = folder / "model.toml"
    path.write_text(MODEL_STUDY)
    return load_study(path)


def _synthetic(study, truth, noise=None, runs=RUNS, seed=SEED) -> ResultsTable:
    """Results of the builtin model with ``truth`` coefficients at a maximin Latin hypercube, plus noise."""
    return synthetic_results(study, truth, noise, runs, seed)


@pytest.fixture(scope="module")
def noisy(model_study):
    return _synthetic(model_study, TRUTH, NOISE)


@pytest.fixture(scope="module")
def noisy_fit(model_study, noisy):
    settings, conv = builtin_settings_for(model_study)
    return calibrate(settings, conv, noisy, coefficients=list(TRUTH), seed=0)


def test_recovers_changed_coefficients_from_noisy_data(noisy_fit):
    # external check: recovery of the known truth; tolerances are about 3 of the Laplace standard
    # errors seen with this plan and noise (0.0002, 0.0002, 0.002), rounded up
    tolerance = {"body_3d_factor": 0.001, "base_pressure": 0.001, "viscous_lift_factor": 0.01}
    for e in noisy_fit.estimates:
        assert abs(e.value - TRUTH[e.name]) < tolerance[e.name], e
        # within 3 Laplace standard errors (99.7 % for a normal posterior); one fixed draw may fall outside
        # the 95 % interval by chance (1 in 20), which the coverage test below counts over replicates
        assert abs(e.value - TRUTH[e.name]) < 3 * e.std_error, e
        assert e.determined and e.note == ""
        assert e.std_error > 0
    assert noisy_fit.noise == "estimated"


@pytest.mark.slow   # ten repeated calibrations; the fast set checks one noisy fit's intervals against the truth
def test_laplace_intervals_cover_the_truth_at_their_level(model_study):
    # 10 noise replicates x 2 coefficients = 20 intervals of nominal 95 %: the count covering the truth is
    # binomial(20, 0.95) when the intervals are right; P(count <= 15) = 0.003 (binomial, computed)
    settings, conv = builtin_settings_for(model_study)
    truth = {"body_3d_factor": 0.16, "base_pressure": -0.20}
    clean = _synthetic(model_study, truth, runs=12)
    rng = np.random.default_rng(11)
    covered = 0
    for _ in range(10):
        frame = clean.frame.copy()
        for r, sd in NOISE.items():
            frame[r] = frame[r] + rng.normal(0.0, sd, len(frame))
        cal = calibrate(settings, conv, ResultsTable(frame, clean.parameters, clean.responses),
                        coefficients=list(truth), noise=NOISE)
        covered += sum(e.interval[0] <= truth[e.name] <= e.interval[1] for e in cal.estimates)
    assert covered >= 16


def test_discrepancy_after_is_the_noise(noisy_fit):
    for r, sd in NOISE.items():
        before, after = noisy_fit.discrepancy_before[r], noisy_fit.discrepancy_after[r]
        assert before.rms > 5 * sd                       # the uncalibrated model is visibly off
        # the RMS of 30 residuals of a fit with 3 coefficients lies within about +-35 % of the noise
        # sd for chi-square with ~87 of 90 degrees of freedom spread over three responses (common practice, no source)
        assert 0.65 * sd < after.rms < 1.35 * sd, (r, after)
        assert abs(after.bias) < 3 * sd / math.sqrt(RUNS)   # a least-squares fit leaves almost no bias
        assert after.max_abs < 4 * sd
        assert after.r2 > before.r2
    assert 0.6 < noisy_fit.chi2_dof < 1.4


def test_noise_free_data_recover_exactly(model_study):
    truth = {**TRUTH, "forebody_cd": 0.21}
    data = _synthetic(model_study, truth, runs=16)
    settings, conv = builtin_settings_for(model_study)
    cal = calibrate(settings, conv, data, coefficients=list(truth))
    for e in cal.estimates:
        lo, hi = COEFFICIENT_RANGES[e.name]
        # deterministic model, exact data: only the optimiser's tolerances are left (1e-6 of the range)
        assert abs(e.value - truth[e.name]) < 1e-6 * (hi - lo), e
    for d in cal.discrepancy_after.values():
        assert d.rms < 1e-8


def test_stated_noise_uses_known_sigma(model_study, noisy):
    settings, conv = builtin_settings_for(model_study)
    cal = calibrate(settings, conv, noisy, coefficients=["body_3d_factor", "base_pressure"],
                    noise={"cla_total": 0.004, "cda_total": 0.002, "cla_front": 0.003})
    assert cal.noise == "stated" and cal.sigma2 == 1.0
    assert cal.scales == NOISE
    # viscous_lift_factor is left at its wrong default: the other two absorb it, and the
    # residuals come out larger than the stated noise, which is said plainly
    assert cal.chi2_dof > 2.0
    assert any("larger than the stated noise" in n for n in cal.notes)


def test_coefficient_without_effect_is_not_determined(model_study, noisy):
    settings, conv = builtin_settings_for(model_study)
    # forebody_cd only adds drag: it has no effect on the whole car's lift
    cal = calibrate(settings, conv, noisy, coefficients=["body_3d_factor", "forebody_cd"], responses=["cla_total"])
    est = {e.name: e for e in cal.estimates}
    assert not est["forebody_cd"].determined
    assert "no effect" in est["forebody_cd"].note
    assert math.isinf(est["forebody_cd"].std_error)
    assert est["body_3d_factor"].determined
    data = cal.to_dict()
    assert data["fitted"]["forebody_cd"]["std_error"] is None
    json.dumps(data, allow_nan=False)


def test_screening_leaves_out_coefficients_without_effect(model_study):
    data = _synthetic(model_study, {"body_3d_factor": 0.16}, runs=8)
    settings, conv = builtin_settings_for(model_study)
    cal = calibrate(settings, conv, data, responses=["cla_total"])
    for name in ("forebody_cd", "wing_parasite_cd", "lift_drag_factor"):   # drag only: no effect on lift
        assert name in cal.not_fitted and "no effect" in cal.not_fitted[name]
    assert "critical_slant" in cal.not_fitted
    assert "body_3d_factor" in [e.name for e in cal.estimates]


def test_collinear_coefficients_are_reported(model_study, noisy):
    settings, conv = builtin_settings_for(model_study)
    # both add a constant to the car's drag and neither changes its lift: only their sum is seen
    cal = calibrate(settings, conv, noisy, coefficients=["forebody_cd", "wing_parasite_cd"],
                    responses=["cla_total", "cda_total"])
    assert abs(cal.correlation[0, 1]) > CORRELATION_LIMIT
    for e in cal.estimates:
        assert not e.determined and "correlated" in e.note


@pytest.mark.parametrize("options, words", [
    (dict(coefficients=["body_factor"]), "unknown coefficient 'body_factor'"),
    (dict(coefficients=["critical_slant"]), "least squares cannot fit it"),
    (dict(coefficients=["base_pressure", "base_pressure"]), "named twice"),
    (dict(responses=["cl_rear_wing"]), "not an output of the builtin model"),
    (dict(responses=["stalled"]), "not in the results"),
    (dict(noise={"cla_total": -1.0}), "must be a positive number"),
    (dict(starts=0), "starts must be"),
])
def test_bad_input_is_one_line(model_study, noisy, options, words):
    settings, conv = builtin_settings_for(model_study)
    with pytest.raises(CalibrationError) as err:
        calibrate(settings, conv, noisy, **options)
    assert words in str(err.value) and "\n" not in str(err.value)


def test_no_ok_runs_is_an_error(model_study, noisy):
    frame = noisy.frame.copy()
    frame["status"] = "failed"
    settings, conv = builtin_settings_for(model_study)
    with pytest.raises(CalibrationError, match="no ok runs"):
        calibrate(settings, conv, ResultsTable(frame, noisy.parameters, noisy.responses), coefficients=["base_pressure"])


def test_parse_noise():
    assert parse_noise("cla_total=0.004, cda_total=2e-3") == {"cla_total": 0.004, "cda_total": 0.002}
    with pytest.raises(CalibrationError, match="RESPONSE=STD"):
        parse_noise("cla_total:0.004")


def test_recorded_study_without_builtin_model_is_a_clear_error(tmp_path):
    study = read_study_text(_head("t-rec") + '[evaluator]\nkind = "recorded"\nfile = "r.csv"\n',
                            tmp_path / "rec.toml")
    with pytest.raises(CalibrationError, match=r"add a \[low_fidelity\] table with kind = \"builtin\""):
        builtin_settings_for(study)


def test_low_fidelity_table_gives_the_builtin_settings(tmp_path):
    study = read_study_text(_head("t-rec") + '[evaluator]\nkind = "recorded"\nfile = "r.csv"\n'
                            '[low_fidelity]\nkind = "builtin"\nbody_panels = 40\nspeed = 44.0\n', tmp_path / "rec.toml")
    settings, conversion = builtin_settings_for(study)
    assert settings.body_panels == 40 and settings.speed == 44.0
    assert conversion == {"flap_angle": 1.0, "wing_aoa": 1.0, "wing_height": 1.0}


# ---------------------------------------------------------------------------
# the CLI and the calibrated evaluator
@pytest.fixture(scope="module")
def cli_files(tmp_path_factory, model_study):
    folder = tmp_path_factory.mktemp("calib_cli")
    data = _synthetic(model_study, TRUTH, runs=16)               # noise-free: the calibrated model is the truth
    write_plan(data.frame, folder / "cfd.csv")
    (folder / "rec.toml").write_text(_head("t-rec") + '[evaluator]\nkind = "recorded"\nfile = "cfd.csv"\n')
    (folder / "model.toml").write_text(MODEL_STUDY)
    out = folder / "out" / "cal.json"
    err, printed = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(printed):
        rc = main(["calibrate", str(folder / "rec.toml"), "--results", str(folder / "cfd.csv"), "--model-study",
                   str(folder / "model.toml"), "--coefficients", ",".join(TRUTH), "--out", str(out)])
    return folder, out, rc, err.getvalue(), printed.getvalue()


def test_cli_writes_the_calibration(cli_files, model_study):
    folder, out, rc, err, printed = cli_files
    assert rc == 0
    assert "calibrate: iteration 1, cost" in err                 # one progress line per iteration
    assert "body_3d_factor" in printed and "cla_total [m^2]" in printed and f"wrote {out}" in printed
    data = json.loads(out.read_text())
    for key in ("format", "study", "coefficients", "coefficients_before", "fitted", "correlation", "responses",
                "runs", "noise", "fit", "notes"):
        assert key in data
    assert data["study"] == "t-rec" and len(data["runs"]) == 16
    for name, value in TRUTH.items():
        assert data["coefficients"][name] == pytest.approx(value, abs=1e-6)    # exact data: optimiser tolerance
    assert set(data["responses"]["cla_total"]["after"]) == {"bias", "rms", "max_abs", "r2"}
    back = load_calibration(out)
    assert back.to_dict() == data
    co = back.evaluator(model_study).model.settings.coefficients
    assert co.body_3d_factor == pytest.approx(TRUTH["body_3d_factor"], abs=1e-6)


def test_study_with_calibration_evaluates_with_calibrated_coefficients(cli_files):
    folder, out = cli_files[:2]
    text = MODEL_STUDY.replace('kind = "builtin"', 'kind = "builtin"\ncalibration = "out/cal.json"')
    (folder / "calibrated.toml").write_text(text)
    study = load_study(folder / "calibrated.toml")
    ev = make_evaluator(study)
    for name, value in TRUTH.items():
        assert getattr(ev.model.settings.coefficients, name) == pytest.approx(value, abs=1e-6)
    recorded = read_results(folder / "cfd.csv", study)
    points = recorded.frame[study.space.names].to_dict("records")
    got = ev.evaluate_many(list(recorded.frame["run_id"]), points)
    # the calibrated model reproduces the noise-free "CFD" it was fitted to
    for o, (_, row) in zip(got, recorded.frame.iterrows()):
        assert o.values["cla_total"] == pytest.approx(row["cla_total"], abs=1e-6)


def test_explicit_coefficients_win_over_the_calibration(cli_files):
    folder = cli_files[0]
    text = MODEL_STUDY.replace('kind = "builtin"', 'kind = "builtin"\ncalibration = "out/cal.json"')
    study = read_study_text(text + "[evaluator.coefficients]\nbase_pressure = -0.3\n", folder / "explicit.toml")
    co = make_evaluator(study).model.settings.coefficients
    assert co.base_pressure == -0.3
    assert co.body_3d_factor == pytest.approx(TRUTH["body_3d_factor"], abs=1e-6)


@pytest.mark.parametrize("content", [None, "not json", '{"format": "other"}',
                                     '{"format": "doe-calibration-1", "coefficients": {"base_pressure": 3.0}}'])
def test_bad_calibration_file_is_one_line(tmp_path, content):
    if content is not None:
        (tmp_path / "cal.json").write_text(content)
    text = MODEL_STUDY.replace('kind = "builtin"', 'kind = "builtin"\ncalibration = "cal.json"')
    with pytest.raises(StudyError) as err:
        read_study_text(text, tmp_path / "s.toml")
    assert "cal.json" in str(err.value) and "\n" not in str(err.value)


def test_read_calibrated_coefficients_rejects_unknown_names(tmp_path):
    (tmp_path / "c.json").write_text('{"format": "doe-calibration-1", "coefficients": {"wing_magic": 1.0}}')
    with pytest.raises(CalibrationError, match="unknown coefficient 'wing_magic'"):
        read_calibrated_coefficients(tmp_path / "c.json")


def test_cli_error_exits_2(cli_files, capsys):
    folder = cli_files[0]
    rc = main(["calibrate", str(folder / "rec.toml"), "--results", str(folder / "cfd.csv"), "--no-progress"])
    assert rc == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("doe: error:") and "low_fidelity" in err and "\n" not in err
    rc = main(["calibrate", str(folder / "rec.toml"), "--results", str(folder / "cfd.csv"), "--model-study",
               str(folder / "model.toml"), "--coefficients", "nope", "--no-progress"])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and err.startswith("doe: error:") and "unknown coefficient 'nope'" in err and "\n" not in err
