"""The 2-D RANS case driver (examples/cfd) and the closed outlines it meshes (doe.aero.outline).

Everything but the last test runs without OpenFOAM: solver output is read from
files recorded by real runs (tests/data/cfd/README.md says how each was made).
The last test runs one coarse case end to end when OpenFOAM and gmsh are
installed (``.ci/run`` installs OpenFOAM) and is skipped otherwise.
"""
from __future__ import annotations

import importlib.util
import json
import math
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from doe.aero import ModelSettings
from doe.aero.car import body_contour
from doe.aero.model import RearPackageModel
from doe.aero.outline import rear_package_outlines
from doe.errors import AeroError

ROOT = Path(__file__).resolve().parents[1]
CFD = ROOT / "examples" / "cfd"
DATA = Path(__file__).resolve().parent / "data" / "cfd"
sys.path.insert(0, str(CFD))

import cfd_foam  # noqa: E402
import cfd_results  # noqa: E402

HAS_GMSH = importlib.util.find_spec("gmsh") is not None
HAS_FOAM = shutil.which("simpleFoam") is not None and shutil.which("gmshToFoam") is not None
POINT = {"flap_angle": 30.0, "wing_height": 100.0, "wing_aoa": 8.0, "wing_camber": 4.0, "wing_overhang": 50.0}


# ---------------------------------------------------------------------- geometry
def _segments_cross(poly) -> bool:
    """Whether any two non-neighbouring edges of a closed polygon intersect (orientation test)."""
    a, b = poly, np.roll(poly, -1, axis=0)
    n = len(poly)

    def orient(p, q, r):
        return np.sign((q[..., 0] - p[..., 0]) * (r[..., 1] - p[..., 1]) - (q[..., 1] - p[..., 1]) * (r[..., 0] - p[..., 0]))

    i, j = np.triu_indices(n, k=2)
    keep = ~((i == 0) & (j == n - 1))
    i, j = i[keep], j[keep]
    o1, o2 = orient(a[i], b[i], a[j]), orient(a[i], b[i], b[j])
    o3, o4 = orient(a[j], b[j], a[i]), orient(a[j], b[j], b[i])
    return bool(np.any((o1 * o2 < 0) & (o3 * o4 < 0)))


def _area(poly) -> float:
    x, y = poly[:, 0], poly[:, 1]
    return 0.5 * float(np.dot(x, np.roll(y, -1)) - np.dot(y, np.roll(x, -1)))


@pytest.mark.parametrize("point", [POINT, {"flap_angle": 10.0, "wing_height": 60.0, "wing_aoa": 20.0},
                                   {"flap_angle": 45.0, "wing_height": 200.0, "wing_aoa": 0.0, "wing_camber": 7.0,
                                    "wing_overhang": 150.0},
                                   {"flap_angle": -10.0, "flap_chord": 200.0, "wing_height": 300.0}])
def test_outlines_closed_simple_clockwise_above_ground(point):
    o = rear_package_outlines(ModelSettings(), point)
    for poly in (o.body, o.wing):
        assert not _segments_cross(poly)
        assert _area(poly) < 0                              # clockwise, as the module says
        assert np.hypot(*(poly[-1] - poly[0])) > 0          # first node not repeated
    assert o.body[:, 1].min() == pytest.approx(ModelSettings().car.ground_clearance, abs=1e-12)
    assert o.wing[:, 1].min() > o.hatch_edge[1]
    assert o.wing_gap >= 0.01


def test_body_is_the_model_contour_closed():
    """The outline starts with the model's own panel contour, node for node (one description of the car)."""
    st = ModelSettings()
    o = rear_package_outlines(st, POINT, body_panels=400)
    c = body_contour(st.car, 30.0, 0.060, 400, 2, st.coefficients.critical_slant)
    assert np.array_equal(o.body[:len(c.nodes)], c.nodes)
    # closed by the flap's underside and the base: two nodes beyond the model's contour
    assert len(o.body) == len(c.nodes) + 2
    assert np.array_equal(o.lower_edge, c.nodes[0])


