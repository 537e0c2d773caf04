"""Choosing the next runs from fitted surrogates (``doe next``).

Every criterion scores a dense set of feasible candidate points (scrambled
Sobol' points inside the bounds and constraints) and takes the best one; a
batch of ``K`` runs is built one run at a time. Runs already made, failed
runs and pending runs are never proposed again: a candidate closer than
:data:`MIN_DISTANCE` (in the unit cube) to any of them, or to a run already
picked, is dropped.

================ ================= ===========================================================
aim              criterion         what it maximises
================ ================= ===========================================================
``map``          ``ivr_posterior`` integrated variance reduction (Cohn 1996; the IMSE criterion
                                   of Sacks, Welch, Mitchell & Wynn 1989) averaged over the
                                   draws of the kernel settings' posterior that predict each
                                   response (its fitted kernel alone when the fit is plug-in),
                                   summed over responses, each scaled by the variance of its
                                   runs; the batch is exact (:mod:`doe.design.sequential`).
                                   Default for ``map``: measured in
                                   ``benchmarks/bench_sequential.py``.
``map``          ``ivr``           the same drop under the fitted kernel alone, length scales
                                   capped (below), batch by kriging believer
``map``          variance          the predictive variance itself (MacKay 1992), same scaling
``map``          ``eigf``          expected improvement for global fit,
                                   ``(mu - y_nearest)^2 + var`` (Lam 2008), same scaling
``optimum``      ``ei``            expected improvement of one response with a goal (Jones,
                                   Schonlau & Welch 1998)
================ ================= ===========================================================

Batches. ``ivr_posterior``: a run's effect on the predictive variance does
not depend on its (unknown) result, so after each pick every draw's
posterior covariance is updated exactly and the next pick is scored given
the earlier picks and the pending runs. The other criteria condition the
surrogates on the runs already picked as if they had returned the
surrogate's mean there (the *kriging believer* heuristic, Ginsbourger, Le
Riche & Carraro 2010), with the hyperparameters kept; and for ``ivr``,
``variance`` and ``eigf`` candidates are scored with length scales capped at
each parameter's range (:data:`MAP_LENGTH_SCALE_CAP`), so that a parameter
that a few runs make look irrelevant is still explored (``ivr_posterior``
gets that from the draws in which the parameter matters).

References
----------
.. [1] Jones, D. R., Schonlau, M. and Welch, W. J. (1998). Efficient global
   optimization of expensive black-box functions. J. Global Optim. 13, 455-492.
.. [2] Ginsbourger, D., Le Riche, R. and Carraro, L. (2010). Kriging is well-suited
   to parallelize optimization. In Computational Intelligence in Expensive
   Optimization Problems, Springer, 131-162.
.. [3] Cohn, D. A. (1996). Neural network exploration using optimal experiment
   design. Neural Networks 9(6), 1071-1083.
.. [4] Sacks, J., Welch, W. J., Mitchell, T. J. and Wynn, H. P. (1989). Design and
   analysis of computer experiments. Statistical Science 4(4), 409-423.
.. [5] MacKay, D. J. C. (1992). Information-based objective functions for active
   data selection. Neural Computation 4(4), 590-604.
.. [6] Lam, C. Q. (2008). Sequential adaptive designs in computer experiments for
   response surface model fit. PhD thesis, The Ohio State University.
"""
from __future__ import annotations

import sys
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.stats import norm
from threadpoolctl import threadpool_limits
from tqdm import tqdm

from ..checks import is_whole
from ..errors import PlanError, SurrogateError
from ..surrogate.gp import ResponseSurrogate
from ..surrogate.set import SurrogateSet
from .plans import candidates, next_ids
from .sequential import MAX_DRAWS, greedy_ivr, ivr_states

__all__ = ["propose_runs", "run_adaptive", "Proposal", "Pick", "accuracy_status", "AIMS", "CRITERIA", "MIN_DISTANCE"]

