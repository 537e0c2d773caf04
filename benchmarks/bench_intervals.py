"""Calibration at the budgets users have: predictive bands, Sobol intervals and verdicts, plug-in against mixture.

For Ishigami, the G-function (8 inputs), borehole, the OTL circuit, the
piston simulation and the wing-weight function, ``n = 2d, 5d, 10d, 20d`` runs
of a maximin Latin hypercube (``doe.design.plans.maximin_lhs``, one plan per seed)
are fitted by

* **plug-in**: today's surrogate (``doe.surrogate.gp.ResponseSurrogate``, default
  settings: kernel chosen by leave-one-out, 3 restarts), hyperparameters fixed
  at their fitted values;
* **mixture**: ``doe.surrogate.hyperposterior.HyperPosterior`` (``mode = "auto"``:
  hyperparameters sampled below 20 runs per parameter, the posterior mode above).

Measured per fit: the share of 1000 uniform held-out points whose error lies
inside the 2-sigma band; the held-out q2; the 95 % intervals of the surrogate
route's Sobol indices (``doe.sensitivity.sobol.sobol_indices`` on the posterior mean
with the surrogate's sample paths, fixed base sample 2^11, 64 paths): share
of the d first-order and d total indices whose interval holds the reference
value, mean half-width, largest error. Reference indices: analytic for
Ishigami (Sobol' & Levitan 1999) and the G-function (Saltelli & Sobol' 1995),
the direct route with a base sample of 2^15 for the others (its own
half-width is given). Verdicts: how often a rule says ``ready`` (q2 at least
the target 0.9) of a map whose held-out q2 is below 0.9.
"""
from __future__ import annotations

import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from doe.testing import functions as tf  # noqa: E402
from doe.sensitivity.inputs import InputDistribution  # noqa: E402
from doe.surrogate.hyperposterior import HyperPosterior  # noqa: E402
from doe.design.plans import maximin_lhs  # noqa: E402
from doe.sensitivity.sobol import Z95, sobol_indices  # noqa: E402
from doe.workflow.sensitivity import surrogate_callables  # noqa: E402
from doe.surrogate.gp import ResponseSurrogate  # noqa: E402
from doe.surrogate.set import SurrogateSet  # noqa: E402

FUNCTIONS = ("ishigami", "g_function", "borehole", "otl_circuit", "piston", "wing_weight")
MULTIPLES = (2, 5, 10, 20)
TARGET_Q2 = 0.9
N_TEST = 1000
SOBOL_BASE = 2**11
N_PATHS = 64
REFERENCE_BASE = 2**15
#: Base rows of the path-centred intervals: (d + 2) 2^10 joint points per path.
PATH_BASE = 2**10


@dataclass
class Fit:
    """What one fit of one method gave on one plan."""

    band: float                 # share of held-out errors inside 2 sigma
    q2_test: float
    q2_loo: float
    seconds: float
    sobol_cover: np.ndarray     # (2d,) bool
    sobol_half: np.ndarray      # (2d,)
    sobol_error: float          # largest |index - reference|
    extra: dict = field(default_factory=dict)


def _reference(name: str) -> dict:
    if name == "ishigami":
        ref = tf.ishigami_indices()
        return {"S1": ref["S1"], "ST": ref["ST"], "half": 0.0}
    if name == "g_function":
        ref = tf.g_function_indices()
        return {"S1": ref["S1"], "ST": ref["ST"], "half": 0.0}
    f = tf.get(name)
    res = sobol_indices(f, InputDistribution.uniform(f.space()), base_samples=REFERENCE_BASE, seed=123)["y"]
    return {"S1": res.S1, "ST": res.ST, "half": float(max(res.S1_conf.max(), res.ST_conf.max()))}


def _sobol(space, model, paths, ref, seed):
    res = sobol_indices(model, InputDistribution.uniform(space), paths=paths, base_samples=SOBOL_BASE,
                        n_paths=N_PATHS, seed=seed)["y"]
    est = np.r_[res.S1, res.ST]
    truth = np.r_[ref["S1"], ref["ST"]]
    half = np.r_[res.S1_conf, res.ST_conf]
    return np.abs(est - truth) <= half, half, float(np.max(np.abs(est - truth)))


