"""Sobol indices: evaluator runs needed by the surrogate route and the direct route, interval coverage, cost.

For a test function with analytic indices, the *surrogate route* fits
``doe.surrogate.gp`` to ``n`` runs of an optimised Latin hypercube
(``doe.design.plans.maximin_lhs``) and computes the indices on the posterior mean,
with intervals from the estimator and the posterior paths; the *direct route*
gives SALib's estimators ``N (d + 2)`` calls of the function itself. For
each, the error is the largest absolute error over all first-order and total
indices, median over seeds; the runs *needed* for an accuracy are the
smallest count on the grid from which every larger count on the grid meets
it. Analytic indices: Ishigami & Homma 1990 / Sobol' & Levitan 1999;
Saltelli & Sobol' 1995 (G-function).
"""
from __future__ import annotations

import time

import numpy as np

from doe.testing import functions as tf
from doe.sensitivity.inputs import InputDistribution
from doe.design.plans import maximin_lhs
from doe.sensitivity.sobol import sobol_indices
from doe.workflow.sensitivity import surrogate_callables
from doe.surrogate.gp import ResponseSurrogate
from doe.surrogate.set import SurrogateSet

TARGETS = (0.05, 0.02)
#: Surrogate settings: kernel chosen by leave-one-out as in ``doe fit``, one optimiser restart to keep this short.
FIT = {"restarts": 1}
#: Base sample of the surrogate route: estimator error ~0.003, well under the targets.
SURROGATE_BASE = 2**12


def _analytic(name):
    return tf.ishigami_indices() if name == "ishigami" else tf.g_function_indices()


def _max_error(res, exact) -> float:
    return float(max(np.max(np.abs(res.S1 - exact["S1"])), np.max(np.abs(res.ST - exact["ST"]))))


def _covered(res, exact) -> np.ndarray:
    return np.r_[np.abs(res.S1 - exact["S1"]) <= res.S1_pm95, np.abs(res.ST - exact["ST"]) <= res.ST_pm95]


def _needed(counts, errors, target):
    """Smallest count from which every larger count meets ``target``; None if the grid never does."""
    ok = [e <= target for e in errors]
    for i in range(len(counts)):
        if all(ok[i:]):
            return counts[i]
    return None


def surrogate_route(name: str, runs: int, seed: int):
    """Indices of a test function from a surrogate fitted to ``runs`` evaluations; returns (result, seconds)."""
    f = tf.get(name)
    space = f.space()
    U = maximin_lhs(runs, f.dim, seed=seed)
    t0 = time.perf_counter()
    gp = ResponseSurrogate(seed=seed, **FIT).fit(U, f(space.from_unit(U)))
    sset = SurrogateSet(space, {"y": gp}, {"y": "-"}, {"y": "none"}, [str(i) for i in range(runs)])
    model, paths = surrogate_callables(sset)
    res = sobol_indices(model, InputDistribution.uniform(space), paths=paths, base_samples=SURROGATE_BASE,
                        seed=seed)["y"]
    return res, time.perf_counter() - t0


def direct_route(name: str, base: int, seed: int):
    f = tf.get(name)
    return sobol_indices(f, InputDistribution.uniform(f.space()), base_samples=base, seed=seed)["y"]


def _runs_table(name, run_grid, base_grid, seeds) -> tuple[list, list]:
    exact = _analytic(name)
    d = tf.get(name).dim
    surr_err, cover, seconds = [], [], []
    for n in run_grid:
        errs, hits = [], []
        for s in seeds:
            res, dt = surrogate_route(name, n, s)
            errs.append(_max_error(res, exact))
            hits.extend(_covered(res, exact))
            seconds.append(dt)
        surr_err.append(float(np.median(errs)))
        cover.append(float(np.mean(hits)))
    direct_err = [float(np.median([_max_error(direct_route(name, b, s), exact) for s in seeds])) for b in base_grid]
    direct_counts = [b * (d + 2) for b in base_grid]
    lines = [f"### {name} (d = {d}), seeds {list(seeds)}", "",
             "| max index error | surrogate route: runs | direct route: evaluations | ratio |", "|---|---|---|---|"]
    for target in TARGETS:
        ns, nd = _needed(list(run_grid), surr_err, target), _needed(direct_counts, direct_err, target)
        ratio = f"{nd / ns:.0f}x" if ns and nd else "-"
        lines.append(f"| {target} | {ns if ns else f'> {run_grid[-1]}'} | {nd if nd else f'> {direct_counts[-1]}'}"
                     f" | {ratio} |")
    lines += ["", "| runs | surrogate max error | coverage of 95 % intervals |", "|---|---|---|"]
    lines += [f"| {n} | {e:.4f} | {c:.2f} |" for n, e, c in zip(run_grid, surr_err, cover)]
    lines += ["", "| direct evaluations | max error |", "|---|---|"]
    lines += [f"| {c} | {e:.4f} |" for c, e in zip(direct_counts, direct_err)]
    lines += ["", f"Surrogate route time (fit + indices), median {np.median(seconds):.1f} s per case.", ""]
    return lines, cover