AIMS = ("map", "optimum")
#: Criteria allowed per aim; the first is the default.
CRITERIA = {"map": ("ivr_posterior", "ivr", "variance", "eigf"), "optimum": ("ei",)}
#: No proposal is closer than this to an existing, pending or picked run (Euclidean, unit cube).
MIN_DISTANCE = 0.01
#: Candidate points scored per pick.
N_CANDIDATES = 2048
#: For aim "map", candidates are scored with length scales capped at this fraction of each range, so
#: that a parameter the first runs make look irrelevant is still explored (None: no cap).
MAP_LENGTH_SCALE_CAP = 1.0
#: Expected improvement below this fraction of the spread of the runs counts as none: the pick
#: then falls back to the largest predictive variance (common practice, no source).
EI_NEGLIGIBLE = 1e-6
#: Points over which the integrated variance is averaged.
N_REFERENCE = 512
#: The batch rule of each criterion, for the ``<plan>.why.json`` sidecar.
_BATCH = {"ivr_posterior": "exact: a run's effect on the predictive variance does not depend on its result, so each "
                           "pick is scored given the earlier picks and the pending runs, under every kernel setting "
                           "drawn (no assumed results)"}
_BELIEVER = ("kriging believer: each pick assumes the earlier picks and pending runs return the surrogate's mean "
             "(Ginsbourger, Le Riche & Carraro 2010)")
_SOURCES = {
    "ivr_posterior": "integrated variance reduction averaged over the kernel settings' posterior draws (Cohn 1996; "
                     "Sacks, Welch, Mitchell & Wynn 1989)",
    "ivr": "integrated variance reduction (Cohn 1996; Sacks, Welch, Mitchell & Wynn 1989)",
    "variance": "maximum predictive variance (MacKay 1992)",
    "ei": "expected improvement (Jones, Schonlau & Welch 1998)",
    "eigf": "expected improvement for global fit (Lam 2008)",
}


@dataclass
class Pick:
    """One proposed run and why it was picked."""

    run_id: str
    point: dict
    score: float
    reason: str
    predicted: dict


@dataclass
class Proposal:
    """The runs proposed by :func:`propose_runs`.

    Attributes
    ----------
    frame : DataFrame
        ``run_id`` then one column per parameter (study units): a plan.
    picks : list of Pick
    aim, criterion : str
    response : str or None
        The response optimised (``aim = "optimum"``).
    accuracy_met : bool
        Whether the stopping rule (``q2_loo >= target_q2`` for every response) already holds.
    notes : list of str
    """

    frame: pd.DataFrame
    picks: list
    aim: str
    criterion: str
    response: str | None
    accuracy_met: bool
    notes: list = field(default_factory=list)

    def to_dict(self) -> dict:
        """The ``<plan>.why.json`` sidecar: the criterion and, per run, its score and reason."""
        return {"aim": self.aim, "criterion": self.criterion, "criterion_source": _SOURCES[self.criterion],
                "batch": _BATCH.get(self.criterion, _BELIEVER),
                "response": self.response, "accuracy_met": self.accuracy_met, "notes": list(self.notes),
                "runs": [{"run_id": p.run_id, "point": p.point, "score": p.score, "reason": p.reason,
                          "predicted": p.predicted} for p in self.picks]}


def accuracy_status(sset) -> tuple:
    """The stopping rule: (met, sentence). Met when every response is ``ready`` by the numbers.

    Ready: ``q2_loo >= target_q2`` and, when known, the 5 % quantile of the
    posterior draws of its q2 too (:meth:`doe.surrogate.set.SurrogateSet.meets_target`).
    """
    names = [n for n, m in sset.models.items() if not m.constant_]
    q2 = {n: sset.loo(n).q2 for n in names}
    low = {n: sset.q2_low(n) for n in names}

    def shown(n):
        return f"{q2[n]:.3f}" + ("" if np.isnan(low[n]) else f", at 95 % probability {low[n]:.3f}")

    short = [f"{n} (q2_loo {shown(n)})" for n in names if not sset.meets_target(n)]
    if not short:
        return True, (f"the accuracy wanted is already met: q2_loo >= {sset.target_q2:g} for every response "
                      f"({', '.join(f'{n} {shown(n)}' for n in names)}); more runs are optional")
    return False, f"accuracy wanted (q2_loo >= {sset.target_q2:g}) not met yet for: {', '.join(short)}"


