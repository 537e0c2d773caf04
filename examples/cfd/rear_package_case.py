#!/usr/bin/env python3
"""Case driver: one steady 2-D RANS run of the rear package, for ``doe``'s command evaluator.

Usage (the study's ``[evaluator]``)::

    argv = ["python3", "{study_dir}/../examples/cfd/rear_package_case.py", "{case_dir}",
            "--study", "{study_dir}/rans_example.toml", "--mesh", "coarse"]

What it does, in the case folder the evaluator made (``params.json`` in it):

1. reads the run's parameters and converts them to the built-in model's units
   with the study's ``[low_fidelity]`` table (the same car, wing chord, speed
   and fixed inputs as the cheap model; without ``--study``: the model's
   defaults and parameters already in model units);
2. builds the closed body (with the hatch flap) and the inverted wing from the
   model's own geometry (:func:`doe.aero.outline.rear_package_outlines`);
3. meshes the section with gmsh (quad layers on the walls, triangles, one cell
   deep; ``cfd_mesh.py``), converts it with ``gmshToFoam``, sets the patch
   types, checks it with ``checkMesh``;
4. runs ``simpleFoam`` (k-omega SST, SIMPLEC) over a moving ground, with
   force coefficients of the body and the wing, watching the force files: the
   run stops when the windowed means of the forces have settled (the rule of
   OpenFOAM's runTimeControl ``average`` condition, applied by the driver so
   that it can be tested and recorded), or at the iteration cap;
5. writes ``result.json``: the responses (``cla_total``, ``cla_front``,
   ``cla_rear``, ``cla_wing``, ``cla_body``, ``cda_total``, ``cda_wing``,
   ``cda_body``; definitions in ``cfd_results.py``), the spread of each over
   the last window (``<name>_std``), ``converged`` (1: the forces settled;
   0: the cap was reached and the numbers are the mean of oscillating forces),
   cells, iterations, wall time, solver and mesher versions, settings.

A run that cannot give forces exits with code 1 and prints one line
``run failed: <reason>`` (also in ``failure.json``): a geometry the model
rejects, a mesh that gmsh cannot make or that ``checkMesh`` fails, a
floating-point exception or NaN forces (divergence), the driver's time limit.
The command evaluator then records a failed run with that line.

Needs OpenFOAM (Debian's ``openfoam``; ``WM_PROJECT_DIR`` is set here) and
gmsh (``pip install 'doe[cfd]'``). See ``README.md`` and ``docs/cfd.md``:
2-D RANS of an invented car's centreline, not a measurement of any real car.
"""
from __future__ import annotations

import argparse
import importlib.util
import json
import math
import platform
import shutil
import sys
import time
from dataclasses import asdict, replace
from pathlib import Path

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

try:
    import numpy as np  # noqa: E402
    import doe  # noqa: E402,F401
except ImportError:                                   # run by a Python without the project installed
    sys.path.insert(0, str(HERE.parents[1]))
    try:
        import numpy as np  # noqa: E402
        import doe  # noqa: E402,F401
    except ImportError as exc:
        print(f"run failed: this Python ({sys.executable}) cannot import {exc.name}: run the study with the "
              "project's environment first on PATH (e.g. PATH=.venv/bin:$PATH)", flush=True)
        sys.exit(1)

from cfd_foam import (CaseFailure, check_mesh_report, foam_version, run_tool, set_patch_types,  # noqa: E402
                      solver_failure, write_dictionaries)
from cfd_mesh import MESH_LEVELS, write_mesh  # noqa: E402
from cfd_results import (RESPONSES, find_coefficient_file, read_force_coefficients,  # noqa: E402
                         response_series, steady_verdict, window_stats)

#: Iteration settings of the solver (``--max-iterations`` and friends override them).
SOLVER_DEFAULTS = {"max_iterations": 2000, "min_iterations": 300, "window": 200, "rel_tol": 0.002, "abs_tol": 0.002,
                   "relax_p": 0.3, "relax_U": 0.7, "relax_turb": 0.6, "turbulence_intensity": 0.005,
                   "viscosity_ratio": 10.0}
#: A coefficient beyond this (per metre of width, reference length 1 m) is a diverged run.
BLOW_UP = 1e3


