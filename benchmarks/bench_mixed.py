"""Mixed inputs: one Gaussian process over the levels against one Gaussian process per level.

On :func:`doe.testing.functions.hartmann3_levels` (Hartmann 3-D with one input
held at three values: two continuous inputs and a three-level choice) the
runs are a sliced Latin hypercube (Qian 2012) with the same number of runs per
level; both surrogates are fitted on the same runs:

* ``mixed``: :class:`doe.surrogate.mixed.MixedSurrogate` (Matern 5/2 times an
  exchangeable level correlation; Qian, Wu & Wu 2008; Roustant et al. 2020);
* ``per level``: :class:`doe.surrogate.mixed.SeparateSurrogates` (one
  :class:`~doe.surrogate.gp.ResponseSurrogate`, Matern 5/2 with a constant
  trend, per level);
* ``kept by LOO``: whichever of the two has the smaller leave-one-out RMSE
  (the rule of :func:`doe.surrogate.mixed.best_level_surrogate`);
* ``mixed, unrestricted``: the mixed GP with one correlation per pair of
  levels (hypersphere form, Zhou, Qian & Zhou 2011).

Score: RMSE on 900 uniform held-out points (300 per level) of the exact
function. Two cases: the first input held (levels that share structure, level
surfaces correlated 0.88-0.98) and the third input held (levels that share
little, correlated -0.6 to 0.2). Reported per runs per level: median and range
over seeds of both RMSEs, how often the mixed GP wins, its learned level
correlation and the fit times.

A third table does the same on the built-in rear-package model through the
invented study ``studies/demo_choices.toml`` (a choice of wing section, flap on
or off, three continuous knobs, a class-box constraint): plans of 40 runs
(``doe.design.plans.make_plan``: 10 per level combination), RMSE of
``cla_total`` and ``cda_total`` on 400 feasible held-out points (100 per level
combination) evaluated with the model; each choice column and each level
combination as the surrogates see them.

Coverage tables: how often the exact value lies inside the surrogate's
2-sigma band at the held-out points, with the fitted (plug-in) band and with
the band widened by :mod:`doe.surrogate.levelbands` (kernel settings sampled
from their posterior, level correlations included, and the standardised
leave-one-out errors; the larger factor kept), for both surrogates and for
the one kept by leave-one-out (what ``doe fit`` uses). A band that is right
holds about 95 % (normal errors); the target is 90-99 %.

A last table sweeps the built-in model's wing angle for pairs of wing
sections given as choice levels (``doe.aero.choices``): the shift between
the linear parts of the wing's lift curves against thin-aerofoil theory's
difference of zero-lift angles (Abbott & von Doenhoff 1959, sec. 4.3: -2.077
deg per 2 % camber at 40 % chord; the invented section's 7.5 % camber at 45 %
chord by the same integral), the angle where each section's stall
measure reaches 1 and its largest wing lift coefficient.

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

from doe.design.plans import make_plan, sliced_lhs  # noqa: E402
from doe.runs.evaluators import make_evaluator  # noqa: E402
from doe.study.reader import load_study  # noqa: E402
from doe.surrogate.levelset import level_unit_sample  # noqa: E402
from doe.surrogate.mixed import MixedSurrogate, SeparateSurrogates  # noqa: E402
from doe.testing.functions import hartmann3_levels  # noqa: E402

CASES = {"levels share structure (x1 held at 0.2, 0.5, 0.8)": 0,
         "levels share little (x3 held at 0.2, 0.5, 0.8)": 2}
TEST_SEED = 12345
#: Runs per level of the Hartmann coverage table.
COVERAGE_SIZES = (6, 12)


def _inside(model, T, truth) -> float:
    """Share of held-out points whose exact value lies inside the model's 2-sigma band."""
    mean, std = model.predict(T, return_std=True)
    return float(np.mean(np.abs(truth - mean) <= 2 * std))


def band_coverage(mixed, per, levels, T, truth, seed) -> dict:
    """Plug-in and widened 2-sigma coverage of both fitted surrogates and of the one kept by leave-one-out."""
    out = {"mixed plug-in": _inside(mixed, T, truth), "per level plug-in": _inside(per, T, truth)}
    t0 = time.perf_counter()
    check = level_unit_sample(levels, 128, seed=seed + 1)          # as doe.surrogate.levelset does
    mixed.widen(check, seed=seed)
    per.widen(check, seed=seed)
    out["t_widen"] = (time.perf_counter() - t0) / 2
    out["mixed widened"] = _inside(mixed, T, truth)
    out["per level widened"] = _inside(per, T, truth)
    kept_mixed = mixed.loo_.rmse <= per.loo_.rmse
    out["kept plug-in"] = out["mixed plug-in" if kept_mixed else "per level plug-in"]
    out["kept widened"] = out["mixed widened" if kept_mixed else "per level widened"]
    out["factor mixed"] = mixed.band_factor_
    return out


