"""Sensitivity of a study: its input distribution, and the surrogate or the direct route to its indices.

``doe sensitivity`` calls :func:`study_sensitivity` (and :func:`study_screening`
for ``--screen``); the numerical work is in :mod:`doe.sensitivity.sobol` and
:mod:`doe.sensitivity.morris`, the presentation in :mod:`doe.sensitivity.words`.

Routes
------
surrogate (default)
    One Gaussian process per response is fitted to the study's ok runs
    (:func:`doe.workflow.fit.fit_surrogates`); indices are computed on the
    posterior mean and their intervals include the posterior's spread.
direct (``direct=True``)
    The study's evaluator is called at every point of the Saltelli sample:
    only for a cheap evaluator (the built-in model). Its indices carry only
    the estimator's uncertainty and serve as a cross-check of the surrogate
    route. Where the model fails (a wing that would touch the body), the base
    row of that point is left out; more than 1 % of rows failing is an error.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from ..sensitivity.inputs import InputDistribution
from ..errors import SensitivityError
from ..runs.evaluators import make_evaluator
from ..runs.results import ResultsTable
from .cheap import study_surrogates
from ..sensitivity.morris import ScreeningResult, morris_screening
from ..sensitivity.levels import level_sobol_indices
from ..sensitivity.sobol import SobolResult, sobol_indices
from ..sensitivity.words import to_dict

__all__ = ["evaluate_points", "nominal_point", "study_inputs", "surrogate_callables", "evaluator_model", "study_sensitivity",
           "study_sensitivity_json", "study_screening", "DIRECT_MAX_EVALUATIONS"]

#: Default bound on evaluator calls of the direct route.
DIRECT_MAX_EVALUATIONS = 20_000
#: Share of base rows the direct route may drop for failed runs (common practice, no source).
DIRECT_FAILED_SHARE = 0.01


def nominal_point(study) -> dict:
    """The study's nominal setting: ``[sensitivity] nominal``, else the middle of each range (study units)."""
    given = study.sensitivity.nominal
    return {p.name: given.get(p.name, 0.5 * (p.low + p.high)) for p in study.space.parameters}


def study_inputs(study, around=None) -> InputDistribution:
    """The input distribution a study asks for.

    Parameters
    ----------
    study : Study
    around : None, "nominal" or dict of str to float
        None: the ``[sensitivity] distribution`` (uniform, or scatter around
        the nominal setting). ``"nominal"``: scatter around the nominal
        setting. A dict: scatter around that setting (parameters left out sit
        at their nominal value). Scatter is a truncated normal unless the study
        asks for ``normal``; one standard deviation is the parameter's tolerance.

    Raises
    ------
    SensitivityError
        A setting names an unknown parameter or lies outside the bounds, or no
        parameter has a tolerance.
    """
    kind = study.sensitivity.distribution
    if around is None and kind == "uniform":
        return InputDistribution.uniform(study.space)
    point = nominal_point(study)
    if isinstance(around, dict):
        unknown = [k for k in around if k not in point]
        if unknown:
            raise SensitivityError(f"setting for the sensitivity: '{unknown[0]}' is not a parameter "
                                   f"(parameters: {', '.join(point)})")
        point.update({k: float(v) for k, v in around.items()})
    elif around not in (None, "nominal"):
        raise SensitivityError(f"around must be 'nominal' or a setting of parameters, got {around!r}")
    return InputDistribution.around(study.space, point, "normal" if kind == "normal" else "truncnormal")


def surrogate_callables(surrogates):
    """``(model, paths)`` for :func:`~doe.sensitivity.sobol.sobol_indices` from a fitted ``SurrogateSet``.

    ``paths`` are the set's joint posterior draws, from what predicts each
    response: the mixture over kernel settings when it is used, so the
    intervals carry the uncertainty of those settings too. ``model`` is the
    control variate of the paths and the large-sample part of the estimate: the
    posterior mean, or for a mixture the mean of its posterior mode (one draw
    instead of all, and as good a control variate: the indices are centred on
    the mean over paths either way, see :mod:`doe.sensitivity.sobol`).
    """
    space = surrogates.space

    def centre(name, U):
        p = surrogates.predictor(name)
        return p.centre(U) if hasattr(p, "centre") else p.predict(U, return_std=False)

    def model(X):
        U = space.to_unit(X)
        return {r: np.asarray(centre(r, U), dtype=float) for r in surrogates.models}

    def paths(X, n_paths, seed):
        return surrogates.sample_paths(X, n_paths, seed)

    return model, paths


