"""The command evaluator and `doe evaluate`: failures, time limits, resume after SIGKILL."""
from __future__ import annotations

import os
import signal
import subprocess
import sys
import time

import pandas as pd
import pytest

from doe.cli import main
from doe.runs.evaluators import make_evaluator
from doe.runs.results import read_results
from doe.study.reader import load_study

PLAN = "run_id,x1,x2\n" + "\n".join(f"r{i:03d},{i * 0.9:.2f},{20 + 10 * i}" for i in range(1, 9)) + "\n"


@pytest.fixture
def setup(study_file, tmp_path):
    plan = tmp_path / "plan.csv"
    plan.write_text(PLAN)
    return study_file, plan, tmp_path / "out" / "results.csv"


def test_evaluate_fills_results(setup, capsys):
    study_file, plan, out = setup
    assert main(["evaluate", str(study_file), "--plan", str(plan), "--out", str(out), "--no-progress"]) == 0
    table = read_results(out, load_study(study_file))
    assert len(table.ok) == 8
    # Each case has its own folder with its parameters written first.
    assert (out.parent / "cases" / "r001" / "params.json").exists()


def test_failures_are_recorded_and_the_rest_completes(setup, monkeypatch):
    study_file, plan, out = setup
    monkeypatch.setenv("CASE_CRASH", "r002")
    monkeypatch.setenv("CASE_BADJSON", "r003")
    monkeypatch.setenv("CASE_NAN", "r004")
    monkeypatch.setenv("CASE_HANG", "r005")
    study = load_study(study_file)
    text = (study_file.read_text()).replace("timeout_s = 20", "timeout_s = 1.5")
    study_file.write_text(text)
    assert main(["evaluate", str(study_file), "--plan", str(plan), "--out", str(out), "--no-progress",
                 "--jobs", "2"]) == 0
    frame = read_results(out, study).frame.set_index("run_id")
    assert frame.loc["r002", "status"] == "failed" and "exit code 3" in frame.loc["r002", "message"]
    assert "diverged" in frame.loc["r002", "message"]  # the tail of the log
    assert "not valid JSON" in frame.loc["r003", "message"]
    assert frame.loc["r004", "status"] == "failed"
    assert "time limit" in frame.loc["r005", "message"]
    assert (frame.drop(["r002", "r003", "r004", "r005"])["status"] == "ok").all()
    # --retry-failed reruns only those runs.
    for var in ("CASE_CRASH", "CASE_BADJSON", "CASE_NAN", "CASE_HANG"):
        monkeypatch.delenv(var)
    counter = out.parent / "counter.txt"
    monkeypatch.setenv("CASE_COUNTER", str(counter))
    assert main(["evaluate", str(study_file), "--plan", str(plan), "--out", str(out), "--no-progress",
                 "--retry-failed"]) == 0
    assert sorted(counter.read_text().split()) == ["r002", "r003", "r004", "r005"]
    frame = read_results(out, study).frame
    assert len(frame) == 8 and (frame["status"] == "ok").all()


def test_run_id_cannot_escape_case_folder(study_file, tmp_path):
    ev = make_evaluator(load_study(study_file), workspace=tmp_path / "cases")
    out = ev.evaluate("../evil", {"x1": 1.0, "x2": 30.0})
    assert out.status == "failed" and "case folder" in out.message
    assert not (tmp_path / "evil").exists()


def test_parameter_values_never_reach_a_shell(study_file, tmp_path):
    ev = make_evaluator(load_study(study_file), workspace=tmp_path / "cases")
    argv = ev.command_line("r1", {"x1": 1.0, "x2": 2.0}, tmp_path)
    assert isinstance(argv, list) and argv[1].endswith("case.py")