def test_flap_angle_moves_only_the_flap_by_its_angle():
    st = ModelSettings()
    a = rear_package_outlines(st, {**POINT, "flap_angle": 10.0})
    b = rear_package_outlines(st, {**POINT, "flap_angle": 40.0})
    n_fixed = len(a.body) - 4                               # flap root .. tip, tip underside, root underside
    assert np.array_equal(a.body[:n_fixed], b.body[:n_fixed])
    window = st.car.hatch_edge - st.car.roof_rear
    for o, angle in ((a, 10.0), (b, 40.0)):
        flap = o.flap_tip - o.hatch_edge
        assert np.hypot(*flap) == pytest.approx(0.060, abs=1e-12)           # flap chord 60 mm
        cross = window[0] * flap[1] - window[1] * flap[0]
        turn = np.degrees(np.arctan2(cross, np.dot(window, flap)))
        assert turn == pytest.approx(angle, abs=1e-9)                          # up from the window line


def test_flap_thickness_and_no_flap():
    st = ModelSettings()
    o = rear_package_outlines(st, POINT, flap_thickness=0.006)
    assert np.hypot(*(o.body[-2] - o.body[-3])) == pytest.approx(0.006, abs=1e-12)   # blunt tip
    bare = rear_package_outlines(st, {**POINT, "flap_chord": 0.0})
    assert np.allclose(bare.flap_tip, st.car.hatch_edge)
    assert len(bare.body) < len(o.body)
    with pytest.raises(AeroError, match="flap thickness"):
        rear_package_outlines(st, POINT, flap_thickness=0.0)


def test_wing_knobs_move_the_wing_as_defined():
    st = ModelSettings()
    base = rear_package_outlines(st, POINT)
    up = rear_package_outlines(st, {**POINT, "wing_height": 150.0})
    back = rear_package_outlines(st, {**POINT, "wing_overhang": 90.0})
    assert np.allclose(up.wing - base.wing, [0.0, 0.050], atol=1e-12)
    assert np.allclose(back.wing - base.wing, [0.040, 0.0], atol=1e-12)
    assert np.array_equal(up.body, base.body)
    for aoa in (0.0, 8.0, 17.0):
        w = rear_package_outlines(st, {**POINT, "wing_aoa": aoa}).wing
        te = w[0]
        want_le = st.car.hatch_edge + [0.050, 0.100]                              # leading edge where set
        le = w[np.argmin(np.hypot(*(w - want_le).T))]
        assert np.hypot(*(le - want_le)) < 1e-12
        assert np.hypot(*(te - le)) == pytest.approx(st.chord, abs=1e-12)       # closed trailing edge: chord
        assert np.degrees(np.arctan2(te[1] - le[1], te[0] - le[0])) == pytest.approx(aoa, abs=1e-9)


def test_wing_too_close_to_body_is_refused():
    with pytest.raises(AeroError, match="within"):
        rear_package_outlines(ModelSettings(), {"wing_height": 20.0, "wing_overhang": -300.0})
    with pytest.raises(AeroError, match="outside"):
        rear_package_outlines(ModelSettings(), {"wing_aoa": 40.0})


def test_model_geometry_is_public_and_refuses_a_touching_wing():
    """RearPackageModel.geometry gives the contour the model solves; a wing inside the body is an AeroError."""
    model = RearPackageModel(ModelSettings())
    st = model.settings
    p = {k: float(v[0]) for k, v in model.inputs(POINT).items()}
    c = body_contour(st.car, 30.0, p["flap_chord"] / 1000.0, st.body_panels, st.flap_panels,
                     st.coefficients.critical_slant, flap_position=p["flap_position"] / 100.0)
    assert np.array_equal(model.geometry(p)["body"].nodes, c.nodes)
    with pytest.raises(AeroError, match="within"):
        model.geometry({**p, "wing_height": 20.0, "wing_overhang": -300.0})


# ---------------------------------------------------------------------- mesh and dictionaries
def test_split_at_corners_covers_polygon():
    import cfd_mesh

    poly = np.array([[0, 0], [1, 0], [2, 0], [2, 1], [1, 1], [0, 1]], dtype=float)
    pieces = cfd_mesh.split_at_corners(poly, [0, 3])
    assert [list(p) for p in pieces] == [[0, 1, 2, 3], [3, 4, 5, 0]]


