"""Robust settings and trade-offs over a space with choice knobs: one search per level combination.

A choice (a wing section, the flap fitted or not) is not scattered: the car
is built with one level, and setup scatter moves only the knobs that are set
by hand. So the continuous and stepped knobs are searched within each level
combination (:func:`doe.robust.search.find_settings` on the space without its
choices, the choices held at the combination's levels), and the combinations
are then compared by their robust values. Stepped knobs move on their steps
in the search (:meth:`doe.space.Space.from_unit` snaps them) and scatter by
their tolerance like a continuous knob (a mount that is set to a hole may
still sit a little off it); a tolerance of 0 keeps them exact.

What choosing one combination over another is worth is the difference of the
objective's means at each combination's own best setting, with a 95 %
interval from the surrogate's standard deviations at the two settings, taken
as independent (their covariance is not known here; for settings far apart
this is close, for nearby settings of strongly correlated levels it is
conservative). The same is done for every response read at the settings
and, when the study has a car (a :class:`FigureMap`), for every vehicle
figure (lap time, top speed, balance) whatever the objective: the figure's
standard deviation at each setting comes from the surrogate's standard
deviations of the responses it reads, carried through by the unscented
transform (:func:`doe.vehicle.normal_moments`; Julier & Uhlmann 2004).
With a ``baseline`` (the car as it runs now, its levels named) every
combination's pick is also compared with it.

Combinations that do not differ are searched once: when a switch knob of the
built-in model (:data:`SWITCHES`: ``wing`` or ``flap``, see
:mod:`doe.aero.choices`) is at ``off``, every other knob whose name starts
with the switch's name and an underscore (``wing_section``, ``wing_aoa``,
``flap_angle``, ...) has no part to act on: its levels are one row
("no wing"), and its continuous knobs are listed as not applying.

References
----------
Julier, S. J. and Uhlmann, J. K. (2004). Unscented filtering and nonlinear
estimation. Proc. IEEE 92(3), 401-422.
"""
from __future__ import annotations

import itertools
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from ..errors import DoeError
from ..seeds import child_seeds
from ..space import Space
from ..vehicle import compare_figures, figure_unit, normal_moments
from .search import PointResult, find_settings
from .tradeoff import _minimised, nondominated, tradeoff_set

__all__ = ["LevelSpace", "LevelPointResult", "LevelRobustResult", "FigureMap", "find_settings_per_level",
           "tradeoff_per_level", "Z95", "SWITCHES"]

#: Two-sided 95 % normal quantile.
Z95 = 1.959963984540054
#: Switch knobs of the built-in model (:data:`doe.aero.choices.CHOICE_INPUTS`) and the level that takes their
#: part away; the knobs named ``<switch>_...`` then have nothing to act on.
SWITCHES = {"wing": "off", "flap": "off"}


@dataclass(frozen=True)
class FigureMap:
    """Vehicle figures as a function of responses (e.g. lap time from CLA front, CLA rear and CDA).

    Attributes
    ----------
    inputs : tuple of str
        The responses it reads, in the order ``func`` takes them.
    func : callable
        ``func(*arrays) -> {figure: ndarray}``, vectorised (each array of one broadcast shape).
    """

    inputs: tuple
    func: object

    def value(self, at: dict) -> dict:
        """Each figure at the responses' means ``at = {response: (mean, std)}``."""
        out = self.func(*(np.asarray(at[r][0], dtype=float) for r in self.inputs))
        return {k: float(v) for k, v in out.items()}

    def spread(self, at: dict) -> dict:
        """Each figure's standard deviation from the responses' (independent) standard deviations."""
        moments = normal_moments(self.func, [at[r][0] for r in self.inputs], [at[r][1] for r in self.inputs])
        return {k: float(sd) for k, (_, sd) in moments.items()}


