"""How many expensive runs a cheap model saves: the two-fidelity surrogate against the high-only one.

For each pair of an expensive ("high") and a cheap ("low") function on the unit
cube, :func:`runs_to_target` grows the number of expensive runs in steps and
fits, at each step and for each seed,

* ``high only``: :class:`doe.surrogate.gp.ResponseSurrogate` on the expensive runs;
* ``with low``: :class:`doe.surrogate.twofidelity.TwoFidelitySurrogate` on the same
  expensive runs plus a fixed budget of cheap runs (a maximin Latin hypercube),
  the cheap model being also run at every expensive point (nested design), so
  the cheap budget is ``n_low + n_high``.

Both use the same expensive points (a maximin Latin hypercube of each size,
drawn afresh per size and seed), so only the cheap information differs. The
score is the held-out ``q2 = 1 - mean((mu - y)^2) / var(y)`` on independent
uniform points of the expensive function; reported: the first number of
expensive runs that reaches ``q2 >= 0.95`` (median and range over seeds), the
ratio of the medians ("runs saved"), and q2 at a few fixed numbers of runs.

Pairs: Forrester et al. (2007) 1-D, Currin 2-D, Park 4-D and borehole 8-D (low
forms of Xiong, Qian & Wu 2013; :mod:`doe.testing.functions`), and the built-in
rear-package model (:mod:`doe.aero`) with its default coefficients and coarse
panels as the cheap model of an invented "expensive" one: the same model with
changed coefficients, the default panels and a small deterministic scatter.

Run as a script (``python benchmarks/bench_twofidelity.py [--quick]``) or through
``make bench`` / ``python benchmarks/run_all.py --only twofidelity``.
"""
from __future__ import annotations

import sys
import time
import zlib
from typing import NamedTuple
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from doe.testing import functions as tf  # noqa: E402
from doe.design.plans import maximin_lhs  # noqa: E402
from doe.surrogate.gp import ResponseSurrogate  # noqa: E402

TARGET = 0.95
#: The same kernel settings for both surrogates, so that only the cheap data differ.
FIT = dict(kernel="sqexp", trend="constant", restarts=1)
METHODS = ("high only", "with low")


class TargetResult(NamedTuple):
    """What :func:`runs_to_target` measured.

    (Named tuples, not dataclasses: ``run_all`` loads benchmark files without
    registering them in ``sys.modules``, which dataclasses need.)

    Attributes
    ----------
    needed : dict
        Method -> list (one per seed) of the first number of expensive runs with
        ``q2 >= target``; ``inf`` when not reached within the steps.
    q2 : dict
        Method -> {number of expensive runs -> list of q2 over seeds} for every
        step that was fitted.
    n_low : int
        Cheap runs besides those at the expensive points.
    seconds : float
    steps : list of int
        The sizes tried.
    """

    needed: dict
    q2: dict
    n_low: int
    seconds: float
    steps: list

    def median(self, method: str) -> float:
        return float(np.median(self.needed[method]))

    def saved(self) -> float:
        """Median expensive runs without the cheap model over those with it."""
        return self.median("high only") / self.median("with low")


def _q2(pred, y) -> float:
    return float(1 - np.mean((pred - y) ** 2) / np.var(y))


def _finite(U, *ys):
    ok = np.all([np.isfinite(y) for y in ys], axis=0)   # the built-in model can fail at odd geometries
    return (U[ok], *(y[ok] for y in ys))


def _two_fidelity_default(seed, **fit):
    from doe.surrogate.twofidelity import TwoFidelitySurrogate

    return TwoFidelitySurrogate(seed=seed, compare=False, **fit)   # the comparison is made here