def _on_steps(space, C: np.ndarray) -> np.ndarray:
    """Candidates with their stepped knobs on their steps (scored where the run will be made), each once,
    those that the snap moved across a constraint left out. Without stepped knobs, ``C`` as it is."""
    if not any(p.values for p in space.parameters):
        return C
    C = np.unique(space.to_unit(space.from_unit(C)), axis=0)
    return C[space.feasible_unit(C)]


def _far_from(C: np.ndarray, P: np.ndarray) -> np.ndarray:
    """Boolean mask of candidates farther than MIN_DISTANCE from every point of P."""
    if len(P) == 0:
        return np.ones(len(C), dtype=bool)
    keep = np.ones(len(C), dtype=bool)
    for s in range(0, len(P), 256):
        d2 = ((C[:, None, :] - P[None, s:s + 256, :]) ** 2).sum(-1)
        keep &= d2.min(axis=1) > MIN_DISTANCE**2
    return keep


# ---------------------------------------------------------------------------
# criteria: each returns (scores over candidates, a function index -> reason text)
def _variance(models, sset, C, R, response):
    parts = {n: m.predict(C, return_std=True) for n, m in models.items()}
    scaled = {n: (s / m.y_std_) ** 2 for (n, (_, s)), m in zip(parts.items(), models.values())}
    score = sum(scaled.values())

    def why(i):
        top = max(scaled, key=lambda n: scaled[n][i])
        mean, std = parts[top][0][i], parts[top][1][i]
        return (f"largest predictive uncertainty left: {top} = {mean:.4g} +/- {std:.3g} {sset.units[top]} here "
                f"({std / models[top].y_std_:.1%} of the spread of the runs)")

    return score, why


def _ivr(models, sset, C, R, response):
    score = np.zeros(len(C))
    avg_var = 0.0
    for m in models.values():
        _, sC = m.predict(C, return_std=True)
        _, sR = m.predict(R, return_std=True)
        cov = m.predict_cov(R, C)                                   # (R, C), unit^2
        # variance drop at u after observing x: cov(u, x)^2 / (var(x) + noise)  (Cohn 1996)
        score += np.mean(cov**2, axis=0) / (sC**2 + m.noise_std_**2) / m.y_std_**2
        avg_var += float(np.mean(sR**2)) / m.y_std_**2

    def why(i):
        share = score[i] / avg_var if avg_var > 0 else 0.0
        bits = []
        for n, m in models.items():
            mu, sd = m.predict(C[i:i + 1], return_std=True)
            bits.append(f"{n} = {mu[0]:.4g} +/- {sd[0]:.3g} {sset.units[n]}")
        return (f"largest integrated variance reduction: expected to cut the predictive variance averaged over "
                f"the design space by {share:.0%} (responses scaled by the spread of their runs); here "
                + "; ".join(bits))

    return score, why


def _ei(models, sset, C, R, response):
    m = models[response]
    sign = 1.0 if sset.goals[response] == "minimize" else -1.0
    mean, std = m.predict(C, return_std=True)
    g = sign * mean
    best = float(np.min(sign * m.predict(m.X_unit_)))          # best posterior mean at the runs so far
    z = np.where(std > 0, (best - g) / np.where(std > 0, std, 1.0), 0.0)
    ei = np.where(std > 0, (best - g) * norm.cdf(z) + std * norm.pdf(z), np.maximum(best - g, 0.0))  # [1] eq. (15)

    def why(i):
        return (f"largest expected improvement of {response} ({sset.goals[response]}): {ei[i]:.3g} "
                f"{sset.units[response]} beyond the best so far ({sign * best:.4g} {sset.units[response]}); "
                f"predicted {mean[i]:.4g} +/- {std[i]:.3g} {sset.units[response]}")

    return ei, why


def _eigf(models, sset, C, R, response):
    score = np.zeros(len(C))
    parts = {}
    for n, m in models.items():
        mean, std = m.predict(C, return_std=True)
        d2 = ((C[:, None, :] - m.X_unit_[None, :, :]) ** 2).sum(-1)
        near = m.y_[np.argmin(d2, axis=1)]
        # expected improvement for global fit: (mu(x) - y(nearest run))^2 + var(x)  (Lam 2008)
        score += ((mean - near) ** 2 + std**2) / m.y_std_**2
        parts[n] = (mean, std, near)

    def why(i):
        bits = [f"{n} = {mu[i]:.4g} +/- {sd[i]:.3g} {sset.units[n]} (nearest run: {ne[i]:.4g})"
                for n, (mu, sd, ne) in parts.items()]
        return ("largest expected improvement for global fit: the response is predicted to change most from the "
                "nearest run, or is least certain, here: " + "; ".join(bits))

    return score, why


