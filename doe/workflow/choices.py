"""The steps of a study whose space has choice knobs: fit, sensitivity, robust search, trade-off.

Each function is the choice-knob branch of the matching step in
:mod:`doe.workflow.fit`, :mod:`doe.workflow.sensitivity` and
:mod:`doe.workflow.robust`, which call here when ``space.choices`` is not
empty. Engines: :mod:`doe.surrogate.levelset` (one surrogate per response over
the levels), :mod:`doe.sensitivity.levels` (Sobol indices and level effects)
and :mod:`doe.robust.levels` (the search per level combination).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import SensitivityError, SurrogateError
from ..robust.levels import FigureMap
from ..seeds import child_seeds
from ..sensitivity.levels import level_effects, level_sobol_indices
from ..sensitivity.sobol import SobolResult
from ..surrogate.levelset import LevelResponseSurrogate
from ..surrogate.set import SurrogateSet
from ..vehicle import VehicleObjective

__all__ = ["fit_level_surrogates", "level_figure_map", "LevelSobolResult", "wants_level_sensitivity",
           "check_level_route", "study_level_sensitivity"]

def fit_level_surrogates(study, results, settings: dict, seed=0) -> SurrogateSet:
    """One :class:`~doe.surrogate.levelset.LevelResponseSurrogate` per response of a study with choice knobs.

    Parameters
    ----------
    study : Study
    results : ResultsTable
        Ok rows are used; choice columns hold level indices.
    settings : dict
        The ``[fit]`` settings (``kernel``, ``restarts``, ``nugget``, ``target_q2``, ``exact_sources``, ``noise``).
    seed : int

    Returns
    -------
    SurrogateSet
        Every response's band widened about its fitted mean (``uncertainty[name]["method"] == "widened"``,
        the reason in words; :mod:`doe.surrogate.levelbands`), with its ``q2_low``.

    Raises
    ------
    SurrogateError
        A response that cannot be fitted (named), or a two-fidelity fit asked for.
    """
    if settings["fidelity"] == "two":
        raise SurrogateError("a two-fidelity fit is not available with choice knobs; use fidelity = \"single\"")
    ok = results.ok
    if len(ok) == 0:
        raise SurrogateError(f"{results.path or 'results'}: no ok runs to fit")
    space = study.space
    X = space.to_unit(results.X())
    levels = [len(p.levels) for p in space.parameters]
    given = ok["source"] if "source" in ok.columns else ["recorded"] * len(ok)
    noisy = sorted({str(s) for s in given} - set(settings["exact_sources"]))
    reason = ""
    if noisy and settings["noise"] != "fixed":
        reason = (f"runs from {', '.join(noisy)} may be noisy, but a surrogate over choice knobs learns no noise "
                  "level: it passes through every run (a small fixed nugget)")
    models, uncertainty, reasons = {}, {}, {}
    for k, resp in enumerate(study.responses):
        try:
            model = LevelResponseSurrogate(levels, space.names, settings["kernel"], settings["restarts"],
                                           settings["nugget"], int(seed) + 1000 * k).fit(X, results.y(resp.name),
                                                                                        space.upper - space.lower)
        except SurrogateError as exc:
            raise SurrogateError(f"response '{resp.name}': {exc}") from exc
        models[resp.name] = model
        reasons[resp.name] = reason
        uncertainty[resp.name] = {"method": model.band_method_, "reason": model.band_words_,
                                  "q2_low": model.q2_low_, "q2_loo_plugin": float(model.loo_.q2)}
    return SurrogateSet(space, models, {r.name: r.unit for r in study.responses},
                        {r.name: r.goal for r in study.responses}, list(ok["run_id"]), settings["target_q2"],
                        study.name, reasons, {}, uncertainty)


# ---------------------------------------------------------------------------
# robust search
def level_figure_map(study) -> FigureMap | None:
    """The study's vehicle figures as a function of its responses (None without ``[vehicle]``).

    Lap time (with ``[track]``), top speed, and the front load share and balance shift at
    ``balance_speed_kph``, from CLA front, CLA rear and CDA, or from the whole-car CLA split by the
    front-share response or the fixed ``aero_front_share`` (as :func:`doe.workflow.robust.study_vehicle_figures`).
    A negative CDA (a surrogate draw) counts as 0.
    """
    v = study.vehicle
    if v is None:
        return None
    figures = VehicleObjective(v.car, study.track, balance_speed_kph=v.balance_speed_kph)
    if v.cla_front_response is not None:
        return FigureMap((v.cla_front_response, v.cla_rear_response, v.cda_response),
                         lambda cf, cr, cd: figures.figures(cf, cr, np.maximum(cd, 0.0)))
    if v.front_share_response is not None:
        return FigureMap((v.cla_response, v.front_share_response, v.cda_response),
                         lambda cla, share, cd: figures.figures(cla * share, cla * (1 - share), np.maximum(cd, 0.0)))
    share = float(v.aero_front_share)
    return FigureMap((v.cla_response, v.cda_response),
                     lambda cla, cd: figures.figures(cla * share, cla * (1 - share), np.maximum(cd, 0.0)))


# ---------------------------------------------------------------------------
# sensitivity
@dataclass
class LevelSobolResult(SobolResult):
    """A :class:`~doe.sensitivity.sobol.SobolResult` with what each level of each choice is worth.

    Attributes
    ----------
    effects : dict of str to dict of str to LevelEffects
        ``effects[response][choice]`` (see :func:`doe.sensitivity.levels.level_effects`).
    units : dict of str to str
    """

    effects: dict = field(default_factory=dict)
    units: dict = field(default_factory=dict)

    def levels_json(self) -> dict:
        """``{response: {choice: {...}}}``: mean per level, every difference between levels, 95 % half-widths, words."""
        return {r: {name: _effects_record(e, self.units.get(r, "")) for name, e in per.items()}
                for r, per in self.effects.items() if per}


def _effects_record(e, unit: str) -> dict:
    L = len(e.levels)
    diffs = [{"level": e.levels[a], "over": e.levels[b], "difference": float(e.difference[a, b]),
              "difference_pm95": float(e.difference_pm95[a, b])} for a in range(L) for b in range(L) if a > b]
    words = "; ".join(f"{d['level']} instead of {d['over']}: {d['difference']:+.4g} ± {d['difference_pm95']:.2g} "
                      f"{unit}".rstrip() for d in diffs)
    return {"levels": list(e.levels), "mean": {lv: float(m) for lv, m in zip(e.levels, e.mean)},
            "mean_pm95": {lv: float(m) for lv, m in zip(e.levels, e.mean_pm95)}, "differences": diffs,
            "points": int(e.points),
            "statement": f"{e.parameter}, averaged over the other knobs (95 %): {words}"}


def wants_level_sensitivity(study, direct: bool, around) -> bool:
    """Whether the sensitivity of a study goes through :func:`study_level_sensitivity`.

    Always with choice knobs; with stepped knobs when the route is the
    surrogate's over the uniform box (each step then equally likely).
    """
    space = study.space
    stepped = any(p.values for p in space.parameters)
    return bool(space.choices) or (stepped and not direct and around is None
                                   and study.sensitivity.distribution == "uniform")


def check_level_route(study, direct: bool, around) -> None:
    """Refuse in one line what the sensitivity with choice knobs cannot do (a SensitivityError).

    Only the box as a whole (every level equally likely) is available, by either route.
    """
    if not study.space.choices:
        return
    if around is not None or study.sensitivity.distribution != "uniform":
        raise SensitivityError("with choice knobs the sensitivity covers the whole box, every level equally "
                               "likely: set [sensitivity] distribution = \"uniform\" and give no setting to scatter "
                               "around")


def study_level_sensitivity(study, surrogates, model, paths, options: dict, n_paths: int) -> LevelSobolResult:
    """Sobol indices over continuous, stepped and choice knobs, and each choice's level effects.

    Parameters
    ----------
    study : Study
    surrogates : SurrogateSet
        Fitted on the study's runs.
    model, paths : callable
        Its mean and joint posterior draws in study units (:func:`doe.workflow.sensitivity.surrogate_callables`).
    options : dict
        ``base_samples``, ``second_order``, ``responses``, ``seed`` for
        :func:`~doe.sensitivity.levels.level_sobol_indices`.
    n_paths : int
        Posterior paths for the intervals.

    Returns
    -------
    LevelSobolResult
    """
    space = study.space
    result = level_sobol_indices(model, space, paths=paths, n_paths=n_paths, **options)
    effects = {}
    seeds = child_seeds(options.get("seed", 0), len(surrogates.models) * max(len(space.choices), 1))
    k = 0
    for r in surrogates.models:
        effects[r] = {}
        predictor = surrogates.predictor(r)
        for p in space.choices:
            effects[r][p.name] = level_effects(
                lambda X, pr=predictor: pr.predict(space.to_unit(X)), space, p.name,
                paths=lambda X, n, s, pr=predictor: pr.sample_paths(space.to_unit(X), n, s), seed=int(seeds[k]))
            k += 1
    return LevelSobolResult(**vars(result), effects=effects, units=dict(surrogates.units))
