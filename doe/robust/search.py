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
objective's range for breaking a linear constraint or a limit; seeded. The
nominal search (one surrogate point per candidate) restarts from several parts
of a dense pilot; the robust search (``samples`` points per candidate) starts
from the nominal optimum and the best points of both pilots, in fewer runs.

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
``limits``                  list of ``{"response", "value_at_setting", "mean", "std",
                            "probability", "met_at_setting", "met_with_probability"}``: the
                            surrogate mean at the exact setting, mean/std under scatter
                            (response unit), the probability that the limit holds under
                            scatter and surrogate error (-), whether it holds at the exact
                            setting (bool), and whether that probability reaches
                            ``method.probability_target`` (bool)
``feasible``                the linear constraints hold and every limit is met as this pick
                            is judged (bool): ``met_at_setting`` for the nominal pick,
                            ``met_with_probability`` for the robust pick and the baseline
``nearest_run``             distance to the nearest run in the unit cube (-), null without runs
``flag``                    true when the point needs confirming runs; ``flag_reason`` says why
``confirm_runs``            list of ``{parameter: value}``: the point and its +-1 tolerance
                            neighbours that would confirm it
``fragility``               ``{parameter: {...}}``, see :class:`Fragility`
``vehicle``                 :class:`doe.vehicle.VehicleFigures` as a dict (with ``[vehicle]``)
``figures``                 ``{figure: {"mean", "std", "unit"}}``: vehicle figures at the setting
                            with the surrogates' uncertainty (with a vehicle objective), else null
==========================  ===================================================

``vehicle_change``: ``robust - nominal`` of every vehicle figure (with ``[vehicle]``), same
keys and units as ``vehicle``; a negative ``lap_time_s`` means the robust point is faster.
``baseline``: the setting the car runs now (``[robust] baseline``), a record like
``robust`` (limits judged at the robust probability), or null.
``vehicle_change_from_baseline``: ``robust - baseline`` of the vehicle figures, or null.
``balance_change``: with a vehicle objective, how the handling balance at speed moves from the
baseline (or the nominal setting) to the robust one (:class:`doe.vehicle.BalanceChange` keys plus
``from``), or null.

*Vehicle figures.* The objective and the limits may name vehicle figures (lap
time, top speed, balance) computed from three aero responses through a
:class:`doe.vehicle.VehicleObjective` (:mod:`doe.robust.figures`); they are then
read like responses. The baseline joins the starting points of both searches,
so neither pick scores worse than the car as it runs now.

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
from dataclasses import dataclass, replace
from functools import cached_property

import numpy as np
from scipy.stats import qmc
from threadpoolctl import threadpool_limits

from ..checks import check_limit_bounds
from ..errors import DoeError
from ..seeds import child_seeds, seed_value
from ..space import Space
from ..study.settings import ResponseLimit
from ..vehicle import Aero, VehicleFigures, VehicleLimit, balance_change, compare_figures, figure_unit
from .figures import FigureTerms
from .scatter import fragility, predict_checked, propagate, scatter_draws, goal_sign

__all__ = ["PointResult", "RobustResult", "find_settings", "DEFAULT_MAXITER", "DEFAULT_RESTARTS",
           "DEFAULT_ROBUST_RESTARTS"]

#: Generations of each differential-evolution run.
DEFAULT_MAXITER = 100
#: Independent differential-evolution runs of the nominal search (the best is kept).
DEFAULT_RESTARTS = 3
#: Independent runs of the robust search. It starts from the nominal optimum and the best points of both
#: pilots, so further runs from random pilot points rarely find more: on the demo study two more runs
#: doubled the search's cost for no better point (reports/benchmarks.md, robust section).
DEFAULT_ROBUST_RESTARTS = 1
#: Sobol' pilot points before the nominal and the robust search.
NOMINAL_PILOT, ROBUST_PILOT = 4096, 256
SIZE_PER_DIM = 10
#: Penalty per unit of violation, and its step at the first violation, in multiples of the objective's range.
_PENALTY, _STEP = 1e3, 10.0
#: A point whose surrogate std exceeds this share of the objective's range is flagged.
MODEL_STD_SHARE = 0.05


