"""Setup scatter: Sobol' draws of each parameter's tolerance, the spread it gives a response, fragility.

Each parameter is set with an independent normal error whose standard
deviation is its ``tolerance``; the draws are scrambled Sobol' points mapped
through the normal quantile, so a few hundred give smooth means and standard
deviations. See :mod:`doe.robust.search` for how the search uses them.

References
----------
.. [BS] Beyer, H.-G. and Sendhoff, B. (2007). Robust optimization - a
   comprehensive survey. Comput. Methods Appl. Mech. Engrg. 196:3190-3218.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
from scipy.special import ndtr, ndtri
from scipy.stats import qmc

from ..errors import DoeError
from ..space import Space

__all__ = ["scatter_draws", "predict_checked", "Spread", "propagate", "Fragility", "fragility", "goal_sign"]


# ---------------------------------------------------------------------------
# propagation of setup scatter
def goal_sign(goal: str) -> float:
    """+1 to maximise, -1 to minimise (a DoeError for any other goal)."""
    if goal == "maximize":
        return 1.0
    if goal == "minimize":
        return -1.0
    raise DoeError(f"robust: goal {goal!r} is not 'maximize' or 'minimize'")


def scatter_draws(dim: int, samples: int, seed) -> np.ndarray:
    """Standard-normal draws for the propagation of setup scatter (randomised quasi-Monte Carlo).

    Parameters
    ----------
    dim : int
        Number of parameters.
    samples : int
        Number of draws, rounded up to a power of two (Sobol' points keep their
        balance only there).
    seed : int or numpy.random.Generator
        Seed of the scrambling; same seed, same draws.

    Returns
    -------
    ndarray, shape (2**m, dim)
        ``ndtri(u)`` for scrambled Sobol' points ``u`` in ``(0, 1)^dim``.

    References
    ----------
    Owen, A. B. (1997). Scrambled net variance for integrals of smooth
    functions. Ann. Statist. 25:1541-1562.
    """
    if samples < 2:
        raise DoeError(f"robust: samples must be at least 2, got {samples}")
    m = int(math.ceil(math.log2(samples)))
    u = qmc.Sobol(dim, scramble=True, seed=np.random.default_rng(seed)).random_base2(m)
    return ndtri(np.clip(u, 1e-12, 1.0 - 1e-12))


def predict_checked(predict, X: np.ndarray, names) -> dict:
    out = predict(X)
    result = {}
    for name in names:
        if name not in out:
            raise DoeError(f"robust: the surrogate gives no response '{name}' (it gives {sorted(out)})")
        mean, std = (np.asarray(a, dtype=float).reshape(-1) for a in out[name])
        if mean.shape != (len(X),) or std.shape != (len(X),):
            raise DoeError(f"robust: the surrogate's '{name}' has shape {mean.shape}, expected ({len(X)},)")
        result[name] = (mean, np.maximum(std, 0.0))
    return result


@dataclass(frozen=True)
class Spread:
    """A response under setup scatter at each of ``m`` settings (arrays of shape ``(m,)``).

    Attributes
    ----------
    mean, std : ndarray
        Mean and standard deviation (ddof 1) of the surrogate mean over the draws, response unit.
    model_std : ndarray
        Root-mean-square surrogate standard deviation over the draws, response unit.
    draws_mean, draws_std : ndarray, shape (m, n)
        Surrogate mean and standard deviation at each of the ``n`` scattered
        settings around each of the ``m`` settings, response unit.
    """

    mean: np.ndarray
    std: np.ndarray
    model_std: np.ndarray
    draws_mean: np.ndarray = field(repr=False)
    draws_std: np.ndarray = field(repr=False)

    def probability(self, low: float | None, high: float | None) -> np.ndarray:
        """Chance that ``low <= response <= high`` under scatter and surrogate error, -."""
        m, s = self.draws_mean, self.draws_std
        with np.errstate(divide="ignore", invalid="ignore"):
            up = np.ones_like(m) if high is None else np.where(s > 0, ndtr((high - m) / s), m <= high)
            down = np.zeros_like(m) if low is None else np.where(s > 0, ndtr((low - m) / s), m < low)
        return np.mean(up - down, axis=1)


def propagate(predict, space: Space, X, draws: np.ndarray, responses) -> dict:
    """Mean and spread of responses under setup scatter, by Monte Carlo on the surrogate.

    Parameters
    ----------
    predict : callable
        ``predict(X) -> {response: (mean, std)}`` (see the module docstring).
    space : Space
        Gives each parameter's tolerance (one standard deviation, parameter unit).
    X : array_like, shape (m, d)
        Settings, study units.
    draws : ndarray, shape (n, d)
        Standard-normal draws (:func:`scatter_draws`); the same for every setting.
    responses : sequence of str

    Returns
    -------
    dict of str to Spread
    """
    X = space.as_points(X)
    m, n = len(X), len(draws)
    tol = space.tolerances
    if not np.any(tol > 0):
        draws = draws[:1] * 0.0
        n = 1
    cloud = (X[:, None, :] + draws[None, :, :] * tol).reshape(m * n, space.dim)
    pred = predict_checked(predict, cloud, responses)
    out = {}
    for name, (mean, std) in pred.items():
        mean, std = mean.reshape(m, n), std.reshape(m, n)
        spread = mean.std(axis=1, ddof=1) if n > 1 else np.zeros(m)
        out[name] = Spread(mean.mean(axis=1), spread, np.sqrt(np.mean(std**2, axis=1)), mean, std)
    return out


# ---------------------------------------------------------------------------
# fragility
@dataclass(frozen=True)
class Fragility:
    """How much the objective suffers from an error in one parameter, at a setting.

    Attributes
    ----------
    parameter, unit : str
        The parameter and its unit (in JSON also ``per_unit``, e.g. ``"m^2/deg"``).
    step : float
        Error tried on each side: the tolerance, or 1 % of the range when the
        tolerance is 0 (parameter unit).
    slope : float
        Central-difference derivative of the surrogate mean (objective unit per parameter unit).
    curvature : float or None
        Second difference (objective unit per parameter unit squared); None at a bound.
    drop : float
        Worst loss of the objective, in its goal's direction, for an error of
        ``step`` either way (objective unit, >= 0).
    drop_per_unit : float
        ``drop / step`` (objective unit per parameter unit).
    rank : int
        1 for the parameter whose error costs most; measure that one most carefully.
    """

    parameter: str
    unit: str
    step: float
    slope: float
    curvature: float | None
    drop: float
    drop_per_unit: float
    rank: int = 0

    def to_dict(self, objective_unit: str = "") -> dict:
        """Plain dict without the parameter name; ``per_unit`` spells the unit of ``drop_per_unit``."""
        return {"unit": self.unit, "per_unit": f"{objective_unit or '-'}/{self.unit}", "step": self.step,
                "slope": self.slope, "curvature": self.curvature, "drop": self.drop,
                "drop_per_unit": self.drop_per_unit, "rank": self.rank}


def fragility(predict, space: Space, objective: str, goal: str, x) -> list:
    """Local sensitivity of the objective to an error in each parameter (a fragility map).

    Parameters
    ----------
    predict : callable
    space : Space
    objective : str
    goal : {"maximize", "minimize"}
    x : array_like, shape (d,)
        The setting, study units.

    Returns
    -------
    list of Fragility
        One per parameter, in the space's order; ``rank`` orders them by ``drop``.
    """
    sense = goal_sign(goal)
    x = space.as_points(x)[0]
    d = space.dim
    steps = np.where(space.tolerances > 0, space.tolerances, 0.01 * (space.upper - space.lower))
    probes = [x]
    for i in range(d):
        for side in (-1.0, 1.0):
            p = x.copy()
            p[i] = np.clip(x[i] + side * steps[i], space.lower[i], space.upper[i])
            probes.append(p)
    P = np.asarray(probes)
    f = predict_checked(predict, P, [objective])[objective][0]
    out = []
    for i, par in enumerate(space.parameters):
        lo, hi = P[1 + 2 * i, i], P[2 + 2 * i, i]
        f0, fl, fh = f[0], f[1 + 2 * i], f[2 + 2 * i]
        slope = (fh - fl) / (hi - lo) if hi > lo else 0.0
        both = np.isclose(hi - x[i], steps[i]) and np.isclose(x[i] - lo, steps[i])
        curv = float((fh - 2 * f0 + fl) / steps[i] ** 2) if both else None
        drop = max(0.0, sense * (f0 - fl), sense * (f0 - fh))
        out.append(Fragility(par.name, par.unit, float(steps[i]), float(slope), curv, float(drop),
                             float(drop / steps[i])))
    order = np.argsort([-fr.drop for fr in out], kind="stable")
    ranks = np.empty(d, dtype=int)
    ranks[order] = np.arange(1, d + 1)
    return [replace(fr, rank=int(r)) for fr, r in zip(out, ranks)]
