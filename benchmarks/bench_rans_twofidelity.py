"""Two fidelities on the recorded 2-D RANS data set: what the built-in model is worth as the cheap trend.

Reads the committed RANS runs (studies/rans_rear.toml, no solver runs here) and
uses only the library's public functions. Three questions:

1. **Accuracy against the number of RANS runs.** Repeated random splits of the
   32 runs: for each size ``n`` and repeat, ``n`` runs train and the other
   ``32 - n`` are held out (the same splits for every method). Methods, all
   with the same Gaussian-process options (:data:`FIT`):

   * ``RANS alone``: :class:`doe.surrogate.gp.ResponseSurrogate` on the ``n`` runs;
   * ``two-fidelity``: :class:`doe.surrogate.twofidelity.TwoFidelitySurrogate`
     with the built-in model (the study's ``[low_fidelity]`` settings) as the
     cheap level: a space-filling plan of cheap runs plus one at every training
     run (the nested plan of :func:`doe.workflow.cheap.cheap_plan`);
   * ``two-fidelity, calibrated``: the same after :func:`doe.workflow.calibration.calibrate_study`
     (``doe calibrate``, its defaults) on the ``n`` training runs only, so that the
     held-out runs never reach the cheap model;
   * ``calibrated model alone``: the calibrated built-in model's own values.

   Scores over the held-out runs of all repeats, pooled:
   ``q2 = 1 - mean(err^2) / var(y over the 32 runs)`` and ``RMSE = sqrt(mean(err^2))``
   (m^2). A calibration costs about a minute here, so it is run at fewer sizes
   and repeats (stated in the table).
2. **Learned noise against the solver's scatter.** The noise standard deviation
   learned on all 32 runs (RANS alone and two-fidelity) beside the spread the
   solver reported over its last iterations (``<response>_std``), and the
   leave-one-out error of the runs whose forces settled, oscillated, or were
   still drifting at the iteration cap.
3. **Sobol indices and the robust setting** from the 32 RANS runs alone against
   those from the two-fidelity surrogate (both fitted with the study's
   ``[fit]`` defaults by :func:`doe.workflow.fit.fit_surrogates`):
   :func:`doe.sensitivity.sobol.sobol_indices` on the posterior mean with the
   posterior paths, and :func:`doe.robust.search.find_settings` for the lowest
   ``cla_total`` (most downforce) under the study's setup tolerances, ``k = 1``.

The RANS numbers are 2-D (docs/cfd.md): this measures the tools on slow, noisy,
real CFD, not the car's truth.
"""
from __future__ import annotations

import time
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.stats import spearmanr

from doe.robust.search import find_settings
from doe.runs.evaluators import make_evaluator
from doe.runs.results import ResultsTable, read_results
from doe.sensitivity.inputs import InputDistribution
from doe.sensitivity.sobol import sobol_indices
from doe.study.reader import load_study
from doe.surrogate.gp import ResponseSurrogate
from doe.surrogate.twofidelity import TwoFidelitySurrogate
from doe.workflow.calibration import calibrate_study
from doe.workflow.cheap import cheap_plan, cheap_study
from doe.workflow.fit import fit_surrogates
from doe.workflow.robust import only_responses
from doe.workflow.sensitivity import evaluate_points, surrogate_callables

ROOT = Path(__file__).resolve().parents[1]
STUDY = ROOT / "studies" / "rans_rear.toml"
RESULTS = ROOT / "studies" / "rans_rear_results.csv"
#: Responses of the learning curves (time: cla_rear and cla_body follow cla_total closely, r = 0.96 over the runs).
RESPONSES = ("cla_total", "cda_total", "cla_wing")
#: Responses of the Sobol comparison.
SOBOL_RESPONSES = ("cla_total", "cda_total", "cla_rear")
#: The same options for every surrogate of the learning curves, so that only the cheap data differ.
#: Fixed kernel and trend: the automatic choice costs three times as long for the same picture here.
FIT = dict(kernel="matern52", trend="linear", restarts=1, noise="learn")
#: Space-filling cheap runs beside the nested ones.
CHEAP_SPREAD = 64
SEED = 16
FULL = dict(sizes=(8, 12, 16, 20, 24), repeats=3, cal_sizes=(12, 24), cal_repeats=2, responses=RESPONSES,
            sobol=True)
