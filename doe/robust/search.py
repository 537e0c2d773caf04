"""Robust settings under setup scatter, fragility maps and trade-off (non-dominated) sets.

Everything here works on a *predictor*: a callable
``predict(X) -> {response: (mean, std)}`` taking points of shape ``(n, d)`` in
the study's units and returning, per response, the surrogate mean and its
standard deviation (arrays of shape ``(n,)``, in the response's unit). A fitted
surrogate set's ``predict`` is one; an analytic function with ``std = 0`` is
another (used in the tests).

Method
------
*Setup scatter.* Each parameter is set with an independent normal error whose
standard deviation is its ``tolerance``. Mean and spread of a response at a
setting ``x`` are estimated by randomised quasi-Monte Carlo on the surrogate
mean: ``x + tol * z_j``, ``j = 1..n``, where ``z_j`` are scrambled Sobol'
points (Owen 1997) mapped to standard-normal draws by the inverse normal
distribution function, ``n`` a power of two, drawn once from the seed and shared
by every candidate (common random numbers keep the search deterministic and
smooth). On smooth responses this is several times more accurate than plain
Monte Carlo with the same ``n`` (``benchmarks/bench_robust.py``). Scattered
settings are not clipped to the bounds (the car really can be set outside them).

*Robust score.* For a response to maximise, ``mean - k * std``; to minimise,
``mean + k * std`` (the "robust value"; the search optimises it). ``std`` is
the spread caused by setup scatter only; the surrogate's own error is reported
apart as ``model_std``.

*Limits.* Each ``[robust] limits`` entry ``min <= response <= max`` must hold
with probability at least ``probability`` at the robust point. The probability
counts both setup scatter and surrogate error: the mean over the scatter draws
of ``Phi((max - m_j)/s_j) - Phi((min - m_j)/s_j)`` (an indicator where
``s_j = 0``). The nominal point only needs the limits on the surrogate mean at
the setting. The study's linear constraints hold at the nominal setting.

*Search.* Differential evolution (Storn & Price 1997) over the unit cube,
population evaluated in one predictor call, with a penalty far larger than the
objective's range for breaking a linear constraint or a limit; seeded.

Robust JSON (written by :meth:`RobustResult.to_dict`)
-----------------------------------------------------
``objective``: ``{"response", "unit", "goal", "k"}``.
``method``: how the numbers were made (``propagation``, ``samples``, ``seed``,
``search``, ``probability_target``).
``limits``: list of ``{"response", "unit", "min", "max"}`` (null when open).
``nominal`` and ``robust``, one record each (:class:`PointResult`):

==========================  ===================================================
key                         meaning (unit)
==========================  ===================================================
``point``                   ``{parameter: value}`` (parameter unit)
``value_at_point``          surrogate mean of the objective at the exact setting (objective unit)
``mean``, ``std``           mean and standard deviation of the objective under setup scatter
``robust_value``            ``mean - k std`` (maximise) or ``mean + k std`` (minimise)
``model_std``               surrogate standard deviation of the objective at the setting
``limits``                  list of ``{"response", "mean", "std", "probability", "met"}``:
                            mean/std under scatter (response unit), probability that the
                            limit holds (-), and whether the point meets what it was asked
``feasible``                linear constraints and limits as asked are met (bool)
``nearest_run``             distance to the nearest run in the unit cube (-), null without runs
``flag``                    true when the point needs confirming runs; ``flag_reason`` says why
``confirm_runs``            list of ``{parameter: value}``: the point and its +-1 tolerance
                            neighbours that would confirm it
``fragility``               ``{parameter: {...}}``, see :class:`Fragility`
``vehicle``                 :class:`doe.vehicle.VehicleFigures` as a dict (with ``[vehicle]``)
==========================  ===================================================

``vehicle_change``: ``robust - nominal`` of every vehicle figure (with ``[vehicle]``), same
keys and units as ``vehicle``; a negative ``lap_time_s`` means the robust point is faster.
``baseline``: the setting the car runs now (``[robust] baseline``), a record like
``robust`` (limits judged at the robust probability), or null.
``vehicle_change_from_baseline``: ``robust - baseline`` of the vehicle figures, or null.

Trade-off CSV (written by :func:`write_tradeoff`): the parameter columns (study
units), then per trade-off response ``<response>`` (surrogate mean, response
unit) and ``<response>_std`` (surrogate standard deviation), one row per
non-dominated setting, sorted by the first trade-off response.

References
----------
.. [SP] Storn, R. and Price, K. (1997). Differential evolution - a simple and
   efficient heuristic for global optimization over continuous spaces.
   J. Global Optim. 11:341-359.
.. [BS] Beyer, H.-G. and Sendhoff, B. (2007). Robust optimization - a
   comprehensive survey. Comput. Methods Appl. Mech. Engrg. 196:3190-3218.
.. [D] Deb, K. (2001). Multi-Objective Optimization using Evolutionary
   Algorithms. Wiley. (non-dominated sets)
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from functools import cached_property

import numpy as np
import pandas as pd
from scipy.special import ndtr, ndtri
from scipy.stats import qmc

from ..errors import DoeError
from ..space import Space
from ..study.reader import ResponseLimit
from ..vehicle import Aero, VehicleFigures, compare_figures, vehicle_figures

__all__ = ["scatter_draws", "propagate", "Spread", "Fragility", "fragility", "PointResult", "RobustResult",
           "find_settings", "nondominated", "tradeoff_set", "write_tradeoff", "study_robust", "study_tradeoff",
           "study_vehicle_figures", "study_responses", "only_responses", "DEFAULT_MAXITER",
           "DEFAULT_RESTARTS"]

#: Generations of each differential-evolution run.
DEFAULT_MAXITER = 100
#: Independent differential-evolution runs per search (the best is kept).
DEFAULT_RESTARTS = 3
#: Sobol' pilot points before the nominal and the robust search.
NOMINAL_PILOT, ROBUST_PILOT = 4096, 256
SIZE_PER_DIM = 10
#: Penalty per unit of violation, and its step at the first violation, in multiples of the objective's range.
_PENALTY, _STEP = 1e3, 10.0
#: A point whose surrogate std exceeds this share of the objective's range is flagged.
MODEL_STD_SHARE = 0.05


# ---------------------------------------------------------------------------
# propagation of setup scatter
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


def _predict_checked(predict, X: np.ndarray, names) -> dict:
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
    X = space._check_shape(X)
    m, n = len(X), len(draws)
    tol = space.tolerances
    if not np.any(tol > 0):
        draws = draws[:1] * 0.0
        n = 1
    cloud = (X[:, None, :] + draws[None, :, :] * tol).reshape(m * n, space.dim)
    pred = _predict_checked(predict, cloud, responses)
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
    sense = _sense(goal)
    x = space._check_shape(x)[0]
    d = space.dim
    steps = np.where(space.tolerances > 0, space.tolerances, 0.01 * (space.upper - space.lower))
    probes = [x]
    for i in range(d):
        for side in (-1.0, 1.0):
            p = x.copy()
            p[i] = np.clip(x[i] + side * steps[i], space.lower[i], space.upper[i])
            probes.append(p)
    P = np.asarray(probes)
    f = _predict_checked(predict, P, [objective])[objective][0]
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


# ---------------------------------------------------------------------------
# the search
def _sense(goal: str) -> float:
    if goal == "maximize":
        return 1.0
    if goal == "minimize":
        return -1.0
    raise DoeError(f"robust: goal {goal!r} is not 'maximize' or 'minimize'")


@dataclass(frozen=True)
class _Problem:
    predict: object
    space: Space
    objective: str
    sense: float
    k: float
    limits: tuple
    probability: float
    draws: np.ndarray
    ranges: dict            # response -> range of the surrogate mean over the space

    @property
    def responses(self) -> list:
        return list(dict.fromkeys([self.objective] + [lim.response for lim in self.limits]))

    def linear_violation(self, X: np.ndarray) -> np.ndarray:
        v = np.zeros(len(X))
        span = self.space.upper - self.space.lower
        for c in self.space.constraints:
            scale = sum(abs(coef) * span[self.space.names.index(n)] for n, coef in c.terms.items()) or 1.0
            value = c.value(X, self.space.names)
            if c.max is not None:
                v += np.maximum(value - c.max, 0.0) / scale
            if c.min is not None:
                v += np.maximum(c.min - value, 0.0) / scale
        return v

    def limit_violation(self, spreads: dict, robust: bool) -> np.ndarray:
        v = 0.0
        for lim in self.limits:
            s = spreads[lim.response]
            if robust:
                v = v + np.maximum(self.probability - s.probability(lim.min, lim.max), 0.0)
            else:
                value = s.draws_mean[:, 0]
                scale = self.ranges[lim.response] or 1.0
                hi = np.maximum(value - lim.max, 0.0) if lim.max is not None else 0.0
                lo = np.maximum(lim.min - value, 0.0) if lim.min is not None else 0.0
                v = v + (hi + lo) / scale
        return v

    def penalised(self, U: np.ndarray, robust: bool) -> np.ndarray:
        """Value the search minimises, for points ``U`` (m, d) in the unit cube."""
        X = self.space.from_unit(U)
        spreads = propagate(self.predict, self._space(robust), X, self.draws, self.responses)
        obj = spreads[self.objective]
        k = self.k if robust else 0.0
        score = self.sense * obj.mean - k * obj.std
        bad = self.linear_violation(X) + self.limit_violation(spreads, robust)
        scale = self.ranges[self.objective] or 1.0
        # a step of 10 ranges puts every breaking point behind every keeping one; the slope leads back
        return -score + np.where(bad > 0, _STEP * scale, 0.0) + _PENALTY * scale * bad

    def _space(self, robust: bool) -> Space:
        return self.space if robust else self.exact_space

    @cached_property
    def exact_space(self) -> Space:
        """The space with every tolerance set to 0 (for the nominal search)."""
        exact = tuple(replace(p, tolerance=0.0) for p in self.space.parameters)
        return Space(exact, self.space.constraints)


def _search(problem: _Problem, robust: bool, seed: int, maxiter: int, restarts: int, pilot_size: int,
            extra=None) -> tuple:
    """Best of ``restarts`` differential-evolution runs started from parts of one Sobol' pilot.

    The first run's population holds the pilot's best tenth and the ``extra``
    unit-cube points, and mutates around the best member (``best1bin``: it
    keeps narrow peaks the pilot or an earlier search has found); the others
    start from random pilot points only and mutate around random members
    (``rand1bin``: slower, but they escape the pilot's local optima). A last
    ``best1bin`` run starts from the best members of all runs. Returns the best
    setting (study units) and the pilot's best tenth (unit cube), for seeding a
    later search.
    """
    from scipy.optimize import differential_evolution

    d = problem.space.dim
    rng = np.random.default_rng(seed)
    size = max(20, SIZE_PER_DIM * d)
    pilot = qmc.Sobol(d, scramble=True, seed=rng).random_base2(int(math.ceil(math.log2(max(pilot_size, 8 * size)))))
    if extra is not None:
        pilot = np.vstack([np.atleast_2d(extra), pilot])
    values = problem.penalised(pilot, robust)
    order = np.argsort(values, kind="stable")

    def func(U):                 # vectorised: U has shape (d, S)
        return problem.penalised(np.asarray(U, dtype=float).T.reshape(-1, d), robust)

    def evolve(init, strategy):
        return differential_evolution(func, [(0.0, 1.0)] * d, strategy=strategy, maxiter=maxiter, tol=1e-8,
                                      atol=0.0, init=init, polish=False, vectorized=True, updating="deferred",
                                      rng=rng)

    top = max(1, size // 10)
    members, energies = [pilot[order[:1]]], [values[order[:1]]]
    for run in range(restarts):
        lead = order[:top] if run == 0 else order[:0]
        res = evolve(pilot[np.concatenate([lead, rng.choice(order[top:], size - len(lead), replace=False)])],
                     "best1bin" if run == 0 else "rand1bin")
        members.append(res.population), energies.append(res.population_energies)
    # a last greedy run from the best members of all runs sharpens the best basin found
    members, energies = np.vstack(members), np.concatenate(energies)
    pool = np.argsort(energies, kind="stable")[:size]
    res = evolve(members[pool], "best1bin")
    best_u = res.x if res.fun <= energies[pool[0]] else members[pool[0]]
    return problem.space.from_unit(best_u)[0], pilot[order[:top]]


@dataclass(frozen=True)
class PointResult:
    """One recommended setting and what it is worth (see the module docstring for the keys).

    Attributes
    ----------
    point : dict of str to float
        The setting, study units.
    value_at_point, mean, std, robust_value, model_std : float
        Objective figures (objective unit).
    limits : list of dict
    feasible : bool
    nearest_run : float or None
    flag : bool
    flag_reason : str
    confirm_runs : list of dict
    fragility : list of Fragility
    vehicle : doe.vehicle.VehicleFigures or None
    """

    point: dict
    value_at_point: float
    mean: float
    std: float
    robust_value: float
    model_std: float
    limits: list
    feasible: bool
    nearest_run: float | None
    flag: bool
    flag_reason: str
    confirm_runs: list
    fragility: list
    vehicle: VehicleFigures | None = None

    def to_dict(self, objective_unit: str = "") -> dict:
        """The JSON record (``objective_unit`` labels the fragility units)."""
        out = {k: v for k, v in self.__dict__.items() if k not in ("fragility", "vehicle")}
        out["fragility"] = {fr.parameter: fr.to_dict(objective_unit) for fr in self.fragility}
        out["vehicle"] = self.vehicle.to_dict() if self.vehicle is not None else None
        return out

    def summary(self, label: str, objective: str, unit: str) -> str:
        """One line for the terminal: the setting, mean +- std of the objective, flags."""
        where = ", ".join(f"{k} {v:.4g}" for k, v in self.point.items())
        line = f"{label}: {where}: {objective} {self.mean:.4g} +- {self.std:.2g} {unit} under scatter"
        if self.vehicle is not None and self.vehicle.lap_time_s is not None:
            line += f", lap {self.vehicle.lap_time_s:.2f} s"
        if self.flag:
            line += f" [check: {self.flag_reason}; {len(self.confirm_runs)} confirming runs in the JSON]"
        return line


def _nearest_run(space: Space, x: np.ndarray, runs_X) -> tuple:
    """Unit-cube distance from x to the nearest run, and the runs' median nearest-neighbour distance."""
    if runs_X is None or len(runs_X) == 0:
        return None, None
    U = space.to_unit(runs_X)
    u = space.to_unit(x)[0]
    near = float(np.min(np.linalg.norm(U - u, axis=1)))
    if len(U) < 2:
        return near, None
    D = np.linalg.norm(U[:, None, :] - U[None, :, :], axis=2)
    np.fill_diagonal(D, np.inf)
    return near, float(np.median(D.min(axis=1)))


def _confirm_runs(space: Space, x: np.ndarray) -> list:
    pts = [x]
    for i, tol in enumerate(space.tolerances):
        for side in (-1.0, 1.0):
            if tol > 0:
                p = x.copy()
                p[i] = x[i] + side * tol
                pts.append(p)
    P = np.asarray(pts)
    P = P[space.feasible(P)]
    return [dict(zip(space.names, map(float, p))) for p in P]


def _describe_point(problem: _Problem, x: np.ndarray, robust: bool, runs_X, vehicle_block) -> PointResult:
    spreads = propagate(problem.predict, problem.space, x[None, :], problem.draws, problem.responses)
    exact = _predict_checked(problem.predict, x[None, :], problem.responses)
    obj = spreads[problem.objective]
    mean, std = float(obj.mean[0]), float(obj.std[0])
    limits, ok = [], bool(problem.space.feasible(x[None, :])[0])
    for lim in problem.limits:
        s = spreads[lim.response]
        prob = float(s.probability(lim.min, lim.max)[0])
        at = float(exact[lim.response][0][0])
        met = prob >= problem.probability if robust else (
            (lim.max is None or at <= lim.max) and (lim.min is None or at >= lim.min))
        ok &= bool(met)
        limits.append({"response": lim.response, "mean": float(s.mean[0]), "std": float(s.std[0]),
                       "probability": prob, "met": bool(met)})
    model_std = float(exact[problem.objective][1][0])
    near, typical = _nearest_run(problem.space, x[None, :], runs_X)
    reasons = []
    if near is not None and typical is not None and near > typical:
        reasons.append(f"nearest run {near:.3g} away in the unit cube, farther than the runs' typical "
                       f"spacing {typical:.3g}")
    obj_range = problem.ranges[problem.objective]
    if obj_range > 0 and model_std > MODEL_STD_SHARE * obj_range:
        reasons.append(f"surrogate std {model_std:.3g} is over {MODEL_STD_SHARE:.0%} of the objective's "
                       f"range {obj_range:.3g}")
    if not ok:
        reasons.append("does not meet every constraint and limit as asked")
    return PointResult(
        point=dict(zip(problem.space.names, map(float, x))), value_at_point=float(exact[problem.objective][0][0]),
        mean=mean, std=std, robust_value=mean - problem.sense * problem.k * std, model_std=model_std,
        limits=limits, feasible=ok, nearest_run=near, flag=bool(reasons), flag_reason="; ".join(reasons),
        confirm_runs=_confirm_runs(problem.space, x),
        fragility=fragility(problem.predict, problem.space, problem.objective,
                            "maximize" if problem.sense > 0 else "minimize", x),
        vehicle=vehicle_block(x) if vehicle_block is not None else None)


@dataclass(frozen=True)
class RobustResult:
    """Nominal and robust optimum of one study objective (see the module docstring).

    Attributes
    ----------
    objective, unit, goal : str
    k : float
    nominal, robust : PointResult
    limits : list of dict
        ``{"response", "unit", "min", "max"}``.
    method : dict
    vehicle_change : dict or None
        ``robust - nominal`` of the vehicle figures.
    baseline : PointResult or None
        The setting the car runs now, described like the two optima.
    vehicle_change_from_baseline : dict or None
        ``robust - baseline`` of the vehicle figures.
    """

    objective: str
    unit: str
    goal: str
    k: float
    nominal: PointResult
    robust: PointResult
    limits: list
    method: dict
    vehicle_change: dict | None = None
    baseline: PointResult | None = None
    vehicle_change_from_baseline: dict | None = None

    def to_dict(self) -> dict:
        """The robust JSON."""
        return {"objective": {"response": self.objective, "unit": self.unit, "goal": self.goal, "k": self.k},
                "method": self.method, "limits": self.limits,
                "nominal": self.nominal.to_dict(self.unit), "robust": self.robust.to_dict(self.unit),
                "vehicle_change": self.vehicle_change,
                "baseline": self.baseline.to_dict(self.unit) if self.baseline is not None else None,
                "vehicle_change_from_baseline": self.vehicle_change_from_baseline}


def _ranges(predict, space: Space, responses, seed) -> dict:
    U = qmc.Sobol(space.dim, scramble=True, seed=np.random.default_rng(seed)).random_base2(8)
    pred = _predict_checked(predict, space.from_unit(U), responses)
    return {n: float(np.ptp(m)) for n, (m, _) in pred.items()}


def find_settings(predict, space: Space, objective: str, goal: str, *, k: float = 1.0, limits=(),
                  probability: float = 0.9, samples: int = 128, seed=0, runs_X=None, units=None,
                  vehicle_block=None, baseline=None, maxiter: int = DEFAULT_MAXITER,
                  restarts: int = DEFAULT_RESTARTS) -> RobustResult:
    """Nominal optimum on the surrogate mean, and robust optimum under setup scatter.

    Parameters
    ----------
    predict : callable
        ``predict(X) -> {response: (mean, std)}``, X in study units (module docstring).
    space : Space
        Bounds, tolerances (one standard deviation of setup scatter) and linear constraints.
    objective : str
        Response to optimise.
    goal : {"maximize", "minimize"}
    k : float
        Weight of the scatter spread in the robust value, -.
    limits : sequence of doe.study.reader.ResponseLimit or dict
        ``min <= response <= max`` limits on other responses (their units); a
        dict takes the keys ``response``, ``min`` and ``max``.
    probability : float
        Chance each limit must hold at the robust point, -.
    samples : int
        Monte-Carlo draws of setup scatter per candidate.
    seed : int
        Seed of the draws and the search.
    runs_X : array_like, shape (r, d), optional
        Settings already run (study units), to flag points far from the data.
    units : dict of str to str, optional
        Units of the responses, for the JSON.
    vehicle_block : callable, optional
        ``vehicle_block(x) -> VehicleFigures`` at setting ``x`` (study units).
    baseline : array_like, shape (d,), optional
        The setting the car runs now (study units, inside the bounds), to
        compare with.
    maxiter : int
        Generations of each differential-evolution run.
    restarts : int
        Independent runs per search; the best is kept.

    Returns
    -------
    RobustResult

    References
    ----------
    Storn & Price (1997), J. Global Optim. 11:341; Beyer & Sendhoff (2007),
    Comput. Methods Appl. Mech. Engrg. 196:3190.
    """
    sense = _sense(goal)
    if not (k >= 0 and math.isfinite(k)):
        raise DoeError(f"robust: k must be a finite number >= 0, got {k!r}")
    if not 0 < probability < 1:
        raise DoeError(f"robust: probability must be between 0 and 1, got {probability!r}")
    space.check_feasible()
    if baseline is not None:
        baseline = space._check_shape(baseline)[0]
        if not space.in_bounds(baseline[None, :])[0]:
            raise DoeError(f"robust: the baseline {dict(zip(space.names, baseline.tolist()))} is outside the bounds")
    limits = tuple(_as_limit(lim) for lim in limits)
    rng = np.random.default_rng(seed)
    seeds = rng.integers(0, 2**63 - 1, size=3)
    responses = list(dict.fromkeys([objective] + [lim.response for lim in limits]))
    ranges = _ranges(predict, space, responses, seeds[0])
    problem = _Problem(predict, space, objective, sense, float(k), tuple(limits), float(probability),
                       scatter_draws(space.dim, samples, seeds[1]), ranges)
    if int(maxiter) < 1 or int(restarts) < 1:
        raise DoeError(f"robust: maxiter and restarts must be at least 1, got {maxiter} and {restarts}")
    # the nominal search is cheap per point (no scatter draws): a dense pilot; its best points and the
    # nominal optimum seed the robust search (with zero tolerances the two problems coincide)
    x_nom, seen = _search(problem, False, int(seeds[2]), int(maxiter), int(restarts), NOMINAL_PILOT)
    x_rob, _ = _search(problem, True, int(seeds[2]), int(maxiter), int(restarts), ROBUST_PILOT,
                       extra=np.vstack([space.to_unit(x_nom), seen]))
    nominal = _describe_point(problem, x_nom, False, runs_X, vehicle_block)
    robust = _describe_point(problem, x_rob, True, runs_X, vehicle_block)
    base = _describe_point(problem, baseline, True, runs_X, vehicle_block) if baseline is not None else None
    units = units or {}
    change = _vehicle_change(nominal, robust)
    change_base = _vehicle_change(base, robust) if base is not None else None
    method = {"propagation": "randomised quasi-Monte Carlo on the surrogate mean: scrambled Sobol' points "
                             "mapped to normal draws of setup scatter (tolerance = one standard deviation), "
                             "the same draws for every candidate",
              "samples": len(problem.draws), "seed": seed if isinstance(seed, int) else None,
              "search": f"best of {restarts} differential-evolution runs over the unit cube, {maxiter} "
                        "generations each, penalty for broken constraints and limits",
              "probability_target": float(probability)}
    lims = [{"response": lim.response, "unit": units.get(lim.response, ""), "min": lim.min, "max": lim.max}
            for lim in limits]
    return RobustResult(objective, units.get(objective, ""), goal, float(k), nominal, robust, lims, method, change,
                        base, change_base)


def _as_limit(lim) -> ResponseLimit:
    """A :class:`~doe.study.reader.ResponseLimit` from itself or a mapping with ``response``, ``min``, ``max``."""
    if isinstance(lim, dict):
        unknown = set(lim) - {"response", "min", "max"}
        if unknown or "response" not in lim:
            raise DoeError(f"robust: a limit needs 'response' and 'min' and/or 'max', got {sorted(lim)}")
        lim = ResponseLimit(lim["response"], lim.get("max"), lim.get("min"))
    if not isinstance(lim, ResponseLimit):
        raise DoeError(f"robust: a limit must be a ResponseLimit or a dict, got {lim!r}")
    for bound in (lim.min, lim.max):
        if bound is not None and not (isinstance(bound, (int, float)) and math.isfinite(bound)):
            raise DoeError(f"robust: the limit on '{lim.response}' must be finite numbers, got {bound!r}")
    if lim.min is None and lim.max is None:
        raise DoeError(f"robust: the limit on '{lim.response}' needs 'min', 'max' or both")
    if lim.min is not None and lim.max is not None and not lim.min < lim.max:
        raise DoeError(f"robust: the limit on '{lim.response}' has min {lim.min:g} >= max {lim.max:g}")
    return lim


def _vehicle_change(a: PointResult, b: PointResult) -> dict | None:
    if a.vehicle is None or b.vehicle is None:
        return None
    return compare_figures(a.vehicle, b.vehicle)


# ---------------------------------------------------------------------------
# a study's settings
def study_vehicle_figures(study, predict, x) -> VehicleFigures | None:
    """Vehicle figures at setting ``x`` (study units) from the surrogate means of the ``[vehicle]`` responses.

    Returns None when the study has no ``[vehicle]`` table. The lap time needs ``[track]``.
    """
    v = study.vehicle
    if v is None:
        return None
    axles = v.cla_front_response is not None
    names = [v.cda_response] + ([v.cla_front_response, v.cla_rear_response] if axles else [v.cla_response]) + (
        [v.front_share_response] if v.front_share_response else [])
    value = {n: float(m[0]) for n, (m, _) in _predict_checked(predict, study.space._check_shape(x), names).items()}
    cda = max(value[v.cda_response], 0.0)
    if axles:
        aero = Aero(value[v.cla_front_response], value[v.cla_rear_response], cda)
    else:
        share = value[v.front_share_response] if v.front_share_response else v.aero_front_share
        aero = Aero.from_total(value[v.cla_response], cda, share)
    return vehicle_figures(v.car, aero, study.track, v.speeds_kph, v.radii_m)


def study_responses(study) -> list:
    """Responses the robust analysis of a study reads: objective, limits, trade-off, ``[vehicle]`` aero."""
    names = []
    if study.robust is not None:
        names += [study.robust.objective] + [lim.response for lim in study.robust.limits] + list(study.robust.tradeoff)
    v = study.vehicle
    if v is not None:
        names += [n for n in (v.cla_response, v.cda_response, v.cla_front_response, v.cla_rear_response,
                              v.front_share_response) if n is not None]
    return list(dict.fromkeys(names))


def only_responses(surrogates, names):
    """A fitted surrogate set reduced to the responses ``names``, so each prediction costs only those.

    Parameters
    ----------
    surrogates : doe.surrogate.gp.SurrogateSet
    names : sequence of str

    Returns
    -------
    doe.surrogate.gp.SurrogateSet
        The same models for ``names``; the others are left out.
    """
    missing = [n for n in names if n not in surrogates.models]
    if missing:
        raise DoeError(f"robust: no surrogate for {missing}; the surrogates cover {list(surrogates.models)}")
    return replace(surrogates, models={n: surrogates.models[n] for n in names})


def study_robust(study, predict, runs_X=None, maxiter: int = DEFAULT_MAXITER) -> RobustResult:
    """:func:`find_settings` with a study's ``[robust]`` goals, units and ``[vehicle]`` figures.

    Parameters
    ----------
    study : doe.study.reader.Study
    predict : callable
        E.g. the ``predict`` of a fitted surrogate set.
    runs_X : array_like, optional
        Settings already run (study units).
    maxiter : int
    """
    r = study.robust
    if r is None:
        raise DoeError("robust: the study has no [robust] settings")
    units = {resp.name: resp.unit for resp in study.responses}
    block = (lambda x: study_vehicle_figures(study, predict, x[None, :])) if study.vehicle is not None else None
    baseline = [r.baseline[n] for n in study.space.names] if r.baseline is not None else None
    return find_settings(predict, study.space, r.objective, r.goal, k=r.k, limits=r.limits,
                         probability=r.probability, samples=r.samples, seed=r.seed, runs_X=runs_X, units=units,
                         vehicle_block=block, baseline=baseline, maxiter=maxiter)


def study_tradeoff(study, predict, samples: int = 4096) -> pd.DataFrame:
    """:func:`tradeoff_set` of a study's ``[robust] tradeoff`` responses (goals from ``[[responses]]``)."""
    r = study.robust
    if r is None or len(r.tradeoff) < 2:
        raise DoeError("trade-off: give at least two responses in [robust] tradeoff "
                       "(by default the responses with a goal)")
    goals = {resp.name: resp.goal for resp in study.responses}
    return tradeoff_set(predict, study.space, r.tradeoff, goals, r.targets, samples=samples, seed=r.seed)


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
        X = space._check_shape(candidates)
    X = X[space.feasible(X)]
    if len(X) == 0:
        raise DoeError("trade-off: no candidate setting meets the constraints")
    pred = _predict_checked(predict, X, responses)
    cols = []
    for name in responses:
        goal = goals.get(name, "none")
        mean = pred[name][0]
        if goal == "none":
            if name not in targets:
                raise DoeError(f"trade-off: response '{name}' has no goal; give it a target")
            cols.append(np.abs(mean - targets[name]))
        else:
            cols.append(-_sense(goal) * mean)
    keep = nondominated(np.column_stack(cols))
    frame = pd.DataFrame(X[keep], columns=space.names)
    for name in responses:
        frame[name] = pred[name][0][keep]
        frame[f"{name}_std"] = pred[name][1][keep]
    return frame.sort_values(responses[0], kind="stable").reset_index(drop=True)


def write_tradeoff(frame: pd.DataFrame, path) -> None:
    """Write a trade-off table as CSV (columns in the module docstring)."""
    from pathlib import Path

    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    frame.to_csv(path, index=False, float_format="%.10g")
