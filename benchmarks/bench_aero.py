"""Benchmark of the built-in aerodynamic model: speed, panel-count convergence and validation tables.

``run(quick)`` returns markdown lines; run as a script to print them::

    python benchmarks/bench_aero.py [--quick] [--plots DIR]

Speed is measured on one core (BLAS limited to one thread) at the default
panel counts, on a batch of configurations spread over the demo study's
ranges, after one warm-up call. The validation tables set the model beside
published values (sources in each table; "memory" marks values that could
not be checked in a primary text). ``--plots DIR`` also writes PNG sweeps of
every input at the demo settings (studies/demo_hatch.toml, invented) and of
the published checks.
"""
from __future__ import annotations

import argparse
import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from doe.aero.car import CarGeometry  # noqa: E402
from doe.aero.model import DESIGN_INPUTS, ModelSettings, RearPackageModel  # noqa: E402
from doe.aero.panels import Layout, solve_field  # noqa: E402
from doe.aero.section_analysis import section_lift_curve  # noqa: E402
from doe.aero.sections import naca4  # noqa: E402

TARGET_PER_S = 100.0
GOAL_PER_S = 500.0
#: Abbott & von Doenhoff 1959, App. IV, smooth, Re about 3e6 (memory): c_l,max and its angle, deg.
MEASURED_STALL = {"0012": (1.50, 16.0), "2412": (1.60, 16.0), "4412": (1.60, 14.0), "6412": (1.70, 14.0)}
#: The demo study's settings (studies/demo_hatch.toml, invented) and baseline.
DEMO = replace(ModelSettings(), speed=44.0, fixed={"flap_chord": 60.0})
DEMO_BASE = dict(flap_angle=20.0, wing_height=120.0, wing_aoa=6.0, wing_camber=4.0, wing_overhang=50.0)
DEMO_RANGES = {"flap_angle": (10, 45), "wing_height": (60, 200), "wing_aoa": (0, 20), "wing_camber": (2, 7),
               "wing_overhang": (0, 150)}


def _points(n, seed=0):
    rng = np.random.default_rng(seed)
    return {"flap_angle": rng.uniform(10, 45, n), "wing_height": rng.uniform(60, 160, n),
            "wing_aoa": rng.uniform(0, 14, n), "wing_camber": rng.uniform(2, 7, n),
            "wing_overhang": rng.uniform(0, 150, n)}


def _speed(n, repeats):
    """Configurations per second: by wall clock and by this process's CPU time (one core)."""
    model = RearPackageModel()
    model.evaluate(_points(4, 99))                       # warm-up (fills the static-influence cache)
    wall, cpu = [], []
    for r in range(repeats):
        pts = _points(n, r)
        t0, c0 = time.perf_counter(), time.process_time()
        res = model.evaluate(pts)
        wall.append(n / (time.perf_counter() - t0))
        cpu.append(n / (time.process_time() - c0))
        if not res.ok.all():
            raise RuntimeError("benchmark configurations must all be valid")
    return float(np.median(wall)), float(np.median(cpu))


#: Configurations across the demo's ranges for the convergence check.
CONV_POINTS = {"wing_aoa": np.array([0.0, 0.0, 5.0, 10.0, 15.0, 20.0, 20.0]),
               "wing_camber": np.array([2.0, 7.0, 4.0, 2.0, 7.0, 2.0, 7.0]),
               "flap_angle": np.array([10.0, 45.0, 30.0, 20.0, 40.0, 10.0, 45.0]),
               "wing_height": np.array([60.0, 200.0, 120.0, 80.0, 150.0, 200.0, 60.0]),
               "wing_overhang": np.array([0.0, 150.0, 50.0, 100.0, 20.0, 0.0, 150.0])}


def _convergence(factors):
    rows = []
    for f in factors:
        st = replace(DEMO, wing_panels=60 * f, body_panels=100 * f, flap_panels=8 * f)
        rows.append((f, st, RearPackageModel(st).evaluate(CONV_POINTS).values))
    return rows