QUICK = dict(sizes=(12, 24), repeats=1, cal_sizes=(), cal_repeats=0, responses=RESPONSES[:2], sobol=False)


# ---------------------------------------------------------------------------
class Data:
    """The study, its ok RANS runs (unit cube and values) and the cheap model's evaluator."""

    def __init__(self):
        self.study = load_study(STUDY)
        self.results = read_results(RESULTS, self.study)
        self.ok = self.results.ok.reset_index(drop=True)
        self.names = self.study.space.names
        self.X = self.study.space.to_unit(self.ok[self.names].to_numpy(float))
        self.cheap_study = cheap_study(self.study)
        self.model = make_evaluator(self.cheap_study)

    def subset(self, rows) -> ResultsTable:
        """A results table of some ok runs (what a user with only those runs would have)."""
        return ResultsTable(self.ok.iloc[rows].reset_index(drop=True), list(self.names), list(self.results.responses))

    def cheap_runs(self, rows, evaluator=None) -> ResultsTable:
        """The cheap model on the nested plan of the runs ``rows``: a spread plus one at each of them."""
        plan = cheap_plan(self.study, self.ok.iloc[rows][["run_id", *self.names]], spread=CHEAP_SPREAD)
        table = evaluate_points(self.cheap_study, plan[self.names].to_numpy(float), evaluator or self.model)
        table.frame["run_id"] = list(plan["run_id"])
        return table

    def model_values(self, rows, evaluator) -> pd.DataFrame:
        return evaluate_points(self.cheap_study, self.ok.iloc[rows][self.names].to_numpy(float), evaluator).frame


def splits(n_runs: int, size: int, repeats: int):
    """``repeats`` random (train, held-out) index splits with ``size`` training runs; seeded by size and repeat."""
    for k in range(repeats):
        idx = np.random.default_rng([SEED, size, k]).permutation(n_runs)
        yield k, idx[:size], idx[size:]


def two_fidelity_errors(data: Data, cheap: ResultsTable, train, test, responses, seed) -> dict:
    """Held-out errors of the two-fidelity surrogate of each response (m^2)."""
    ok = cheap.ok
    XL = data.study.space.to_unit(ok[data.names].to_numpy(float))
    out = {}
    for j, r in enumerate(responses):
        y = data.ok[r].to_numpy(float)
        m = TwoFidelitySurrogate(seed=seed + j, compare=False, **FIT).fit(XL, ok[r].to_numpy(float), data.X[train],
                                                                            y[train])
        out[r] = m.predict(data.X[test]) - y[test]
    return out


def learning_curves(data: Data, cfg: dict) -> tuple[dict, dict]:
    """Pooled held-out errors per (method, response, size), and the calibrations' cost and notes."""
    errors, info = {}, {"cal_s": [], "cal_at_bound": []}

    def add(method, r, n, e):
        errors.setdefault((method, r, n), []).extend(np.atleast_1d(e).tolist())

    for n in cfg["sizes"]:
        for k, train, test in splits(len(data.ok), n, cfg["repeats"]):
            seed = SEED + 100 * n + 10 * k
            for j, r in enumerate(cfg["responses"]):
                y = data.ok[r].to_numpy(float)
                single = ResponseSurrogate(seed=seed + j, **FIT).fit(data.X[train], y[train])
                add("RANS alone", r, n, single.predict(data.X[test]) - y[test])
            for r, e in two_fidelity_errors(data, data.cheap_runs(train), train, test, cfg["responses"], seed).items():
                add("two-fidelity", r, n, e)
            if n in cfg["cal_sizes"] and k < cfg["cal_repeats"]:
                t0 = time.perf_counter()
                cal = calibrate_study(data.study, data.subset(train), model_study=data.cheap_study, seed=seed)
                info["cal_s"].append(time.perf_counter() - t0)
                info["cal_at_bound"].append(sum("end of its plausible range" in e.note for e in cal.estimates))
                evaluator = cal.evaluator(data.cheap_study)
                cheap = data.cheap_runs(train, evaluator)
                for r, e in two_fidelity_errors(data, cheap, train, test, cfg["responses"], seed).items():
                    add("two-fidelity, calibrated", r, n, e)
                held = data.model_values(test, evaluator)
                for r in cfg["responses"]:
                    add("calibrated model alone", r, n, held[r].to_numpy(float) - data.ok[r].to_numpy(float)[test])
    return errors, info