_CRITERIA = {"ivr": _ivr, "variance": _variance, "ei": _ei, "eigf": _eigf}


def _localcandidates(sset, response, rng, n_each=128, spread=0.05):
    """Points around the best runs so far, for the expected improvement."""
    m = sset.models[response]
    sign = 1.0 if sset.goals[response] == "minimize" else -1.0
    order = np.argsort(sign * m.y_)[:5]
    pts = [np.clip(m.X_unit_[i] + spread * rng.standard_normal((n_each, m.X_unit_.shape[1])), 0, 1) for i in order]
    P = np.vstack(pts)
    return P[sset.space.feasible_unit(P)]


def _pick_response(sset, response):
    if response is None:
        goals = [n for n in sset.responses if sset.goals[n] in ("minimize", "maximize")]
        if not goals:
            raise SurrogateError("aim 'optimum' needs a response with goal = \"minimize\" or \"maximize\" in the study")
        return goals[0]
    if response not in sset.models:
        raise SurrogateError(f"no response '{response}'; the study has {', '.join(sset.responses)}")
    if sset.goals[response] not in ("minimize", "maximize"):
        raise SurrogateError(f"response '{response}' has goal 'none'; give it minimize or maximize to seek its optimum")
    return response


def propose_runs(sset, runs: int, aim: str = "map", criterion: str | None = None, response: str | None = None,
                 pending=None, avoid=None, taken_ids=(), seed=0, n_candidates: int = N_CANDIDATES,
                 progress: bool = False) -> Proposal:
    """Propose ``runs`` new runs.

    Parameters
    ----------
    sset : SurrogateSet
        Fitted surrogates of the study.
    runs : int
        Runs to propose.
    aim : {"map", "optimum"}
        Map the whole space (accurate surrogates everywhere) or seek the
        optimum of one response.
    criterion : str, optional
        One of :data:`CRITERIA` ``[aim]``; default the first.
    response : str, optional
        With ``aim = "optimum"``: the response to optimise (default: the first
        with a goal).
    pending : array_like, shape (p, d), optional
        Runs planned but not evaluated yet, study units; fantasised at the
        surrogate's mean and never duplicated.
    avoid : array_like, shape (a, d), optional
        Other points not to repeat (e.g. failed runs), study units.
    taken_ids : iterable of str
        Run ids already used besides those the surrogates were fitted on
        (failed and pending runs); new ids continue the numbering.
    seed : int
    n_candidates : int
        Candidate points scored per pick.
    progress : bool
        Show a progress bar on standard error when the picks take more than
        two seconds.

    Returns
    -------
    Proposal

    Raises
    ------
    SurrogateError, PlanError
        Unknown aim or criterion, a response without goal, or no feasible
        candidate left.
    """
    with threadpool_limits(limits=1, user_api="blas"):  # small matrices: threads only contend
        return _propose(sset, runs, aim, criterion, response, pending, avoid, taken_ids, seed, n_candidates, progress)


