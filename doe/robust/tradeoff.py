"""Trade-off sets: the non-dominated settings among many, by the surrogate means.

References
----------
.. [D] Deb, K. (2001). Multi-Objective Optimization using Evolutionary
   Algorithms. Wiley. (non-dominated sets)
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.stats import qmc
from threadpoolctl import threadpool_limits

from ..errors import DoeError
from ..space import Space
from .scatter import goal_sign, predict_checked

__all__ = ["nondominated", "tradeoff_set", "refine_points", "write_tradeoff"]


# ---------------------------------------------------------------------------
# trade-off sets
def nondominated(F) -> np.ndarray:
    """Which rows of ``F`` no other row dominates (every column is minimised).

    Row ``j`` dominates row ``i`` when ``F[j] <= F[i]`` in every column and
    ``<`` in at least one ([D]_ def. 2.5). Rows are visited in lexicographic
    order, so a row can only be dominated by one visited before it.

    Parameters
    ----------
    F : array_like, shape (n, m)

    Returns
    -------
    ndarray of bool, shape (n,)
    """
    F = np.asarray(F, dtype=float)
    if F.ndim != 2 or not np.all(np.isfinite(F)):
        raise DoeError("trade-off: the values must be a finite 2-D array")
    keep = np.zeros(len(F), dtype=bool)
    front = np.empty((0, F.shape[1]))
    for i in np.lexsort(F.T[::-1]):
        f = F[i]
        if len(front) and np.any(np.all(front <= f, axis=1) & np.any(front < f, axis=1)):
            continue
        keep[i] = True
        front = np.vstack([front, f])
    return keep


def _minimised(pred: dict, responses, goals: dict, targets: dict) -> np.ndarray:
    """Columns to minimise, one per response: ``-+ mean`` by its goal, or the distance to its target."""
    cols = []
    for name in responses:
        goal = goals.get(name, "none")
        mean = pred[name][0]
        if goal == "none":
            if name not in targets:
                raise DoeError(f"trade-off: response '{name}' has no goal; give it a target")
            cols.append(np.abs(mean - targets[name]))
        else:
            cols.append(-goal_sign(goal) * mean)
    return np.column_stack(cols)


#: Margin (share of the first response's range) by which a polish aims below its epsilon level.
_LEVEL_MARGIN = 1e-7


def refine_points(predict, space: Space, responses, goals: dict, X, targets=None, levels: int = 8,
                  maxiter: int = 60) -> np.ndarray:
    """Settings on the trade-off's edges and along it, polished from the best of the candidates ``X``.

    Each response's own optimum on the surrogate mean (the ends of the trade-off
    line), then, for the first two responses, ``levels`` epsilon-constraint
    points: the best second response with the first no worse than a level
    between its two ends ([D]_ sec. 4.2; Haimes, Lasdon & Wismer 1971), and up
    to ``levels`` more halfway across the widest gaps of the second response
    (where the line is steep). Each is
    a local SLSQP polish (unit cube, the linear constraints kept) from the best
    candidate of ``X`` for it (and, along the line, also from the previous
    level's point), so it is never worse than that candidate.

    Parameters
    ----------
    predict, space, responses, goals, targets
        As :func:`tradeoff_set`.
    X : array_like, shape (n, d)
        Feasible candidate settings (study units) to start from.
    levels : int
    maxiter : int
        SLSQP iterations per polish.

    Returns
    -------
    ndarray, shape (k, d)
        Feasible settings, study units.
    """
    from scipy.optimize import minimize

    responses, targets = list(responses), targets or {}
    X = space.as_points(X)
    F = _minimised(predict_checked(predict, X, responses), responses, goals, targets)

    def values(u):
        x = space.from_unit(np.clip(np.atleast_2d(u), 0.0, 1.0))
        return _minimised(predict_checked(predict, x, responses), responses, goals, targets)[0]

    span = space.upper - space.lower
    cons = []
    for c in space.constraints:
        coef = np.array([c.terms.get(n, 0.0) for n in space.names]) * span
        base = float(np.dot([c.terms.get(n, 0.0) for n in space.names], space.lower))
        scale = float(np.sum(np.abs(coef))) or 1.0
        if c.max is not None:
            cons.append({"type": "ineq", "fun": lambda u, a=coef, b=base, m=c.max, s=scale: (m - b - a @ u) / s})
        if c.min is not None:
            cons.append({"type": "ineq", "fun": lambda u, a=coef, b=base, m=c.min, s=scale: (a @ u + b - m) / s})
    scale = np.ptp(F, axis=0)
    scale = np.where(scale > 0, scale, 1.0)

    def polish(start, j, level=None, on=0):
        """Minimise response j from ``start``, with response ``on`` no worse than ``level`` (if given)."""
        # the level is aimed at with a margin: at an epsilon-constraint optimum the level is active, and
        # SLSQP ends on it only to its tolerance, often a hair above; the check below would then throw the
        # polished point away and keep the (sampled) start, leaving steps in the line
        extra = [] if level is None else [{"type": "ineq",
                                           "fun": lambda u: (level - values(u)[on]) / scale[on] - _LEVEL_MARGIN}]
        res = minimize(lambda u: values(u)[j] / scale[j], space.to_unit(start[None, :])[0], method="SLSQP",
                       bounds=[(0.0, 1.0)] * space.dim, constraints=cons + extra,
                       options={"maxiter": maxiter, "ftol": 1e-10})
        u = np.clip(res.x, 0.0, 1.0)
        x, f = space.from_unit(u[None, :])[0], values(u)
        ok = bool(space.feasible(x[None, :])[0]) and (level is None or f[on] <= level)
        return x if ok and f[j] <= values(space.to_unit(start[None, :]))[j] else start

    def on_level(level, previous):
        # two starts, the previous level's point (a continuation along the line) and the best sampled
        # setting under the level (if any); the better polish is kept
        ok = F[:, 0] <= level
        tries = [polish(previous, 1, level)] + ([polish(X[ok][np.argmin(F[ok, 1])], 1, level)] if np.any(ok) else [])
        return min(tries, key=lambda x: values(space.to_unit(x[None, :]))[1])

    ends = [polish(X[np.argmin(F[:, j])], j) for j in range(len(responses))]
    # an end can tie on its own response with settings better in the other (a knob that only moves the
    # other response): the best of the other response at the end's own value is the line's true end
    for j, o in ((0, 1), (1, 0)):
        own = values(space.to_unit(ends[j][None, :]))[j]
        ends[j] = polish(ends[j], o, own + 2 * _LEVEL_MARGIN * scale[j], on=j)
    line = [ends[0]]
    lo, hi = values(space.to_unit(ends[0][None, :]))[0], values(space.to_unit(ends[1][None, :]))[0]
    for level in np.linspace(lo, hi, levels + 2)[1:-1]:
        line.append(on_level(level, line[-1]))
    line.append(ends[1])
    # where the line is steep, evenly spaced levels of the first response leave wide gaps in the second
    # (between them only sampled settings, well behind the line, fill in): across each gap wider than an
    # even share of the second response's range on the line, widest first (up to ``levels`` of them),
    # the best first response with the second no worse than halfway across the gap, polished from the
    # gap's better end in the first response
    f = np.array([values(space.to_unit(x[None, :]))[:2] for x in line])
    height = abs(f[-1, 1] - f[0, 1]) or 1.0           # the second response's range along the line
    tried = np.zeros(len(f) - 1, dtype=bool)                  # gaps that a polish could not split
    for _ in range(levels):
        gaps = np.where(tried, 0.0, np.abs(np.diff(f[:, 1])) / height)
        k = int(np.argmax(gaps))
        if gaps[k] <= 1.0 / (levels + 1):
            break
        x = polish(line[k + 1], 0, 0.5 * (f[k, 1] + f[k + 1, 1]), on=1)
        fx = values(space.to_unit(x[None, :]))[:2]
        if not min(f[k, 1], f[k + 1, 1]) < fx[1] < max(f[k, 1], f[k + 1, 1]):
            tried[k] = True
            continue
        line.insert(k + 1, x)
        f = np.insert(f, k + 1, fx, axis=0)
        tried = np.insert(tried, k + 1, False)
    return np.asarray(line)


def tradeoff_set(predict, space: Space, responses, goals: dict, targets=None, samples: int = 4096, seed=0,
                 candidates=None, include=None, refine: bool = False, levels: int = 16) -> pd.DataFrame:
    """Non-dominated settings of several responses on the surrogate mean (e.g. downforce vs drag).

    Parameters
    ----------
    predict : callable
    space : Space
    responses : sequence of str
        At least two.
    goals : dict of str to str
        ``"minimize"``, ``"maximize"`` or ``"none"`` per response; ``"none"``
        needs a target.
    targets : dict of str to float, optional
        Aim for a response with goal ``"none"``: the distance to it is minimised.
    samples : int
        Size of the scrambled Sobol' sample of candidates (rounded up to a power of 2).
    seed : int
    candidates : array_like, shape (n, d), optional
        Settings to filter instead of the sample (study units).
    include : array_like, shape (k, d), optional
        Settings added to the candidates (e.g. the recommended picks), study units.
    refine : bool
        Add each response's optimum and points along the line (:func:`refine_points`), so
        the set reaches the true ends of the trade-off, not only the sample's.
    levels : int
        Epsilon-constraint levels of the refinement (:func:`refine_points`).

    Returns
    -------
    pandas.DataFrame
        Parameters, then ``<response>`` and ``<response>_std`` per response,
        sorted by the first response; only feasible settings.
    """
    responses = list(responses)
    targets = targets or {}
    if len(responses) < 2:
        raise DoeError(f"trade-off: give at least two responses, got {responses}")
    if candidates is None:
        m = int(math.ceil(math.log2(max(samples, 2))))
        U = qmc.Sobol(space.dim, scramble=True, seed=np.random.default_rng(seed)).random_base2(m)
        X = space.from_unit(U)
    else:
        X = space.as_points(candidates)
    if include is not None and len(include):
        X = np.vstack([X, space.as_points(include)])
    X = X[space.feasible(X)]
    if len(X) == 0:
        raise DoeError("trade-off: no candidate setting meets the constraints")
    with threadpool_limits(limits=1, user_api="blas"):  # many small predictions: BLAS threads only contend
        if refine:
            X = np.unique(np.vstack([X, refine_points(predict, space, responses, goals, X, targets, levels)]), axis=0)
        pred = predict_checked(predict, X, responses)
    keep = nondominated(_minimised(pred, responses, goals, targets))
    frame = pd.DataFrame(X[keep], columns=space.names)
    for name in responses:
        frame[name] = pred[name][0][keep]
        frame[f"{name}_std"] = pred[name][1][keep]
    return frame.sort_values(responses[0], kind="stable").reset_index(drop=True)


def write_tradeoff(frame: pd.DataFrame, path) -> None:
    """Write a trade-off table as CSV (columns in the module docstring)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    frame.to_csv(path, index=False, float_format="%.10g")