def same_split_table(data: Data, errors: dict, cfg: dict) -> list[str]:
    """The calibrated rows against the others on the same (calibrated) splits only: q2 / RMSE."""
    methods = ("RANS alone", "two-fidelity", "two-fidelity, calibrated")
    lines = ["| response | n | " + " | ".join(methods) + " |", "|---|---|" + "---|" * len(methods)]
    for r in cfg["responses"]:
        var = float(np.var(data.ok[r].to_numpy(float)))
        for n in cfg["cal_sizes"]:
            k = cfg["cal_repeats"] * (len(data.ok) - n)      # errors are stored split by split, in order
            cells = []
            for method in methods:
                e = np.asarray(errors[method, r, n][:k], float)
                cells.append(f"{1 - np.mean(e**2) / var:.2f} / {np.sqrt(np.mean(e**2)):.3f}")
            lines.append(f"| {r} | {n} | " + " | ".join(cells) + " |")
    return lines


def curve_table(data: Data, errors: dict, cfg: dict) -> list[str]:
    sizes = cfg["sizes"]
    lines = ["| response | method | " + " | ".join(f"n = {n}" for n in sizes) + " |",
             "|---|---|" + "---|" * len(sizes)]
    methods = ("RANS alone", "two-fidelity", "two-fidelity, calibrated", "calibrated model alone")
    for r in cfg["responses"]:
        var = float(np.var(data.ok[r].to_numpy(float)))
        for method in methods:
            if not any((method, r, n) in errors for n in sizes):
                continue
            cells = []
            for n in sizes:
                e = np.asarray(errors.get((method, r, n), []), float)
                cells.append(f"{1 - np.mean(e**2) / var:.2f} / {np.sqrt(np.mean(e**2)):.3f}" if len(e) else "-")
            lines.append(f"| {r} | {method} | " + " | ".join(cells) + " |")
    return lines


# ---------------------------------------------------------------------------
def status_groups(ok: pd.DataFrame) -> dict:
    """Row masks of the runs whose forces settled, oscillated, or were still drifting at the cap."""
    settled = ok["converged"].to_numpy(int) == 1
    osc = ok["oscillating"].to_numpy(int) == 1
    return {"settled": settled, "oscillating": osc, "drifting": ~settled & ~osc}


def noise_table(data: Data, fits: dict, responses) -> list[str]:
    """Learned noise on all runs against the solver's reported window spread, and LOO error by run status.

    ``fits``: label -> {response: fitted surrogate}; the LOO errors are those of the first label's.
    """
    groups = status_groups(data.ok)
    head = " | ".join(f"LOO RMSE, {g} ({int(m.sum())})" for g, m in groups.items())
    labels = list(fits)
    lines = ["| response | " + " | ".join(f"learned noise std, {lab}" for lab in labels)
             + " | solver spread, median (all / settled / not settled) | " + f"{labels[0]}: LOO q2, shortest length "
             "scale | " + head + " |", "|---|" + "---|" * (len(labels) + 2 + len(groups))]
    for r in responses:
        first = fits[labels[0]][r]
        std = data.ok[f"{r}_std"].to_numpy(float)
        resid = first.loo_.residual
        if len(resid) != len(data.ok):
            raise ValueError(f"{r}: leave-one-out residuals do not match the runs (duplicates merged?)")
        loo = " | ".join(f"{np.sqrt(np.mean(resid[m] ** 2)):.3f}" for m in groups.values())
        noise = " | ".join(f"{fits[lab][r].noise_std_:.2g}" for lab in labels)
        lines.append(f"| {r} | {noise} | {np.median(std):.2g} / {np.median(std[groups['settled']]):.2g} / "
                     f"{np.median(std[~groups['settled']]):.2g} | {first.loo_.q2:.2f}, "
                     f"{np.min(first.length_scales_):.2f} | {loo} |")
    return lines


