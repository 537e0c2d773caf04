"""How many runs each strategy needs before the surrogate is accurate, and how long a fit takes.

For each function, the test-set predictivity ``q2 = 1 - mean((mu - y)^2) / var(y)``
on independent uniform points is followed as runs are added, and the first run
count at which it reaches 0.95 and 0.99 is reported (median over seeds; a
strategy that does not reach it within the budget counts as not reached):

* ``adaptive``: a maximin Latin hypercube of 2 runs per parameter (at least 6), then
  batches proposed by integrated variance reduction (``doe next --aim map``),
  hyperparameters refitted every second round (in between, the surrogate is
  conditioned on the new runs with the hyperparameters kept, which if
  anything understates its accuracy);
* ``LHS``: a fresh one-shot maximin Latin hypercube of each size;
* ``random``: uniform random points of each size;
* ``grid``: full-factorial grids with 2, 3, ... levels per parameter.

Functions: Branin, Hartmann 3-D, borehole (Surjanovic & Bingham, Virtual
Library of Simulation Experiments) and, when :mod:`doe.aero` is installed,
the built-in model on ``studies/demo_hatch.toml``. All fits use the
squared-exponential kernel with a constant trend and 1 restart, the same
for every strategy, so that the strategies alone differ.

Run as a script (``python benchmarks/bench_surrogate.py [--quick]``) or through
``make bench``.
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from doe.testing import functions as tf  # noqa: E402
from doe.design.adaptive import run_adaptive  # noqa: E402
from doe.design.plans import maximin_lhs  # noqa: E402
from doe.surrogate.gp import ResponseSurrogate  # noqa: E402

THRESHOLDS = (0.95, 0.99)
FIT = dict(kernel="sqexp", trend="constant", restarts=1)
N_TEST = 2000


class Case:
    """A function on the unit cube with a run budget."""

    def __init__(self, name, dim, func, budget, names, space=None, builtin=False):
        self.name, self.dim, self.func, self.budget, self.names = name, dim, func, budget, names
        self._space, self.builtin = space, builtin

    def space(self):
        from doe.space import Parameter, Space

        if self._space is not None:
            return self._space
        return Space(tuple(Parameter(n, "-", 0.0, 1.0) for n in self.names))


def _test_cases():
    out = []
    for name, budget in (("branin", 60), ("hartmann3", 90), ("borehole", 120)):
        f = tf.get(name)
        out.append(Case(name, f.dim, f.on_unit, budget, list(f.names)))
    return out


def _builtin_cases():
    """The built-in model on the demo study, one case per of its first three responses, or ([], reason)."""
    try:
        import doe.aero  # noqa: F401
        from doe.runs.evaluators import make_evaluator
        from doe.study.reader import load_study
    except ImportError as exc:
        return [], f"built-in model skipped: doe.aero is not importable here ({exc})"
    path = ROOT / "studies" / "demo_hatch.toml"
    if not path.exists():
        return [], "built-in model skipped: studies/demo_hatch.toml is missing"
    study = load_study(path)
    ev = make_evaluator(study)
    names = study.space.names

    memo = {}                                   # one model run per point serves every response

    def values(x):
        key = tuple(np.round(x, 12))
        if key not in memo:
            memo[key] = ev.evaluate(f"b{len(memo)}", dict(zip(names, x))).values
        return memo[key]

    def response(resp):
        def func(U):
            return np.array([values(x)[resp] for x in study.space.from_unit(U)])
        return func

    return [Case(f"builtin:{r}", study.space.dim, response(r), 12 * study.space.dim, names, study.space, True)
            for r in study.response_names[:3]], ""


def _feasible(case, U):
    """The points of U that meet the case's constraints (the test functions have none)."""
    return U[case.space().feasible_unit(U)] if case.builtin else U


def _q2(model, Ut, yt) -> float:
    return float(1 - np.mean((model.predict(Ut) - yt) ** 2) / np.var(yt))


def _first_reach(curve, thr):
    """(runs, reached already at the first measured size)."""
    for i, (n, q) in enumerate(curve):
        if q >= thr:
            return n, i == 0
    return np.inf, False


def _one_shot(case, design, sizes, Ut, yt, seed):
    """Curve of (runs, q2) for fresh designs of each size; stops once the last threshold is met."""
    curve = []
    for n in sizes:
        U = _feasible(case, design(n, seed))
        y = case.func(U)
        ok = np.isfinite(y)                    # the built-in model fails where the wing meets the body
        model = ResponseSurrogate(seed=seed, **FIT).fit(U[ok], y[ok])
        curve.append((len(U), _q2(model, Ut, yt)))   # failed runs count: they were paid for
        if curve[-1][1] >= THRESHOLDS[-1]:
            break
    return curve


