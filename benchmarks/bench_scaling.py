"""How the cost of a fit grows: time of one Gaussian-process fit against runs and parameters.

One response, the G-function on its first d inputs, squared-exponential kernel with a constant
trend, no restarts (one optimiser start), so the time is that of one fit; the growth exponent is
the slope of log(time) against log(runs), fitted by least squares over the sizes measured.

"""
from __future__ import annotations

import sys
import time

import numpy as np

from doe.design.plans import maximin_lhs
from doe.surrogate.gp import ResponseSurrogate
from doe.testing.functions import g_function

SEED = 3


def _y(U: np.ndarray) -> np.ndarray:
    # The G-function with a = (0, 1, 4.5, 9, 99, ...) (Saltelli & Sobol' 1995) on the first d inputs.
    a = np.array([0, 1, 4.5, 9] + [99] * 16, dtype=float)[: U.shape[1]]
    return g_function(U, a)


def _fit_seconds(n: int, d: int) -> float:
    rng = np.random.default_rng(SEED)
    U = maximin_lhs(n, d, seed=rng, iterations=0) if n > 400 else maximin_lhs(n, d, seed=rng)
    y = _y(U)
    t0 = time.perf_counter()
    ResponseSurrogate(kernel="sqexp", trend="constant", noise="fixed", restarts=0, seed=SEED).fit(U, y)
    return time.perf_counter() - t0


def run(quick: bool) -> list[str]:
    plan = {2: [50, 100, 200], 5: [50, 100, 200]} if quick else \
        {2: [50, 100, 200, 400, 800, 1600], 5: [50, 100, 200, 400, 800], 10: [50, 100, 200, 400]}
    lines = ["## How a fit's cost grows", "",
             f"Time of one Gaussian-process fit (squared-exponential, constant trend, one optimiser start) of the "
             f"G-function on an optimised Latin hypercube, seed {SEED}. Growth exponent: slope of log(time) "
             "against log(runs) over the sizes measured (3 would be the Cholesky factorisation alone). Larger "
             "fits are left out of the benchmark for their cost.", "",
             "| parameters | runs | fit time (s) |", "|---|---|---|"]
    slopes = []
    for d, sizes in plan.items():
        times = [_fit_seconds(n, d) for n in sizes]
        lines += [f"| {d} | {n} | {t:.2f} |" for n, t in zip(sizes, times)]
        slopes.append((d, np.polyfit(np.log(sizes), np.log(times), 1)[0], sizes[-1]))
    lines += ["", "| parameters | growth exponent (runs 50 to the largest) |", "|---|---|"]
    lines += [f"| {d} | {k:.2f} (up to {top}) |" for d, k, top in slopes]
    return lines


if __name__ == "__main__":
    print("\n".join(run(quick="--quick" in sys.argv)))
