"""Plain statements and verdicts about a fitted surrogate, and the content of ``fit.json``.

``fit.json`` holds one object per response::

    {"<response>": {"q2_loo": ..., "rmse_loo": ..., "verdict": ..., ...}, ...}

Keys of each response (units in brackets):

=============================  ===============================================================
``unit``                       the response's unit
``q2_loo``                     leave-one-out predictivity coefficient [-]; 1 is perfect, 0 is no
                               better than the mean of the runs (of the mixture when it is used:
                               importance-weighted over its draws)
``rmse_loo``                   root mean square leave-one-out error [response unit]
``uncertainty``                ``"mixture"`` (predictions average over sampled kernel settings),
                               ``"widened"`` (the best settings, band widened by the spread the
                               samples showed) or ``"plugin"`` (the fitted settings alone);
                               ``uncertainty_reason`` says why
``q2_low``                     5 % quantile of the posterior draws of the map's q2 [-]: with 95 %
                               probability (under the model) the map is at least this accurate
``q2_loo_plugin``              ``q2_loo`` of the fitted settings alone [-], for comparison
``verdict``                    ``"ready"``, ``"add runs"`` or ``"check the data"`` (rules below)
``verdict_reason``             one sentence saying why
``target_q2``, ``meets_target``  the accuracy wanted (``[fit] target_q2``) and whether it is met
``runs``, ``points``           runs fitted, and distinct points among them
``kernel``, ``family``, ``trend``  the kernel that predicts (``family``: sqexp, matern52, matern32;
                               ``trend``: constant, linear): the hyperparameter posterior's when
                               it predicts, else the fitted surrogate's
``kernel_structure``           ``"product"`` (one joint term) or ``"additive"`` (plus one-input
                               terms); ``kernel_settings``: ``"posterior mode"``, ``"median over
                               the draws"`` or ``"fitted"``
``plugin_kernel``              the fitted surrogate's kernel (the one ``candidates`` chose), and
                               ``plugin_relative_length_scales``
``one_input_length_scales``    with one-input terms: their length scales per parameter [parameter
                               unit] (and ``relative_one_input_length_scales`` [-])
``noise``                      ``"learned"`` or ``"fixed"``; ``noise_reason`` says why
``noise_std``                  standard deviation of the noise (or of the nugget) [response unit]
``noise_share``                learned noise variance over the variance of the runs [-]
``length_scales``              per parameter [parameter unit], of the kernel that predicts (its joint
                               term); large means a smooth, weak effect (or, with one-input terms,
                               little interaction)
``relative_length_scales``     per parameter, in fractions of its range [-]
``standardised_residuals``     per run id: leave-one-out residual / its predictive std [-]
``max_abs_standardised_residual``  the largest of those in magnitude [-]
``loo``                        per distinct point: ``run_ids``, ``observed``, ``predicted``, ``std``
                               [response unit]
``statements``                 plain-language diagnostics (bounds reached, optimiser, few data)
``candidates``                 every kernel tried: ``kernel``, ``rmse_loo``, ``log_marginal_likelihood``,
                               ``chosen``
``log_marginal_likelihood``    of the kept kernel, normalised data [-]
``fit_seconds``                wall time of the fit [s]
``fidelity``                   ``"single"`` (the runs alone) or ``"two"`` (the runs as the expensive
                               level over a cheap model, :mod:`doe.surrogate.twofidelity`); for ``"two"`` the
                               kernel, length scales and noise above are the discrepancy's, and the
                               leave-one-out figures are over the expensive runs
``two_fidelity``               only when ``fidelity`` is ``"two"``: ``rho`` (scale of the cheap model
                               [-]), ``cheap_runs``, ``cheap_q2_loo`` (the cheap runs' own fit [-]),
                               ``cheap_kernel``, ``single_fidelity_q2_loo`` (the expensive runs fitted
                               alone [-], for comparison), ``nested_points`` (expensive points with a
                               cheap run at the same point), ``rho_profile`` (each ``rho`` tried and
                               the discrepancy's log marginal likelihood [-])
=============================  ===============================================================

Verdict rules, in this order:

1. ``"check the data"`` when a learned noise explains more than half of the
   variance of the runs (:data:`NOISE_SHARE_MAX`), or when one run's
   standardised residual is at least :data:`OUTLIER_Z` in magnitude and at
   least :data:`OUTLIER_RATIO` times the median magnitude, and its residual
   exceeds half (:data:`OUTLIER_SPREAD`) the standard deviation of the runs,
   so that it matters (a single run that
   disagrees with all the others: a failed case recorded as ok, a typo, a
   unit slip). Under a correct Gaussian model the median magnitude is about
   0.67, so the ratio asks for about 4 standard deviations; the
   hyperparameters partly adapt to a bad run, which is why the bar is not
   higher (common practice, no source).
2. ``"ready"`` when ``q2_loo >= target_q2`` and ``q2_low >= target_q2``: the
   map predicted the left-out runs well enough, and the runs make it likely
   (95 %, under the model) that it does so everywhere. The second condition
   keeps ``ready`` from being said of a map that was lucky at its runs
   (measured in ``benchmarks/bench_intervals.py``: how often ``ready`` is said
   of a map whose held-out q2 is below the target).
3. ``"add runs"`` otherwise.
"""
from __future__ import annotations