def parse_args(argv=None):
    ap = argparse.ArgumentParser(description="One 2-D RANS run of the rear package (OpenFOAM + gmsh).")
    ap.add_argument("case_dir", type=Path, help="case folder holding params.json")
    ap.add_argument("--study", type=Path, help="study file whose [low_fidelity] builtin table gives the "
                    "car, the wing chord and span, the speed and the fixed inputs")
    ap.add_argument("--mesh", choices=sorted(MESH_LEVELS), default="medium")
    ap.add_argument("--max-iterations", type=int, default=SOLVER_DEFAULTS["max_iterations"])
    ap.add_argument("--min-iterations", type=int, default=SOLVER_DEFAULTS["min_iterations"])
    ap.add_argument("--window", type=int, default=SOLVER_DEFAULTS["window"],
                    help="iterations averaged: the forces' mean and spread are reported over it")
    ap.add_argument("--rel-tol", type=float, default=SOLVER_DEFAULTS["rel_tol"],
                    help="settled when the window's half-means differ by less than this share of the mean ...")
    ap.add_argument("--abs-tol", type=float, default=SOLVER_DEFAULTS["abs_tol"],
                    help="... or by less than this, m^2")
    ap.add_argument("--time-limit", type=float, default=900.0, help="wall-time limit of the whole run, s")
    ap.add_argument("--keep", action="store_true",
                    help="keep the OpenFOAM case: mesh, and fields written every 100 iterations")
    return ap.parse_args(argv)


# ----------------------------------------------------------------------
def model_point(params: dict, study_path: Path | None):
    """Model settings and the run's design inputs in model units (deg, mm, % chord)."""
    from doe.aero import DESIGN_INPUTS, ModelSettings

    values = {k: float(v) for k, v in params.items() if k != "run_id"}
    if study_path is None:
        unknown = sorted(set(values) - set(DESIGN_INPUTS))
        if unknown:
            raise CaseFailure(f"parameter '{unknown[0]}' is not a model input")
        return ModelSettings(), values, "model defaults"
    from doe.errors import DoeError
    from doe.runs.evaluators.builtin import read_builtin_settings
    from doe.study.reader import load_study

    try:
        study = load_study(study_path)
        if study.low_fidelity is None or study.low_fidelity.evaluator.kind != "builtin":
            raise CaseFailure(f"{study_path}: needs a [low_fidelity] table of kind 'builtin' "
                              "(the model whose geometry and settings the case uses)")
        settings, conv = read_builtin_settings(study, study.low_fidelity.evaluator)
    except DoeError as exc:
        raise CaseFailure(f"study: {exc}") from exc
    point = {}
    for name, v in values.items():
        if name not in conv:
            raise CaseFailure(f"parameter '{name}' is not a parameter of {study_path.name}")
        point[name] = v * conv[name]
    return settings, point, str(study_path)


def case_values(settings, mesh, solver: dict, keep: bool = False) -> dict:
    """Values for the dictionary templates (``keep``: write the fields every 100 iterations, for a look)."""
    from doe.aero.atmosphere import viscosity

    nu = float(viscosity(settings.temperature)) / settings.density
    k = 1.5 * (solver["turbulence_intensity"] * settings.speed) ** 2
    return {"speed": settings.speed, "density": settings.density, "nu": nu, "depth": mesh.depth,
            "front_axle": settings.car.front_axle, "k_inlet": k,
            "omega_inlet": k / (nu * solver["viscosity_ratio"]),
            "write_interval": 100 if keep else solver["max_iterations"],
            **{key: solver[key] for key in ("max_iterations", "relax_p", "relax_U", "relax_turb")}}