@dataclass(frozen=True)
class LevelSpace:
    """A space split into its choice knobs and the rest (what is searched within a level combination).

    Attributes
    ----------
    space : Space
        The whole space.
    """

    space: Space

    @property
    def settable(self) -> Space:
        """The continuous and stepped knobs with the constraints (a choice never enters a constraint)."""
        return self.space.settable()

    def idle(self, combo) -> dict:
        """``{knob: switch}`` of the knobs with nothing to act on at a combination (their switch is off)."""
        out = {}
        for p, i in zip(self.space.choices, combo):
            if SWITCHES.get(p.name) == p.levels[int(i)].strip().lower():
                out.update({q.name: p.name for q in self.space.parameters if q.name.startswith(p.name + "_")})
        return out

    def canonical(self, combo) -> tuple:
        """The combination with every choice that has nothing to act on at its first level."""
        idle = self.idle(combo)
        return tuple(0 if p.name in idle else int(i) for p, i in zip(self.space.choices, combo))

    def combinations(self) -> list:
        """Every level combination that differs, as a tuple of level indices in the order of ``space.choices``.

        Combinations that differ only in choices with nothing to act on (:meth:`idle`) are one.
        """
        out = []
        for combo in itertools.product(*(range(len(p.levels)) for p in self.space.choices)):
            combo = self.canonical(combo)
            if combo not in out:
                out.append(combo)
        return out

    def names(self, combo) -> dict:
        """``{choice: level name}`` of a combination ("no wing" for a choice with nothing to act on)."""
        idle = self.idle(combo)
        return {p.name: f"no {idle[p.name]}" if p.name in idle else p.levels[int(i)]
                for p, i in zip(self.space.choices, combo)}

    def not_applying(self, combo) -> list:
        """The continuous and stepped knobs with nothing to act on at a combination."""
        idle = self.idle(combo)
        return [n for n in self.settable.names if n in idle]

    def full(self, X_sub, combo) -> np.ndarray:
        """Points of the settable knobs with the choices set to ``combo``, in the whole space's columns."""
        X_sub = self.settable.as_points(X_sub)
        X = np.empty((len(X_sub), self.space.dim))
        cols = [j for j, p in enumerate(self.space.parameters) if not p.levels]
        X[:, cols] = X_sub
        for j, i in zip(self.space.choice_columns, combo):
            X[:, j] = float(i)
        return X

    def split(self, X) -> tuple:
        """Points of the whole space as ``(settable part, list of level combinations)`` (canonical)."""
        X = self.space.as_points(X)
        cols = [j for j, p in enumerate(self.space.parameters) if not p.levels]
        return X[:, cols], [self.canonical(tuple(int(round(v)) for v in row))
                            for row in X[:, self.space.choice_columns]]

    def predictor(self, predict, combo):
        """``predict`` of the whole space as a predictor of the settable knobs at ``combo``."""
        return lambda X_sub: predict(self.full(X_sub, combo))


@dataclass(frozen=True)
class LevelPointResult(PointResult):
    """A :class:`~doe.robust.search.PointResult` over the whole space: choices as level indices in ``point``.

    Attributes
    ----------
    levels : dict of str to str
        ``{choice: level name}`` (also in :meth:`to_dict`).
    """

    levels: dict = field(default_factory=dict)

    def summary(self, label: str, objective: str, unit: str) -> str:
        """As :meth:`PointResult.summary`, the choices named instead of numbered."""
        settable = {k: v for k, v in self.point.items() if k not in self.levels}
        line = PointResult.summary(replace(self, point=settable), label, objective, unit)
        return line.replace(f"{label}: ", f"{label}: {', '.join(f'{k} {v}' for k, v in self.levels.items())}, ", 1)