def test_sigkill_then_resume_loses_and_repeats_nothing(setup):
    study_file, plan, out = setup
    counter = out.parent / "counter.txt"
    out.parent.mkdir(parents=True)
    env = {**os.environ, "CASE_COUNTER": str(counter), "CASE_SLOW": ",".join(f"r{i:03d}" for i in range(1, 9)),
           "CASE_SLEEP": "0.4"}
    cmd = [sys.executable, "-m", "doe.cli", "evaluate", str(study_file), "--plan", str(plan), "--out", str(out),
           "--no-progress"]
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline:  # wait until at least two runs are stored
        if out.exists() and len(out.read_text().splitlines()) >= 3:
            break
        time.sleep(0.05)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    first = pd.read_csv(out)["run_id"].tolist()
    assert 2 <= len(first) < 8
    subprocess.run(cmd, env=env, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    final = pd.read_csv(out)
    assert sorted(final["run_id"]) == [f"r{i:03d}" for i in range(1, 9)]  # every run exactly once
    runs = counter.read_text().split()
    for rid in first:  # a run stored before the kill was never computed again
        assert runs.count(rid) == 1


EXTRAS_CASE = """
import json, sys
from pathlib import Path
case = Path(sys.argv[1])
p = json.loads((case / "params.json").read_text())
(case / "result.json").write_text(json.dumps({
    "y": p["x1"], "iterations": 1290, "converged": False, "mesh": "medium\\nsecond line", "y_std": 0.0107,
    "forces": {"cl": -1.0}, "history": [1, 2], "status": "not a status", "run_id": "other"}))
"""


def test_result_json_extras_are_stored_and_read_back(setup):
    """Plain extra keys of result.json reach the results table; nested ones and clashing names do not."""
    study_file, plan, out = setup
    (study_file.parent / "case.py").write_text(EXTRAS_CASE)
    assert main(["evaluate", str(study_file), "--plan", str(plan), "--out", str(out), "--no-progress"]) == 0
    frame = read_results(out, load_study(study_file)).frame.set_index("run_id")
    assert (frame["status"] == "ok").all()           # "status" in result.json does not overwrite the run's
    assert frame.loc["r003", "iterations"] == 1290 and frame.loc["r003", "y_std"] == 0.0107
    assert not frame.loc["r003", "converged"]
    assert frame.loc["r003", "mesh"] == "medium | second line"   # folded to one line
    assert "forces" not in frame.columns and "history" not in frame.columns
    assert (out.parent / (out.name + ".extra.jsonl")).exists()
    assert pd.read_csv(out).columns.tolist()[-4:] == ["status", "source", "message", "elapsed_s"]  # CSV layout kept


def test_torn_extras_line_is_skipped(setup):
    """A kill can cut the last line of the extras file: the reader skips it, the runs stay readable."""
    study_file, plan, out = setup
    (study_file.parent / "case.py").write_text(EXTRAS_CASE)
    assert main(["evaluate", str(study_file), "--plan", str(plan), "--out", str(out), "--no-progress"]) == 0
    side = out.parent / (out.name + ".extra.jsonl")
    side.write_text(side.read_text() + '{"run_id": "r001", "iterati')
    frame = read_results(out, load_study(study_file)).frame
    assert len(frame) == 8 and frame["iterations"].notna().all()


def test_extras_of_a_recorded_rans_result():
    """The case driver's own result.json (a real run, tests/data/cfd): its record is kept, its nested parts not."""
    import json
    from pathlib import Path

    from doe.runs.evaluators.command import plain_extras

    data = json.loads((Path(__file__).parent / "data" / "cfd" / "result_medium_r001.json").read_text())
    responses = ["cla_total", "cda_total", "cla_front", "cla_rear", "cla_wing", "cla_body"]
    extra = plain_extras(data, responses)
    assert extra["converged"] == 1 and extra["iterations"] == data["iterations"] and extra["cells"] == data["cells"]
    assert extra["cla_total_std"] == data["cla_total_std"] and extra["solver_version"] == data["solver_version"]
    assert not set(extra) & {*responses, "drift", "mesh_settings", "mesh_warnings", "settings", "point_model_units"}