import numpy as np

from ..files import json_number
from .kernels import AMPLITUDE_BOUNDS, LENGTH_SCALE_BOUNDS, NOISE_BOUNDS, kernel_label

__all__ = ["hyperparameter_statements", "verdict", "response_report", "OUTLIER_Z", "OUTLIER_RATIO", "OUTLIER_SPREAD", "NOISE_SHARE_MAX",
           "FEW_RUNS_PER_PARAMETER"]

#: Magnitude of a standardised leave-one-out residual that marks a suspicious run...
OUTLIER_Z = 3.0
#: ... when it is also this many times the median magnitude.
OUTLIER_RATIO = 6.0
#: ... and its residual exceeds this fraction of the standard deviation of the runs (it matters).
OUTLIER_SPREAD = 0.5
#: Largest share of the variance a learned noise may explain before the data are questioned.
NOISE_SHARE_MAX = 0.5
#: Fewer runs per parameter than this: hyperparameters are poorly determined.
FEW_RUNS_PER_PARAMETER = 5
#: A length scale above this many times the range marks a weak effect.
WEAK_LENGTH_SCALE = 10.0
_AT_BOUND = np.log(1.05)  # within 5 % of a bound counts as "at the bound"


def _names(model) -> list:
    d = model.X_unit_.shape[1]
    return list(model.names) if model.names is not None else [f"x{i + 1}" for i in range(d)]


def hyperparameter_statements(model) -> list:
    """Plain statements about hyperparameters at their bounds and about too few data.

    Parameters
    ----------
    model : ResponseSurrogate
        Fitted.

    Returns
    -------
    list of str
    """
    out = []
    if model.constant_:
        return out
    lo, hi = np.log(LENGTH_SCALE_BOUNDS)
    for name, ls in zip(_names(model), np.log(model.length_scales_)):
        if ls >= hi - _AT_BOUND:
            out.append(f"{name}: length scale at its upper bound ({LENGTH_SCALE_BOUNDS[1]:g} x its range): "
                       f"the response barely changes with {name} beyond a straight-line trend; "
                       "it may not depend on it")
        elif ls >= np.log(WEAK_LENGTH_SCALE):
            out.append(f"{name}: length scale {np.exp(ls):.0f} x its range: the response changes little with "
                       f"{name}, or only along a straight-line trend")
        elif ls <= lo + _AT_BOUND:
            out.append(f"{name}: length scale at its lower bound ({LENGTH_SCALE_BOUNDS[0]:g} x its range): "
                       f"the response seems to change faster with {name} than the runs can resolve; "
                       "add runs, or check the data for noise")
    parts = model._parts()
    if np.log(parts["amplitude"]) >= np.log(AMPLITUDE_BOUNDS[1]) - _AT_BOUND:
        out.append("signal variance at its upper bound: the response may grow without limit inside the range; "
                   "a linear trend or more runs may help")
    if model.learn_noise_:
        if np.log(max(parts["noise"], 1e-300)) >= np.log(NOISE_BOUNDS[1]) - _AT_BOUND:
            out.append("noise level at its upper bound: the runs look like noise around a constant")
        elif np.log(max(parts["noise"], 1e-300)) <= np.log(NOISE_BOUNDS[0]) + _AT_BOUND:
            out.append("noise level at its lower bound: the runs show no noise that the fit can tell apart from "
                       "the response itself (with few runs, noise and real variation look alike)")
    n, d = model.X_unit_.shape
    if n < FEW_RUNS_PER_PARAMETER * d:
        out.append(f"only {n} distinct points for {d} parameters: the kernel's settings are poorly determined "
                   "(about 10 runs per parameter is the usual first plan, Loeppky, Sacks & Welch 2009)")
    return out


