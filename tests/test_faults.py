"""Evaluations under faults: dying workers, evaluator bugs, Ctrl-C, repeated SIGKILL, a Dask cluster."""
from __future__ import annotations

import csv
import math
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pandas as pd
import pytest

from doe.runs.evaluators.base import Evaluator, Outcome
from doe.runs.execution import evaluate_plan

from conftest import BASE_STUDY, write_study


class Toy(Evaluator):
    """A pure-Python evaluator; run ids listed in ``die`` kill their worker, in ``bug`` raise."""

    kind = "toy"

    def __init__(self, die=(), bug=()):
        super().__init__(["y"])
        self.die, self.bug = set(die), set(bug)

    def evaluate(self, run_id, point):
        if run_id in self.die:
            os._exit(9)  # the worker process dies, as with a segfault or the OOM killer
        if run_id in self.bug:
            raise ZeroDivisionError("division by zero in the case set-up")
        return Outcome({"y": math.sin(point["x1"]) + point["x2"] / 100}, source="toy")


def toy_plan(n=12):
    rng = np.random.default_rng(1)
    return pd.DataFrame({"run_id": [f"r{i:03d}" for i in range(1, n + 1)],
                         "x1": rng.uniform(0, 10, n), "x2": rng.uniform(20, 120, n)})


def test_dead_worker_loses_only_its_own_run(tmp_path, monkeypatch):
    from doe.runs.executors import LocalProcesses

    pools = []
    new_pool = LocalProcesses._new_pool
    monkeypatch.setattr(LocalProcesses, "_new_pool", lambda self: pools.append(1) or new_pool(self))
    plan = toy_plan()
    out = tmp_path / "res.csv"
    s = evaluate_plan(plan, Toy(die={"r004"}, bug={"r007"}), out, ["x1", "x2"], jobs=2, progress=False)
    # One death: the pool is restarted once, and the runs that were in flight retried on one fresh worker,
    # replaced only when r004 kills it again (not a restart after every later wait, not a process per retry).
    assert len(pools) <= 4
    frame = pd.read_csv(out).set_index("run_id")
    assert len(frame) == 12 and s.ran == 12
    assert frame.loc["r004", "status"] == "failed" and "died" in frame.loc["r004", "message"]
    assert frame.loc["r007", "status"] == "failed" and "ZeroDivisionError" in frame.loc["r007", "message"]
    assert (frame.drop(["r004", "r007"])["status"] == "ok").all()


def test_local_processes_equal_serial_row_for_row(tmp_path):
    plan = toy_plan(20)
    evaluate_plan(plan, Toy(), tmp_path / "a.csv", ["x1", "x2"], jobs=1, progress=False)
    evaluate_plan(plan, Toy(), tmp_path / "b.csv", ["x1", "x2"], jobs=2, progress=False)
    cols = ["run_id", "x1", "x2", "y", "status"]
    a = pd.read_csv(tmp_path / "a.csv")[cols].sort_values("run_id").reset_index(drop=True)
    b = pd.read_csv(tmp_path / "b.csv")[cols].sort_values("run_id").reset_index(drop=True)
    pd.testing.assert_frame_equal(a, b)


@pytest.mark.slow   # starting a dask cluster dominates; test_local_processes_equal_serial_row_for_row checks the
#                    same row-for-row contract with local worker processes in the fast set
def test_dask_local_cluster_equals_serial_row_for_row(tmp_path):
    pytest.importorskip("distributed")
    from doe.runs.executors import DaskCluster

    plan = toy_plan(16)
    evaluate_plan(plan, Toy(), tmp_path / "serial.csv", ["x1", "x2"], progress=False)
    cluster = DaskCluster("local", workers=2)  # two worker processes on 127.0.0.1
    try:
        assert cluster.workers == 2
        evaluate_plan(plan, Toy(bug={"r003"}), tmp_path / "dask.csv", ["x1", "x2"], executor=cluster,
                      progress=False)
    finally:
        cluster.close()
    cols = ["run_id", "x1", "x2", "y"]
    a = pd.read_csv(tmp_path / "serial.csv").set_index("run_id")
    b = pd.read_csv(tmp_path / "dask.csv").set_index("run_id")
    assert b.loc["r003", "status"] == "failed"
    keep = [r for r in a.index if r != "r003"]
    pd.testing.assert_frame_equal(a.loc[keep, cols[1:]], b.loc[keep, cols[1:]])


def _cli(study_file, plan, out, jobs=1):
    return [sys.executable, "-m", "doe.cli", "evaluate", str(study_file), "--plan", str(plan), "--out", str(out),
            "--no-progress", "--jobs", str(jobs)]