def _points(knobs, X) -> list:
    """Points as an evaluator gets them from a plan: study units, a choice knob's level by its name.

    ``knobs`` is the study's Space, or plain parameter names (every column a number).
    """
    X = np.asarray(X, dtype=float)
    if not hasattr(knobs, "parameters"):
        return [dict(zip(knobs, map(float, x))) for x in X]
    return [{p.name: (p.levels[int(p.snap(v))] if p.levels else float(v)) for p, v in zip(knobs.parameters, x)}
            for x in X]


def evaluator_model(evaluator, knobs, responses):
    """A model callable that runs an evaluator at each point (serially).

    ``knobs`` is the study's Space (or the parameter names when every knob is
    a number). ``X`` holds study units with choice columns as level indices;
    the evaluator gets each point as from a plan (a choice by its level name). A
    failed run gives NaN for every response (so that
    :func:`~doe.sensitivity.sobol.sobol_indices` can drop its base row); the
    callable's ``failures`` list keeps ``(run_id, message)`` of each.
    """
    counter = [0]

    def model(X):
        ids = [f"sens{counter[0] + i:07d}" for i in range(len(X))]
        counter[0] += len(X)
        outcomes = evaluator.evaluate_many(ids, _points(knobs, X))
        model.failures.extend((rid, o.message or "no message") for rid, o in zip(ids, outcomes) if o.status != "ok")
        return {r: np.array([o.values.get(r, np.nan) if o.status == "ok" else np.nan for o in outcomes], dtype=float)
                for r in responses}

    model.failures = []
    return model


def evaluate_points(study, X, evaluator):
    """Run an evaluator at points (study units) into an in-memory results table, for route cross-checks.

    Returns
    -------
    ResultsTable
        Run ids ``r0``, ``r1``, ...; failed runs kept with ``status = failed``.
    """
    names, ids = study.space.names, [f"r{i}" for i in range(len(X))]
    outcomes = evaluator.evaluate_many(ids, _points(study.space, X))
    frame = pd.DataFrame(np.asarray(X, dtype=float), columns=names)
    frame.insert(0, "run_id", ids)
    for r in study.response_names:
        frame[r] = [o.values.get(r, np.nan) if o.status == "ok" else np.nan for o in outcomes]
    frame["status"] = [o.status for o in outcomes]
    frame["source"] = [o.source or evaluator.kind for o in outcomes]
    return ResultsTable(frame, names, study.response_names)


def _first_failure(model) -> str:
    if not model.failures:
        return ""
    rid, message = model.failures[0]
    return f" (first failure, {rid}: {message})"


def _study_model(study, evaluator, what: str):
    """The study's evaluator (built unless given) as a model callable."""
    if evaluator is None:
        if study.evaluator.kind == "recorded":
            raise SensitivityError(f"{study.name}: {what} needs an evaluator that can run new points; "
                                   "a 'recorded' evaluator cannot (use the surrogate route)")
        evaluator = make_evaluator(study)
    return evaluator_model(evaluator, study.space, study.response_names)


def _warn_about(study, inputs: InputDistribution, direct: bool) -> None:
    if study.space.constraints and inputs.kind == "uniform":
        rules = "; ".join(c.describe() for c in study.space.constraints)
        warnings.warn(f"{study.name}: Sobol indices need independent inputs, so they cover the whole box; the "
                      f"constraints ({rules}) are not part of the input distribution", stacklevel=3)
    outside = inputs.outside_probability()
    if not direct and np.any(outside > 0.01):
        i = int(np.argmax(outside))
        warnings.warn(f"{study.name}: the normal scatter of '{study.space.names[i]}' leaves its bounds "
                      f"{100 * outside[i]:.0f} % of the time, where the surrogate extrapolates; "
                      "consider distribution = \"truncnormal\"", stacklevel=3)