def verdict(loo, noise_share: float, target_q2: float, labels=None, constant: bool = False,
            q2_low: float = float("nan")) -> tuple:
    """The verdict on one response and its reason (rules in the module docstring).

    Parameters
    ----------
    loo : LooResult
        Leave-one-out results of the response.
    noise_share : float
        Learned noise variance over the variance of the runs (0 when fixed).
    target_q2 : float
    labels : list of str, optional
        A name per residual (run ids), to name a suspicious run.
    constant : bool
        The response has the same value at every run.
    q2_low : float
        Lower (5 %) quantile of the posterior draws of the map's q2; NaN when
        not known (then ``q2_loo`` alone decides).

    Returns
    -------
    verdict : {"ready", "add runs", "check the data"}
    reason : str
    """
    if constant:
        return "ready", "the response has the same value at every run; the surrogate returns that value"
    q2 = loo.q2
    az = np.abs(loo.standardised)
    spread = float(np.std(loo.observed))
    if noise_share > NOISE_SHARE_MAX:
        return "check the data", (f"the learned noise explains {noise_share:.0%} of the variance of the runs: "
                                  "the parameters hardly explain the response; check the data and the setup")
    worst = int(np.argmax(az)) if len(az) else 0
    if (len(az) and az[worst] >= OUTLIER_Z and az[worst] >= OUTLIER_RATIO * np.median(az)
            and abs(loo.residual[worst]) > OUTLIER_SPREAD * spread):
        run = f"run {labels[worst]}" if labels is not None else "one run"
        return "check the data", (f"{run} is {az[worst]:.1f} standard deviations from what the other runs "
                                  "predict there, far more than the rest: check that run (a failed case, a typo or unit slip, "
                                  "or a real jump such as a stall that a smooth surrogate cannot follow)")
    known = np.isfinite(q2_low)
    if np.isfinite(q2) and q2 >= target_q2 and (not known or q2_low >= target_q2):
        if not known:
            return "ready", f"q2_loo = {q2:.3f} meets the target {target_q2:g}"
        return "ready", (f"q2_loo = {q2:.3f} meets the target {target_q2:g}, and so does q2 = {q2_low:.3f} "
                         "that the map reaches with 95 % probability given the runs")
    if np.isfinite(q2) and q2 >= target_q2:
        return "add runs", (f"q2_loo = {q2:.3f} meets the target {target_q2:g}, but the runs leave room for a map "
                            f"below it (q2 {q2_low:.3f} at 95 % probability): the runs may have been lucky; add "
                            "runs before trusting the map")
    why = f"q2_loo = {q2:.3f} is below the target {target_q2:g}"
    if noise_share > 0 and 1 - noise_share < target_q2:
        why += (f"; noise explains {noise_share:.0%} of the variance, so q2 cannot exceed about "
                f"{1 - noise_share:.2f}: replicate runs or lower the target")
    return "add runs", why


