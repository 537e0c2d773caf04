#!/usr/bin/env python3
"""Make the 2-D RANS data set of the rear package: plan, run (resumable), record.

What it makes: ``studies/rans_rear_results.csv``, read by ``studies/rans_rear.toml``
(a recorded-results study). Each row is one steady 2-D RANS run (OpenFOAM
simpleFoam, k-omega SST) of the centreline section of the INVENTED hatchback of
the demo, over the demo's five knobs, made by ``rear_package_case.py``. It is
2-D RANS of an invented car's centreline, not a measurement of any real car.

Steps (each resumes where it stopped):

1. ``doe plan studies/rans_rear_run.toml --runs N --seed S`` (maximin plan inside the class box),
   committed as ``studies/rans_rear_plan.csv`` (made once; delete it for a new plan);
2. ``doe evaluate`` of that plan, one run at a time, into ``reports/rans-rear-run/results.csv``
   (the store resumes: runs already stored are never run again; case folders in
   ``reports/rans-rear-run/cases/``). In a fresh checkout the store starts from the committed
   ``studies/rans_rear_results.csv``, so the data set resumes where the last session left it;
3. the recorded CSV: the stored rows with, from each case's ``result.json``, the
   spread of every response (``<name>_std``), ``converged``, ``oscillating``,
   ``iterations``, ``cells``, mesh, solver and mesher versions, wall time.

Run it gently (the solver is serial; other work shares the machine)::

    nice -n 19 .venv/bin/python examples/cfd/make_rans_dataset.py            # plan, run, record
    .venv/bin/python examples/cfd/make_rans_dataset.py --collect-only         # record what is done so far

Needs OpenFOAM and gmsh (``make cfd-example`` installs both).
"""
from __future__ import annotations

import argparse
import csv
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
RUN_STUDY = ROOT / "studies" / "rans_rear_run.toml"
WORK = ROOT / "reports" / "rans-rear-run"
RECORDED = ROOT / "studies" / "rans_rear_results.csv"
PLAN = ROOT / "studies" / "rans_rear_plan.csv"

#: Columns taken from each case's result.json besides the responses.
EXTRA = ("converged", "oscillating", "iterations", "window", "cells", "mesh", "solver_version", "gmsh_version",
         "solve_s", "wall_s")
RESPONSES = ("cla_total", "cda_total", "cla_front", "cla_rear", "cla_wing", "cla_body")
PARAMETERS = ("flap_angle", "wing_height", "wing_aoa", "wing_camber", "wing_overhang")


def doe_command() -> list:
    """The ``doe`` program of this Python (the project's venv when run with its python)."""
    exe = Path(sys.executable).parent / "doe"
    return [str(exe)] if exe.exists() else [sys.executable, "-m", "doe.cli"]


def env_with_venv() -> dict:
    """PATH with this Python's folder first, so that the study's ``python3`` is the one that has doe and gmsh."""
    env = dict(os.environ)
    env["PATH"] = str(Path(sys.executable).parent) + os.pathsep + env.get("PATH", "")
    return env


def plan(runs: int, seed: int) -> Path:
    """The committed plan (made once with ``doe plan``: maximin inside the class box)."""
    if not PLAN.exists():
        subprocess.run(doe_command() + ["plan", str(RUN_STUDY), "--runs", str(runs), "--seed", str(seed),
                                        "--out", str(PLAN)], check=True, env=env_with_venv())
    return PLAN


def seed_store(results: Path = None, recorded: Path = RECORDED) -> int:
    """Start the results store from the committed record when there is none (a fresh checkout resumes).

    Returns the number of runs taken over. Failed runs are taken over as failed
    (``doe evaluate --retry-failed`` runs them again).
    """
    results = results or WORK / "results.csv"
    if results.exists() or not recorded.exists():
        return 0
    with open(recorded, newline="") as fh:
        rows = list(csv.DictReader(fh))
    results.parent.mkdir(parents=True, exist_ok=True)
    header = ["run_id", *PARAMETERS, *RESPONSES, "status", "source", "message", "elapsed_s"]
    with open(results, "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=header, extrasaction="ignore")
        w.writeheader()
        for row in rows:
            w.writerow({**row, "source": "command", "elapsed_s": row.get("wall_s") or "0"})
    return len(rows)


def evaluate(plan_csv: Path) -> int:
    return subprocess.run(doe_command() + ["evaluate", str(RUN_STUDY), "--plan", str(plan_csv),
                                           "--out", str(WORK / "results.csv"), "--no-progress"],
                          env=env_with_venv()).returncode


def collect(results: Path = None, cases: Path = None, out: Path = RECORDED) -> int:
    """Write the recorded CSV from the store and the case folders; returns the number of rows."""
    results = results or WORK / "results.csv"
    cases = cases or WORK / "cases"
    if not results.exists():
        print(f"no results yet in {results}")
        return 0
    with open(results, newline="") as fh:
        rows = list(csv.DictReader(fh))
    before = {}
    if out.exists():                       # runs recorded earlier whose case folders are not here
        with open(out, newline="") as fh:
            before = {r["run_id"]: r for r in csv.DictReader(fh)}
    header = (["run_id", *PARAMETERS, *RESPONSES, "status", "source"]
              + [f"{r}_std" for r in RESPONSES] + list(EXTRA) + ["message"])
    out_rows = []
    for row in rows:
        rec = {k: row.get(k, "") for k in ("run_id", *PARAMETERS, *RESPONSES, "status", "message")}
        rec["source"] = "cfd-rans-2d"
        res = cases / row["run_id"] / "result.json"
        if row.get("status", "ok") == "ok" and res.exists():
            data = json.loads(res.read_text())
            for r in RESPONSES:
                rec[f"{r}_std"] = _fmt(data.get(f"{r}_std"))
            for k in EXTRA:
                rec[k] = _fmt(data.get(k))
        elif row["run_id"] in before:
            old = before[row["run_id"]]
            for k in [f"{r}_std" for r in RESPONSES] + list(EXTRA):
                rec[k] = old.get(k, "")
        out_rows.append(rec)
    tmp = out.with_suffix(".csv.tmp")
    with open(tmp, "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=header, extrasaction="ignore")
        w.writeheader()
        w.writerows(out_rows)
    shutil.move(tmp, out)
    ok = sum(r["status"] == "ok" for r in out_rows)
    conv = sum(str(r.get("converged", "")) == "1" for r in out_rows)
    print(f"wrote {out}: {len(out_rows)} runs ({ok} ok, {conv} with settled forces)")
    return len(out_rows)


def _fmt(v):
    if v is None:
        return ""
    if isinstance(v, float):
        return f"{v:.6g}"
    return v


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=32)
    ap.add_argument("--seed", type=int, default=16)
    ap.add_argument("--collect-only", action="store_true", help="only write the recorded CSV from what is done")
    args = ap.parse_args(argv)
    if not args.collect_only:
        taken = seed_store()
        if taken:
            print(f"started the store from {RECORDED.name}: {taken} runs already done")
        code = evaluate(plan(args.runs, args.seed))
        if code not in (0,):
            print(f"doe evaluate ended with exit code {code}; recording what is done")
    collect()
    return 0


if __name__ == "__main__":
    sys.exit(main())
