"""Next runs with two fidelities: the cheap runs that go with them, and the expensive runs saved.

When a study's surrogates lean on a cheap model (:mod:`doe.surrogate.twofidelity`),
``doe next`` proposes expensive runs as usual (:mod:`doe.design.adaptive`: the
two-fidelity variance already counts the cheap level's share) and a nested
plan of cheap runs: one at every proposed expensive run, so that the
discrepancy is measured exactly there (:mod:`doe.workflow.cheap`).

How many expensive runs the cheap model saves is estimated from learning
curves: for the expensive runs made so far, with the fitted
hyperparameters (and ``rho``) kept, random subsets of ``m`` runs predict the
runs left out; the mean squared error over the variance of the runs,
``e(m) = 1 - q2(m)``, is fitted by a power law ``e = a m^-b`` (the usual
algebraic decay of kriging errors with sample size; e.g. Stein 1999,
ch. 3, for the rate under fixed hyperparameters) and extrapolated to the
target ``1 - target_q2``, once for the two-fidelity surrogate and once for
the expensive runs alone. The estimate is rough: hyperparameters fitted to
all runs make small subsets look better than they would be, and
extrapolating a power law far beyond the runs at hand is a guess; it is
reported as such, with the fitted exponents.

References
----------
.. [1] Stein, M. L. (1999). Interpolation of Spatial Data: Some Theory for
   Kriging. Springer.
.. [2] Le Gratiet, L. and Garnier, J. (2014). Recursive co-kriging model for
   design of computer experiments with multiple levels of fidelity.
   International Journal for Uncertainty Quantification 4(5), 365-386.
"""
from __future__ import annotations

import numpy as np

from ..errors import SurrogateError
from ..surrogate.gp import ResponseSurrogate

__all__ = ["learning_curve", "runs_to_target", "expected_savings", "MIN_RUNS", "SUBSET_FRACTIONS", "SPLITS"]

#: Fewest expensive runs for which a learning curve is estimated.
MIN_RUNS = 6
#: Subset sizes of the learning curve, as fractions of the runs (plus leave-one-out).
SUBSET_FRACTIONS = (0.5, 0.625, 0.75, 0.875)
#: Random subsets per size.
SPLITS = 16
#: Largest number of runs an extrapolation may report (beyond it: "more than").
EXTRAPOLATION_CAP = 5000


def learning_curve(model, seed=0) -> tuple[np.ndarray, np.ndarray]:
    """Held-out error against training size, hyperparameters fixed.

    Parameters
    ----------
    model : ResponseSurrogate or TwoFidelitySurrogate
        Fitted.
    seed : int

    Returns
    -------
    sizes : ndarray of int
        Training sizes ``m``.
    errors : ndarray
        Mean squared held-out error over the variance of the runs, ``1 - q2``
        (dimensionless); the last entry is the leave-one-out value (``m = n - 1``).
    """
    rng = np.random.default_rng(seed)
    two = getattr(model, "fidelity", "single") == "two"
    base = model.delta_ if two else model
    X = base.X_unit_
    y = model.y_                                     # expensive values (response unit)
    target = base.y_                                 # what the refitted process is fitted to
    offset = model.rho_ * model.y_low_high_ if two else np.zeros(len(y))
    n = len(y)
    var = float(np.var(y))
    sizes, errors = [], []
    for f in SUBSET_FRACTIONS:
        m = int(round(f * n))
        if m < 3 or m >= n - 1:
            continue
        err = []
        for _ in range(SPLITS):
            idx = rng.permutation(n)
            train, test = idx[:m], idx[m:]
            try:
                sub = base.refitted(X[train], target[train])
            except SurrogateError:       # a singular subset: skip that split
                continue
            pred = sub.predict(X[test]) + offset[test]
            err.append(np.mean((y[test] - pred) ** 2))
        if err:
            sizes.append(m)
            errors.append(float(np.mean(err)) / var)
    sizes.append(n - 1)
    errors.append(max(1.0 - float(model.loo_.q2), 0.0))
    return np.array(sizes), np.array(errors)