def _path_centred(space, paths, ref, seed):
    """Marrel et al. (2009): indices of each sample path, centred on their mean, spread from paths and estimator.

    Every path is a response of one model call on a Saltelli sample of
    :data:`PATH_BASE` base rows (so that the draws are joint over it); the
    interval is ``mean_p S_p +- 1.96 sqrt(var_p S_p + mean_p var_mc,p)``.
    """
    names = [f"p{i}" for i in range(N_PATHS)]

    def model(X):
        draws = paths(X, N_PATHS, seed)
        return {nm: draws[i] for i, nm in enumerate(names)}

    res = sobol_indices(model, InputDistribution.uniform(space), responses=names, base_samples=PATH_BASE,
                        seed=seed)
    est = np.array([np.r_[res[nm].S1, res[nm].ST] for nm in names])             # (P, 2d)
    mc = np.array([np.r_[res[nm].S1_conf_mc, res[nm].ST_conf_mc] for nm in names]) / Z95
    centre = est.mean(axis=0)
    half = Z95 * np.sqrt(est.var(axis=0, ddof=1) + np.mean(mc**2, axis=0))
    truth = np.r_[ref["S1"], ref["ST"]]
    return np.abs(centre - truth) <= half, half, float(np.max(np.abs(centre - truth)))


def _band(mean, std, yt):
    return float(np.mean(np.abs(mean - yt) <= 2 * std)), float(1 - np.mean((mean - yt) ** 2) / np.var(yt))


def fit_plugin(f, U, y, Ut, yt, ref, seed) -> Fit:
    """Today's surrogate with plug-in hyperparameters."""
    space = f.space()
    t0 = time.perf_counter()
    gp = ResponseSurrogate(seed=seed).fit(U, y)
    seconds = time.perf_counter() - t0
    band, q2 = _band(*gp.predict(Ut, return_std=True), yt)
    sset = SurrogateSet(space, {"y": gp}, {"y": "-"}, {"y": "none"}, [str(i) for i in range(len(y))])
    model, paths = surrogate_callables(sset)
    cover, half, err = _sobol(space, model, paths, ref, seed)
    return Fit(band, q2, gp.loo_.q2, seconds, cover, half, err, {"kernel": f"{gp.family_}/{gp.trend_}"})


def fit_mixture(f, U, y, Ut, yt, ref, seed, mode="auto") -> Fit:
    """The hyperparameter posterior (mixture below the plug-in rule's threshold)."""
    space = f.space()
    hp = HyperPosterior(mode=mode, seed=seed).fit(U, y)
    band, q2 = _band(*hp.predict(Ut, return_std=True), yt)

    def model(X):
        return hp.predict(space.to_unit(X))

    def paths(X, n_paths, path_seed):
        return hp.sample_paths(space.to_unit(X), n_paths, path_seed)

    cover, half, err = _sobol(space, model, paths, ref, seed)
    pc_cover, pc_half, pc_err = _path_centred(space, paths, ref, seed)
    q2_draws = hp.q2_draws(seed=seed)
    return Fit(band, q2, hp.loo()["q2"], hp.fit_seconds_, cover, half, err,
               {"method": hp.method_, "expected_q2": hp.expected_q2(seed=seed),
                "pc_cover": pc_cover, "pc_half": pc_half, "pc_error": pc_err,
                "q2_low": float(np.quantile(q2_draws, 0.05)), "q2_median": float(np.median(q2_draws))})


def run_cases(functions, multiples, seeds, log=None, after=None):
    """Every (function, n, seed) case: {(name, n): [(plugin Fit, mixture Fit), ...]}, and reference half-widths."""
    out, ref_half = {}, {}
    for name in functions:
        f = tf.get(name)
        d = f.dim
        ref = _reference(name)
        ref_half[name] = ref["half"]
        Ut = np.random.default_rng(2024).random((N_TEST, d))
        yt = f.on_unit(Ut)
        for mult in multiples:
            n = mult * d
            for seed in seeds:
                U = maximin_lhs(n, d, seed=seed)
                y = f.on_unit(U)
                pair = (fit_plugin(f, U, y, Ut, yt, ref, seed), fit_mixture(f, U, y, Ut, yt, ref, seed))
                out.setdefault((name, n), []).append(pair)
                if after:
                    after(out, ref_half)
                if log:
                    p, m = pair
                    log(f"{name} n={n} seed={seed}: band {p.band:.2f}/{m.band:.2f}, q2 {p.q2_test:.3f}/{m.q2_test:.3f}, "
                        f"sobol cover {p.sobol_cover.mean():.2f}/{m.sobol_cover.mean():.2f}, "
                        f"half {p.sobol_half.mean():.3f}/{m.sobol_half.mean():.3f}, fit {p.seconds:.1f}/{m.seconds:.1f} s")
    return out, ref_half


