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

from ..errors import DoeError
from ..space import Space
from .scatter import goal_sign, predict_checked

__all__ = ["nondominated", "tradeoff_set", "write_tradeoff"]


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


def tradeoff_set(predict, space: Space, responses, goals: dict, targets=None, samples: int = 4096, seed=0,
                 candidates=None) -> pd.DataFrame:
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
    X = X[space.feasible(X)]
    if len(X) == 0:
        raise DoeError("trade-off: no candidate setting meets the constraints")
    pred = predict_checked(predict, X, responses)
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
    keep = nondominated(np.column_stack(cols))
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