def _kernel_keys(model, posterior, names, spans) -> dict:
    """``kernel``, ``family``, ``trend``, ``length_scales``... of what predicts, and the plug-in's beside them."""
    def scales(key, relative):
        return {key: {n: float(ls * s) for n, ls, s in zip(names, relative, spans)},
                f"relative_{key}": {n: float(ls) for n, ls in zip(names, relative)}}

    plugin = {"plugin_kernel": kernel_label(model.family_, model.trend_),
              "plugin_relative_length_scales": {n: float(ls) for n, ls in zip(names, model.length_scales_)}}
    if posterior is None:
        return {"kernel": plugin["plugin_kernel"], "family": model.family_, "trend": model.trend_,
                "kernel_structure": "product", "kernel_settings": "fitted",
                **scales("length_scales", model.length_scales_), **plugin}
    summary = posterior.kernel_summary()
    out = {"kernel": summary["label"], "family": summary["family"], "trend": summary["trend"],
           "kernel_structure": summary["structure"], "kernel_settings": summary["which"],
           **scales("length_scales", summary["length_scales"]), **plugin}
    if "one_input_length_scales" in summary:
        out.update(scales("one_input_length_scales", summary["one_input_length_scales"]))
    return out


def response_report(model, sset, name: str) -> dict:
    """The ``fit.json`` entry of one response (keys in the module docstring)."""
    loo = sset.loo(name)
    q2_low = sset.q2_low(name)
    unc = sset.uncertainty.get(name, {"method": sset.method(name), "reason": ""})
    names = _names(model)
    spans = getattr(model, "spans_", sset.space.upper - sset.space.lower)   # a level surrogate: its continuous knobs
    ids = list(sset.run_ids)
    var_y = float(np.var(model.y_)) if len(model.y_) else 0.0
    noise_share = float(model._parts()["noise"] * model.y_std_**2 / var_y) if model.learn_noise_ and var_y > 0 else 0.0
    z = loo.standardised
    label, reason = verdict(loo, noise_share, sset.target_q2, ["+".join(ids[i] for i in g) for g in model.groups_],
                            model.constant_, q2_low)
    points = [{"run_ids": [ids[i] for i in g], "observed": float(o), "predicted": float(p), "std": float(s)}
              for g, o, p, s in zip(model.groups_, loo.observed, loo.predicted, loo.std)]
    extra = {"fidelity": getattr(model, "fidelity", "single")}
    if extra["fidelity"] == "two":
        extra["two_fidelity"] = model.two_fidelity_record()
    return {
        "unit": sset.units[name],
        "q2_loo": json_number(loo.q2), "rmse_loo": json_number(loo.rmse),
        "verdict": label, "verdict_reason": reason,
        "target_q2": sset.target_q2, "meets_target": sset.meets_target(name),
        "uncertainty": unc["method"], "uncertainty_reason": unc["reason"],
        "q2_low": json_number(q2_low), "q2_loo_plugin": json_number(model.loo_.q2),
        "runs": int(sum(len(g) for g in model.groups_)), "points": int(len(model.groups_)),
        **_kernel_keys(model, sset.posteriors.get(name), names, spans),
        "noise": "learned" if model.learn_noise_ else "fixed",
        "noise_reason": sset.noise_reason.get(name, "") or ("" if model.learn_noise_ else
                                                            "deterministic evaluator: a small fixed nugget"),
        "noise_std": json_number(model.noise_std_), "noise_share": noise_share,
        "standardised_residuals": {ids[i]: float(zz) for g, zz in zip(model.groups_, z) for i in g},
        "max_abs_standardised_residual": float(np.max(np.abs(z))) if len(z) else 0.0,
        "loo": points,
        "statements": list(model.statements_) + ([f"kernel settings: {unc['reason']}"] if unc["reason"] else []),
        "candidates": model.candidates_,
        "log_marginal_likelihood": json_number(model.log_marginal_likelihood_),
        "fit_seconds": float(model.fit_seconds_),
        **extra,
    }