def settled_only_table(data: Data, responses) -> list[str]:
    """RANS alone fitted to the settled runs only (:data:`FIT`): its LOO error, and its error at the unsettled runs."""
    settled = status_groups(data.ok)["settled"]
    lines = ["| response | LOO RMSE over the settled runs: fitted to all / to the settled only | error at the "
             "unsettled runs of the settled-only fit: RMSE, mean (prediction - run) |", "|---|---|---|"]
    for j, r in enumerate(responses):
        y = data.ok[r].to_numpy(float)
        every = ResponseSurrogate(seed=SEED + j, **FIT).fit(data.X, y)
        only = ResponseSurrogate(seed=SEED + j, **FIT).fit(data.X[settled], y[settled])
        e = only.predict(data.X[~settled]) - y[~settled]
        lines.append(f"| {r} | {np.sqrt(np.mean(every.loo_.residual[settled] ** 2)):.3f} / {only.loo_.rmse:.3f} | "
                     f"{np.sqrt(np.mean(e**2)):.3f}, {e.mean():+.3f} |")
    return lines


def fixed_option_fits(data: Data, responses) -> dict:
    """Both surrogates of each response on all runs with the learning curves' options (:data:`FIT`)."""
    cheap = data.cheap_runs(np.arange(len(data.ok)))
    XL = data.study.space.to_unit(cheap.ok[data.names].to_numpy(float))
    out = {"RANS alone": {}, "two-fidelity": {}}
    for j, r in enumerate(responses):
        y = data.ok[r].to_numpy(float)
        out["RANS alone"][r] = ResponseSurrogate(seed=SEED + j, **FIT).fit(data.X, y)
        out["two-fidelity"][r] = TwoFidelitySurrogate(seed=SEED + j, compare=False, **FIT).fit(
            XL, cheap.ok[r].to_numpy(float), data.X, y)
    return out


# ---------------------------------------------------------------------------
def surrogate_sets(data: Data):
    """Surrogates of every response on all 32 runs: RANS alone, and with the built-in model (study defaults)."""
    alone = fit_surrogates(data.study, data.results, seed=SEED, fidelity="single")
    two = fit_surrogates(data.study, data.results, seed=SEED, low_results=data.cheap_runs(np.arange(len(data.ok))),
                         fidelity="two")
    return {"RANS alone": alone, "two-fidelity": two}


def sobol_table(data: Data, sets: dict) -> list[str]:
    inputs = InputDistribution.uniform(data.study.space)
    rows = {}
    for label, sset in sets.items():
        model, paths = surrogate_callables(sset)
        res = sobol_indices(model, inputs, paths=paths, responses=list(SOBOL_RESPONSES), seed=SEED)
        for r in SOBOL_RESPONSES:
            ind = res[r]
            cells = [f"{ind.ST[i]:.2f} +- {ind.ST_pm95[i]:.2f}" for i in range(len(data.names))]
            rho = getattr(sset.models[r], "rho_", None)
            name = label if rho is None else f"{label} ({rho:.2g})"
            rows[r, label] = f"| {r} | {name} | {sset.models[r].loo_.q2:.2f} | " + " | ".join(cells) + " |"
    return (["| response | surrogate (rho of the cheap model) | leave-one-out q2 | " + " | ".join(data.names) + " |",
             "|---|---|---|" + "---|" * len(data.names)]
            + [rows[r, label] for r in SOBOL_RESPONSES for label in sets])


def robust_table(data: Data, sets: dict) -> list[str]:
    space = data.study.space
    picks = {}
    for label, sset in sets.items():
        res = find_settings(only_responses(sset, ["cla_total"]).predict, space, "cla_total", "minimize", k=1.0,
                            seed=SEED, runs_X=data.results.X(), units={"cla_total": "m^2"})
        picks[f"{label}, nominal"] = res.nominal
        picks[f"{label}, robust"] = res.robust
    lines = ["| setting from | " + " | ".join(data.names) + " | cla_total, RANS-alone surrogate (m^2) | "
             "cla_total, two-fidelity surrogate (m^2) | nearest RANS run (unit-cube distance) |",
             "|---|" + "---|" * (len(data.names) + 3)]
    for label, p in picks.items():
        x = np.array([[p.point[n] for n in data.names]])
        vals = [sets[s].predict(x)["cla_total"] for s in sets]
        cells = " | ".join(f"{p.point[n]:.1f}" for n in data.names)
        lines.append(f"| {label} | {cells} | " + " | ".join(f"{m[0]:.3f} +- {s[0]:.3f}" for m, s in vals)
                     + f" | {p.nearest_run:.2f} |")
    return lines