# -- verdict rules -----------------------------------------------------------
RULES = {
    "today: plug-in q2_loo >= 0.9": lambda p, m: p.q2_loo >= TARGET_Q2,
    "mixture q2_loo >= 0.9": lambda p, m: m.q2_loo >= TARGET_Q2,
    "mixture expected q2 >= 0.9": lambda p, m: m.extra["expected_q2"] >= TARGET_Q2,
    "mixture q2_loo and expected q2 >= 0.9": lambda p, m: min(m.q2_loo, m.extra["expected_q2"]) >= TARGET_Q2,
    "5 % quantile of posterior q2 >= 0.9": lambda p, m: m.extra["q2_low"] >= TARGET_Q2,
    "q2_loo >= 0.9 and 5 % quantile of posterior q2 >= 0.9":
        lambda p, m: min(m.q2_loo, m.extra["q2_low"]) >= TARGET_Q2,
}


def _verdict_lines(cases) -> list:
    pairs = [pm for runs in cases.values() for pm in runs]
    good = [p.q2_test >= TARGET_Q2 for p, _ in pairs]
    good_m = [m.q2_test >= TARGET_Q2 for _, m in pairs]
    lines = ["### Verdicts", "",
             f"{len(pairs)} fits; held-out q2 >= {TARGET_Q2} for {sum(good)} plug-in and {sum(good_m)} mixture maps. "
             "'false ready': said `ready` of a map whose held-out q2 is below the target (the map the rule judges: "
             "the plug-in map for today's rule, the mixture's for the others).", "",
             "| rule | said ready | false ready (share of all fits) | false ready (share of ready) | "
             "ready maps called ready |", "|---|---|---|---|---|"]
    for label, rule in RULES.items():
        said = [bool(rule(p, m)) for p, m in pairs]
        truth = good if label.startswith("today") else good_m
        false = sum(s and not t for s, t in zip(said, truth))
        hit = sum(s and t for s, t in zip(said, truth))
        lines.append(f"| {label} | {sum(said)} | {false} ({false / len(pairs):.1%}) | "
                     f"{false / max(sum(said), 1):.1%} | {hit}/{sum(truth)} |")
    return lines + [""]


def _table_lines(cases, ref_half) -> list:
    lines = ["| function | n | band plug-in | band mixture | Sobol coverage plug-in | Sobol coverage mixture | "
             "half-width plug-in | half-width mixture | max error plug-in | max error mixture | "
             "path-centred coverage / half-width / max error (mixture) | q2 plug-in | "
             "q2 mixture | fit s plug-in | fit s mixture |", "|" + "---|" * 15]
    tot = {"bp": [], "bm": [], "cp": [], "cm": [], "pc": []}
    for (name, n), runs in cases.items():
        P = [p for p, _ in runs]
        M = [m for _, m in runs]

        def mean(xs):
            return float(np.mean(xs))

        cp = np.concatenate([p.sobol_cover for p in P])
        cm = np.concatenate([m.sobol_cover for m in M])
        tot["bp"] += [p.band for p in P]
        tot["bm"] += [m.band for m in M]
        tot["cp"].append(cp)
        tot["cm"].append(cm)
        pc = np.concatenate([m.extra["pc_cover"] for m in M])
        tot["pc"].append(pc)
        method = "/".join(sorted({m.extra["method"] for m in M}))
        lines.append(f"| {name} | {n} | {mean([p.band for p in P]):.2f} | {mean([m.band for m in M]):.2f} "
                     f"({method}) | {cp.mean():.2f} | {cm.mean():.2f} | "
                     f"{mean([p.sobol_half.mean() for p in P]):.3f} | {mean([m.sobol_half.mean() for m in M]):.3f} | "
                     f"{mean([p.sobol_error for p in P]):.3f} | {mean([m.sobol_error for m in M]):.3f} | "
                     f"{pc.mean():.2f} / {mean([m.extra['pc_half'].mean() for m in M]):.3f} / "
                     f"{mean([m.extra['pc_error'] for m in M]):.3f} | "
                     f"{mean([p.q2_test for p in P]):.3f} | {mean([m.q2_test for m in M]):.3f} | "
                     f"{mean([p.seconds for p in P]):.1f} | {mean([m.seconds for m in M]):.1f} |")
    cp, cm = np.concatenate(tot["cp"]), np.concatenate(tot["cm"])
    lines += ["", f"Overall: 2-sigma band holds {np.mean(tot['bp']):.1%} (plug-in) and {np.mean(tot['bm']):.1%} "
              f"(mixture) of held-out errors; worst case {np.min(tot['bp']):.1%} and {np.min(tot['bm']):.1%}. "
              f"95 % Sobol intervals hold the reference in {cp.mean():.1%} (plug-in) and {cm.mean():.1%} (mixture) "
              f"of {len(cp)} indices; centred on the mean index of the mixture's paths (Marrel et al. 2009) "
              f"{np.concatenate(tot['pc']).mean():.1%}.", ""]
    refs = [f"{k} {v:.4f}" for k, v in ref_half.items() if v > 0]
    if refs:
        lines += ["Largest 95 % half-width of the direct-route reference indices: " + ", ".join(refs) + ".", ""]
    return lines


