"""Next runs for a better map, chosen under the hyperparameter posterior (:mod:`doe.surrogate.hyperposterior`).

Criterion: integrated variance reduction (IVR; Cohn 1996, the IMSE criterion
of Sacks, Welch, Mitchell & Wynn 1989), averaged over hyperparameter draws.
For one draw, adding a run at ``x`` lowers the posterior variance at ``r`` by
``cov(r, x)^2 / (var(x) + nugget)``; IVR is that drop averaged over reference
points ``r`` spread through the unit cube. Averaging it over the draws rather
than taking the plug-in's makes the choice robust to length scales the first
runs pin down poorly: a run is worth most where it helps under every
plausible setting, and a parameter the first runs make look inert is still
explored while some draws say it matters.

Batch rule: greedy. A run's variance reduction does not depend on its
(unknown) value, so after each pick every draw's posterior covariance is
updated exactly by a rank-one step (no fantasy values), and the next pick
maximises the criterion given the picks before it. Several responses add
their criteria, each in units of the variance of its runs
(:func:`greedy_ivr`); ``doe next`` uses this as its default for a map
(:mod:`doe.design.adaptive`, criterion ``ivr_posterior``).

What was measured (``benchmarks/bench_sequential.py``: borehole, OTL circuit,
piston and wing weight, 10 d runs against a one-shot maximin Latin hypercube
of 10 d, fitted alike, seeds 0-4): held-out RMSE ratios 0.70, 0.78, 0.65 and
0.95 with 2 d first runs and the posterior mode refitted before each batch
(2-5 s per sequential run on the shared 2-core machine), 0.75, 0.79, 0.75 and
0.99 averaging over up to 8 posterior draws (10-30 s); 4 d first runs and the
draws gave 0.95, 0.90, 0.79 and 0.78 before (seeds 0-2, 28-68 s). On three
functions not used to choose the settings: Ishigami 0.86, Hartmann 6-D 1.00,
G-function 0.99. Starting from 2 d leaves more of the budget to be
placed knowing the fitted length scales. Weighting the reference points by
the leave-one-out errors of nearby runs, and capping the length scales at the
range, were tried and not kept (better on one function, worse on others). The
gain is largest where a few inputs dominate; on the wing-weight function,
where ten inputs act smoothly and nearly additively, it is about even.

References
----------
.. [1] Cohn, D. A. (1996). Neural network exploration using optimal experiment
   design. Neural Networks 9(6), 1071-1083.
.. [2] Sacks, J., Welch, W. J., Mitchell, T. J. and Wynn, H. P. (1989). Design and
   analysis of computer experiments. Statistical Science 4(4), 409-423.
.. [3] Gramacy, R. B. (2020). Surrogates: Gaussian Process Modeling, Design, and
   Optimization for the Applied Sciences. CRC Press, ch. 6 (sequential design
   by integrated variance).
"""
from __future__ import annotations

import numpy as np
from scipy.linalg import solve_triangular
from scipy.stats import qmc
from threadpoolctl import threadpool_limits

from ..errors import SurrogateError
from ..surrogate.hyperposterior import HyperPosterior

__all__ = ["propose_batch", "greedy_ivr", "ivr_states", "run_sequential", "N_CANDIDATES", "N_REFERENCE", "MAX_DRAWS",
           "START_RUNS_PER_PARAMETER"]

#: Candidate points scored per pick (scrambled Sobol').
N_CANDIDATES = 2048
#: Reference points over which the variance is integrated.
N_REFERENCE = 512
#: Hyperparameter draws used by the criterion (evenly spaced through the kept draws).
MAX_DRAWS = 8
#: First runs per parameter before the batches (callers of :func:`run_sequential`). Chosen by the held-out
#: RMSE ratio against a one-shot maximin LHS of 10 d runs, seeds 0-2 (borehole, OTL circuit, piston, wing
#: weight): 2 d first runs 0.85, 0.82, 0.73, 0.83; 3 d 0.87, 0.83, 0.81, 0.83 (posterior mode); the
#: previous 4 d 0.95, 0.90, 0.79, 0.78 (posterior draws). More of the budget is placed knowing the fitted
#: length scales.
START_RUNS_PER_PARAMETER = 2