# ---------------------------------------------------------------------------
# the search
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
    terms: FigureTerms | None = None    # vehicle figures read like responses

    @property
    def responses(self) -> list:
        return list(dict.fromkeys([self.objective] + [lim.response for lim in self.limits]))

    def spreads(self, X: np.ndarray, space: Space) -> dict:
        """:func:`propagate` of the responses read, vehicle figures included."""
        if self.terms is None:
            return propagate(self.predict, space, X, self.draws, self.responses)
        figures = [n for n in self.responses if self.terms.is_figure(n)]
        plain = [n for n in self.responses if n not in figures] + (list(self.terms.aero) if figures else [])
        spreads = propagate(self.terms.predict, space, X, self.draws, list(dict.fromkeys(plain)))
        return self.terms.add_spreads(spreads, figures)

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
        spreads = self.spreads(X, self._space(robust))
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
    figures : dict or None
        ``{figure: {"mean", "std", "unit"}}``: vehicle figures at the exact setting with the
        surrogate's uncertainty of CLA front, CLA rear and CDA carried through (unscented
        transform, :meth:`doe.vehicle.VehicleObjective.normal`); None without vehicle figures.
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
    figures: dict | None = None

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
    spreads = problem.spreads(x[None, :], problem.space)
    exact = predict_checked(problem.predict, x[None, :], problem.responses)
    obj = spreads[problem.objective]
    mean, std = float(obj.mean[0]), float(obj.std[0])
    limits, ok = [], bool(problem.space.feasible(x[None, :])[0])
    for lim in problem.limits:
        s = spreads[lim.response]
        prob = float(s.probability(lim.min, lim.max)[0])
        at = float(exact[lim.response][0][0])
        at_setting = (lim.max is None or at <= lim.max) and (lim.min is None or at >= lim.min)
        likely = prob >= problem.probability
        ok &= bool(likely if robust else at_setting)
        limits.append({"response": lim.response, "value_at_setting": at, "mean": float(s.mean[0]),
                       "std": float(s.std[0]), "probability": prob, "met_at_setting": bool(at_setting),
                       "met_with_probability": bool(likely)})
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
        vehicle=vehicle_block(x) if vehicle_block is not None else None, figures=_figures_at(problem, x))


def _aero_at(problem: _Problem, x: np.ndarray) -> tuple:
    """Surrogate means and standard deviations of CLA front, CLA rear and CDA at setting ``x``, m^2."""
    pred = predict_checked(problem.terms.predict, x[None, :], problem.terms.aero)
    return [pred[n][0] for n in problem.terms.aero], [pred[n][1] for n in problem.terms.aero]


def _figures_at(problem: _Problem, x: np.ndarray) -> dict | None:
    if problem.terms is None:
        return None
    means, stds = _aero_at(problem, x)
    out = problem.terms.objective.normal(means, stds)
    return {name: {"mean": float(m[0]), "std": float(sd[0]), "unit": figure_unit(name)}
            for name, (m, sd) in out.items()}


def _balance(problem: _Problem, before: np.ndarray, after: np.ndarray, names) -> dict | None:
    """:func:`doe.vehicle.balance_change` between two settings, from the surrogate means (JSON record)."""
    if problem.terms is None:
        return None
    aero = []
    for x in (before, after):
        (cf, cr, cd), _ = _aero_at(problem, x)
        aero.append(Aero(float(cf[0]), float(cr[0]), max(float(cd[0]), 0.0)))
    obj = problem.terms.objective
    return balance_change(obj.vehicle, aero[0], aero[1], obj.balance_speed_kph, names=names).to_dict()


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
    balance_change : dict or None
        :class:`doe.vehicle.BalanceChange` from the baseline (or, without one, the nominal
        setting) to the robust setting, with ``from``: ``"baseline"`` or ``"nominal"``.
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
    balance_change: dict | None = None

    def to_dict(self) -> dict:
        """The robust JSON."""
        return {"objective": {"response": self.objective, "unit": self.unit, "goal": self.goal, "k": self.k},
                "method": self.method, "limits": self.limits,
                "nominal": self.nominal.to_dict(self.unit), "robust": self.robust.to_dict(self.unit),
                "vehicle_change": self.vehicle_change,
                "baseline": self.baseline.to_dict(self.unit) if self.baseline is not None else None,
                "vehicle_change_from_baseline": self.vehicle_change_from_baseline,
                "balance_change": self.balance_change}