def compare(column: int, per_level: int, seeds, coverage: bool = False) -> dict:
    """Held-out RMSE of both surrogates over ``seeds`` (one sliced Latin hypercube per seed), and with
    ``coverage`` their bands' coverage (:func:`band_coverage`)."""
    rng = np.random.default_rng(TEST_SEED)
    T = np.column_stack([rng.random((900, 2)), np.repeat([0, 1, 2], 300)])
    truth = hartmann3_levels(T, column=column)
    out = {"mixed": [], "per level": [], "by loo": [], "unrestricted": [], "rho": [], "t_mixed": [], "t_per": [],
           "coverage": []}
    for seed in seeds:
        U, slice_of = sliced_lhs([per_level] * 3, 2, seed=seed)
        X = np.column_stack([U, slice_of])
        y = hartmann3_levels(X, column=column)
        t0 = time.perf_counter()
        mixed = MixedSurrogate((0, 0, 3), seed=seed).fit(X, y)
        t1 = time.perf_counter()
        per = SeparateSurrogates((0, 0, 3), seed=seed).fit(X, y)
        t2 = time.perf_counter()
        full = MixedSurrogate((0, 0, 3), seed=seed, correlation="unrestricted").fit(X, y)
        out["unrestricted"].append(float(np.sqrt(np.mean((full.predict(T) - truth) ** 2))))
        out["mixed"].append(float(np.sqrt(np.mean((mixed.predict(T) - truth) ** 2))))
        out["per level"].append(float(np.sqrt(np.mean((per.predict(T) - truth) ** 2))))
        # best_level_surrogate's rule, on the same two fits: the smaller leave-one-out error
        out["by loo"].append(out["mixed"][-1] if mixed.loo_.rmse <= per.loo_.rmse else out["per level"][-1])
        out["rho"].append(float(mixed.level_correlations_[0]))
        out["t_mixed"].append(t1 - t0)
        out["t_per"].append(t2 - t1)
        if coverage:
            out["coverage"].append(band_coverage(mixed, per, (0, 0, 3), T, truth, seed))
    cov = out.pop("coverage")
    return {k: np.array(v) for k, v in out.items()} | {"coverage": {k: np.array([c[k] for c in cov])
                                                                    for k in (cov[0] if cov else {})}}


def _evaluate(study, X) -> dict:
    """The built-in model at points ``X`` (study units, choice columns as level indices)."""
    names = study.space.names
    points = [{n: (study.space.parameters[j].levels[int(v)] if study.space.parameters[j].levels else v)
               for j, (n, v) in enumerate(zip(names, x))} for x in X]
    outs = make_evaluator(study).evaluate_many([f"p{i}" for i in range(len(points))], points)
    ok = np.array([o.status == "ok" for o in outs])
    return ok, {r: np.array([o.values[r] for o in outs]) for r in study.response_names}


def compare_builtin(seeds, responses=("cla_total", "cda_total", "stall_margin")) -> dict:
    """Held-out RMSE of both surrogates on the built-in model of ``studies/demo_choices.toml``."""
    study = load_study(ROOT / "studies" / "demo_choices.toml")
    space = study.space
    levels = [len(p.levels) for p in space.parameters]
    rng = np.random.default_rng(TEST_SEED)
    U = rng.random((4000, space.dim))
    U[:, space.choice_columns] = 0
    U = U[space.feasible_unit(U)]
    combos = [(a, b) for a in range(levels[0]) for b in range(levels[1])]
    T = np.vstack([np.column_stack([np.full(100, a), np.full(100, b), U[k * 100:(k + 1) * 100, 2:]])
                   for k, (a, b) in enumerate(combos)])
    ok, truth = _evaluate(study, space.from_unit(T))
    out = {r: {"mixed": [], "per level": [], "coverage": []} for r in responses}
    for seed in seeds:
        plan = make_plan(space, 40, seed=seed).frame
        X = np.column_stack([[space.parameters[j].levels.index(v) for v in plan[n]] if space.parameters[j].levels
                             else plan[n].to_numpy(dtype=float) for j, n in enumerate(space.names)])
        good, y = _evaluate(study, X)
        Xu = space.to_unit(X[good])
        for r in responses:
            mixed = MixedSurrogate(levels, seed=seed).fit(Xu, y[r][good])
            per = SeparateSurrogates(levels, seed=seed).fit(Xu, y[r][good])
            for name, model in (("mixed", mixed), ("per level", per)):
                out[r][name].append(float(np.sqrt(np.mean((model.predict(T[ok]) - truth[r][ok]) ** 2))))
            out[r]["coverage"].append(band_coverage(mixed, per, levels, T[ok], truth[r][ok], seed))
    result = {}
    for r, d in out.items():
        cov = d.pop("coverage")
        result[r] = ({k: np.array(v) for k, v in d.items()} | {"sd": float(np.std(truth[r][ok]))}
                     | {"coverage": {k: np.array([c[k] for c in cov]) for k in cov[0]}})
    return result