def _draw_state(draw, C, R):
    """Posterior covariance of one draw: candidates x reference, candidate and reference variances, a column maker.

    ``draw`` is anything with ``_signal_kernel()``, ``Z_``, ``L_``, ``nugget_`` and ``noise_var_n_`` in
    normalised units (a hyperposterior draw, or a fitted :class:`~doe.surrogate.gp.ResponseSurrogate`);
    ``C`` and ``R`` are centred (unit cube minus 1/2).
    """
    kern = draw._signal_kernel()
    Z = draw.Z_
    vC = solve_triangular(draw.L_, kern(Z, C), lower=True, check_finite=False)     # (n, Nc)
    vR = solve_triangular(draw.L_, kern(Z, R), lower=True, check_finite=False)     # (n, Nr)
    cov_cr = kern(C, R) - vC.T @ vR
    var_c = np.clip(kern.diag(C) - np.einsum("ij,ij->j", vC, vC), 0.0, None)
    var_r = np.clip(kern.diag(R) - np.einsum("ij,ij->j", vR, vR), 0.0, None)

    def column(i):
        """Covariance of every candidate with candidate ``i`` given the runs (before this batch's picks)."""
        return kern(C, C[i:i + 1])[:, 0] - vC.T @ vC[:, i]

    return {"cov_cr": cov_cr, "var_c": var_c, "var_r": var_r, "column": column, "us": [],
            "eps": draw.nugget_ + draw.noise_var_n_}


def _covariance_state(model, C, R):
    """The same state from any fitted surrogate with ``predict_cov`` and ``predict`` (unit cube ``C``, ``R``),
    in units of the variance of its runs (e.g. a two-fidelity surrogate, which has no single kernel)."""
    s2 = model.y_std_ ** 2
    var_c = model.predict(C, return_std=True)[1] ** 2 / s2
    var_r = model.predict(R, return_std=True)[1] ** 2 / s2

    def column(i):
        return model.predict_cov(C, C[i:i + 1])[:, 0] / s2

    return {"cov_cr": model.predict_cov(C, R) / s2, "var_c": var_c, "var_r": var_r, "column": column, "us": [],
            "eps": model.noise_std_ ** 2 / s2}


def ivr_states(model, C, R, max_draws: int = MAX_DRAWS) -> list:
    """The criterion's state for each hyperparameter draw of ``model`` (points of the unit cube).

    A :class:`~doe.surrogate.hyperposterior.HyperPosterior` contributes up to ``max_draws`` of its draws,
    evenly spaced along the chain (one when its posterior mode alone predicts); any other fitted
    surrogate contributes its own fit.
    """
    if isinstance(model, HyperPosterior):
        J = len(model.draws_)
        chosen = np.unique(np.linspace(0, J - 1, min(J, int(max_draws))).round().astype(int))
        return [_draw_state(model.draws_[j], C - 0.5, R - 0.5) for j in chosen]
    if all(hasattr(model, a) for a in ("L_", "Z_", "nugget_", "noise_var_n_", "_signal_kernel")):
        return [_draw_state(model, C - 0.5, R - 0.5)]
    return [_covariance_state(model, C, R)]


def _score(states) -> np.ndarray:
    """IVR of every candidate, averaged over draws."""
    total = 0.0
    for s in states:
        total = total + np.mean(s["cov_cr"] ** 2, axis=1) / (s["var_c"] + s["eps"])
    return total / len(states)


def _integrated_variance(states) -> float:
    """Predictive variance averaged over the reference points and the draws (normalised units)."""
    return float(np.mean([np.mean(s["var_r"]) for s in states]))


def _condition(s, i) -> None:
    """Rank-one update of one draw's state after a run at candidate ``i``."""
    col = s["column"](i)
    for u in s["us"]:
        col = col - u * u[i]
    scale = np.sqrt(max(s["var_c"][i], 0.0) + s["eps"])
    u = col / scale
    w = s["cov_cr"][i] / scale
    s["cov_cr"] -= np.outer(u, w)
    s["var_c"] = np.clip(s["var_c"] - u**2, 0.0, None)
    s["var_r"] = np.clip(s["var_r"] - w**2, 0.0, None)
    s["us"].append(u)


