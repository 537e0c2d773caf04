"""Benchmark of the built-in aerodynamic model: speed and panel-count convergence.

``run(quick)`` returns markdown lines; run as a script to print them::

    python benchmarks/bench_aero.py [--quick]

Speed is measured on one core (BLAS limited to one thread) at the default
panel counts, on a batch of configurations spread over the demo study's
ranges, after one warm-up call.
"""
from __future__ import annotations

import argparse
import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from doe.aero.model import ModelSettings, RearPackageModel  # noqa: E402
from doe.aero.panels import Layout, solve_field  # noqa: E402

TARGET_PER_S = 100.0


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


def _convergence(factors):
    pts = {"flap_angle": np.array([15.0, 35.0]), "wing_aoa": np.array([3.0, 9.0]),
           "wing_height": np.array([80.0, 160.0])}
    base = ModelSettings()
    rows = []
    for f in factors:
        st = replace(base, wing_panels=int(base.wing_panels * f) // 2 * 2, body_panels=int(base.body_panels * f),
                     flap_panels=max(2, int(round(base.flap_panels * f))))
        v = RearPackageModel(st).evaluate(pts).values
        rows.append((f, st, v))
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


def run(quick: bool = False) -> list:
    """Markdown lines: configurations per second and panel-count convergence."""
    n, repeats = (32, 3) if quick else (128, 5)
    wall, cpu = _speed(n, repeats)
    st = ModelSettings()
    lines = ["## Built-in aerodynamic model", "",
             f"Default panels: wing {st.wing_panels}, body {st.body_panels}, flap {st.flap_panels}; "
             f"one core; batches of {n} configurations.", "",
             "| measure | value | target |", "|---|---|---|",
             f"| full-car configurations per CPU second, one core (median of {repeats}) | {cpu:.0f} | "
             f">= {TARGET_PER_S:.0f} |",
             f"| full-car configurations per wall-clock second (shared machine) | {wall:.0f} | |",
             f"| Joukowski lift error, 120 panels, 4-12 deg | {100 * _joukowski_error():.3f} % | < 1 % |", "",
             "Panel-count convergence (two configurations; CLA and CDA in m^2):", "",
             "| panels x | wing/body/flap | cla_wing | cla_body | cla_total | cda_total |", "|---|---|---|---|---|---|"]
    for f, s, v in _convergence((0.5, 1.0, 2.0) if quick else (0.5, 1.0, 2.0, 4.0)):
        def cell(k):
            return " / ".join(f"{x:+.4f}" for x in v[k])
        lines.append(f"| {f:g} | {s.wing_panels}/{s.body_panels}/{s.flap_panels} | {cell('cla_wing')} | "
                     f"{cell('cla_body')} | {cell('cla_total')} | {cell('cda_total')} |")
    return lines


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer repeats and panel counts")
    print("\n".join(run(ap.parse_args().quick)))