@pytest.mark.skipif(not HAS_GMSH, reason="gmsh is not installed (pip install 'doe[cfd]')")
def test_mesh_has_named_patches_and_no_inverted_cells(tmp_path):
    import gmsh

    import cfd_mesh

    st = ModelSettings()
    o = rear_package_outlines(st, POINT)
    info = cfd_mesh.write_mesh(o, cfd_mesh.MESH_LEVELS["coarse"], tmp_path / "m.msh", st.car.length,
                               st.car.roof_height)
    assert 5000 < info["cells_2d"] < 40000
    assert info["wing_wall_faces"] > 100                   # the section's curvature is resolved
    with cfd_mesh.gmsh_session():
        gmsh.open(str(tmp_path / "m.msh"))
        names = {gmsh.model.getPhysicalName(d, t) for d, t in gmsh.model.getPhysicalGroups()}
        assert names == {"inlet", "outlet", "top", "ground", "body", "wing", "front", "back", "fluid"}
        types, tags, _ = gmsh.model.mesh.getElements(3)
        q = np.concatenate([gmsh.model.mesh.getElementQualities(t, "minSJ") for t in tags])
        assert q.min() > -1e-9                             # no inverted cell ...
        assert (q < 1e-3).sum() <= 2                       # ... and at most a degenerate one where the layers start
    # gmsh resets SIGPIPE to its default at the C level; the session puts Python's "ignore" back
    import ctypes
    import signal

    libc = ctypes.CDLL(None)
    libc.signal.restype = ctypes.c_void_p
    assert libc.signal(signal.SIGPIPE, ctypes.c_void_p(1)) == 1      # SIG_IGN was in place


def test_templates_fill_completely(tmp_path):
    import rear_package_case as drv

    st = ModelSettings(speed=44.0)
    import cfd_mesh

    values = drv.case_values(st, cfd_mesh.MESH_LEVELS["medium"], drv.SOLVER_DEFAULTS)
    files = cfd_foam.write_dictionaries(tmp_path, values)
    names = {str(f.relative_to(tmp_path)) for f in files}
    assert {"system/controlDict", "system/fvSchemes", "system/fvSolution", "0/U", "0/p", "0/k", "0/omega",
            "0/nut", "constant/transportProperties", "constant/turbulenceProperties"} <= names
    for f in files:
        assert "${" not in f.read_text()
    cd = (tmp_path / "system/controlDict").read_text()
    assert f"CofR            ({st.car.front_axle:.10g} 0 0)" in cd     # moments about the front axle's patch
    assert "magUInf         44;" in cd
    nu = float((tmp_path / "constant/transportProperties").read_text().split("nu")[-1].split(";")[0])
    # kinematic viscosity of ISO 2533 sea-level air: 1.4607e-5 m^2/s (ISO 2533:1975, table of properties)
    assert nu == pytest.approx(1.4607e-5, rel=1e-3)
    with pytest.raises(KeyError, match="speed"):
        cfd_foam.fill_template("U ${speed};", {})
    assert cfd_foam.fill_template("$keep ${a}", {"a": 2}) == "$keep 2"


def test_patch_types_set_on_gmshToFoam_boundary():
    raw = (DATA / "boundary_gmshToFoam").read_text()
    assert raw.count("type            patch;") == 8
    fixed = cfd_foam.set_patch_types(raw)
    for name, kind in cfd_foam.PATCH_TYPES.items():
        block = fixed.split(f"\n    {name}\n")[1].split("}")[0]
        assert f"type            {kind};" in block
        assert "physicalType" not in block
    assert "nFaces          165;" in fixed.split("\n    wing\n")[1].split("}")[0]   # sizes untouched
    with pytest.raises(cfd_foam.CaseFailure, match="no patch 'body'"):
        cfd_foam.set_patch_types(raw.replace("    body\n", "    hull\n"))


# ---------------------------------------------------------------------- logs and forces
def test_check_mesh_reports():
    ok, why, stats = cfd_foam.check_mesh_report((DATA / "checkMesh_ok.log").read_text())
    assert ok and why == "" and stats["cells"] > 5000
    bad, why, _ = cfd_foam.check_mesh_report((DATA / "checkMesh_bad.log").read_text())
    assert not bad
    assert "negative" in why.lower() and "incorrectly oriented" in why