def _propose(sset, runs, aim, criterion, response, pending, avoid, taken_ids, seed, n_candidates,
             progress=False) -> Proposal:
    if aim not in AIMS:
        raise SurrogateError(f"aim {aim!r} is not one of {', '.join(AIMS)}")
    criterion = criterion or CRITERIA[aim][0]
    if criterion not in CRITERIA[aim]:
        raise SurrogateError(f"criterion {criterion!r} does not serve aim {aim!r}; use {', '.join(CRITERIA[aim])}")
    if not is_whole(runs) or runs < 1:
        raise SurrogateError(f"the number of runs to propose must be a whole number >= 1, got {runs!r}")
    response = _pick_response(sset, response) if aim == "optimum" else None
    rng = np.random.default_rng(seed)
    space = sset.space
    first = next(iter(sset.models.values()))
    P = sset.unit_points(pending) if pending is not None and len(pending) else np.zeros((0, space.dim))
    A = sset.unit_points(avoid) if avoid is not None and len(avoid) else np.zeros((0, space.dim))
    C = candidates(space, n_candidates, rng)
    if aim == "optimum":
        C = np.vstack([C, _localcandidates(sset, response, rng)])
    C = _on_steps(space, C)
    C = C[_far_from(C, np.vstack([first.X_unit_, P, A]))]
    R = candidates(space, N_REFERENCE, rng) if criterion in ("ivr", "ivr_posterior") else None
    met, status = accuracy_status(sset)
    notes = [status]
    ids = next_ids(list(sset.run_ids) + list(taken_ids), runs)
    bar = tqdm(total=runs, desc="choosing next runs", unit="run", delay=2.0, disable=not progress, file=sys.stderr)
    with bar:
        if criterion == "ivr_posterior":
            if len(P):
                notes.append(f"{len(P)} pending run(s) taken as made (their effect on the predictive variance does "
                             "not depend on their results)")
            chosen, picks = _posterior_picks(sset, runs, C, R, P, ids, bar.update)
        else:
            if len(P):
                notes.append(f"{len(P)} pending run(s) taken as returning the surrogate's mean")
            models = {n: (m.conditioned(P) if len(P) else m) for n, m in sset.models.items()}
            chosen, picks = _believer_picks(sset, models, runs, aim, criterion, response, C, R, ids, bar.update)
    frame = pd.DataFrame(np.clip(space.from_unit(np.array(chosen)), space.lower, space.upper), columns=space.names)
    frame.insert(0, "run_id", ids)
    return Proposal(frame, picks, aim, criterion, response, met, notes)


def _pick(run_id, space, x, score, reason, models) -> Pick:
    """The record of one proposed run: its point in study units and each response's prediction there."""
    pred = {n: m.predict(x[None], return_std=True) for n, m in models.items()}
    point = dict(zip(space.names, (float(v) for v in space.from_unit(x[None])[0])))
    return Pick(run_id, point, float(score), reason,
                {n: {"mean": float(mu[0]), "std": float(sd[0])} for n, (mu, sd) in pred.items()})


def _believer_picks(sset, models, runs, aim, criterion, response, C, R, ids, advance):
    """Picks one at a time, the surrogates conditioned on each as if it returned their mean (kriging believer)."""
    space = sset.space
    chosen, picks = [], []
    for j in range(runs):
        if len(C) == 0:
            raise PlanError(f"no feasible candidate is left after {j} pick(s): the space is crowded; "
                            "ask for fewer runs")
        if aim == "map" and MAP_LENGTH_SCALE_CAP is not None:
            score, _ = _CRITERIA[criterion]({n: m.capped(MAP_LENGTH_SCALE_CAP) for n, m in models.items()},
                                            sset, C, R, response)
            why = _CRITERIA[criterion](models, sset, C, R, response)[1]
        else:
            score, why = _CRITERIA[criterion](models, sset, C, R, response)
        prefix = ""
        if criterion == "ei" and score.max() <= EI_NEGLIGIBLE * models[response].y_std_:
            score, why = _variance({response: models[response]}, sset, C, R, response)
            prefix = "expected improvement is negligible everywhere; instead: "
        i = int(np.argmax(score))
        x = C[i]
        reason = prefix + why(i)
        if j:
            reason += f" (assuming the {j} run(s) picked before return the surrogate's mean)"
        picks.append(_pick(ids[j], space, x, score[i], reason, models))
        chosen.append(x)
        models = {n: m.conditioned(x[None]) for n, m in models.items()}
        C = C[_far_from(C, x[None])]
        advance(1)
    return chosen, picks