def study_sensitivity(study, results=None, *, direct: bool = False, around=None, second_order: bool | None = None,
                      base_samples: int | None = None, seed: int | None = None, surrogates=None, evaluator=None,
                      max_evaluations: int | None = None) -> SobolResult:
    """Sobol indices of every response of a study, with 95 % intervals.

    Parameters
    ----------
    study : Study
    results : ResultsTable, optional
        The runs to fit the surrogates to (surrogate route, unless ``surrogates`` is given).
    direct : bool
        Use the study's evaluator instead of a surrogate.
    around : None, "nominal" or dict
        Input distribution (see :func:`study_inputs`).
    second_order : bool, optional
        Default: ``[sensitivity] second_order``.
    base_samples : int, optional
        Default: ``[sensitivity] base_samples`` (else chosen).
    seed : int, optional
        Default: ``[plan] seed``.
    surrogates : SurrogateSet, optional
        Already fitted surrogates.
    evaluator : Evaluator, optional
        For the direct route; default ``make_evaluator(study)``.
    max_evaluations : int, optional
        Direct route: bound on evaluator calls (default 20 000; serial, so at 20 ms a call about 7 min).

    Returns
    -------
    SobolResult
    """
    from .choices import check_level_route, study_level_sensitivity, wants_level_sensitivity   # choice knobs

    cfg = study.sensitivity
    seed = study.plan.seed if seed is None else seed
    check_level_route(study, direct, around)
    levels = wants_level_sensitivity(study, direct, around)
    inputs = study_inputs(study, around)
    _warn_about(study, inputs, direct)
    options = dict(base_samples=base_samples if base_samples is not None else cfg.base_samples,
                   second_order=cfg.second_order if second_order is None else bool(second_order),
                   responses=study.response_names, seed=seed)
    if direct:
        model = _study_model(study, evaluator, "the direct route")
        bounds = dict(max_evaluations=max_evaluations or DIRECT_MAX_EVALUATIONS, max_failed_share=DIRECT_FAILED_SHARE)
        try:
            if levels:     # choice knobs: every level equally likely (doe.sensitivity.levels)
                result = level_sobol_indices(model, study.space, **bounds, **options)
            else:
                result = sobol_indices(model, inputs, **bounds, **options)
        except SensitivityError as exc:
            raise SensitivityError(f"direct sensitivity: {exc}{_first_failure(model)}") from exc
        if model.failures:
            for res in result.responses.values():
                res.notes.append(f"{len(model.failures)} evaluations failed{_first_failure(model)}")
        return result
    if surrogates is None:
        if results is None:
            raise SensitivityError(f"{study.name}: the surrogate route needs results (or use the direct route)")
        surrogates = study_surrogates(study, results, seed=seed, progress=False,
                                      say=lambda line: warnings.warn(line, stacklevel=3))   # runs are said, not hidden
    model, paths = surrogate_callables(surrogates)
    if levels:
        return study_level_sensitivity(study, surrogates, model, paths, options, cfg.paths)
    return sobol_indices(model, inputs, paths=paths, n_paths=cfg.paths, **options)


def study_sensitivity_json(study, result: SobolResult) -> dict:
    """The sensitivity JSON of a study, with response units in the statements."""
    data = to_dict(result, units={r.name: r.unit for r in study.responses})
    if getattr(result, "effects", None):          # choice knobs: what each level is worth (doe.workflow.choices)
        data["_meta"]["levels"] = result.levels_json()
    return data


def study_screening(study, *, trajectories: int = 20, levels: int = 4, seed: int | None = None,
                    evaluator=None) -> ScreeningResult:
    """Morris screening of a study with its (cheap) evaluator over the bounds.

    See :func:`doe.sensitivity.morris.morris_screening`; ``r (d + 1)`` evaluator calls.
    """
    model = _study_model(study, evaluator, "screening")
    return morris_screening(model, study.space, trajectories=trajectories, levels=levels,
                            responses=study.response_names, seed=study.plan.seed if seed is None else seed)