def _ranges(predict, space: Space, responses, seed) -> dict:
    U = qmc.Sobol(space.dim, scramble=True, seed=np.random.default_rng(seed)).random_base2(8)
    pred = predict_checked(predict, space.from_unit(U), responses)
    return {n: float(np.ptp(m)) for n, (m, _) in pred.items()}


def find_settings(predict, space: Space, objective: str, goal: str, *, k: float = 1.0, limits=(),
                  probability: float = 0.9, samples: int = 128, seed=0, runs_X=None, units=None,
                  vehicle_block=None, baseline=None, maxiter: int = DEFAULT_MAXITER,
                  restarts: int = DEFAULT_RESTARTS, robust_restarts: int = DEFAULT_ROBUST_RESTARTS,
                  vehicle_objective=None, aero_responses=None) -> RobustResult:
    """Nominal optimum on the surrogate mean, and robust optimum under setup scatter.

    Parameters
    ----------
    predict : callable
        ``predict(X) -> {response: (mean, std)}``, X in study units (module docstring).
    space : Space
        Bounds, tolerances (one standard deviation of setup scatter) and linear constraints.
    objective : str
        Response to optimise, or (with ``vehicle_objective``) a vehicle figure such as ``"lap_time_s"``.
    goal : {"maximize", "minimize"}
    k : float
        Weight of the scatter spread in the robust value, -.
    limits : sequence of doe.study.reader.ResponseLimit, doe.vehicle.VehicleLimit or dict
        ``min <= response <= max`` limits on other responses (their units); a
        dict takes the keys ``response``, ``min`` and ``max``. A VehicleLimit
        (and every limit of ``vehicle_objective``) limits a vehicle figure.
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
    restarts, robust_restarts : int
        Independent runs of the nominal and of the robust search; the best is kept.
    vehicle_objective : doe.vehicle.VehicleObjective, optional
        Turns the aero responses into vehicle figures (lap time, balance, top
        speed) that the objective and limits may name (:mod:`doe.robust.figures`).
    aero_responses : (str, str, str), optional
        Responses holding CLA front, CLA rear and CDA (m^2); needed with ``vehicle_objective``.

    Returns
    -------
    RobustResult

    References
    ----------
    Storn & Price (1997), J. Global Optim. 11:341; Beyer & Sendhoff (2007),
    Comput. Methods Appl. Mech. Engrg. 196:3190.
    """
    sense = goal_sign(goal)
    if not (k >= 0 and math.isfinite(k)):
        raise DoeError(f"robust: k must be a finite number >= 0, got {k!r}")
    if not 0 < probability < 1:
        raise DoeError(f"robust: probability must be between 0 and 1, got {probability!r}")
    space.check_feasible()
    if baseline is not None:
        baseline = space.as_points(baseline)[0]
        if not space.in_bounds(baseline[None, :])[0]:
            raise DoeError(f"robust: the baseline {dict(zip(space.names, baseline.tolist()))} is outside the bounds")
    terms, limits = _figure_terms(predict, objective, limits, vehicle_objective, aero_responses)
    if terms is not None:
        predict = terms
        units = {**{n: figure_unit(n) for n in terms.names}, **(units or {})}
    seeds = child_seeds(seed, 3)
    responses = list(dict.fromkeys([objective] + [lim.response for lim in limits]))
    ranges = _ranges(predict, space, responses, seeds[0])
    problem = _Problem(predict, space, objective, sense, float(k), tuple(limits), float(probability),
                       scatter_draws(space.dim, samples, seeds[1]), ranges, terms)
    if min(int(maxiter), int(restarts), int(robust_restarts)) < 1:
        raise DoeError(f"robust: maxiter and restarts must be at least 1, got {maxiter}, {restarts} and "
                       f"{robust_restarts}")
    with threadpool_limits(limits=1, user_api="blas"):  # many small predictions: BLAS threads only contend
        x_nom, x_rob = _both_searches(problem, space, baseline, int(seeds[2]), int(maxiter), int(restarts),
                                      int(robust_restarts))
    nominal = _describe_point(problem, x_nom, False, runs_X, vehicle_block)
    robust = _describe_point(problem, x_rob, True, runs_X, vehicle_block)
    base = _describe_point(problem, baseline, True, runs_X, vehicle_block) if baseline is not None else None
    units = units or {}
    change = _vehicle_change(nominal, robust)
    change_base = _vehicle_change(base, robust) if base is not None else None
    method = {"propagation": "randomised quasi-Monte Carlo on the surrogate mean: scrambled Sobol' points "
                             "mapped to normal draws of setup scatter (tolerance = one standard deviation), "
                             "the same draws for every candidate",
              "samples": len(problem.draws), "seed": seed_value(seed),
              "search": f"differential evolution over the unit cube, {maxiter} generations a run: best of "
                        f"{restarts} runs (nominal) and {robust_restarts} (robust, started from the nominal "
                        "optimum), each followed by one run from the best members, penalty for broken "
                        "constraints and limits",
              "probability_target": float(probability)}
    lims = [{"response": lim.response, "unit": units.get(lim.response, ""), "min": lim.min, "max": lim.max}
            for lim in limits]
    balance = (_balance(problem, baseline, x_rob, ("the car as it runs now", "the robust setting"))
               if baseline is not None else _balance(problem, x_nom, x_rob, ("the nominal setting", "the robust setting")))
    if balance is not None:
        balance = {"from": "baseline" if baseline is not None else "nominal", **balance}
    return RobustResult(objective, units.get(objective, ""), goal, float(k), nominal, robust, lims, method, change,
                        base, change_base, balance)