def _posterior_picks(sset, runs, C, R, P, ids, advance):
    """Picks by integrated variance reduction over each response's posterior draws, batch exact."""
    space = sset.space
    names = [n for n, m in sset.models.items() if not m.constant_] or list(sset.models)
    Cp = np.vstack([P, C])
    predictors = {n: sset.predictor(n) for n in sset.models}
    groups = [ivr_states(predictors[n], Cp, R, MAX_DRAWS) for n in names]
    drawn = [f"{n} {len(g)}" for n, g in zip(names, groups) if len(g) > 1]
    rest = "" if len(drawn) == len(names) else "; the other responses: their fitted settings"
    head = (f"averaged over plausible kernel settings (draws: {', '.join(drawn)}{rest})" if drawn
            else "under the fitted kernel settings")

    def near(i):
        return ~_far_from(Cp, Cp[i][None])

    found = greedy_ivr(groups, runs, n_pending=len(P), blocked=near, on_pick=lambda j: advance(1))
    if len(found) < runs:
        raise PlanError(f"no feasible candidate is left after {len(found)} pick(s): the space is crowded; "
                        "ask for fewer runs")
    chosen, picks = [], []
    for j, (i, score, share) in enumerate(found):
        pick = _pick(ids[j], space, Cp[i], score, "", predictors)
        here = "; ".join(f"{n} = {p['mean']:.4g} +/- {p['std']:.3g} {sset.units[n]}"
                         for n, p in pick.predicted.items())
        pick.reason = (f"largest integrated variance reduction {head}: "
                       f"expected to cut the predictive variance averaged over the design space by {share:.0%} "
                       f"(responses scaled by the spread of their runs); here {here}")
        if j:
            pick.reason += f" (given the {j} run(s) picked before; their effect does not depend on their results)"
        picks.append(pick)
        chosen.append(Cp[i])
    return chosen, picks


def run_adaptive(func, space, U0, n_add: int, batch: int = 2, refit_every: int = 2, seed=0,
                 aim: str = "map", criterion: str | None = None, goal: str = "none", on_round=None,
                 **fit_options):
    """Sequential design with a cheap evaluator: fit, propose a batch, evaluate, repeat.

    Parameters
    ----------
    func : callable
        ``func(U) -> y`` on points of the unit cube, shape ``(n, d) -> (n,)``.
    space : Space
    U0 : ndarray, shape (n0, d)
        First runs, unit cube.
    n_add : int
        Successful runs to add (a run whose value is not finite counts as
        failed: it is not fitted and its point is not proposed again).
    batch : int
        Runs proposed per round.
    refit_every : int
        Hyperparameters are estimated again every this many rounds; in
        between, the surrogate is conditioned on the new runs with its
        hyperparameters kept (a common economy, no source).
    seed : int
    aim, criterion : str
        As in :func:`propose_runs`.
    goal : {"none", "minimize", "maximize"}
        Goal of the response (``aim = "optimum"`` needs one).
    on_round : callable, optional
        ``on_round(model, U, y) -> bool`` is called with the surrogate used
        for each round's proposal and finally with the refitted last one; a
        true return value stops the loop early.
    **fit_options
        Options of :class:`~doe.surrogate.gp.ResponseSurrogate`.

    Returns
    -------
    U : ndarray, shape (n0 + n_add, d)
    y : ndarray
    model : ResponseSurrogate
        Fitted (hyperparameters estimated) on all runs.
    """
    U = np.asarray(U0, dtype=float)
    y = np.asarray(func(U), dtype=float)
    bad = ~np.isfinite(y)                     # failed runs: never refitted, never proposed again
    failed, U, y = U[bad], U[~bad], y[~bad]
    model, rounds, target = None, 0, len(U) + n_add
    while len(U) < target:
        if model is None or rounds % refit_every == 0:
            model = ResponseSurrogate(seed=seed, names=space.names, **fit_options).fit(U, y)
        if on_round is not None and on_round(model, U, y):
            return U, y, model
        sset = SurrogateSet(space, {"y": model}, {"y": "-"}, {"y": goal}, [], 0.9)
        k = min(batch, target - len(U))
        avoid = space.from_unit(failed) if len(failed) else None
        new = space.to_unit(propose_runs(sset, k, aim=aim, criterion=criterion, avoid=avoid, seed=seed + rounds)
                            .frame[space.names].to_numpy(dtype=float))
        y_new = np.asarray(func(new), dtype=float)
        ok = np.isfinite(y_new)
        failed = np.vstack([failed, new[~ok]])
        if ok.any():
            model = model.conditioned(new[ok], y_new[ok])
        U, y = np.vstack([U, new[ok]]), np.concatenate([y, y_new[ok]])
        rounds += 1
    model = ResponseSurrogate(seed=seed, names=space.names, **fit_options).fit(U, y)
    if on_round is not None:
        on_round(model, U, y)
    return U, y, model
