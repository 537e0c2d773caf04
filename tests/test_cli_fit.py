"""`doe fit` and `doe next` from the command line, on a study with recorded (invented) results."""
import json

import numpy as np
import pandas as pd

from doe.cli import main
from doe.runs.results import read_plan
from doe.study.reader import load_study
from test_surrogate import STUDY, branin_results


def _setup(tmp_path):
    study_file = tmp_path / "study.toml"
    study_file.write_text(STUDY + "\n[fit]\nkernel = \"sqexp\"\ntrend = \"constant\"\nrestarts = 1\n")
    study = load_study(study_file)
    res = branin_results(study)
    res.frame.loc[3, "status"] = "failed"
    res.frame.loc[3, "f"] = np.nan
    res.frame.to_csv(tmp_path / "results.csv", index=False)
    return study_file, study


def test_fit_writes_folder_report_and_predictions(tmp_path, capsys):
    study_file, study = _setup(tmp_path)
    pts = pd.DataFrame({"x1": [0.0, 5.0], "x2": [1.0, 14.0]})
    pts.to_csv(tmp_path / "points.csv", index=False)
    out = tmp_path / "sur"
    code = main(["fit", str(study_file), "--results", str(tmp_path / "results.csv"), "--out", str(out),
                 "--predict", str(tmp_path / "points.csv")])
    assert code == 0
    rep = json.loads((out / "fit.json").read_text())
    assert rep["f"]["runs"] == 19                           # the failed run is not fitted
    assert {"model.json", "data.npz", "fit.json", "predictions.csv"} <= {p.name for p in out.iterdir()}
    pred = pd.read_csv(out / "predictions.csv")
    assert list(pred.columns) == ["x1", "x2", "f_mean", "f_std", "g_mean", "g_std"]
    # g = 2 x1 + 0.05 x2^2 is smooth: 19 runs predict it to 1 % of its range (about 30 * 1 %)
    assert np.allclose(pred["g_mean"], 2 * pts["x1"] + 0.05 * pts["x2"] ** 2, atol=0.3)
    assert "q2_loo" in capsys.readouterr().err


def test_next_writes_plan_and_reasons(tmp_path, capsys):
    study_file, study = _setup(tmp_path)
    out = tmp_path / "next.csv"
    code = main(["next", str(study_file), "--results", str(tmp_path / "results.csv"), "--runs", "3",
                 "--aim", "optimum", "--out", str(out)])
    assert code == 0
    plan = read_plan(out, study)                            # a valid plan for `doe evaluate`
    assert list(plan["run_id"]) == ["r021", "r022", "r023"]
    why = json.loads(out.with_suffix(".why.json").read_text())
    assert why["criterion"] == "ei" and len(why["runs"]) == 3 and why["response"] == "f"
    err = capsys.readouterr().err
    assert "expected improvement" in err


def test_next_reuses_a_saved_surrogate(tmp_path):
    study_file, study = _setup(tmp_path)
    results = str(tmp_path / "results.csv")
    assert main(["fit", str(study_file), "--results", results, "--out", str(tmp_path / "sur")]) == 0
    for name, extra in (("a.csv", ["--surrogate", str(tmp_path / "sur")]), ("b.csv", [])):
        assert main(["next", str(study_file), "--results", results, "--runs", "2", "--out", str(tmp_path / name),
                     *extra]) == 0
    # the same seed and the same (deterministically refitted) surrogates give the same proposals
    assert (tmp_path / "a.csv").read_text() == (tmp_path / "b.csv").read_text()


def test_cli_errors_are_one_line(tmp_path, capsys):
    study_file, _ = _setup(tmp_path)
    code = main(["next", str(study_file), "--results", str(tmp_path / "results.csv"), "--runs", "2",
                 "--aim", "optimum", "--response", "g"])
    assert code == 2
    assert "goal" in capsys.readouterr().err.strip().splitlines()[-1]