def _direct_coverage(seeds) -> list:
    hits = []
    for name in ("ishigami", "g_function"):
        exact = _analytic(name)
        for s in seeds:
            hits.extend(_covered(direct_route(name, 2**9, s), exact))
    return [f"Direct route, N = 512: the 95 % intervals contain the analytic index in {np.mean(hits):.0%} of "
            f"{len(hits)} cases (Ishigami and G-function, {len(seeds)} seeds each).", ""]


def _timing(quick: bool) -> list:
    f = tf.get("ishigami")
    space = f.space()
    U = maximin_lhs(100, 3, seed=0)
    gp = ResponseSurrogate(seed=0, **FIT).fit(U, f(space.from_unit(U)))
    model, paths = surrogate_callables(SurrogateSet(space, {"y": gp}, {"y": "-"}, {"y": "none"},
                                                    [str(i) for i in range(100)]))
    lines = ["### Time against base sample size (Ishigami surrogate, 100 runs)", "",
             "| base sample N | evaluations of the mean | time, mean only (s) | time with 64 posterior paths (s) |",
             "|---|---|---|---|"]
    inputs = InputDistribution.uniform(space)
    for base in ((2**10, 2**12) if quick else (2**10, 2**12, 2**14)):
        t0 = time.perf_counter()
        sobol_indices(model, inputs, base_samples=base, seed=0)
        t1 = time.perf_counter()
        sobol_indices(model, inputs, paths=paths, base_samples=base, seed=0)
        t2 = time.perf_counter()
        lines.append(f"| {base} | {base * 5} | {t1 - t0:.2f} | {t2 - t1:.2f} |")
    return lines + [""]


def _builtin_agreement() -> list:
    """Direct against surrogate route on the demo study's built-in model, when both are in this tree."""
    import dataclasses
    from pathlib import Path

    demo = Path(__file__).resolve().parents[1] / "studies" / "demo_hatch.toml"
    try:
        from doe.runs.evaluators import builtin  # noqa: F401 - only to know whether the model is installed
    except ImportError:
        return ["### Built-in model", "", "Not measured: the built-in model (doe.aero) is not in this tree.", ""]
    if not demo.exists():
        return ["### Built-in model", "", "Not measured: studies/demo_hatch.toml is not in this tree.", ""]
    import warnings

    from doe.runs.evaluators import make_evaluator
    from doe.workflow.sensitivity import evaluate_points, study_sensitivity
    from doe.study.reader import load_study

    full = load_study(demo)
    keep = ("cla_total", "cda_total", "cla_rear")
    study = dataclasses.replace(full, responses=tuple(r for r in full.responses if r.name in keep))
    evaluator = make_evaluator(study)
    runs = full.plan.runs or 10 * study.space.dim
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the constraint note: both routes cover the same box
        results = evaluate_points(study, study.space.from_unit(maximin_lhs(runs, study.space.dim, seed=1)), evaluator)
        surrogate = study_sensitivity(study, results)
        t1 = time.perf_counter()
        direct = study_sensitivity(study, direct=True, evaluator=evaluator, base_samples=256)
    t2 = time.perf_counter()
    lines = [f"### Built-in model: demo study, {runs} runs for the surrogate route against {direct.evaluations} "
             "direct evaluations", "",
             f"Surrogate route {t1 - t0:.0f} s (fit and indices), direct route {t2 - t1:.0f} s.", "",
             "| response | parameter | S1 direct | S1 surrogate | ST direct | ST surrogate | agree within half-widths |",
             "|---|---|---|---|---|---|---|"]
    for r in keep:
        d, s = direct[r], surrogate[r]
        for i, p in enumerate(d.parameters):
            agree = (abs(d.S1[i] - s.S1[i]) <= d.S1_pm95[i] + s.S1_pm95[i]
                     and abs(d.ST[i] - s.ST[i]) <= d.ST_pm95[i] + s.ST_pm95[i])
            lines.append(f"| {r} | {p} | {d.S1[i]:.3f} ± {d.S1_pm95[i]:.3f} | {s.S1[i]:.3f} ± {s.S1_pm95[i]:.3f} | "
                         f"{d.ST[i]:.3f} ± {d.ST_pm95[i]:.3f} | {s.ST[i]:.3f} ± {s.ST_pm95[i]:.3f} | "
                         f"{'yes' if agree else 'NO'} |")
    return lines + [""]


def run(quick: bool) -> list[str]:
    lines = ["## Sensitivity (Sobol indices)", "", __doc__.split("\n\n", 1)[1].replace("\n", " ").strip(), ""]
    if quick:
        ish, _ = _runs_table("ishigami", [30, 60, 100, 200], [2**k for k in range(4, 12)], (0,))
    else:
        ish, _ = _runs_table("ishigami", [20, 30, 40, 60, 80, 100, 130, 160, 200], [2**k for k in range(3, 14)],
                             (0, 1))
    lines += ish
    if not quick:
        g, _ = _runs_table("g_function", [40, 80, 120, 160, 240], [2**k for k in range(3, 13)], (0,))
        lines += g
    lines += _direct_coverage(range(4 if quick else 12))
    lines += _timing(quick)
    if not quick:
        lines += _builtin_agreement()
    return lines


if __name__ == "__main__":
    import sys

    print("\n".join(run(quick="--full" not in sys.argv)))
