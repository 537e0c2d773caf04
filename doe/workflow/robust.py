"""The robust step of a study: its ``[robust]`` goals, limits and trade-off, its ``[vehicle]`` figures."""
from __future__ import annotations

from dataclasses import replace

import pandas as pd

from ..errors import DoeError
from ..robust.scatter import predict_checked
from ..robust.search import DEFAULT_MAXITER, DEFAULT_ROBUST_RESTARTS, RobustResult, find_settings
from ..robust.levels import find_settings_per_level, tradeoff_per_level
from .choices import level_figure_map
from ..robust.tradeoff import tradeoff_set
from ..vehicle import Aero, VehicleFigures, VehicleObjective, vehicle_figures

__all__ = ["study_vehicle_figures", "study_vehicle_objective", "study_responses", "only_responses", "study_robust",
           "study_tradeoff"]


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
    value = {n: float(m[0]) for n, (m, _) in predict_checked(predict, study.space.as_points(x), names).items()}
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
        r = study.robust
        names += ([] if r.objective_is_figure else [r.objective]) + [lim.response for lim in r.limits] + list(r.tradeoff)
    v = study.vehicle
    if v is not None:
        names += [n for n in (v.cla_response, v.cda_response, v.cla_front_response, v.cla_rear_response,
                              v.front_share_response) if n is not None]
    return list(dict.fromkeys(names))


def study_vehicle_objective(study) -> VehicleObjective | None:
    """The :class:`VehicleObjective` of a study whose ``[robust]`` objective or limits name vehicle figures.

    None when they name none. Built from ``[vehicle]`` (car, ``balance_speed_kph``), ``[track]``
    and the ``[robust]`` limits on figures.
    """
    r, v = study.robust, study.vehicle
    if r is None or not r.figures:
        return None
    if v is None or v.cla_front_response is None:
        raise DoeError("robust: vehicle figures need [vehicle] with cla_front_response and cla_rear_response")
    return VehicleObjective(v.car, study.track, balance_speed_kph=v.balance_speed_kph, limits=r.vehicle_limits)


def _aero_responses(study) -> tuple | None:
    v = study.vehicle
    return (v.cla_front_response, v.cla_rear_response, v.cda_response) if v is not None else None


def only_responses(surrogates, names):
    """A fitted surrogate set reduced to the responses ``names``, so each prediction costs only those.

    Parameters
    ----------
    surrogates : doe.surrogate.set.SurrogateSet
    names : sequence of str

    Returns
    -------
    doe.surrogate.set.SurrogateSet
        The same models for ``names``; the others are left out.
    """
    missing = [n for n in names if n not in surrogates.models]
    if missing:
        raise DoeError(f"robust: no surrogate for {missing}; the surrogates cover {list(surrogates.models)}")
    return replace(surrogates, models={n: surrogates.models[n] for n in names})


def study_robust(study, predict, runs_X=None, maxiter: int = DEFAULT_MAXITER,
                 robust_restarts: int = DEFAULT_ROBUST_RESTARTS) -> RobustResult:
    """:func:`find_settings` with a study's ``[robust]`` goals, units and ``[vehicle]`` figures.

    Parameters
    ----------
    study : doe.study.reader.Study
    predict : callable
        E.g. the ``predict`` of a fitted surrogate set.
    runs_X : array_like, optional
        Settings already run (study units).
    maxiter, robust_restarts : int
        Generations of each search run, and runs of the robust search (:func:`find_settings`).
    """
    r = study.robust
    if r is None:
        raise DoeError("robust: the study has no [robust] settings")
    units = {resp.name: resp.unit for resp in study.responses}
    block = (lambda x: study_vehicle_figures(study, predict, x[None, :])) if study.vehicle is not None else None
    baseline = [r.baseline[n] for n in study.space.names] if r.baseline is not None else None
    vobj = study_vehicle_objective(study)
    search = find_settings_per_level if study.space.choices else find_settings    # choices: per level combination
    extra = {"figures": level_figure_map(study)} if study.space.choices else {}
    return search(predict, study.space, r.objective, r.goal, k=r.k, limits=r.limits, **extra,
                         probability=r.probability, samples=r.samples, seed=r.seed, runs_X=runs_X, units=units,
                         vehicle_block=block, baseline=baseline, maxiter=maxiter, robust_restarts=robust_restarts,
                         vehicle_objective=vobj,
                         aero_responses=_aero_responses(study) if vobj is not None else None)


def study_tradeoff(study, predict, samples: int = 4096, include=None) -> pd.DataFrame:
    """:func:`tradeoff_set` of a study's ``[robust] tradeoff`` responses (goals from ``[[responses]]``).

    Refined: each response's optimum and points along the line are added to the sample, and
    ``include`` (settings in study units, e.g. the nominal and robust picks) joins the candidates.
    """
    r = study.robust
    if r is None or len(r.tradeoff) < 2:
        raise DoeError("trade-off: give at least two responses in [robust] tradeoff "
                       "(by default the responses with a goal)")
    goals = {resp.name: resp.goal for resp in study.responses}
    build = tradeoff_per_level if study.space.choices else tradeoff_set      # choices: per level combination
    return build(predict, study.space, r.tradeoff, goals, r.targets, samples=samples, seed=r.seed,
                        include=include, refine=True)