def test_solver_logs():
    ok_log = (DATA / "simpleFoam_ok.log").read_text()
    assert "trapFpe" in ok_log                             # the header mentions FPE trapping ...
    assert cfd_foam.solver_failure(0, ok_log) == ""        # ... which is not a failure
    assert cfd_foam.foam_version(ok_log) == "OPENFOAM=1912 patch=200626"
    fpe = (DATA / "simpleFoam_fpe.log").read_text()
    assert cfd_foam.solver_failure(136, fpe) == "solver diverged (floating-point exception) at iteration 8"
    blow = (DATA / "simpleFoam_blowup.log").read_text()
    why = cfd_foam.solver_failure(1, blow)
    assert why.startswith("solver stopped with exit code 1 at iteration 8: Wrong token type") and "nan" in why


def _series(name):
    body = cfd_results.read_force_coefficients(DATA / f"forces_{name}_body.dat")
    wing = cfd_results.read_force_coefficients(DATA / f"forces_{name}_wing.dat")
    return body, wing, cfd_results.response_series(body, wing, 1.75, 1.30, 2.55)


def test_force_file_columns_and_moment_sign():
    body, wing, s = _series("steady")
    raw = np.loadtxt(DATA / "forces_steady_body.dat", comments="#")
    # OpenFOAM's forceCoeffs: Cl(f) = Cl/2 + CmPitch, Cl(r) = Cl/2 - CmPitch (its front/rear split;
    # OpenFOAM v1912 source, forceCoeffs.H description, memory)
    assert np.allclose(raw[:, 11], raw[:, 3] / 2 + raw[:, 5], atol=1e-7)
    assert np.array_equal(body.cl, raw[:, 3]) and np.array_equal(body.cd, raw[:, 1])
    # the header's pitch axis is (0 0 -1): the moment about +z is -CmPitch
    assert np.array_equal(body.cm, -raw[:, 5])
    # lever check on the wing: its moment about the front contact patch, x Fy - y Fx, with the wing's
    # force at its own place (about 3.3 m behind the front axle, 1.3 m up) gives cm of the sign and size read
    lever = (wing.cm[-1] + 1.30 * wing.cd[-1]) / wing.cl[-1]
    assert 3.0 < lever < 3.6
    assert np.allclose(s["cla_front"] + s["cla_rear"], s["cla_total"])
    assert len(s["iteration"]) == 600


def test_steady_and_oscillating_verdicts():
    _, _, steady = _series("steady")
    v = cfd_results.steady_verdict(steady, 200, 300)
    assert v.settled and not v.oscillating and v.iterations == 2000
    _, _, osc = _series("oscillating")
    v = cfd_results.steady_verdict(osc, 200, 300)
    assert not v.settled and v.oscillating
    assert v.std["cla_total"] > 0.5                        # the base wake swings the whole car's lift
    assert not cfd_results.steady_verdict(steady, 200, 2500).settled   # never before min_iterations
    short = {k: val[:150] for k, val in steady.items()}
    assert not cfd_results.steady_verdict(short, 200, 300).settled     # nor before a full window


def test_window_stats():
    st = cfd_results.window_stats(np.r_[np.zeros(100), np.ones(4), 2 * np.ones(4)], 8)
    assert st.n == 8 and st.mean == 1.5 and st.drift == 1.0
    assert st.std == pytest.approx(np.std([1, 1, 1, 1, 2, 2, 2, 2], ddof=1))


# ---------------------------------------------------------------------- the driver's failure paths
def _driver(case, *extra, timeout=120):
    return subprocess.run([sys.executable, str(CFD / "rear_package_case.py"), str(case), *extra],
                          capture_output=True, text=True, timeout=timeout)


def _summarise(tmp_path, name):
    import rear_package_case as drv

    post = tmp_path / "postProcessing"
    for part in ("body", "wing"):
        src = DATA / f"forces_{name}_{part}.dat"
        dst = post / f"forces{part.title()}" / "0" / "coefficient.dat"
        dst.parent.mkdir(parents=True, exist_ok=True)
        if src.exists():
            shutil.copy(src, dst)
        else:
            shutil.copy(DATA / f"forces_{name}_body.dat", dst)
    return drv.summarise(tmp_path, ModelSettings(), {**drv.SOLVER_DEFAULTS, "max_iterations": 2000}, "")