def _joukowski_error(n=120):
    mu = complex(-0.1, 0.0)
    a = abs(1 - mu)
    th = np.angle(1 - mu) - np.linspace(0, 2 * np.pi, n + 1)
    zeta = mu + a * np.exp(1j * th)
    z = zeta + 1 / zeta
    pts = np.column_stack([z.real, z.imag])
    chord = np.max(np.hypot(*(pts - pts[0]).T))
    worst = 0.0
    for alpha in (4.0, 8.0, 12.0):
        al = np.radians(alpha)
        sol = solve_field(pts, Layout(("s",), (n + 1,)), freestream=(np.cos(al), np.sin(al)))
        cl = 2 * sol.circulation()[0, 0] / chord
        exact = 8 * np.pi * a * np.sin(al) / chord
        worst = max(worst, abs(cl / exact - 1))
    return worst


def _stall_table():
    alphas = np.arange(4.0, 22.01, 0.25)
    lines = ["| section | c_l,max model | c_l,max measured | error | stall angle model | measured | error |",
             "|---|---|---|---|---|---|---|"]
    for code, (cl_ref, a_ref) in MEASURED_STALL.items():
        cl, _ = section_lift_curve(naca4(int(code[0]) / 100, int(code[1]) / 10, 0.12), alphas)
        i = int(np.argmax(cl))
        lines.append(f"| NACA {code} | {cl[i]:.3f} | {cl_ref:.2f} | {100 * (cl[i] / cl_ref - 1):+.1f} % | "
                     f"{alphas[i]:.2f} deg | {a_ref:.0f} deg | {alphas[i] - a_ref:+.2f} deg |")
    return lines


def _slant_sweep(angles):
    cd, cl = [], []
    bare = replace(DEMO, has_wing=False, fixed={"flap_chord": 0.0})
    for a in angles:
        v = RearPackageModel(replace(bare, car=CarGeometry(rear_window_angle=float(a)))).evaluate({}).values
        cd.append(v["cda_total"][0])
        cl.append(v["cla_total"][0])
    return np.array(cd), np.array(cl)


def _body_tables():
    bare = RearPackageModel(replace(DEMO, has_wing=False, fixed={}))
    none = bare.evaluate({"flap_chord": [0.0]}).values
    angles = np.array([10.0, 20.0, 30.0, 45.0])
    flap = bare.evaluate({"flap_chord": np.full(4, 60.0), "flap_angle": angles}).values
    lines = ["No wing, 60 mm flap against no flap (common practice and Hucho, memory: rear lift falls, little front "
             "change, little drag change at moderate angles; the issue's check: front change under a third of the "
             "rear change):", "",
             "| flap angle from window | d cla_rear | d cla_front | front/rear | d cda_total |", "|---|---|---|---|---|"]
    for i, a in enumerate(angles):
        dr, df = flap["cla_rear"][i] - none["cla_rear"][0], flap["cla_front"][i] - none["cla_front"][0]
        lines.append(f"| {a:.0f} deg | {dr:+.4f} | {df:+.4f} | {abs(df / dr):.2f} | "
                     f"{flap['cda_total'][i] - none['cda_total'][0]:+.4f} |")
    model = RearPackageModel(replace(DEMO, fixed={}))
    pts = {k: np.full(4, v) for k, v in DEMO_BASE.items()}
    pts["flap_chord"] = np.array([0.0, 60.0, 60.0, 60.0])
    pts["flap_angle"] = np.array([20.0, 15.0, 20.0, 30.0])
    v = model.evaluate(pts).values
    lines += ["", "Wing at the demo baseline (invented), with and without the flap (common practice: the flap helps "
              "the wing; more total downforce = more negative cla_total):", "",
              "| flap | cla_total | cla_wing | cla_rear |", "|---|---|---|---|"]
    for i, name in enumerate(("none", "60 mm at 15 deg", "60 mm at 20 deg", "60 mm at 30 deg")):
        lines.append(f"| {name} | {v['cla_total'][i]:+.4f} | {v['cla_wing'][i]:+.4f} | {v['cla_rear'][i]:+.4f} |")
    angles = np.arange(5.0, 40.1, 1.0)
    cd, cl = _slant_sweep(angles)
    lines += ["", "Rear-window angle swept 5-40 deg, no wing, no flap (Ahmed, Ramm & Faltin 1984, the trend: drag "
              "lowest near 10-15 deg, peak near 30 deg, lower above; the issue's bands 8-18 and 25-32 deg):", "",
              "| measure | model | reference |", "|---|---|---|",
              f"| angle of least drag | {angles[np.argmin(cd)]:.0f} deg | 8-18 deg |",
              f"| angle of most drag | {angles[np.argmax(cd)]:.0f} deg | 25-32 deg |",
              f"| drag at 40 deg below the peak | {cd.max() - cd[-1]:+.4f} m^2 | > 0 |",
              f"| lift sign over the sweep | {'positive' if np.all(cl > 0) else 'changes'} "
              f"({cl.min():+.3f} to {cl.max():+.3f} m^2) | no change of sign |",
              f"| largest drag step between 1-deg steps | {np.max(np.abs(np.diff(cd))):.4f} m^2 | smooth |"]
    return lines


