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
conservative).
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
from .search import PointResult, find_settings
from .tradeoff import _minimised, nondominated, tradeoff_set

__all__ = ["LevelSpace", "LevelPointResult", "LevelRobustResult", "find_settings_per_level", "tradeoff_per_level",
           "Z95"]

#: Two-sided 95 % normal quantile.
Z95 = 1.959963984540054


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

    def combinations(self) -> list:
        """Every level combination, as a tuple of level indices in the order of ``space.choices``."""
        return list(itertools.product(*(range(len(p.levels)) for p in self.space.choices)))

    def names(self, combo) -> dict:
        """``{choice: level name}`` of a combination."""
        return {p.name: p.levels[int(i)] for p, i in zip(self.space.choices, combo)}

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
        """Points of the whole space as ``(settable part, list of level combinations)``."""
        X = self.space.as_points(X)
        cols = [j for j, p in enumerate(self.space.parameters) if not p.levels]
        return X[:, cols], [tuple(int(round(v)) for v in row) for row in X[:, self.space.choice_columns]]

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
    """

    levels: LevelSpace
    combos: list
    results: list
    best: int
    at_picks: list

    @property
    def objective(self) -> str:
        return self.results[self.best].objective

    @property
    def unit(self) -> str:
        return self.results[self.best].unit

    def _whole(self, rec, combo):
        """A :class:`LevelPointResult` of a combination: the choices in its point (level indices) and named."""
        point = dict(zip(self.levels.space.names, self.levels.full([[rec.point[n] for n in
                                                                       self.levels.settable.names]], combo)[0]))
        return LevelPointResult(**{**vars(rec), "point": {k: float(v) for k, v in point.items()}},
                                levels=self.levels.names(combo))

    @property
    def nominal(self):
        """The best combination's nominal setting (choices as level indices)."""
        return self._whole(self.results[self.best].nominal, self.combos[self.best])

    @property
    def robust(self):
        """The best combination's robust setting (choices as level indices)."""
        return self._whole(self.results[self.best].robust, self.combos[self.best])

    def comparison(self) -> list:
        """Per combination: its robust pick's figures and what it is worth against the best combination."""
        best = self.results[self.best].robust
        rows = []
        for combo, res in zip(self.combos, self.results):
            rec = res.robust
            row = {"levels": self.levels.names(combo), "point": dict(rec.point), "mean": rec.mean, "std": rec.std,
                   "robust_value": rec.robust_value, "model_std": rec.model_std, "feasible": rec.feasible,
                   "flag": rec.flag, "mean_minus_best": rec.mean - best.mean,
                   "mean_minus_best_pm95": Z95 * float(np.hypot(rec.model_std, best.model_std)),
                   "responses": self._responses(combo)}
            if rec.vehicle is not None and best.vehicle is not None:
                lap, lap_best = rec.vehicle.lap_time_s, best.vehicle.lap_time_s
                row["lap_time_s"] = lap
                row["lap_time_minus_best_s"] = None if lap is None or lap_best is None else lap - lap_best
            rows.append(row)
        return rows

    def _responses(self, combo) -> dict:
        """Every response at a combination's robust setting, and its difference from the best combination's."""
        mine, best = self.at_picks[self.combos.index(combo)], self.at_picks[self.best]
        return {r: {"mean": float(m), "std": float(sd), "minus_best": float(m - best[r][0]),
                    "minus_best_pm95": Z95 * float(np.hypot(sd, best[r][1]))} for r, (m, sd) in mine.items()}

    def to_dict(self) -> dict:
        """The robust JSON: the best combination's record (choices in its points), then every combination."""
        best = self.results[self.best]
        out = best.to_dict()
        names = self.levels.names(self.combos[self.best])
        for key, rec in (("nominal", self.nominal), ("robust", self.robust)):
            out[key] = rec.to_dict(best.unit)
        out["per_level"] = [{"levels": self.levels.names(c), "nominal": r.nominal.to_dict(r.unit),
                             "robust": r.robust.to_dict(r.unit)} for c, r in zip(self.combos, self.results)]
        out["level_comparison"] = self.comparison()
        out["choices"] = {
            "knobs": [p.name for p in self.levels.space.choices],
            "best": names,
            "method": ("choices are not scattered: the continuous and stepped knobs are searched within each "
                       "level combination and the combinations compared by their robust values; stepped knobs "
                       "move on their steps and scatter by their tolerance; differences between combinations "
                       "are of the objective's mean at each one's robust setting, 95 % intervals from the "
                       "surrogate's standard deviations taken as independent")}
        return out


def find_settings_per_level(predict, space: Space, objective: str, goal: str, *, seed=0, runs_X=None,
                            vehicle_block=None, **options) -> LevelRobustResult:
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
    **options
        Passed to :func:`find_settings` (``k``, ``limits``, ``probability``, ``samples``, ``units``,
        ``maxiter``, ``vehicle_objective``, ``aero_responses``; a ``baseline`` is refused).

    Returns
    -------
    LevelRobustResult
    """
    if not space.choices:
        raise DoeError("robust: the space has no choice knob; use find_settings")
    if options.get("baseline") is not None:
        raise DoeError("robust: a [robust] baseline is not available with choice knobs yet")
    options.pop("baseline", None)
    levels = LevelSpace(space)
    combos = levels.combinations()
    sub_runs, run_combos = (levels.split(runs_X) if runs_X is not None and len(runs_X) else (None, []))
    results = []
    # thousands of small predictions: BLAS threads would only contend (set up once here, not per call)
    with threadpool_limits(limits=1, user_api="blas"):
        for combo, s in zip(combos, child_seeds(seed, len(combos))):
            mine = None if sub_runs is None else sub_runs[[c == combo for c in run_combos]]
            block = (None if vehicle_block is None else
                     (lambda x, c=combo: vehicle_block(levels.full(x[None, :], c)[0])))
            results.append(find_settings(levels.predictor(predict, combo), levels.settable, objective, goal,
                                         seed=int(s), runs_X=mine, vehicle_block=block, **options))
    sense = 1.0 if results[0].goal == "maximize" else -1.0
    best = int(np.argmax([sense * r.robust.robust_value if r.robust.feasible else -np.inf for r in results]))
    if not results[best].robust.feasible:
        best = int(np.argmax([sense * r.robust.robust_value for r in results]))
    at = []
    for combo, res in zip(combos, results):
        x = levels.full([[res.robust.point[n] for n in levels.settable.names]], combo)
        at.append({r: (float(m[0]), float(sd[0])) for r, (m, sd) in predict(x).items()})
    return LevelRobustResult(levels, combos, results, best, at)


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
