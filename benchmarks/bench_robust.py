"""Robust settings: Monte-Carlo error against sample size, search time and global-search quality."""
from __future__ import annotations

import math
import time

import numpy as np

from doe.robust.scatter import propagate, scatter_draws
from doe.robust.search import find_settings
from doe.space import Parameter, Space
from doe.testing.functions import get
from doe.vehicle import Aero, Segment, Track, Vehicle, lap_time

SEEDS = tuple(range(1, 21))


def _exact(f):
    def predict(X):
        y = f(X)
        return {"y": (y, np.zeros_like(y))}
    return predict


def _mc_error(quick: bool) -> list[str]:
    # f = exp(a.x), x ~ N(x0, diag(tol^2)): lognormal, mean exp(m + s^2/2), variance (e^{s^2}-1) e^{2m+s^2}
    # (Johnson, Kotz & Balakrishnan 1994, ch. 14)
    a, tol, x0 = np.array([0.8, -0.5, 0.3]), np.array([0.2, 0.3, 0.5]), np.array([[0.3, -0.2, 0.1]])
    space = Space(tuple(Parameter(f"p{i}", "-", -2, 2, t) for i, t in enumerate(tol)))
    m, s2 = (x0 @ a).item(), float(np.sum(a**2 * tol**2))
    mean, std = math.exp(m + s2 / 2), math.sqrt((math.exp(s2) - 1) * math.exp(2 * m + s2))
    sizes = (64, 128, 256, 1024) if quick else (64, 128, 256, 1024, 4096, 16384)
    lines = ["### Error of the scatter propagation against sample size", "",
             f"Lognormal test case (analytic moments, s = {math.sqrt(s2):.2f}); RMS relative error over "
             f"{len(SEEDS)} seeds. `scatter_draws` (scrambled Sobol' points) against plain Monte Carlo with "
             "the same number of normal draws.", "",
             "| draws | mean error | std error | plain MC mean error | plain MC std error | time per setting (ms) |",
             "|---|---|---|---|---|---|"]
    f = _exact(lambda X: np.exp(X @ a))
    for n in sizes:
        err, plain, t = [], [], []
        for s in SEEDS:
            t0 = time.perf_counter()
            sp = propagate(f, space, x0, scatter_draws(3, n, s), ["y"])["y"]
            t.append(time.perf_counter() - t0)
            err.append(((sp.mean[0] - mean) / mean, (sp.std[0] - std) / std))
            y = np.exp((x0 + np.random.default_rng(s).standard_normal((n, 3)) * tol) @ a)
            plain.append(((y.mean() - mean) / mean, (y.std(ddof=1) - std) / std))
        e, p = np.sqrt(np.mean(np.square(err), axis=0)), np.sqrt(np.mean(np.square(plain), axis=0))
        lines.append(f"| {n} | {e[0]:.1e} | {e[1]:.1e} | {p[0]:.1e} | {p[1]:.1e} | {1e3 * np.median(t):.2f} |")
    return lines


def _search(quick: bool) -> list[str]:
    names = ("branin", "hartmann3") if quick else ("branin", "hartmann3", "hartmann6")
    lines = ["", "### Global search (nominal and robust, exact function, tolerance 2 % of each range)", "",
             "Published minima: Branin 0.397887, Hartmann 3-D -3.86278, Hartmann 6-D -3.32237 "
             "(Dixon & Szegő 1978).", "",
             "| function | nominal found | error | robust point mean ± std | time (s) |", "|---|---|---|---|---|"]
    for name in names:
        tf = get(name)
        base = tf.space()
        space = Space(tuple(Parameter(p.name, p.unit, p.low, p.high, 0.02 * p.span) for p in base.parameters))
        t0 = time.perf_counter()
        res = find_settings(_exact(tf.func), space, "y", "minimize", k=1.0, seed=0)
        t = time.perf_counter() - t0
        lines.append(f"| {name} | {res.nominal.value_at_point:.6f} | {res.nominal.value_at_point - tf.minimum:.1e} | "
                     f"{res.robust.mean:.4f} ± {res.robust.std:.4f} | {t:.2f} |")
    return lines