# ---------------------------------------------------------------------------
def run(quick: bool) -> list[str]:
    lines = ["## Two fidelities on the 2-D RANS data set: the built-in model as the cheap trend", ""]
    if not RESULTS.exists():
        return lines + ["No recorded RANS data set (examples/cfd/make_rans_dataset.py makes it).", ""]
    cfg = QUICK if quick else FULL
    data = Data()
    flags = status_groups(data.ok)
    lines += [f"{len(data.ok)} ok RANS runs ({int(flags['settled'].sum())} settled, "
              f"{int(flags['oscillating'].sum())} oscillating, {int(flags['drifting'].sum())} still drifting at the "
              "iteration cap), 2-D RANS of an invented car's centreline. Cheap level: the built-in model with the "
              f"study's [low_fidelity] settings, {CHEAP_SPREAD} space-filling runs plus one at every training run. "
              f"Surrogate options for every curve: {FIT}. Seed {SEED}.", ""]
    rho = {r: spearmanr(data.ok[r], data.model_values(np.arange(len(data.ok)), data.model)[r]).statistic
           for r in cfg["responses"]}
    lines += ["Rank correlation of the built-in model with RANS over the 32 runs (Spearman): "
              + ", ".join(f"{r} {v:.2f}" for r, v in rho.items()) + ".", ""]
    t0 = time.perf_counter()
    errors, info = learning_curves(data, cfg)
    cal = (f"calibrated rows: {cfg['cal_repeats']} at n = {', '.join(map(str, cfg['cal_sizes']))}"
           if cfg["cal_sizes"] else "no calibration in quick mode")
    lines += ["### Held-out accuracy against the number of RANS runs n: q2 / RMSE (m^2)", "",
              f"Random splits: {cfg['repeats']} per size ({cal}); the other 32 - n runs held out; errors pooled over the "
              "repeats; q2 = 1 - mean(err^2) / var(y over the 32 runs). q2 < 0: worse than predicting the mean.", ""]
    lines += curve_table(data, errors, cfg)
    if info["cal_s"]:
        lines += ["", "The calibrated rows have fewer splits; on exactly those splits (q2 / RMSE, m^2):", ""]
        lines += same_split_table(data, errors, cfg)
        lines += ["", f"`doe calibrate` on the training runs: {np.median(info['cal_s']):.0f} s each (median of "
                  f"{len(info['cal_s'])}); {min(info['cal_at_bound'])}-{max(info['cal_at_bound'])} of its fitted "
                  "coefficients end at a bound of their plausible range (model-form error)."]
    lines += ["", f"_Learning curves: {time.perf_counter() - t0:.0f} s._", ""]
    t1 = time.perf_counter()
    sets = surrogate_sets(data) if cfg["sobol"] else None
    fits = ({f"doe fit defaults, {label}": sset.models for label, sset in sets.items()} if sets is not None
            else fixed_option_fits(data, cfg["responses"]))
    lines += ["### Learned noise against the solver's reported scatter (all 32 runs, m^2)", "",
              "Learned noise: the white-noise standard deviation each surrogate fitted (with the nugget). Solver "
              "spread: standard deviation of the response over the last 200 iterations. LOO: leave-one-out error "
              "over the runs of each kind.", ""]
    lines += noise_table(data, fits, cfg["responses"])
    lines += ["", f"Leaving the unsettled runs out (RANS alone, options {FIT}):", ""]
    lines += settled_only_table(data, cfg["responses"])
    if sets is not None:
        lines += ["", "### Sobol total indices (uniform over the box, +- 95 % incl. the surrogate's uncertainty)",
                  "", "Both surrogates fitted to all 32 runs with the study's [fit] defaults (kernel chosen by "
                  "leave-one-out, noise learned for recorded CFD).", ""]
        lines += sobol_table(data, sets)
        lines += ["", "### Robust setting for the most downforce (lowest cla_total, k = 1, the study's tolerances)",
                  "", "doe.robust.search.find_settings with its default search; each pick's cla_total as "
                  "both surrogates predict it (mean +- the surrogate's std at the exact setting).", ""]
        lines += robust_table(data, sets)
    lines += ["", f"_Noise, Sobol and robust: {time.perf_counter() - t1:.0f} s._"]
    return lines + [""]


if __name__ == "__main__":
    import sys

    print("\n".join(run(quick="--quick" in sys.argv)))