@dataclass(frozen=True)
class LevelRobustResult:
    """The robust search of every level combination, and the best of them.

    Attributes
    ----------
    levels : LevelSpace
    combos : list of tuple
    results : list of RobustResult
        One per combination, over the settable knobs.
    best : int
        Index of the combination with the best robust value.
    at_picks : list of dict
        Per combination, ``{response: (mean, std)}`` of the surrogate at its robust setting (every
        response ``predict`` gives).
    baseline : LevelPointResult or None
        The car as it runs now (its levels named), described like the picks (under scatter).
    at_baseline : dict or None
        ``{response: (mean, std)}`` of the surrogate at the baseline.
    figures : FigureMap or None
        Vehicle figures from the responses, for the figures' differences with intervals.
    """

    levels: LevelSpace
    combos: list
    results: list
    best: int
    at_picks: list
    baseline: LevelPointResult | None = None
    at_baseline: dict | None = None
    figures: FigureMap | None = None

    @property
    def objective(self) -> str:
        return self.results[self.best].objective

    @property
    def unit(self) -> str:
        return self.results[self.best].unit

    def _whole(self, rec, combo):
        """A :class:`LevelPointResult` of a combination: the choices in its point (level indices) and named."""
        return _whole_point(self.levels, rec, combo)

    @property
    def nominal(self):
        """The best combination's nominal setting (choices as level indices)."""
        return self._whole(self.results[self.best].nominal, self.combos[self.best])

    @property
    def robust(self):
        """The best combination's robust setting (choices as level indices)."""
        return self._whole(self.results[self.best].robust, self.combos[self.best])

    def comparison(self) -> list:
        """Per combination: its robust pick's figures and what it is worth against the best combination.

        Differences carry 95 % half-widths from the surrogate's standard deviations at the two settings taken
        as independent (0 for the best combination against itself); with a baseline, the same against it.
        """
        best = self.results[self.best].robust
        rows = []
        for k, (combo, res) in enumerate(zip(self.combos, self.results)):
            rec = res.robust
            same = k == self.best
            row = {"levels": self.levels.names(combo), "not_applying": self.levels.not_applying(combo),
                   "point": dict(rec.point), "mean": rec.mean, "std": rec.std,
                   "robust_value": rec.robust_value, "model_std": rec.model_std, "feasible": rec.feasible,
                   "flag": rec.flag, "mean_minus_best": rec.mean - best.mean,
                   "mean_minus_best_pm95": 0.0 if same else _pm95(rec.model_std, best.model_std),
                   "responses": self._responses(k)}
            if self.baseline is not None:
                row["mean_minus_baseline"] = rec.mean - self.baseline.mean
                row["mean_minus_baseline_pm95"] = _pm95(rec.model_std, self.baseline.model_std)
            if rec.vehicle is not None and best.vehicle is not None:
                lap, lap_best = rec.vehicle.lap_time_s, best.vehicle.lap_time_s
                row["lap_time_s"] = lap
                row["lap_time_minus_best_s"] = None if lap is None or lap_best is None else lap - lap_best
            if self.figures is not None:
                row["figures"] = self._figures(k)
            rows.append(row)
        return rows

    def _responses(self, k: int) -> dict:
        """Every response at a combination's robust setting, and its difference from the best (and baseline)."""
        mine, best = self.at_picks[k], self.at_picks[self.best]
        out = {}
        for r, (m, sd) in mine.items():
            out[r] = {"mean": float(m), "std": float(sd), "minus_best": float(m - best[r][0]),
                      "minus_best_pm95": 0.0 if k == self.best else _pm95(sd, best[r][1])}
            if self.at_baseline is not None and r in self.at_baseline:
                base = self.at_baseline[r]
                out[r]["minus_baseline"] = float(m - base[0])
                out[r]["minus_baseline_pm95"] = _pm95(sd, base[1])
        return out

    def _figures(self, k: int) -> dict:
        """Every vehicle figure at a combination's robust setting and its differences, with 95 % intervals."""
        fm = self.figures
        value, spread = fm.value(self.at_picks[k]), fm.spread(self.at_picks[k])
        best_value, best_spread = fm.value(self.at_picks[self.best]), fm.spread(self.at_picks[self.best])
        base = (None if self.at_baseline is None else (fm.value(self.at_baseline), fm.spread(self.at_baseline)))
        out = {}
        for name, v in value.items():
            rec = {"unit": figure_unit(name), "value": v, "pm95": Z95 * spread[name],
                   "minus_best": v - best_value[name],
                   "minus_best_pm95": 0.0 if k == self.best else _pm95(spread[name], best_spread[name])}
            if base is not None:
                rec["minus_baseline"] = v - base[0][name]
                rec["minus_baseline_pm95"] = _pm95(spread[name], base[1][name])
            out[name] = rec
        return out

    def to_dict(self) -> dict:
        """The robust JSON: the best combination's record (choices in its points), then every combination."""
        best = self.results[self.best]
        out = best.to_dict()
        names = self.levels.names(self.combos[self.best])
        for key, rec in (("nominal", self.nominal), ("robust", self.robust)):
            out[key] = rec.to_dict(best.unit)
        if self.baseline is not None:
            out["baseline"] = self.baseline.to_dict(best.unit)
            robust = self.robust
            out["vehicle_change_from_baseline"] = (
                compare_figures(self.baseline.vehicle, robust.vehicle)
                if self.baseline.vehicle is not None and robust.vehicle is not None else None)
        out["per_level"] = [{"levels": self.levels.names(c), "not_applying": self.levels.not_applying(c),
                             "nominal": r.nominal.to_dict(r.unit), "robust": r.robust.to_dict(r.unit)}
                            for c, r in zip(self.combos, self.results)]
        out["level_comparison"] = self.comparison()
        out["choices"] = {
            "knobs": [p.name for p in self.levels.space.choices],
            "best": names,
            "method": ("choices are not scattered: the continuous and stepped knobs are searched within each "
                       "level combination and the combinations compared by their robust values; stepped knobs "
                       "move on their steps and scatter by their tolerance; combinations that differ only in "
                       "levels of a part that is switched off (no wing, no flap) are searched once, and knobs "
                       "of that part are listed as not applying; differences between combinations (and from "
                       "the baseline, when one is given) are of the objective's mean at each one's robust "
                       "setting, and of each response and vehicle figure read there, 95 % intervals from the "
                       "surrogate's standard deviations at the two settings taken as independent (vehicle "
                       "figures: carried through from the responses they read by the unscented transform)")}
        return out