def run_case(args) -> dict:
    """Everything from params.json to the result dict; raises CaseFailure with the reason."""
    t0 = time.monotonic()
    case = args.case_dir.resolve()
    try:
        params = json.loads((case / "params.json").read_text())
    except (OSError, ValueError) as exc:
        raise CaseFailure(f"cannot read params.json: {exc}") from exc
    settings, point, source = model_point(params, args.study)
    solver = {**SOLVER_DEFAULTS, "max_iterations": args.max_iterations, "min_iterations": args.min_iterations,
              "window": args.window, "rel_tol": args.rel_tol, "abs_tol": args.abs_tol}
    mesh = MESH_LEVELS[args.mesh]
    work = case / "openfoam"
    if work.exists():
        shutil.rmtree(work)                          # a fresh case every time
    work.mkdir(parents=True)

    from doe.aero.outline import rear_package_outlines
    from doe.errors import AeroError

    try:
        outlines = rear_package_outlines(settings, point)
    except AeroError as exc:
        raise CaseFailure(f"geometry: {exc}") from exc
    (case / "geometry.json").write_text(json.dumps(
        {"units": "m", "axes": "x rearward from the bumper tip, y up from the ground",
         "body": np.round(outlines.body, 6).tolist(),
         "wing": None if outlines.wing is None else np.round(outlines.wing, 6).tolist()}) + "\n")
    missing = [t for t in ("gmshToFoam", "checkMesh", "renumberMesh", "simpleFoam") if shutil.which(t) is None]
    if missing:
        raise CaseFailure(f"OpenFOAM's {missing[0]} is not on PATH (Debian: apt-get install openfoam)")
    if importlib.util.find_spec("gmsh") is None:
        raise CaseFailure("gmsh is not installed for this Python (pip install 'doe[cfd]')")
    try:
        minfo = write_mesh(outlines, mesh, work / "mesh.msh", settings.car.length, settings.car.roof_height)
    except Exception as exc:                          # gmsh raises plain Exceptions
        raise CaseFailure(f"mesh generation failed: {exc}") from exc
    write_dictionaries(work, case_values(settings, mesh, solver, keep=args.keep))

    def remaining():
        left = args.time_limit - (time.monotonic() - t0)
        if left <= 0:
            raise CaseFailure(f"stopped at the driver's time limit of {args.time_limit:g} s")
        return left

    r = run_tool(["gmshToFoam", "mesh.msh"], work, "gmshToFoam", remaining())
    if r.code != 0:
        raise CaseFailure(f"gmshToFoam failed (exit code {r.code}): {_last_line(r.text())}")
    boundary = work / "constant" / "polyMesh" / "boundary"
    boundary.write_text(set_patch_types(boundary.read_text()))
    (work / "mesh.msh").unlink()
    r = run_tool(["checkMesh"], work, "checkMesh", remaining())
    ok, reason, mstats = check_mesh_report(r.text())
    if r.code != 0 or not ok:
        raise CaseFailure(reason or f"checkMesh exit code {r.code}")
    r = run_tool(["renumberMesh", "-overwrite"], work, "renumberMesh", remaining())
    if r.code != 0:
        raise CaseFailure(f"renumberMesh failed (exit code {r.code}): {_last_line(r.text())}")
    ts = time.monotonic()
    monitor = Monitor(work, settings, solver)
    r = run_tool(["simpleFoam"], work, "simpleFoam", remaining(), poll=monitor.poll)
    solve_s = time.monotonic() - ts
    log = r.text()
    if r.timed_out:
        raise CaseFailure(f"stopped at the driver's time limit of {args.time_limit:g} s "
                          f"after {_iterations(log)} iterations")
    why = "" if r.stopped else solver_failure(r.code, log)
    if why:
        raise CaseFailure(why)
    result = summarise(work, settings, solver, log,
                       settled=monitor.verdict.settled if r.stopped and monitor.verdict else None)
    result.update({
        "cells": mstats.get("cells", minfo["cells_2d"]), "mesh": args.mesh,
        "mesh_settings": asdict(mesh), "body_wall_faces": minfo["body_wall_faces"],
        "wing_wall_faces": minfo["wing_wall_faces"], "max_non_orthogonality": mstats.get("max_non_orthogonality"),
        "max_skewness": mstats.get("max_skewness"),
        "mesh_warnings": mstats.get("warnings", []), "solver": "simpleFoam k-omega SST (SIMPLEC)",
        "solver_version": foam_version(log) or "unknown", "gmsh_version": minfo["gmsh_version"],
        "solve_s": round(solve_s, 1), "wall_s": round(time.monotonic() - t0, 1),
        "settings": {**{k: v for k, v in solver.items()}, "speed": settings.speed, "chord": settings.chord,
                     "span": settings.span, "width": settings.car.width, "source": source},
        "point_model_units": point, "host": platform.node(),
        "what": "2-D steady RANS of an invented car's centreline; not a measurement of any real car",
    })
    if not args.keep:
        for sub in ("constant/polyMesh", "processor0"):
            shutil.rmtree(work / sub, ignore_errors=True)
        for d in work.iterdir():
            if d.is_dir() and _is_time(d.name):
                shutil.rmtree(d)
    return result