def test_summary_of_steady_run(tmp_path):
    out = _summarise(tmp_path, "steady")
    assert out["converged"] == 1 and out["oscillating"] == 0 and out["iterations"] == 2000
    for r in cfd_results.RESPONSES:
        assert math.isfinite(out[r]) and out[r + "_std"] >= 0
    assert out["cla_body"] == pytest.approx(-1.6946 * 1.75, rel=1e-3)


def test_summary_of_oscillating_run_reports_mean_spread_and_flag(tmp_path):
    out = _summarise(tmp_path, "oscillating")
    assert out["converged"] == 0 and out["oscillating"] == 1
    assert "did not settle" in out["note"]
    assert out["cla_total_std"] > 0.5


def test_blown_up_forces_fail_the_run(tmp_path):
    import rear_package_case as drv

    with pytest.raises(cfd_foam.CaseFailure, match="diverged: .* at iteration 2"):
        _summarise(tmp_path, "blowup")
    assert drv.BLOW_UP < 1e10


def test_driver_reports_geometry_failure(tmp_path):
    (tmp_path / "params.json").write_text(json.dumps({"run_id": "r1", "wing_height": 20.0, "wing_overhang": -300.0}))
    r = _driver(tmp_path)
    assert r.returncode == 1
    assert r.stdout.strip().splitlines()[-1].startswith("run failed: geometry: the wing comes within")
    assert json.loads((tmp_path / "failure.json").read_text())["status"] == "failed"
    assert not (tmp_path / "result.json").exists()


def test_driver_reports_missing_params_and_unknown_parameter(tmp_path):
    r = _driver(tmp_path)
    assert r.returncode == 1 and "cannot read params.json" in r.stdout
    (tmp_path / "params.json").write_text(json.dumps({"run_id": "r1", "spoiler": 3.0}))
    r = _driver(tmp_path)
    assert r.returncode == 1 and "parameter 'spoiler' is not a model input" in r.stdout


def test_driver_without_openfoam_says_so(tmp_path):
    (tmp_path / "params.json").write_text(json.dumps({"run_id": "r1", **POINT}))
    r = subprocess.run([sys.executable, str(CFD / "rear_package_case.py"), str(tmp_path)], capture_output=True,
                       text=True, timeout=120, env={"PATH": str(tmp_path), "HOME": str(tmp_path)})
    assert r.returncode == 1
    assert r.stdout.strip().endswith("is not on PATH (Debian: apt-get install openfoam)")


@pytest.mark.skipif(not (HAS_FOAM and HAS_GMSH), reason="OpenFOAM and gmsh are needed to reach the time limit")
def test_driver_time_limit_is_a_failure(tmp_path):
    (tmp_path / "params.json").write_text(json.dumps({"run_id": "r1", **POINT}))
    r = _driver(tmp_path, "--mesh", "coarse", "--time-limit", "0.01")
    assert r.returncode == 1 and "time limit of 0.01 s" in r.stdout


def test_tool_time_limit_kills_the_program(tmp_path):
    r = cfd_foam.run_tool(["sleep", "30"], tmp_path, "sleep", 0.5)
    assert r.timed_out and r.seconds < 10


def test_tool_poll_stops_the_program(tmp_path):
    calls = []
    r = cfd_foam.run_tool(["sleep", "30"], tmp_path, "sleep", 20, poll=lambda: calls.append(1) or len(calls) > 1,
                          poll_s=0.1)
    assert r.stopped and not r.timed_out and r.seconds < 10


def test_command_evaluator_records_driver_failure(tmp_path):
    from doe.runs.evaluators.command import CommandEvaluator, CommandSettings

    ev = CommandEvaluator(CommandSettings((sys.executable, str(CFD / "rear_package_case.py"), "{case_dir}"),
                                          timeout_s=60),
                          ["cla_total"], list(POINT), tmp_path, tmp_path)
    out = ev.evaluate("r1", {**POINT, "wing_height": 20.0, "wing_overhang": -300.0})
    assert out.status == "failed"
    assert "run failed: geometry" in out.message and math.isnan(out.values["cla_total"])


# ---------------------------------------------------------------------- one real case
@pytest.mark.skipif(not (HAS_FOAM and HAS_GMSH),
                    reason="OpenFOAM (apt-get install openfoam) and gmsh (pip install 'doe[cfd]') are needed")