def runs_to_target(high, low, d, *, n_low, steps, seeds, target=TARGET, n_test=1000, report_at=(),
                   fit=None, two_fidelity=None, test_seed=12345) -> TargetResult:
    """Expensive runs needed to reach a held-out q2, with and without a cheap model.

    Parameters
    ----------
    high, low : callable
        ``f(U) -> y`` for points ``U`` of shape ``(n, d)`` in the unit cube;
        non-finite values count as failed runs (paid for, not fitted).
    d : int
        Number of inputs.
    n_low : int
        Cheap runs on their own maximin Latin hypercube (per seed); the cheap
        model is also run at every expensive point.
    steps : sequence of int
        Numbers of expensive runs tried, increasing.
    seeds : sequence of int
    target : float
        Held-out q2 to reach.
    n_test : int
        Uniform held-out points of the expensive function.
    report_at : sequence of int
        Step sizes at which q2 is always measured (fitting continues past the
        target until the largest of them).
    fit : dict, optional
        Options for both surrogates (default :data:`FIT`).
    two_fidelity : callable, optional
        ``two_fidelity(seed, **fit)`` -> an unfitted two-fidelity surrogate with
        ``fit(X_low, y_low, X_high, y_high, y_low_high=...)`` and ``predict``;
        default :class:`doe.surrogate.twofidelity.TwoFidelitySurrogate`.

    Returns
    -------
    TargetResult
    """
    fit = dict(FIT if fit is None else fit)
    make_two = two_fidelity or _two_fidelity_default
    Ut = np.random.default_rng(test_seed).random((n_test, d))
    Ut, yt = _finite(Ut, high(Ut))
    needed = {m: [] for m in METHODS}
    q2 = {m: {} for m in METHODS}
    last_report = max(report_at, default=0)
    t0 = time.perf_counter()
    for seed in seeds:
        Ul = maximin_lhs(n_low, d, seed=seed)
        Ul, yl = _finite(Ul, low(Ul))
        reached = {m: np.inf for m in METHODS}
        for n in steps:
            if all(np.isfinite(reached[m]) for m in METHODS) and n > last_report:
                break
            Uh = maximin_lhs(n, d, seed=10_000 * seed + n)
            Uh, yh, ylh = _finite(Uh, high(Uh), low(Uh))
            for m in METHODS:
                if np.isfinite(reached[m]) and n > last_report:
                    continue
                if m == "high only":
                    model = ResponseSurrogate(seed=seed, **fit).fit(Uh, yh)
                else:
                    model = make_two(seed, **fit).fit(np.vstack([Ul, Uh]), np.concatenate([yl, ylh]), Uh, yh,
                                                      y_low_high=ylh)
                score = _q2(model.predict(Ut), yt)
                q2[m].setdefault(n, []).append(score)
                if score >= target and not np.isfinite(reached[m]):
                    reached[m] = n
        for m in METHODS:
            needed[m].append(reached[m])
    return TargetResult(needed, q2, n_low, time.perf_counter() - t0, list(steps))


# ---------------------------------------------------------------------------
# the cases
class Case(NamedTuple):
    """A high/low pair on the unit cube with its benchmark settings."""

    name: str
    d: int
    high: object
    low: object
    n_low: int
    steps: tuple
    report_at: tuple
    n_test: int = 1000
    note: str = ""


def _pair_case(name, low_per_input, steps, report_at, n_low=None, note=""):
    high, low = tf.get_pair(name)
    n_low = n_low or low_per_input * high.dim
    return Case(name, high.dim, high.on_unit, low.on_unit, n_low, steps, report_at, note=note)


#: Design inputs of the built-in model varied in the aero case, with ranges (model units: deg, mm, % chord).
AERO_INPUTS = {"flap_angle": (10.0, 45.0), "wing_height": (60.0, 200.0), "wing_aoa": (0.0, 15.0),
               "wing_camber": (2.0, 7.0)}
#: Coefficients of the invented "expensive" model (defaults: 0.12, -0.15, 0.88, 0.030).
AERO_CHANGES = dict(body_3d_factor=0.15, base_pressure=-0.19, viscous_lift_factor=0.82, wing_parasite_cd=0.040)
#: Standard deviation of the invented scatter of the "expensive" model, m^2 (about 1-2 % of each spread).
AERO_SCATTER = {"cla_total": 0.002, "cda_total": 0.0003}
COARSE_PANELS = dict(wing_panels=30, body_panels=50, flap_panels=4)


def _scatter(U, std):
    """Deterministic scatter: the same point always gets the same offset (like a converged CFD rerun)."""
    return np.array([std * np.random.default_rng(zlib.crc32(np.round(u, 12).tobytes())).standard_normal()
                     for u in U])


def _aero_cases(responses, steps, report_at, low_per_input):
    from doe.aero.model import ModelSettings, RearPackageModel

    lo = np.array([v[0] for v in AERO_INPUTS.values()])
    hi = np.array([v[1] for v in AERO_INPUTS.values()])
    cheap = RearPackageModel(ModelSettings(**COARSE_PANELS))
    dear = RearPackageModel().with_coefficients(**AERO_CHANGES)

    def run(model, response, U):
        X = lo + np.asarray(U) * (hi - lo)
        return model.evaluate(dict(zip(AERO_INPUTS, X.T))).values[response]

    def pair(response):
        def high(U):
            return run(dear, response, U) + _scatter(U, AERO_SCATTER[response])

        def low(U):
            return run(cheap, response, U)
        return high, low

    d = len(AERO_INPUTS)
    return [Case(f"built-in model: {r}", d, *pair(r), low_per_input * d, steps, report_at, n_test=300)
            for r in responses]