def zero_lift_angle(m: float, p: float) -> float:
    """Thin-aerofoil zero-lift angle, deg, of a NACA 4-digit mean line (camber m at p chords).

    ``alpha_L0 = -(1/pi) int_0^pi (dz/dx)(cos t - 1) dt`` with ``x = (1 - cos t) / 2``
    (Abbott & von Doenhoff 1959, sec. 4.3), by the midpoint rule on 200000 intervals.
    """
    t = (np.arange(200_000) + 0.5) * np.pi / 200_000
    x = 0.5 * (1 - np.cos(t))
    slope = np.where(x < p, 2 * m / p**2 * (p - x), 2 * m / (1 - p) ** 2 * (p - x))
    return float(np.degrees(-np.sum(slope * (np.cos(t) - 1)) * (np.pi / 200_000) / np.pi))


def section_sweep(pairs=(("naca0012", "naca4412", (0.0, 0.4), (0.04, 0.4)),
                         ("naca0012", "naca6412", (0.0, 0.4), (0.06, 0.4)),
                         ("naca2412", "studies/sections/high_lift_invented.dat", (0.02, 0.4), (0.075, 0.45)))) -> list:
    """Wing-angle sweeps of section pairs on the built-in model (default settings, the car with its flap)."""
    from doe.aero.choices import ChoiceModel
    from doe.aero.model import ModelSettings

    alpha = np.arange(-4.0, 26.0, 0.5)
    rows = []
    for low, high, camber_low, camber_high in pairs:
        theory = zero_lift_angle(*camber_low) - zero_lift_angle(*camber_high)
        model = ChoiceModel(ModelSettings(), {"wing_section": [low, high]}, ROOT)
        curves = [model.evaluate({"wing_aoa": alpha}, {"wing_section": np.full(alpha.size, k)}).values
                  for k in (0, 1)]
        lin = (alpha >= 0) & (alpha <= 10)
        fits = [np.polyfit(alpha[lin], -c["cl_wing"][lin], 1) for c in curves]
        shift = (fits[1][1] - fits[0][1]) / (0.5 * (fits[0][0] + fits[1][0]))
        stall = [alpha[np.argmax(c["stall_margin"] >= 1)] if np.any(c["stall_margin"] >= 1) else np.nan
                 for c in curves]
        rows.append((low, high, shift, theory, stall, [float(np.nanmax(-c["cl_wing"])) for c in curves]))
    return rows


def _cell(v, unit: str = "") -> str:
    return f"{np.median(v):.4f} ({v.min():.4f}-{v.max():.4f})"


def _share(v) -> str:
    return f"{100 * np.mean(v):.0f} % ({100 * v.min():.0f}-{100 * v.max():.0f})"


def coverage_table(rows, seeds, seeds_b) -> list:
    """Markdown: held-out coverage of the 2-sigma bands, plug-in and widened, per case."""
    out = ["**Coverage of the 2-sigma band at the held-out points** (share of the points whose exact value lies "
           "inside mean +- 2 sd; mean over plan seeds, range in brackets; Hartmann plan seeds "
           f"{seeds.start}-{seeds.stop - 1}, built-in model {seeds_b.start}-{seeds_b.stop - 1}). Plug-in: the "
           "fitted kernel settings; widened: `doe.surrogate.levelbands` (the larger of the spread over 16 sampled "
           "kernel settings and the standardised leave-one-out errors). Kept: the surrogate `doe fit` keeps (the "
           "smaller leave-one-out RMSE). Target 90-99 %.", "",
           "| case | mixed, plug-in | mixed, widened | per level, plug-in | per level, widened | kept, plug-in "
           "| kept, widened | mixed factor (median) | widening s (median) |",
           "|---|---|---|---|---|---|---|---|---|"]
    for label, c in rows:
        out.append(f"| {label} | {_share(c['mixed plug-in'])} | {_share(c['mixed widened'])} | "
                   f"{_share(c['per level plug-in'])} | {_share(c['per level widened'])} | {_share(c['kept plug-in'])} "
                   f"| {_share(c['kept widened'])} | {np.median(c['factor mixed']):.2f} | "
                   f"{np.median(c['t_widen']):.1f} |")
    out.append("")
    return out