def test_real_coarse_case_end_to_end(tmp_path):
    (tmp_path / "params.json").write_text(json.dumps({"run_id": "r1", **POINT}))
    r = _driver(tmp_path, "--mesh", "coarse", "--max-iterations", "400", "--min-iterations", "200",
                "--time-limit", "400", timeout=450)
    assert r.returncode == 0, r.stdout[-500:]
    res = json.loads((tmp_path / "result.json").read_text())
    for name in cfd_results.RESPONSES:
        assert math.isfinite(res[name]) and res[name + "_std"] >= 0
    assert res["converged"] in (0, 1) and 1 < res["iterations"] <= 400
    assert 5000 < res["cells"] < 40000 and res["solver_version"].startswith("OPENFOAM=")
    # a car-sized body at 40 m/s: drag per metre of width positive, a few tenths of q times 1 m^2
    # (common practice, no source; the recorded runs give 0.58)
    assert 0.05 < res["cda_body"] / 1.75 < 2.0
    assert (tmp_path / "geometry.json").exists() and not (tmp_path / "openfoam" / "constant" / "polyMesh").exists()


def test_dataset_record_keeps_spread_convergence_and_cost(tmp_path):
    """make_rans_dataset.collect: stored rows plus each case's record from its result.json (a real medium run)."""
    import make_rans_dataset as mk

    res = json.loads((DATA / "result_medium_r001.json").read_text())
    head = "run_id,flap_angle,wing_height,wing_aoa,wing_camber,wing_overhang," + ",".join(mk.RESPONSES)
    ok_row = "r001,12.46,88.32,13.77,5.26,99.46," + ",".join(str(res[r]) for r in mk.RESPONSES)
    bad_row = "r002,43.2,190.9,0.2,4.0,9.6," + ",".join("" for _ in mk.RESPONSES)
    (tmp_path / "results.csv").write_text(f"{head},status,source,message,elapsed_s\n{ok_row},ok,command,,199.3\n"
                                          f"{bad_row},failed,command,exit code 1; log: run failed: geometry,1.2\n")
    case = tmp_path / "cases" / "r001"
    case.mkdir(parents=True)
    (case / "result.json").write_text(json.dumps(res))
    out = tmp_path / "rec.csv"
    assert mk.collect(tmp_path / "results.csv", tmp_path / "cases", out) == 2
    import pandas as pd

    frame = pd.read_csv(out)
    first = frame.iloc[0]
    assert first["converged"] == 1 and first["iterations"] == 1290 and first["cells"] == 24963
    assert first["cla_total_std"] == pytest.approx(res["cla_total_std"], rel=1e-5)
    assert first["solver_version"] == "OPENFOAM=1912 patch=200626" and first["source"] == "cfd-rans-2d"
    assert frame.iloc[1]["status"] == "failed" and "geometry" in frame.iloc[1]["message"]


def test_dataset_store_resumes_from_the_committed_record(tmp_path):
    """A fresh checkout has no store: it starts from the recorded CSV, and its runs count as done."""
    import make_rans_dataset as mk

    from doe.runs.results import ResultsStore

    rec = tmp_path / "rec.csv"
    res = json.loads((DATA / "result_medium_r001.json").read_text())
    head = "run_id,flap_angle,wing_height,wing_aoa,wing_camber,wing_overhang," + ",".join(mk.RESPONSES)
    rec.write_text(f"{head},status,source,converged,iterations,wall_s,message\n"
                   "r001,12.46,88.32,13.77,5.26,99.46," + ",".join(str(res[r]) for r in mk.RESPONSES)
                   + ",ok,cfd-rans-2d,1,1290,198.6,\n")
    store_csv = tmp_path / "work" / "results.csv"
    assert mk.seed_store(store_csv, rec) == 1
    assert mk.seed_store(store_csv, rec) == 0                 # never over an existing store
    with ResultsStore(store_csv, list(mk.PARAMETERS), list(mk.RESPONSES)) as store:
        assert store.done() == {"r001"}
    # the record's extras survive a collect without the case folder
    assert mk.collect(store_csv, tmp_path / "no-cases", rec) == 1
    assert "1290" in rec.read_text()