def _fit_time_lines(seeds) -> list:
    """Default fit of 60 runs in 5 parameters: G-function with weights (0, 1, 4.5, 9, 99).

    CPU seconds of this process (BLAS limited to one thread in both fits) beside wall seconds: on a shared,
    loaded machine the wall time says more about the other jobs than about the fit.
    """
    a = (0.0, 1.0, 4.5, 9.0, 99.0)
    lines = ["### Fit time: 60 runs in 5 parameters (G-function, a = 0, 1, 4.5, 9, 99)", "",
             "| seed | plug-in fit: CPU s / wall s | mixture fit: CPU s / wall s (sampler evaluations) |",
             "|---|---|---|"]
    for seed in seeds:
        U = maximin_lhs(60, 5, seed=seed)
        y = tf.g_function(U, a)
        c0, w0 = time.process_time(), time.perf_counter()
        ResponseSurrogate(seed=seed).fit(U, y)
        c1, w1 = time.process_time(), time.perf_counter()
        hp = HyperPosterior(seed=seed).fit(U, y)
        c2, w2 = time.process_time(), time.perf_counter()
        lines.append(f"| {seed} | {c1 - c0:.2f} / {w1 - w0:.2f} | {c2 - c1:.2f} / {w2 - w1:.2f} ({hp.evaluations_}) |")
    return lines + [""]


def _report(cases, ref_half, seeds, seconds) -> list:
    lines = ["## Calibration at small budgets: bands, Sobol intervals, verdicts", "",
             *[" ".join(part.split()) for part in __doc__.split("\n\n")[1:]], "",
             f"Seeds {list(seeds)}; each row averages them.", ""]
    lines += _table_lines(cases, ref_half)
    lines += _verdict_lines(cases)
    lines += _fit_time_lines(seeds)
    lines.append(f"Wall time of this section: {seconds:.0f} s.")
    return lines


def run(quick: bool) -> list:
    if quick:
        functions, multiples, seeds = ("ishigami", "borehole"), (2, 10), (0,)
    else:
        functions, multiples, seeds = FUNCTIONS, MULTIPLES, (0, 1)
    t0 = time.perf_counter()
    cases, ref_half = run_cases(functions, multiples, seeds,
                                log=lambda s: print(f"[intervals] {s}", file=sys.stderr, flush=True))
    return _report(cases, ref_half, seeds, time.perf_counter() - t0)


def _to_json(cases, ref_half) -> dict:
    def fit(f):
        return {k: (v.tolist() if isinstance(v, np.ndarray) else v) for k, v in f.__dict__.items() if k != "extra"} | {
            "extra": {k: (v.tolist() if isinstance(v, np.ndarray) else v) for k, v in f.extra.items()}}
    return {"ref_half": ref_half, "cases": [[name, n, [[fit(p), fit(m)] for p, m in runs]]
                                            for (name, n), runs in cases.items()]}


def _from_json(blob: dict):
    def fit(d):
        arr = {k: np.asarray(v) for k, v in d.items() if k in ("sobol_cover", "sobol_half")}
        extra = {k: (np.asarray(v) if isinstance(v, list) else v) for k, v in d["extra"].items()}
        return Fit(**{**{k: v for k, v in d.items() if k != "extra"}, **arr, "extra": extra})
    cases = {(name, n): [(fit(p), fit(m)) for p, m in runs] for name, n, runs in blob["cases"]}
    return cases, blob["ref_half"]


if __name__ == "__main__":
    # a full run split over processes (a shared machine):
    #   bench_intervals.py --functions ishigami,g_function --dump a.json; ...; bench_intervals.py --combine a.json b.json
    import json

    args = sys.argv[1:]
    if "--combine" in args:
        cases, ref_half = {}, {}
        for path in args[args.index("--combine") + 1:]:
            c, r = _from_json(json.loads(Path(path).read_text()))
            cases.update(c)
            ref_half.update(r)
        print("\n".join(_report(cases, ref_half, (0, 1), 0.0)))
    elif "--functions" in args:
        t0 = time.perf_counter()
        seeds = tuple(int(v) for v in args[args.index("--seeds") + 1].split(",")) if "--seeds" in args else (0, 1)
        dump = Path(args[args.index("--dump") + 1])
        run_cases(args[args.index("--functions") + 1].split(","), MULTIPLES, seeds,
                  log=lambda s: print(f"[intervals] {s}", file=sys.stderr, flush=True),
                  after=lambda c, r: dump.write_text(json.dumps(_to_json(c, r))))   # partial results survive
        print(f"{time.perf_counter() - t0:.0f} s", file=sys.stderr)
    else:
        print("\n".join(run(quick="--quick" in args)))