def runs_to_target(sizes, errors, target_q2: float) -> dict:
    """Runs needed to reach ``target_q2`` from a power law fitted to a learning curve.

    Returns
    -------
    dict
        ``runs`` (int, or None when the curve does not fall), ``exponent``
        ``b`` of ``e = a m^-b`` [-], ``met`` (the leave-one-out error already
        meets the target; ``runs`` is then how many would have been enough),
        ``capped`` (the extrapolation passed :data:`EXTRAPOLATION_CAP`).
    """
    sizes, errors = np.asarray(sizes, float), np.asarray(errors, float)
    goal = 1.0 - target_q2
    n_now = int(sizes[-1]) + 1
    met = bool(errors[-1] <= goal)
    keep = errors > 0
    b = None
    if keep.sum() >= 2:
        slope, intercept = np.polyfit(np.log(sizes[keep]), np.log(errors[keep]), 1)
        b = -float(slope)
    if b is None or b <= 0.05:      # a flat or rising curve cannot be extrapolated
        return {"runs": n_now if met else None, "exponent": b, "met": met, "capped": False}
    runs = int(np.ceil(np.exp((intercept - np.log(goal)) / b))) + 1   # + 1: m is a training size below n
    capped = runs > EXTRAPOLATION_CAP
    runs = max(min(runs, EXTRAPOLATION_CAP), 3)
    runs = min(runs, n_now) if met else max(runs, n_now + 1)
    return {"runs": runs, "exponent": b, "met": met, "capped": capped}


def expected_savings(sset, seed=0) -> dict:
    """Expensive runs needed to reach the study's ``target_q2`` with and without the cheap model.

    Parameters
    ----------
    sset : SurrogateSet
        Two-fidelity surrogates (responses with another kind are skipped).
    seed : int

    Returns
    -------
    dict
        ``{"responses": {name: {"with_cheap_model": {...}, "expensive_only":
        {...}}}, "runs_now": n, "with_cheap_model": N2, "expensive_only": N1,
        "saved": N1 - N2, "statement": str, "method": str}`` where each
        ``{...}`` is :func:`runs_to_target`'s dict and the totals are the
        largest over responses (every response must meet the target); None
        when a curve cannot be extrapolated.
    """
    out, need_two, need_one, n_now = {}, [], [], 0
    for name, model in sset.models.items():
        if getattr(model, "fidelity", "single") != "two" or model.constant_:
            continue
        n_now = len(model.y_)
        if n_now < MIN_RUNS:
            continue
        single = ResponseSurrogate(**{**model.options(), "seed": int(seed)}).fit(model.X_unit_, model.y_)
        a = runs_to_target(*learning_curve(model, seed), sset.target_q2)
        b = runs_to_target(*learning_curve(single, seed), sset.target_q2)
        out[name] = {"with_cheap_model": a, "expensive_only": b}
        need_two.append(a["runs"])
        need_one.append(b["runs"])
    result = {"responses": out, "runs_now": n_now, "target_q2": sset.target_q2,
              "method": "power law fitted to learning curves (random subsets, hyperparameters and rho kept), "
                        "extrapolated to the target; rough"}
    if not out:
        result.update(with_cheap_model=None, expensive_only=None, saved=None,
                      statement=f"too few expensive runs (fewer than {MIN_RUNS}) to estimate what the cheap model saves"
                      if sset.models and n_now < MIN_RUNS else "no two-fidelity response")
        return result
    two = None if None in need_two else max(need_two)
    one = None if None in need_one else max(need_one)
    saved = one - two if one is not None and two is not None else None
    result.update(with_cheap_model=two, expensive_only=one, saved=saved)
    if saved is None:
        text = ("the learning curves do not fall steadily enough to extrapolate "
                f"({'with the cheap model' if two is None else 'from the expensive runs alone'}); no estimate")
    elif all(r["with_cheap_model"]["met"] and r["expensive_only"]["met"] for r in out.values()):
        text = (f"both fits meet q2 {sset.target_q2:g} with the {n_now} expensive runs; by their learning curves about "
                f"{two} would have been enough with the cheap model and {one} without it (saving about "
                f"{max(saved, 0)}; rough)")
    elif saved > 0:
        text = (f"to reach q2 {sset.target_q2:g} on every response: about {two} expensive runs with the cheap model, "
                f"{'more than ' if any(r['expensive_only']['capped'] for r in out.values()) else 'about '}{one} "
                f"without it, so the cheap model saves about {saved} expensive runs (rough: extrapolated from "
                f"{n_now} runs)")
    else:
        text = (f"the cheap model is not expected to save expensive runs here (about {two} with it, {one} without); "
                "consider [fit] fidelity = \"single\"")
    result["statement"] = text
    return result


def is_two_fidelity(sset) -> bool:
    """Whether any response of a surrogate set leans on a cheap model."""
    return any(getattr(m, "fidelity", "single") == "two" for m in sset.models.values())