def _on_surrogate(quick: bool) -> list[str]:
    """Robust point found on a GP fitted to a Hartmann 3-D plan, checked by brute force on the function."""
    import pandas as pd

    from doe.design.plans import make_plan
    from doe.runs.results import ResultsTable
    from doe.study.reader import read_study_text
    from doe.workflow.fit import fit_surrogates

    tf = get("hartmann3")
    params = "".join(f'[[parameters]]\nname = "{n}"\nunit = "-"\nlow = 0.0\nhigh = 1.0\ntolerance = 0.03\n\n'
                     for n in tf.names)
    study = read_study_text(f'[study]\nname = "bench"\n\n{params}[[responses]]\nname = "y"\nunit = "-"\n'
                            f'goal = "minimize"\n\n[evaluator]\nkind = "command"\nargv = ["true"]\n'
                            f'output = "r.json"\n')
    lines = ["", "### Robust search on a Gaussian-process surrogate (Hartmann 3-D, tolerance 0.03)", "",
             "Surrogate fitted to a Latin hypercube; the robust point's mean and std under scatter as the surrogate "
             "predicts them, and by brute-force Monte Carlo (100 000 draws) on the true function there.", "",
             "| runs | fit (s) | search (s) | predicted mean ± std | true mean ± std |", "|---|---|---|---|---|"]
    for runs in ((30,) if quick else (30, 60)):
        frame = make_plan(study.space, runs, seed=1).frame
        frame["y"] = tf.func(frame[list(tf.names)].to_numpy())
        frame["status"], frame["source"] = "ok", "builtin"
        table = ResultsTable(frame, list(tf.names), ["y"])
        t0 = time.perf_counter()
        sset = fit_surrogates(study, table, seed=1)
        t1 = time.perf_counter()
        res = find_settings(sset.predict, study.space, "y", "minimize", k=1.0, seed=0, runs_X=table.X())
        t2 = time.perf_counter()
        x = np.array([res.robust.point[n] for n in tf.names])
        y = tf.func(x + np.random.default_rng(7).standard_normal((100_000, 3)) * 0.03)
        lines.append(f"| {runs} | {t1 - t0:.1f} | {t2 - t1:.1f} | {res.robust.mean:.4f} ± {res.robust.std:.4f} | "
                     f"{y.mean():.4f} ± {y.std():.4f} |")
    return lines


def _restarts(quick: bool) -> list[str]:
    """The robust search with one run (the default, from the nominal optimum) against three, on the demo study."""
    import tempfile
    from pathlib import Path

    from doe.runs.results import read_results
    from doe.study.reader import load_study
    from doe.workflow.robust import only_responses, study_responses, study_robust
    from doe.workflow.steps import evaluate_step, fit_step, plan_step

    lines = ["", "### Runs of the robust search on the demo study (lap time, balance window)", ""]
    if quick:
        return lines + ["Skipped in quick mode (about a minute)."]
    study = load_study(Path(__file__).resolve().parents[1] / "studies" / "demo_hatch.toml")
    with tempfile.TemporaryDirectory() as tmp:
        plan = plan_step(study, Path(tmp) / "plan.csv")
        evaluate_step(study, plan.frame, Path(tmp) / "results.csv", progress=False)
        results = read_results(Path(tmp) / "results.csv", study)
        sset = fit_step(study, results, Path(tmp) / "surrogate")
    predict = only_responses(sset, study_responses(study)).predict
    lines += ["The demo's plan, runs and surrogates (seeds of the study file); the whole robust step (nominal "
              "search with 3 runs, then the robust search) with 1 or 3 robust-search runs. CPU time of this "
              "process.", "", "| robust-search runs | CPU time (s) | robust value (s) | lap time at the setting (s) |",
              "|---|---|---|---|"]
    for runs in (1, 3):
        t0 = time.process_time()
        res = study_robust(study, predict, runs_X=results.X(), robust_restarts=runs)
        cpu = time.process_time() - t0
        lines.append(f"| {runs} | {cpu:.1f} | {res.robust.robust_value:.5f} | {res.robust.value_at_point:.5f} |")
    return lines


def _lap(quick: bool) -> list[str]:
    car = Vehicle(1150.0, 1.35, 160.0, 2.55, 0.98, 0.013, "front", 1.4)
    segs = []
    for r in (28.0, 65.0, 40.0, 120.0, 22.0, 55.0):
        segs += [Segment("straight", 250.0), Segment.corner(r, angle_deg=100.0)]
    track = Track(tuple(segs))
    lines = ["", "### Lap-time estimate (invented car and track, 2.1 km)", "",
             "| cell (m) | lap time (s) | time (ms) |", "|---|---|---|"]
    for step in ((1.0, 0.5) if quick else (2.0, 1.0, 0.5, 0.25)):
        t0 = time.perf_counter()
        lap = lap_time(car, Aero.from_total(-0.4, 0.72, 0.4), track, step_m=step)
        lines.append(f"| {step} | {lap.time_s:.4f} | {1e3 * (time.perf_counter() - t0):.0f} |")
    return lines


def run(quick: bool) -> list[str]:
    return (["## Robust settings and vehicle figures", ""] + _mc_error(quick) + _search(quick) + _on_surrogate(quick)
            + _restarts(quick) + _lap(quick))


if __name__ == "__main__":
    print("\n".join(run(quick=True)))