def greedy_ivr(groups, k: int, allowed=None, n_pending: int = 0, blocked=None, on_pick=None) -> list:
    """Greedy batch by integrated variance reduction, summed over groups and averaged over each group's draws.

    Parameters
    ----------
    groups : list of list of dict
        One list of states (:func:`ivr_states`) per response, on the same
        candidates; each in units of the variance of that response's runs.
    k : int
        Picks.
    allowed : ndarray of bool, optional
        Candidates that may be picked (default all).
    n_pending : int
        The first ``n_pending`` candidates are pending runs: conditioned on
        before the first pick, never picked.
    blocked : callable, optional
        ``blocked(i) -> ndarray of bool``: candidates no longer allowed once
        ``i`` is picked (e.g. too close to it).
    on_pick : callable, optional
        ``on_pick(j)`` after pick ``j`` (progress).

    Returns
    -------
    list of tuple
        ``(index, score, share)`` per pick: the candidate, its criterion
        value, and the share of the integrated variance (before the pick)
        that it is expected to remove.
    """
    n_cand = len(groups[0][0]["var_c"])
    ok = np.ones(n_cand, dtype=bool) if allowed is None else np.array(allowed, dtype=bool)
    ok[:n_pending] = False
    for i in range(n_pending):
        for states in groups:
            for s in states:
                _condition(s, i)
    out = []
    for j in range(int(k)):
        if not ok.any():
            break
        score = sum(_score(states) for states in groups)
        score = np.where(ok, score, -np.inf)
        i = int(np.argmax(score))
        total = sum(_integrated_variance(states) for states in groups)
        out.append((i, float(score[i]), float(score[i] / total) if total > 0 else 0.0))
        ok[i] = False
        if blocked is not None:
            ok &= ~blocked(i)
        for states in groups:
            for s in states:
                _condition(s, i)
        if on_pick is not None:
            on_pick(j)
    return out


def propose_batch(model, k: int, seed=0, exclude=None, max_draws: int = MAX_DRAWS,
                  n_candidates: int = N_CANDIDATES) -> np.ndarray:
    """``k`` new runs (unit cube) by greedy integrated variance reduction under the hyperparameter draws.

    Parameters
    ----------
    model : HyperPosterior or fitted surrogate
        Fitted on the runs so far (see :func:`ivr_states`).
    k : int
        Runs to propose.
    seed : int
        Seed of the candidate and reference points.
    exclude : array_like, shape (m, d), optional
        Pending runs: treated as already made (their variance reduction is
        taken before the first pick).
    max_draws : int
        Hyperparameter draws averaged over.
    n_candidates : int
        Candidate points (scrambled Sobol').

    Returns
    -------
    ndarray, shape (k, d)
    """
    if hasattr(model, "_check_fitted"):
        model._check_fitted()
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 1:
        raise SurrogateError(f"k must be a whole number >= 1, got {k!r}")
    d = model.X_unit_.shape[1]
    rng = np.random.default_rng(seed)
    C = qmc.Sobol(d, scramble=True, seed=rng).random(n_candidates)
    n_pending = 0
    if exclude is not None:
        C = np.vstack([np.asarray(exclude, dtype=float), C])
        n_pending = len(exclude)
    R = qmc.Sobol(d, scramble=True, seed=rng).random(N_REFERENCE)
    with threadpool_limits(limits=1, user_api="blas"):
        picks = greedy_ivr([ivr_states(model, C, R, max_draws)], int(k), n_pending=n_pending)
    return C[[i for i, _, _ in picks]]


def run_sequential(func, d: int, n_start: int, n_total: int, batch: int, seed=0, start=None, on_round=None,
                   mode: str = "plugin", **options):
    """Start from a maximin Latin hypercube, then add batches proposed by :func:`propose_batch`.

    Parameters
    ----------
    func : callable
        ``func(U) -> y`` on points of the unit cube, shape ``(m, d) -> (m,)``.
    d, n_start, n_total, batch : int
        Parameters, first runs, all runs, runs per batch.
    seed : int
    start : array_like, optional
        First runs instead of a maximin Latin hypercube of ``n_start``.
    on_round : callable, optional
        ``on_round(model, U, y)`` after each fit.
    mode : {"plugin", "auto", "mixture"}
        Fit before each batch (:class:`~doe.surrogate.hyperposterior.HyperPosterior`): ``"plugin"``, the
        posterior mode alone, did as well in ``benchmarks/bench_sequential.py`` as averaging the criterion
        over draws (``"auto"``; slightly better on all four functions, within the seeds' scatter) at
        about a sixth of the time.
    **options
        Other options of :class:`~doe.surrogate.hyperposterior.HyperPosterior`.

    Returns
    -------
    U : ndarray, shape (n_total, d)
    y : ndarray, shape (n_total,)
    model : HyperPosterior
        Fitted to every run.
    """
    from .plans import maximin_lhs

    U = maximin_lhs(n_start, d, seed=seed) if start is None else np.asarray(start, dtype=float)
    y = np.asarray(func(U), dtype=float)
    rnd = 0
    while True:
        model = HyperPosterior(mode=mode, seed=seed + rnd, **options).fit(U, y)
        if on_round is not None:
            on_round(model, U, y)
        if len(U) >= n_total:
            return U, y, model
        new = propose_batch(model, min(batch, n_total - len(U)), seed=seed + 1000 + rnd)
        U = np.vstack([U, new])
        y = np.concatenate([y, np.asarray(func(new), dtype=float)])
        rnd += 1