def _write_plan(path, n):
    rng = np.random.default_rng(3)
    toy = pd.DataFrame({"run_id": [f"r{i:03d}" for i in range(1, n + 1)], "x1": rng.uniform(0, 10, n),
                        "x2": rng.uniform(20, 120, n)})
    toy.to_csv(path, index=False)


def _wait_rows(out, rows, timeout=30.0):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if out.exists() and len(out.read_text().splitlines()) >= rows + 1:
            return
        time.sleep(0.05)


def test_ctrl_c_stops_cleanly_and_says_how_to_resume(tmp_path):
    study_file = write_study(tmp_path)
    plan, out = tmp_path / "plan.csv", tmp_path / "out" / "res.csv"
    _write_plan(plan, 10)
    env = {**os.environ, "CASE_SLOW": ",".join(f"r{i:03d}" for i in range(1, 11)), "CASE_SLEEP": "0.6"}
    # A shell without job control starts background jobs with SIGINT ignored, and Python keeps it so: the
    # child gets the default back, as under an interactive terminal (pytest run as `make test &` would else fail)
    proc = subprocess.Popen(_cli(study_file, plan, out), env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    _wait_rows(out, 2)
    proc.send_signal(signal.SIGINT)   # once: a press swallowed in a finaliser is caught (test below)
    _, err = proc.communicate(timeout=30)
    assert proc.returncode == 130
    assert "run the same command again to resume" in err
    assert "Traceback" not in err
    stored = pd.read_csv(out)
    assert 2 <= len(stored) < 10 and (stored["status"] == "ok").all()


class _PressesCtrlCInAFinaliser(Toy):
    """At run r003 a Ctrl-C lands while Python runs a finaliser, where its KeyboardInterrupt is only printed."""

    def evaluate(self, run_id, point):
        if run_id == "r003":
            class Finalised:
                def __del__(self):
                    os.kill(os.getpid(), signal.SIGINT)
                    time.sleep(0.01)     # the handler runs here, inside __del__
            Finalised()
        return super().evaluate(run_id, point)


@pytest.mark.filterwarnings("ignore::pytest.PytestUnraisableExceptionWarning")   # the swallowed interrupt
def test_ctrl_c_swallowed_by_a_finaliser_still_stops_at_the_next_run(tmp_path):
    from doe.runs.execution import Interrupted

    out = tmp_path / "res.csv"
    before = signal.signal(signal.SIGINT, signal.default_int_handler)  # Python's own, even when started ignored
    try:
        with pytest.raises(Interrupted, match="3 of 12 runs are stored"):
            evaluate_plan(toy_plan(), _PressesCtrlCInAFinaliser(), out, ["x1", "x2"], progress=False)
    finally:
        signal.signal(signal.SIGINT, before)
    assert list(pd.read_csv(out)["run_id"]) == ["r001", "r002", "r003"]


@pytest.mark.slow   # test_command_evaluator's kill-then-resume checks the same in the fast set
def test_repeated_sigkill_at_random_moments(tmp_path):
    # Kill the evaluating process several times at random moments (seeded), with two
    # workers, then let it finish: every run is stored exactly once, no line is torn.
    study_file = write_study(tmp_path)
    plan, out = tmp_path / "plan.csv", tmp_path / "out" / "res.csv"
    n = 14
    _write_plan(plan, n)
    env = {**os.environ, "CASE_SLOW": ",".join(f"r{i:03d}" for i in range(1, n + 1)), "CASE_SLEEP": "0.15"}
    rng = np.random.default_rng(42)
    for _ in range(4):
        proc = subprocess.Popen(_cli(study_file, plan, out, jobs=2), env=env, stdout=subprocess.DEVNULL,
                                stderr=subprocess.DEVNULL)
        time.sleep(rng.uniform(0.5, 2.0))
        proc.send_signal(signal.SIGKILL)
        proc.wait()
    subprocess.run(_cli(study_file, plan, out, jobs=2), env=env, check=True, stdout=subprocess.DEVNULL,
                   stderr=subprocess.DEVNULL, timeout=120)
    with open(out, newline="") as fh:
        rows = list(csv.reader(fh))
    header, body = rows[0], rows[1:]
    assert all(len(r) == len(header) for r in body)  # nothing half-written
    ids = [r[0] for r in body]
    assert sorted(ids) == [f"r{i:03d}" for i in range(1, n + 1)]  # each run exactly once
    assert all(r[header.index("status")] == "ok" for r in body)
