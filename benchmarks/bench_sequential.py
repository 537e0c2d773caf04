"""Sequential runs against a one-shot maximin Latin hypercube of the same size.

For the borehole, OTL circuit, piston and wing-weight functions (Forrester,
Sobester & Keane 2008), ``10 d`` runs are placed two ways: (a) a maximin Latin
hypercube of ``2 d`` first runs (``doe.design.plans.maximin_lhs``), then
batches of ``max(2, d // 2)`` runs proposed by ``doe.design.sequential.propose_batch``
(integrated variance reduction, batch exact, refitted after every batch),
the criterion's kernel settings being either the posterior mode alone (the
``HyperPosterior`` fitted with ``mode = "plugin"``) or up to 8 draws of the
posterior (``mode = "auto"``, as ``doe fit`` makes them); (b) a fresh maximin
Latin hypercube of ``10 d`` runs. Both final designs are fitted the same way
(``doe.surrogate.hyperposterior.HyperPosterior``, posterior mode) and scored by
the root mean square error on 2000 uniform held-out points. The issue's aim
is a ratio of at most 0.85 on at least three functions. The Ishigami
function, Hartmann 6-D and the G-function (8 inputs) were not used to choose
the settings; they are shown with the default setting only, as a check of
how far the gain carries.
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
from doe.surrogate.hyperposterior import HyperPosterior  # noqa: E402
from doe.design.plans import maximin_lhs  # noqa: E402
from doe.design.sequential import START_RUNS_PER_PARAMETER, run_sequential  # noqa: E402

FUNCTIONS = ("borehole", "otl_circuit", "piston", "wing_weight")
#: Functions not used to choose the settings (default setting only).
OTHER_FUNCTIONS = ("ishigami", "hartmann6", "g_function")
TOTAL = 10
N_TEST = 2000
#: (first runs per parameter, HyperPosterior mode of the fits the criterion uses), the first is the default
#: of doe.design.sequential.run_sequential.
SETTINGS = ((START_RUNS_PER_PARAMETER, "plugin"), (START_RUNS_PER_PARAMETER, "auto"))
SETTING_WORDS = {"plugin": "posterior mode", "auto": "posterior draws (auto)"}


def _rmse(U, y, Ut, yt, seed) -> float:
    model = HyperPosterior(mode="plugin", seed=seed).fit(U, y)
    return float(np.sqrt(np.mean((model.predict(Ut) - yt) ** 2)))


def one_shot(name: str, seeds) -> list:
    """Held-out RMSE of a fresh maximin Latin hypercube of ``TOTAL d`` runs, per seed."""
    f = tf.get(name)
    Ut, yt = _held_out(f)
    out = []
    for seed in seeds:
        L = maximin_lhs(TOTAL * f.dim, f.dim, seed=seed)
        out.append(_rmse(L, f.on_unit(L), Ut, yt, seed))
    return out


def _held_out(f):
    Ut = np.random.default_rng(7).random((N_TEST, f.dim))
    return Ut, f.on_unit(Ut)


def sequential(name: str, start: int, mode: str, seeds) -> tuple:
    """(held-out RMSE per seed, mean seconds per sequential run)."""
    f = tf.get(name)
    d = f.dim
    Ut, yt = _held_out(f)
    rmse, secs = [], []
    for seed in seeds:
        t0 = time.perf_counter()
        U, y, _ = run_sequential(f.on_unit, d, start * d, TOTAL * d, max(2, d // 2), seed=seed, mode=mode)
        secs.append(time.perf_counter() - t0)
        rmse.append(_rmse(U, y, Ut, yt, seed))
    return rmse, float(np.mean(secs))


def run(quick: bool) -> list:
    functions = ("borehole",) if quick else FUNCTIONS
    seeds = (0,) if quick else (0, 1, 2, 3, 4)
    settings = SETTINGS[:1] if quick else SETTINGS
    lines = ["## Sequential runs against a one-shot Latin hypercube", "",
             " ".join(__doc__.split()), "", f"Seeds {list(seeds)}.", "",
             "| function | d | runs | first runs | criterion's kernel settings | RMSE sequential | RMSE one-shot LHS | "
             "ratio of means | ratio per seed | s per sequential run |", "|---|---|---|---|---|---|---|---|---|---|"]
    others = () if quick else OTHER_FUNCTIONS
    for name in functions + others:
        d = tf.get(name).dim
        one = one_shot(name, seeds)
        for start, mode in (settings[:1] if name in others else settings):
            seq, secs = sequential(name, start, mode, seeds)
            ratios = np.array(seq) / np.array(one)
            lines.append(f"| {name} | {d} | {TOTAL * d} | {start * d} | {SETTING_WORDS[mode]} | {np.mean(seq):.4g} | "
                         f"{np.mean(one):.4g} | {np.mean(seq) / np.mean(one):.2f} | "
                         f"{', '.join(f'{r:.2f}' for r in ratios)} | {secs:.0f} |")
    return lines + [""]


if __name__ == "__main__":
    print("\n".join(run(quick="--quick" in sys.argv[1:])))