def _adaptive(case, Ut, yt, seed):
    curve = []

    def record(model, U, y):
        curve.append((len(U), _q2(model, Ut, yt)))
        return curve[-1][1] >= THRESHOLDS[-1]

    n0 = max(2 * case.dim, 6)
    run_adaptive(case.func, case.space(), _feasible(case, maximin_lhs(n0, case.dim, seed=seed)), case.budget - n0,
                 batch=max(2, case.dim // 2), refit_every=2, seed=seed, on_round=record, **FIT)
    return curve


def _strategies(case, quick):
    d = case.dim
    step = max(2, d) * (2 if quick else 1)
    sizes = list(range(max(d + 2, 2 * d), case.budget + 1, step))
    levels = [L for L in range(2, 50) if L**d <= case.budget]

    def lhs(n, seed):
        return maximin_lhs(n, d, seed=seed)

    def rand(n, seed):
        return np.random.default_rng(seed).random((n, d))

    def grid(L, seed):
        axes = np.meshgrid(*[np.linspace(0, 1, L)] * d, indexing="ij")
        return np.column_stack([a.ravel() for a in axes])

    return {"adaptive": None, "LHS": (lhs, sizes), "random": (rand, sizes), "grid": (grid, levels)}


def _fmt(results, budget):
    values = [v for v, _ in results]
    reached = [v for v in values if np.isfinite(v)]
    med = float(np.median(values))
    text = f"{med:.0f}" if np.isfinite(med) else f"> {budget}"
    if all(first for _, first in results):    # met by the smallest size tried: fewer may do
        text = "<= " + text
    return f"{text} ({len(reached)}/{len(values)})"


def _case_rows(case, seeds, quick):
    Ut = _feasible(case, np.random.default_rng(12345).random((N_TEST if not case.builtin else 300, case.dim)))
    yt = case.func(Ut)
    Ut, yt = Ut[np.isfinite(yt)], yt[np.isfinite(yt)]
    if case.builtin:
        seeds = seeds[:2]                      # each run of the model costs ~0.1 s
    rows = []
    for label, spec in _strategies(case, quick).items():
        t0 = time.perf_counter()
        needed = {thr: [] for thr in THRESHOLDS}
        for seed in (seeds if label != "grid" else seeds[:1]):   # a grid has no randomness
            if label == "adaptive":
                curve = _adaptive(case, Ut, yt, seed)
            else:
                curve = _one_shot(case, spec[0], spec[1], Ut, yt, seed)
            for thr in THRESHOLDS:
                needed[thr].append(_first_reach(curve, thr))
        cells = " | ".join(_fmt(needed[thr], case.budget) for thr in THRESHOLDS)
        rows.append(f"| {case.name} | {case.dim} | {label} | {cells} | {time.perf_counter() - t0:.0f} |")
    return rows


def _fit_times(cases, quick):
    lines = ["", "Fit time of one response with the default settings ([fit] kernel = \"auto\", 3 restarts):", "",
             "| function | runs | seconds | kernel kept |", "|---|---|---|---|"]
    for case in cases:
        for mult in ((5, 10) if quick else (5, 10, 20)):
            n = mult * case.dim
            U = maximin_lhs(n, case.dim, seed=0)
            m = ResponseSurrogate(seed=0).fit(U, case.func(U))
            lines.append(f"| {case.name} | {n} | {m.fit_seconds_:.2f} | {m.family_}, {m.trend_} trend |")
    return lines


def run(quick: bool) -> list:
    """Markdown lines: runs needed to reach test-set q2 of 0.95 and 0.99 per strategy, and fit times."""
    seeds = list(range(1 if quick else 5))
    cases = _test_cases()
    builtin, note = _builtin_cases()
    cases += builtin
    lines = ["## Surrogate accuracy: runs needed", "",
             f"Test-set q2 on {N_TEST} uniform points; median runs over {len(seeds)} seed(s) "
             "(in brackets: seeds that reached it within the budget; '<=': already at the smallest size tried). Adaptive starts from 2 runs per parameter (at least 6) "
             "and adds integrated-variance-reduction batches. Kernel: squared-exponential, constant trend, "
             "for every strategy.", "",
             "| function | d | strategy | q2 >= 0.95 | q2 >= 0.99 | seconds |", "|---|---|---|---|---|---|"]
    for case in cases:
        lines += _case_rows(case, seeds, quick)
    if note:
        lines += ["", note]
    lines += _fit_times([c for c in cases if not c.builtin], quick)
    return lines


if __name__ == "__main__":
    print("\n".join(run(quick="--quick" in sys.argv[1:])))