def _pm95(a: float, b: float) -> float:
    """95 % half-width of a difference of two independent normal estimates with standard deviations a, b."""
    return Z95 * float(np.hypot(a, b))


def _whole_point(levels: LevelSpace, rec, combo) -> LevelPointResult:
    """A :class:`LevelPointResult` of a settable-space record at a combination (choices as level indices)."""
    point = dict(zip(levels.space.names, levels.full([[rec.point[n] for n in levels.settable.names]], combo)[0]))
    return LevelPointResult(**{**vars(rec), "point": {k: float(v) for k, v in point.items()}},
                            levels=levels.names(combo))


def find_settings_per_level(predict, space: Space, objective: str, goal: str, *, seed=0, runs_X=None,
                            vehicle_block=None, baseline=None, figures: FigureMap | None = None,
                            **options) -> LevelRobustResult:
    """:func:`~doe.robust.search.find_settings` within every level combination of the choice knobs.

    Parameters
    ----------
    predict : callable
        ``predict(X) -> {response: (mean, std)}``, X in the whole space's study units (choices as level indices).
    space : Space
        With at least one choice knob.
    objective, goal : str
    seed : int
        Each combination gets its own stream.
    runs_X : array_like, optional
        Settings already run (whole space); each combination's search sees its own runs.
    vehicle_block : callable, optional
        ``vehicle_block(x)`` with ``x`` in the whole space's units.
    baseline : array_like, shape (d,), optional
        The car as it runs now, in the whole space (choices as level indices): it joins its combination's
        search as :func:`find_settings` does, and every combination's pick is compared with it.
    figures : FigureMap, optional
        Vehicle figures from the responses: their differences between combinations get 95 % intervals.
    **options
        Passed to :func:`find_settings` (``k``, ``limits``, ``probability``, ``samples``, ``units``,
        ``maxiter``, ``vehicle_objective``, ``aero_responses``).

    Returns
    -------
    LevelRobustResult
    """
    if not space.choices:
        raise DoeError("robust: the space has no choice knob; use find_settings")
    levels = LevelSpace(space)
    combos = levels.combinations()
    base_sub, base_combo = None, None
    if baseline is not None:
        base_x = space.as_points(baseline)
        if not space.in_bounds(base_x)[0]:
            raise DoeError(f"robust: the baseline {dict(zip(space.names, base_x[0].tolist()))} is outside the bounds")
        base_sub, (base_combo,) = levels.split(base_x)
    sub_runs, run_combos = (levels.split(runs_X) if runs_X is not None and len(runs_X) else (None, []))
    results = []
    # thousands of small predictions: BLAS threads would only contend (set up once here, not per call)
    with threadpool_limits(limits=1, user_api="blas"):
        for combo, s in zip(combos, child_seeds(seed, len(combos))):
            mine = None if sub_runs is None else sub_runs[[c == combo for c in run_combos]]
            block = (None if vehicle_block is None else
                     (lambda x, c=combo: vehicle_block(levels.full(x[None, :], c)[0])))
            results.append(find_settings(levels.predictor(predict, combo), levels.settable, objective, goal,
                                         seed=int(s), runs_X=mine, vehicle_block=block,
                                         baseline=base_sub[0] if combo == base_combo else None, **options))
    sense = 1.0 if results[0].goal == "maximize" else -1.0
    best = int(np.argmax([sense * r.robust.robust_value if r.robust.feasible else -np.inf for r in results]))
    if not results[best].robust.feasible:
        best = int(np.argmax([sense * r.robust.robust_value for r in results]))
    at = [_at(predict, levels, res.robust.point, combo) for combo, res in zip(combos, results)]
    base, at_base = None, None
    if baseline is not None:
        base = _whole_point(levels, results[combos.index(base_combo)].baseline, base_combo)
        at_base = _at(predict, levels, base.point, base_combo)
    return LevelRobustResult(levels, combos, results, best, at, base, at_base, figures)


