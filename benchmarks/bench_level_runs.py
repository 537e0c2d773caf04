"""More runs over choice knobs: plan augmentation (quality) and ``doe next`` (time) with level combinations."""
from __future__ import annotations

import time
from pathlib import Path

import numpy as np
from scipy.spatial.distance import pdist

from doe.design.level_proposals import propose_level_runs
from doe.design.plans import augment_plan, centered_l2_discrepancy, is_latin, make_plan
from doe.runs.evaluators import make_evaluator
from doe.space import LinearConstraint, Parameter, Space
from doe.study.reader import load_study
from doe.workflow.fit import fit_surrogates
from doe.workflow.sensitivity import evaluate_points

ROOT = Path(__file__).resolve().parents[1]
KNOBS = ("x1", "x2", "x3")


def _space(constraints=()):
    return Space((Parameter("x1", "-", 0, 1), Parameter.choice("section", ["a", "b"]), Parameter("x2", "-", 0, 1),
                  Parameter.choice("flap", ["on", "off"]), Parameter("x3", "-", 0, 1)), tuple(constraints))


def _measures(frame) -> tuple:
    """(whole plan and every combination Latin, CD², min distance, mean min distance within a combination)."""
    U = frame[list(KNOBS)].to_numpy(float)
    parts = [part[list(KNOBS)].to_numpy(float) for _, part in frame.groupby(["section", "flap"])]
    latin = is_latin(U) and all(is_latin(P) for P in parts)
    return latin, centered_l2_discrepancy(U), pdist(U).min(), np.mean([pdist(P).min() for P in parts])


def _augmentation(quick: bool) -> list:
    seeds = range(5 if quick else 20)
    # a constraint that never binds sends the same box through the constrained route (greedy maximin)
    loose = _space([LinearConstraint("never", {"x1": 1.0}, max=10.0)])
    lines = ["### Adding runs to a sliced plan (`doe plan --add-to`)", "",
             "Three continuous knobs and four level combinations; a sliced Latin hypercube of the first size, then "
             "runs added. *Sliced extension*: the new runs take strata each combination and the whole plan leave "
             "free (the route without constraints); *greedy maximin*: the route under constraints, forced here by a "
             "constraint that never binds; *fresh plan*: a new sliced plan of the final size, for reference. "
             f"Medians over {len(seeds)} seeds; Latin: share of seeds where the whole plan and every combination "
             "are Latin.", "",
             "| runs | method | Latin | CD² | min distance | min distance within a combination |",
             "|---|---|---|---|---|---|"]
    for n0, k in ((12, 12), (20, 12), (40, 8)):
        rows = {"sliced extension": [], "greedy maximin": [], "fresh plan": []}
        for s in seeds:
            first = make_plan(_space(), n0, seed=s).frame
            rows["sliced extension"].append(_measures(augment_plan(_space(), first, k, seed=s + 100).frame))
            rows["greedy maximin"].append(_measures(augment_plan(loose, first, k, seed=s + 100).frame))
            rows["fresh plan"].append(_measures(make_plan(_space(), n0 + k, seed=s).frame))
        for name, m in rows.items():
            m = np.array(m, dtype=float)
            lines.append(f"| {n0} + {k} | {name} | {m[:, 0].mean():.0%} | {np.median(m[:, 1]):.5f} | "
                         f"{np.median(m[:, 2]):.3f} | {np.median(m[:, 3]):.3f} |")
    return lines


def _next_time(quick: bool) -> list:
    study = load_study(ROOT / "studies" / "demo_choices.toml")
    runs = 16 if quick else 40
    plan = make_plan(study.space, runs, seed=7).frame
    X = plan[study.space.names].copy()
    for p in study.space.choices:
        X[p.name] = [p.level_index(v) for v in X[p.name]]
    table = evaluate_points(study, X.to_numpy(float), make_evaluator(study))
    t0 = time.perf_counter()
    sset = fit_surrogates(study, table, seed=7)
    fit_s = time.perf_counter() - t0
    lines = ["", "### `doe next` over level combinations", "",
             f"`studies/demo_choices.toml` (invented car; four level combinations, three continuous knobs, five "
             f"responses), {runs} runs of the built-in model; surrogates fitted in {fit_s:.1f} s. Time to propose, "
             "one BLAS thread:", "", "| criterion | runs proposed | time (s) | runs per combination |", "|---|---|---|---|"]
    for aim, criterion, k in (("map", "ivr", 4), ("map", "ivr", 8), ("map", "variance", 8), ("optimum", "ei", 4)):
        t0 = time.perf_counter()
        made = propose_level_runs(sset, k, aim=aim, criterion=criterion, seed=1)
        spent = time.perf_counter() - t0
        counts = made.frame.groupby(["wing_section", "flap"]).size().tolist()
        lines.append(f"| {criterion} | {k} | {spent:.1f} | {counts} |")
    return lines


def run(quick: bool) -> list[str]:
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        return ["## More runs over choice knobs", "", *_augmentation(quick), *_next_time(quick)]


if __name__ == "__main__":
    print("\n".join(run(quick=True)))