def _coupling_and_ground():
    model = RearPackageModel(replace(DEMO, fixed={}))
    high = {"wing_height": [600.0], "wing_overhang": [0.0], "wing_aoa": [6.0]}
    inst, alone = model.evaluate(high).values["cl_wing"][0], model.isolated_wing(high)[0]
    low = {"wing_height": [80.0], "wing_aoa": [6.0]}
    by_k = [model.with_coefficients(body_3d_factor=k).evaluate(low).values["cl_wing"][0] for k in (0.05, 0.12, 0.3)]
    gaps = np.array([0.03, 0.05, 0.07, 0.1, 0.13, 0.2, 0.3, 0.5, 1.0])
    g = [section_lift_curve(naca4(0.02, 0.4, 0.12), [2.0], ground_gap=x, inverted=True)[0][0] for x in gaps]
    i = int(np.argmin(g))
    return ["| check | model | reference |", "|---|---|---|",
            f"| wing 1.4 chords above the roof: installed / isolated cl | {inst:.3f} / {alone:.3f} "
            f"({100 * (inst / alone - 1):+.1f} %) | within 10 % |",
            f"| wing 80 mm above the hatch, cl at body_3d_factor 0.05 / 0.12 / 0.30 | "
            f"{' / '.join(f'{c:.3f}' for c in by_k)} | responds |",
            f"| inverted NACA 2412 at 2 deg over the road: gap of most downforce | {gaps[i]:.2f} chord "
            f"(c_l {g[i]:.2f}; {g[0]:.2f} at 0.03) | near 0.1, falling below (Zerihan & Zhang 2000, memory) |"]


def run(quick: bool = False) -> list:
    """Markdown lines: rate, convergence and validation against published values."""
    n, repeats = (32, 3) if quick else (128, 5)
    wall, cpu = _speed(n, repeats)
    st = ModelSettings()
    lines = ["## Built-in aerodynamic model", "",
             f"Default panels: wing {st.wing_panels}, body {st.body_panels}, flap {st.flap_panels}; "
             f"one core; batches of {n} configurations.", "",
             "| measure | value | target |", "|---|---|---|",
             f"| full-car configurations per CPU second, one core (median of {repeats}) | {cpu:.0f} | "
             f">= {TARGET_PER_S:.0f} (goal {GOAL_PER_S:.0f}) |",
             f"| full-car configurations per wall-clock second (shared machine) | {wall:.0f} | |",
             f"| Joukowski lift error, 120 panels, 4-12 deg | {100 * _joukowski_error():.3f} % | < 1 % |", "",
             "Stall of 12 % sections in free air (model: viscous lift factor, stall measure and limit of doe.aero; "
             "measured: Abbott & von Doenhoff 1959, App. IV, Re about 3e6, memory):", ""]
    lines += _stall_table()
    lines += ["", "Panel-count convergence at the demo settings, seven configurations across the demo's ranges "
              "(wing/body/flap panels 60/100/8 x 1, 2, 4): largest relative change when the panels double "
              "(cla_total is compared on the scale of the body's lift, as it passes near zero):", "",
              "| panels | stall_margin | cla_wing | cla_body | cla_front | cla_rear | cla_total | cda_total |",
              "|---|---|---|---|---|---|---|---|"]
    rows = _convergence((1, 2) if quick else (1, 2, 4))
    for (f0, _, a), (f1, s1, b) in zip(rows, rows[1:]):
        cells = []
        for k in ("stall_margin", "cla_wing", "cla_body", "cla_front", "cla_rear", "cla_total", "cda_total"):
            scale = np.abs(a["cla_body"]) if k == "cla_total" else np.abs(a[k])
            cells.append(f"{100 * np.max(np.abs(b[k] - a[k]) / scale):.2f} %")
        lines.append(f"| x{f0} -> x{f1} ({s1.wing_panels}/{s1.body_panels}/{s1.flap_panels}) | " + " | ".join(cells) + " |")
    lines += ["", "Wing-body coupling and ground effect:", ""] + _coupling_and_ground()
    lines += [""] + _body_tables()
    return lines


