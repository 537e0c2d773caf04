"""Mixed inputs: one Gaussian process over the levels against one Gaussian process per level.

On :func:`doe.testing.functions.hartmann3_levels` (Hartmann 3-D with one input
held at three values: two continuous inputs and a three-level choice) the
runs are a sliced Latin hypercube (Qian 2012) with the same number of runs per
level; both surrogates are fitted on the same runs:

* ``mixed``: :class:`doe.surrogate.mixed.MixedSurrogate` (Matern 5/2 times an
  exchangeable level correlation; Qian, Wu & Wu 2008; Roustant et al. 2020);
* ``per level``: :class:`doe.surrogate.mixed.SeparateSurrogates` (one
  :class:`~doe.surrogate.gp.ResponseSurrogate`, Matern 5/2 with a constant
  trend, per level).

Score: RMSE on 900 uniform held-out points (300 per level) of the exact
function. Two cases: the first input held (levels that share structure, level
surfaces correlated 0.88-0.98) and the third input held (levels that share
little, correlated -0.6 to 0.2). Reported per runs per level: median and range
over seeds of both RMSEs, how often the mixed GP wins, its learned level
correlation and the fit times.

Run as a script (``python benchmarks/bench_mixed.py [--quick]``) or through
``make bench`` / ``python benchmarks/run_all.py --only mixed``.
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from doe.design.plans import sliced_lhs  # noqa: E402
from doe.surrogate.mixed import MixedSurrogate, SeparateSurrogates  # noqa: E402
from doe.testing.functions import hartmann3_levels  # noqa: E402

CASES = {"levels share structure (x1 held at 0.2, 0.5, 0.8)": 0,
         "levels share little (x3 held at 0.2, 0.5, 0.8)": 2}
TEST_SEED = 12345


def compare(column: int, per_level: int, seeds) -> dict:
    """Held-out RMSE of both surrogates over ``seeds`` (one sliced Latin hypercube per seed)."""
    rng = np.random.default_rng(TEST_SEED)
    T = np.column_stack([rng.random((900, 2)), np.repeat([0, 1, 2], 300)])
    truth = hartmann3_levels(T, column=column)
    out = {"mixed": [], "per level": [], "rho": [], "t_mixed": [], "t_per": []}
    for seed in seeds:
        U, slice_of = sliced_lhs([per_level] * 3, 2, seed=seed)
        X = np.column_stack([U, slice_of])
        y = hartmann3_levels(X, column=column)
        t0 = time.perf_counter()
        mixed = MixedSurrogate((0, 0, 3), seed=seed).fit(X, y)
        t1 = time.perf_counter()
        per = SeparateSurrogates((0, 0, 3), seed=seed).fit(X, y)
        t2 = time.perf_counter()
        out["mixed"].append(float(np.sqrt(np.mean((mixed.predict(T) - truth) ** 2))))
        out["per level"].append(float(np.sqrt(np.mean((per.predict(T) - truth) ** 2))))
        out["rho"].append(float(mixed.level_correlations_[0]))
        out["t_mixed"].append(t1 - t0)
        out["t_per"].append(t2 - t1)
    return {k: np.array(v) for k, v in out.items()}


def _cell(v) -> str:
    return f"{np.median(v):.3f} ({v.min():.3f}-{v.max():.3f})"


def run(quick: bool = False) -> list:
    seeds = range(4) if quick else range(10)
    sizes = (6, 12) if quick else (6, 8, 12, 16)
    lines = ["## Mixed inputs: one GP over the levels against one GP per level", "",
             "Hartmann 3-D with one input held at three values (`doe.testing.functions.hartmann3_levels`), "
             "sliced Latin hypercube runs (Qian 2012), the same runs for both surrogates; RMSE on 900 held-out "
             f"points (seed {TEST_SEED}; the function's standard deviation over them is about 0.9), median "
             f"(range) over plan seeds {seeds.start}-{seeds.stop - 1}. Mixed: Matern 5/2 times an exchangeable "
             "level correlation rho (Qian, Wu & Wu 2008); per level: one Matern 5/2 GP per level.", ""]
    for label, column in CASES.items():
        lines += [f"**{label}**", "",
                  "| runs per level | RMSE mixed | RMSE per level | mixed better | rho (median) | fit s mixed / per level |",
                  "|---|---|---|---|---|---|"]
        for per_level in sizes:
            r = compare(column, per_level, seeds)
            wins = int(np.sum(r["mixed"] < r["per level"]))
            lines.append(f"| {per_level} | {_cell(r['mixed'])} | {_cell(r['per level'])} | {wins} of {len(seeds)} | "
                         f"{np.median(r['rho']):.3f} | {np.median(r['t_mixed']):.2f} / {np.median(r['t_per']):.2f} |")
        lines.append("")
    return lines


if __name__ == "__main__":
    print("\n".join(run("--quick" in sys.argv)))
