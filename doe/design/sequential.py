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
maximises the criterion given the picks before it.

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

__all__ = ["propose_batch", "run_sequential", "N_CANDIDATES", "N_REFERENCE", "MAX_DRAWS"]

#: Candidate points scored per pick (scrambled Sobol').
N_CANDIDATES = 2048
#: Reference points over which the variance is integrated.
N_REFERENCE = 512
#: Hyperparameter draws used by the criterion (evenly spaced through the kept draws).
MAX_DRAWS = 8


def _draw_state(draw, C, R):
    """Posterior covariance of one draw: candidates x reference, candidate variances, and a column maker."""
    kern = draw._signal_kernel()
    Z = draw.Z_
    vC = solve_triangular(draw.L_, kern(Z, C), lower=True, check_finite=False)     # (n, Nc)
    vR = solve_triangular(draw.L_, kern(Z, R), lower=True, check_finite=False)     # (n, Nr)
    cov_cr = kern(C, R) - vC.T @ vR
    var_c = np.clip(kern.diag(C) - np.einsum("ij,ij->j", vC, vC), 0.0, None)

    def column(i):
        """Covariance of every candidate with candidate ``i`` given the runs (before this batch's picks)."""
        return kern(C, C[i:i + 1])[:, 0] - vC.T @ vC[:, i]

    return {"cov_cr": cov_cr, "var_c": var_c, "column": column, "us": [], "eps": draw.nugget_ + draw.noise_var_n_}


def _score(states) -> np.ndarray:
    """IVR of every candidate, averaged over draws."""
    total = 0.0
    for s in states:
        total = total + np.mean(s["cov_cr"] ** 2, axis=1) / (s["var_c"] + s["eps"])
    return total / len(states)


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
    s["us"].append(u)


def propose_batch(model: HyperPosterior, k: int, seed=0, exclude=None) -> np.ndarray:
    """``k`` new runs (unit cube) by greedy integrated variance reduction under the hyperparameter draws.

    Parameters
    ----------
    model : HyperPosterior
        Fitted on the runs so far.
    k : int
        Runs to propose.
    seed : int
        Seed of the candidate and reference points.
    exclude : array_like, shape (m, d), optional
        Pending runs: treated as already made (their variance reduction is
        taken before the first pick).

    Returns
    -------
    ndarray, shape (k, d)
    """
    model._check_fitted()
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 1:
        raise SurrogateError(f"k must be a whole number >= 1, got {k!r}")
    d = model.X_unit_.shape[1]
    rng = np.random.default_rng(seed)
    C = qmc.Sobol(d, scramble=True, seed=rng).random(N_CANDIDATES)
    if exclude is not None:
        C = np.vstack([np.asarray(exclude, dtype=float), C])
    R = qmc.Sobol(d, scramble=True, seed=rng).random(N_REFERENCE)
    J = len(model.draws_)
    chosen = np.unique(np.linspace(0, J - 1, min(J, MAX_DRAWS)).round().astype(int))
    picks = []
    with threadpool_limits(limits=1, user_api="blas"):
        states = [_draw_state(model.draws_[j], C - 0.5, R - 0.5) for j in chosen]
        n_pending = 0 if exclude is None else len(exclude)
        for i in range(n_pending):
            for s in states:
                _condition(s, i)
        for _ in range(int(k)):
            score = _score(states)
            score[:n_pending] = -np.inf
            score[picks] = -np.inf
            i = int(np.argmax(score))
            picks.append(i)
            for s in states:
                _condition(s, i)
    return C[picks]


def run_sequential(func, d: int, n_start: int, n_total: int, batch: int, seed=0, start=None, on_round=None,
                   **options):
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
    **options
        Passed to :class:`~doe.surrogate.hyperposterior.HyperPosterior` (e.g. ``mode``).

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
        model = HyperPosterior(seed=seed + rnd, **options).fit(U, y)
        if on_round is not None:
            on_round(model, U, y)
        if len(U) >= n_total:
            return U, y, model
        new = propose_batch(model, min(batch, n_total - len(U)), seed=seed + 1000 + rnd)
        U = np.vstack([U, new])
        y = np.concatenate([y, np.asarray(func(new), dtype=float)])
        rnd += 1