# ---------------------------------------------------------------------------
def plots(folder) -> list:
    """Write PNG sweeps of every input at the demo settings and of the published checks; return the paths."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    outs = ["cla_total", "cla_front", "cla_rear", "cla_wing", "cla_body", "cda_total"]
    fig, axs = plt.subplots(3, 3, figsize=(15, 12))
    for ax, name in zip(axs.ravel(), DESIGN_INPUTS):
        d = DESIGN_INPUTS[name]
        x = np.linspace(d.low, d.high, 121)
        settings = DEMO if name != "flap_chord" else replace(DEMO, fixed={})
        pts = {k: np.full_like(x, v) for k, v in DEMO_BASE.items()}
        pts[name] = x
        res = RearPackageModel(settings).evaluate(pts)
        for o in outs:
            ax.plot(x, res.values[o], label=o)
        ax2 = ax.twinx()
        ax2.plot(x, res.values["stall_margin"], "k:", label="stall_margin")
        ax2.set_ylim(0, 1.6)
        if name in DEMO_RANGES:
            ax.axvspan(*DEMO_RANGES[name], color="0.9")
        ax.plot(x[~res.ok], np.zeros((~res.ok).sum()), "rx")
        ax.set_title(f"{name} [{d.unit}] (x: failed, {(~res.ok).sum()}); dotted: stall margin")
        ax.grid(alpha=0.3)
    axs[0, 0].legend(fontsize=7)
    ax = axs[2, 2]
    bare = RearPackageModel(replace(DEMO, has_wing=False, fixed={}))
    x = np.linspace(-10, 60, 71)
    for c in (20.0, 60.0, 120.0):
        v = bare.evaluate({"flap_angle": x, "flap_chord": np.full_like(x, c)}).values
        ax.plot(x, v["cla_rear"], label=f"rear, {c:.0f} mm")
        ax.plot(x, v["cla_front"], "--", label=f"front, {c:.0f} mm")
    ax.set_title("no wing: flap angle (lines: no flap)")
    v0 = bare.evaluate({"flap_chord": [0.0]}).values
    ax.axhline(v0["cla_rear"][0], color="k", lw=0.5)
    ax.axhline(v0["cla_front"][0], color="k", lw=0.5, ls="--")
    ax.legend(fontsize=6)
    ax.grid(alpha=0.3)
    fig.tight_layout()
    paths = [folder / "aero_sweeps_demo.png"]
    fig.savefig(paths[0], dpi=70)
    plt.close(fig)

    fig, axs = plt.subplots(1, 3, figsize=(15, 4.5))
    angles = np.arange(5.0, 40.1, 1.0)
    cd, cl = _slant_sweep(angles)
    axs[0].plot(angles, cd, label="cda_total")
    axs[0].plot(angles, cl, label="cla_total")
    axs[0].set_title("rear-window angle, no wing, no flap (m^2)")
    alphas = np.arange(-4.0, 22.01, 0.25)
    for code, (c, a) in MEASURED_STALL.items():
        line, = axs[1].plot(alphas, section_lift_curve(naca4(int(code[0]) / 100, int(code[1]) / 10, 0.12),
                                                       alphas)[0], label=f"NACA {code}")
        axs[1].plot(a, c, "o", color=line.get_color())
    axs[1].set_title("free-air c_l (dots: Abbott & von Doenhoff, memory)")
    gaps = np.geomspace(0.02, 2.0, 40)
    for a in (0.0, 2.0, 4.0, 6.0):
        axs[2].semilogx(gaps, [-section_lift_curve(naca4(0.02, 0.4, 0.12), [a], ground_gap=g, inverted=True)[0][0]
                               for g in gaps], label=f"inverted 2412, {a:.0f} deg")
    axs[2].axvline(0.1, color="k", lw=0.5)
    axs[2].set_title("section downforce against gap / chord")
    for ax in axs:
        ax.legend(fontsize=7)
        ax.grid(alpha=0.3)
    fig.tight_layout()
    paths.append(folder / "aero_checks.png")
    fig.savefig(paths[1], dpi=70)
    plt.close(fig)
    return paths


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer repeats and panel counts")
    ap.add_argument("--plots", metavar="DIR", help="also write PNG sweeps to DIR")
    args = ap.parse_args()
    if args.plots:
        for p in plots(args.plots):
            print(f"wrote {p}")
    print("\n".join(run(args.quick)))