def _cases(quick):
    # report_at keeps fitting past the target up to that size: kept at or below the high-only need, so
    # that it costs few extra fits (the two-fidelity fit searches rho with ~20 small fits)
    steps_small = (3, 4, 5, 6, 8, 10, 12, 16)
    cases = [_pair_case("forrester", 0, steps_small, (4,), n_low=11,
                        note="11 cheap runs as in Forrester et al. 2007 (memory), here on a Latin hypercube; the exact "
                             "relation gives rho = 2"),
             _pair_case("currin", 50, (3, 4, 6, 8, 10, 12, 16, 20, 24, 32, 40), (6,) if quick else (6, 10))]
    if not quick:
        cases += [_pair_case("park", 40, (4, 6, 8, 10, 12, 16, 20, 24, 32, 40), (8,)),
                  _pair_case("borehole", 20, (3, 4, 6, 8, 10, 12, 16, 20, 24, 32), (6,))]
    cases += _aero_cases(("cla_total",) if quick else ("cla_total", "cda_total"),
                         (3, 4, 6, 8, 10, 12, 16, 20, 24, 32, 40), (8,), 20)
    return cases


# ---------------------------------------------------------------------------
# report
def _needed_text(values, steps) -> str:
    v = np.asarray(values, dtype=float)
    med = float(np.median(v))
    if not np.isfinite(med):
        return f"> {steps[-1]} ({int(np.isfinite(v).sum())}/{len(v)})"
    lo, hi = v.min(), v.max()
    if hi == steps[0]:                      # every seed met it at the smallest size tried: fewer may do
        return f"<= {steps[0]:.0f}"
    span = f"{lo:.0f}-{hi:.0f}" if np.isfinite(hi) else f"{lo:.0f}->{steps[-1]}"
    return f"{med:.0f} ({span})"


def _q2_text(res, n) -> str:
    cells = []
    for m in METHODS:
        vals = res.q2[m].get(n)
        cells.append(f"{np.median(vals):.3f}" if vals else "-")
    return " / ".join(cells)


def _saved_text(res) -> str:
    a, b = res.median("high only"), res.median("with low")
    if not np.isfinite(b):
        return "-"
    lower_bound = not np.isfinite(a) or max(res.needed["with low"]) == res.steps[0]
    return f">= {min(a, res.steps[-1]) / b:.1f}" if lower_bound else f"{a / b:.1f}"


def run(quick: bool) -> list:
    """Markdown lines: expensive runs to held-out q2 >= 0.95 with and without the cheap model."""
    seeds = list(range(2 if quick else 5))
    lines = ["## Two-fidelity surrogate: expensive runs saved by a cheap model", "",
             f"Expensive runs needed for a held-out q2 >= {TARGET} (uniform test points of the expensive function: "
             "1000, or 300 for the built-in model): median over "
             f"{len(seeds)} seeds (seeds {seeds[0]}-{seeds[-1]}), range in brackets ('->N': a seed did not reach it "
             "within N runs; '<= N': every seed reached it at the smallest size tried, N). 'high only' fits the expensive runs alone; 'with low' adds the cheap runs (a maximin "
             "Latin hypercube of the stated size, plus the cheap model at every expensive point). Both use the same "
             "expensive points (maximin Latin hypercube per size and seed) and the same kernel settings "
             f"({', '.join(f'{k}={v}' for k, v in FIT.items())}). 'saved' = ratio of the medians.", "",
             "| pair | d | cheap runs | high only | with low | saved | q2 at n runs (high only / with low) "
             "| seconds |", "|---|---|---|---|---|---|---|---|"]
    notes = []
    for case in _cases(quick):
        res = runs_to_target(case.high, case.low, case.d, n_low=case.n_low, steps=case.steps, seeds=seeds,
                             n_test=case.n_test, report_at=case.report_at)
        q2_cells = "; ".join(f"n={n}: {_q2_text(res, n)}" for n in case.report_at)
        lines.append(f"| {case.name} | {case.d} | {case.n_low} + n | "
                     f"{_needed_text(res.needed['high only'], case.steps)} | "
                     f"{_needed_text(res.needed['with low'], case.steps)} | {_saved_text(res)} | {q2_cells} | "
                     f"{res.seconds:.0f} |")
        if case.note:
            notes.append(f"{case.name}: {case.note}.")
    lines += ["", "Built-in model case (invented): cheap = default coefficients, panels "
              f"{COARSE_PANELS}; expensive = default panels with {AERO_CHANGES} and a deterministic scatter of "
              f"standard deviation {AERO_SCATTER} m^2; inputs {AERO_INPUTS} (deg, mm, % chord)."]
    lines += [""] + notes if notes else []
    return lines


if __name__ == "__main__":
    print("\n".join(run(quick="--quick" in sys.argv[1:])))