def run(quick: bool = False) -> list:
    seeds = range(4) if quick else range(10)
    sizes = (6, 12) if quick else (6, 8, 12, 16)
    lines = ["## Mixed inputs: one GP over the levels against one GP per level", "",
             "Hartmann 3-D with one input held at three values (`doe.testing.functions.hartmann3_levels`), "
             "sliced Latin hypercube runs (Qian 2012), the same runs for both surrogates; RMSE on 900 held-out "
             f"points (seed {TEST_SEED}; the function's standard deviation over them is about 0.9), median "
             f"(range) over plan seeds {seeds.start}-{seeds.stop - 1}. Mixed: Matern 5/2 times an exchangeable "
             "level correlation rho (Qian, Wu & Wu 2008); per level: one Matern 5/2 GP per level.", ""]
    coverage_rows = []
    for label, column in CASES.items():
        lines += [f"**{label}**", "",
                  "| runs per level | RMSE mixed | RMSE per level | mixed better | RMSE of the one kept by LOO "
                  "| RMSE mixed, unrestricted | rho (median) | fit s mixed / per level |",
                  "|---|---|---|---|---|---|---|---|"]
        for per_level in sizes:
            r = compare(column, per_level, seeds, coverage=per_level in COVERAGE_SIZES)
            if r["coverage"]:
                coverage_rows.append((f"Hartmann, {label.split(' (')[0]}, {per_level} runs per level", r["coverage"]))
            wins = int(np.sum(r["mixed"] < r["per level"]))
            lines.append(f"| {per_level} | {_cell(r['mixed'])} | {_cell(r['per level'])} | {wins} of {len(seeds)} | "
                         f"{_cell(r['by loo'])} | {_cell(r['unrestricted'])} | {np.median(r['rho']):.3f} | {np.median(r['t_mixed']):.2f} / {np.median(r['t_per']):.2f} |")
        lines.append("")
    seeds_b = range(3) if quick else range(6)
    lines += ["**built-in model, `studies/demo_choices.toml`** (invented study: wing section x flap on/off, "
              f"3 continuous knobs; 40 runs, 10 per level combination; plan seeds {seeds_b.start}-{seeds_b.stop - 1})",
              "", "| response | sd over the held-out points | RMSE mixed | RMSE per level combination | mixed better |",
              "|---|---|---|---|---|"]
    for r, v in compare_builtin(seeds_b).items():
        wins = int(np.sum(v["mixed"] < v["per level"]))
        unit = "-" if r == "stall_margin" else "m^2"
        lines.append(f"| {r} ({unit}) | {v['sd']:.4f} | {_cell(v['mixed'], unit)} | {_cell(v['per level'], unit)} | "
                     f"{wins} of {len(seeds_b)} |")
        coverage_rows.append((f"built-in model, {r}, 40 runs", v["coverage"]))
    lines.append("")
    lines += coverage_table(coverage_rows, seeds, seeds_b)
    lines += ["**built-in model: wing-angle sweeps of two sections as choice levels** (-4 to 25.5 deg by 0.5 deg; "
              "default settings; shift fitted on 0-10 deg)", "",
              "| sections (A -> B) | shift of B's lift curve | thin-aerofoil difference | stall measure reaches 1 "
              "at (A, B) | largest -cl_wing (A, B) |", "|---|---|---|---|---|"]
    for low, high, shift, theory, stall, peak in section_sweep():
        lines.append(f"| {low} -> {Path(high).name} | {shift:.3f} deg | {theory:.3f} deg"
                     f" | {stall[0]:g}, {stall[1]:g} deg | {peak[0]:.3f}, {peak[1]:.3f} |")
    lines.append("")
    return lines


if __name__ == "__main__":
    print("\n".join(run("--quick" in sys.argv)))