def _both_searches(problem: _Problem, space: Space, baseline, seed: int, maxiter: int, restarts: int,
                   robust_restarts: int) -> tuple:
    """The nominal and the robust optimum (study units).

    The nominal search is cheap per point (no scatter draws): a dense pilot; its best points and the
    nominal optimum seed the robust search (with zero tolerances the two problems coincide). The car
    as it runs now joins both pilots, so neither pick can score worse than it.
    """
    known = space.to_unit(baseline[None, :]) if baseline is not None else np.empty((0, space.dim))
    x_nom, seen = _search(problem, False, seed, maxiter, restarts, NOMINAL_PILOT, extra=known if len(known) else None)
    x_rob, _ = _search(problem, True, seed, maxiter, robust_restarts, ROBUST_PILOT,
                       extra=np.vstack([space.to_unit(x_nom), known, seen]))
    return x_nom, x_rob


def _figure_terms(predict, objective: str, limits, vehicle_objective, aero_responses) -> tuple:
    """The :class:`FigureTerms` a search needs (or None), and every limit as a ResponseLimit."""
    plain, figures = [], []
    for lim in list(limits) + list(vehicle_objective.limits if vehicle_objective is not None else ()):
        if isinstance(lim, VehicleLimit):
            figures.append(lim.figure)
            plain.append(ResponseLimit(lim.figure, lim.max, lim.min))
        else:
            plain.append(_as_limit(lim))
    if vehicle_objective is None:
        if figures:
            raise DoeError("robust: a limit on a vehicle figure needs a vehicle_objective")
        return None, tuple(plain)
    if aero_responses is None or len(aero_responses) != 3:
        raise DoeError("robust: give aero_responses = (CLA front, CLA rear, CDA) with a vehicle_objective")
    try:
        figure_unit(objective)
        figures.insert(0, objective)
    except DoeError:
        pass
    return FigureTerms(predict, vehicle_objective, aero_responses, figures), tuple(plain)


def _as_limit(lim) -> ResponseLimit:
    """A :class:`~doe.study.reader.ResponseLimit` from itself or a mapping with ``response``, ``min``, ``max``."""
    if isinstance(lim, dict):
        unknown = set(lim) - {"response", "min", "max"}
        if unknown or "response" not in lim:
            raise DoeError(f"robust: a limit needs 'response' and 'min' and/or 'max', got {sorted(lim)}")
        lim = ResponseLimit(lim["response"], lim.get("max"), lim.get("min"))
    if not isinstance(lim, ResponseLimit):
        raise DoeError(f"robust: a limit must be a ResponseLimit or a dict, got {lim!r}")
    check_limit_bounds("robust", lim.response, lim.min, lim.max)
    return lim


def _vehicle_change(a: PointResult, b: PointResult) -> dict | None:
    if a.vehicle is None or b.vehicle is None:
        return None
    return compare_figures(a.vehicle, b.vehicle)
