"""Calibrating a study's builtin model to its recorded results (``doe calibrate``)."""
from __future__ import annotations

from ..calibration.result import Calibration
from ..calibration.settings import builtin_settings_for
from ..calibration.solver import calibrate
from ..errors import CalibrationError, where

__all__ = ["calibrate_study"]


def calibrate_study(study, results, model_study=None, **options) -> Calibration:
    """Calibrate the builtin model of ``model_study`` (default ``study``) to ``study``'s results.

    Parameters
    ----------
    study : Study
        The study the results belong to (its parameters and responses).
    results : ResultsTable
    model_study : Study, optional
        Where the builtin settings come from (:func:`builtin_settings_for`);
        its parameters must be the results' parameters, in the same units, and
        its choice knobs the same, with the same levels (section files are
        found beside it).
    **options
        Passed to :func:`calibrate` (``coefficients``, ``responses``, ``noise``,
        ``starts``, ``seed``, ``progress``).

    Returns
    -------
    Calibration
    """
    source = model_study if model_study is not None else study
    settings, conversion = builtin_settings_for(source)
    choices = {p.name: p.levels for p in source.space.choices}
    if model_study is not None:
        mine = {p.name: p.levels for p in study.space.choices}
        if mine != choices:
            raise CalibrationError(f"{where(model_study.path)}: its choice knobs and levels ({_shown(choices)}) "
                                   f"differ from those of {where(study.path)} ({_shown(mine)})")
        for p in study.space.parameters:
            other = {q.name: q for q in model_study.space.parameters}.get(p.name)
            if other is not None and other.unit != p.unit:
                raise CalibrationError(f"{where(model_study.path)}: parameter '{p.name}' is in '{other.unit}' "
                                       f"there but in '{p.unit}' in {where(study.path)}")
    options.setdefault("seed", study.plan.seed)
    return calibrate(settings, conversion, results, units={r.name: r.unit for r in study.responses},
                     study_name=study.name, choices=choices, folder=source.folder, **options)


def _shown(choices: dict) -> str:
    return "; ".join(f"{k}: {', '.join(v)}" for k, v in choices.items()) or "none"