class Monitor:
    """Reads the force files while the solver runs; says when the forces have settled."""

    def __init__(self, work: Path, settings, solver: dict):
        self.work, self.settings, self.solver = work, settings, solver
        self.verdict = None

    def series(self) -> dict | None:
        """The response series so far (None while a force file is missing or empty)."""
        post = self.work / "postProcessing"
        fb = find_coefficient_file(post, "forcesBody")
        fw = find_coefficient_file(post, "forcesWing") if self.settings.has_wing else None
        if fb is None or (self.settings.has_wing and fw is None):
            return None
        try:
            body = read_force_coefficients(fb)
            wing = read_force_coefficients(fw) if fw is not None else None
        except ValueError:
            return None
        st = self.settings
        return response_series(body, wing, st.car.width, st.span, st.car.wheelbase)

    def poll(self) -> bool:
        """True when the solver may stop: the forces settled (or went non-finite: the run failed)."""
        s = self.series()
        if s is None or len(s["iteration"]) < 2:
            return False
        if not all(np.isfinite(s[name]).all() for name in RESPONSES):
            return True
        self.verdict = steady_verdict(s, self.solver["window"], self.solver["min_iterations"],
                                      self.solver["rel_tol"], self.solver["abs_tol"])
        return self.verdict.settled


def summarise(work: Path, settings, solver: dict, log: str, settled: bool | None = None) -> dict:
    """Responses, spreads and the convergence verdict from the force files.

    ``settled``: the monitor's verdict when it stopped the run (the solver may
    have written an iteration or two more before it ended); None: judge here.
    """
    series = Monitor(work, settings, solver).series()
    if series is None:
        raise CaseFailure("solver wrote no force coefficients")
    its = series["iteration"]
    if len(its) < 2:
        raise CaseFailure("solver stopped before two iterations of forces")
    last = slice(max(0, len(its) - solver["window"]), None)     # a start-up transient may be large
    for name in RESPONSES:
        v = series[name]
        bad = ~np.isfinite(v)
        bad[last] |= np.abs(v[last]) > BLOW_UP
        if bad.any():
            raise CaseFailure(f"solver diverged: {name} is {v[bad][0]:g} at iteration {int(its[bad][0])}")
    verdict = steady_verdict(series, solver["window"], solver["min_iterations"], solver["rel_tol"],
                             solver["abs_tol"])
    out = {}
    for name in RESPONSES:
        st = window_stats(series[name], solver["window"])
        out[name] = st.mean
        out[name + "_std"] = st.std
    w = int(min(solver["window"], len(its)))
    if settled is not None:
        verdict = replace(verdict, settled=settled)
    out.update({"converged": int(verdict.settled), "oscillating": int(verdict.oscillating),
                "iterations": verdict.iterations, "window": w, "drift": verdict.drift})
    if verdict.settled:
        out["note"] = f"forces settled; mean of the last {w} iterations"
    else:
        out["note"] = (f"forces did not settle in {verdict.iterations} iterations: mean and spread of the last {w}"
                       + (" (oscillating)" if verdict.oscillating else " (still drifting)"))
    return out


def _is_time(name: str) -> bool:
    try:
        return float(name) >= 0
    except ValueError:
        return False


def _iterations(log: str) -> int:
    import re

    its = re.findall(r"^Time = (\d+)\s*$", log, re.M)
    return int(its[-1]) if its else 0


def _last_line(text: str) -> str:
    lines = [s.strip() for s in text.splitlines() if s.strip()]
    return lines[-1] if lines else "(no output)"


def main(argv=None) -> int:
    args = parse_args(argv)
    case = args.case_dir.resolve()
    for stale in ("result.json", "failure.json"):
        (case / stale).unlink(missing_ok=True)
    try:
        result = run_case(args)
    except CaseFailure as exc:
        reason = str(exc).replace("\n", " ")
        (case / "failure.json").write_text(json.dumps({"status": "failed", "reason": reason}) + "\n")
        print(f"run failed: {reason}", flush=True)
        return 1
    bad = [k for k in RESPONSES if not math.isfinite(result[k])]
    if bad:
        print(f"run failed: {bad[0]} is not finite", flush=True)
        return 1
    (case / "result.json").write_text(json.dumps(result, indent=1) + "\n")
    print(f"done: {result['iterations']} iterations, {result['cells']} cells, {result['wall_s']} s, "
          f"converged={result['converged']}, cla_total={result['cla_total']:.4f} m^2", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