def _at(predict, levels: LevelSpace, point: dict, combo) -> dict:
    """``{response: (mean, std)}`` of ``predict`` at a setting of the settable knobs and a combination."""
    x = levels.full([[point[n] for n in levels.settable.names]], combo)
    return {r: (float(m[0]), float(sd[0])) for r, (m, sd) in predict(x).items()}


def tradeoff_per_level(predict, space: Space, responses, goals: dict, targets=None, samples: int = 4096, seed=0,
                       include=None, refine: bool = True) -> pd.DataFrame:
    """The non-dominated settings over every level combination (:func:`~doe.robust.tradeoff.tradeoff_set` per one).

    Returns
    -------
    pandas.DataFrame
        As :func:`tradeoff_set`, the choice columns holding level names; non-dominated across combinations.
    """
    levels = LevelSpace(space)
    inc_sub, inc_combos = (levels.split(include) if include is not None and len(include) else (None, []))
    frames, X_all = [], []
    for combo, s in zip(levels.combinations(), child_seeds(seed, len(levels.combinations()))):
        mine = None if inc_sub is None else inc_sub[[c == combo for c in inc_combos]]
        with threadpool_limits(limits=1, user_api="blas"):
            frame = tradeoff_set(levels.predictor(predict, combo), levels.settable, responses, goals, targets,
                                 samples=samples, seed=int(s), include=mine, refine=refine)
        X_all.append(levels.full(frame[levels.settable.names].to_numpy(float), combo))
        frames.append(frame)
    frame = pd.concat(frames, ignore_index=True)
    X = np.vstack(X_all)
    pred = {r: (frame[r].to_numpy(float), frame[f"{r}_std"].to_numpy(float)) for r in responses}
    keep = nondominated(_minimised(pred, responses, goals, targets or {}))
    out = pd.DataFrame(X[keep], columns=space.names)
    for p, j in zip(space.choices, space.choice_columns):
        out[p.name] = [p.levels[int(i)] for i in X[keep, j]]
    for r in responses:
        out[r] = pred[r][0][keep]
        out[f"{r}_std"] = pred[r][1][keep]
    return out.sort_values(list(responses)[0], kind="stable").reset_index(drop=True)
