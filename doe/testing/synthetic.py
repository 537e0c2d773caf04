"""Synthetic data: invented results of the builtin model, for checking what a calibration can determine."""
from __future__ import annotations

from dataclasses import replace

import numpy as np

from ..aero.model import RearPackageModel
from ..calibration.settings import builtin_settings_for
from ..design.plans import make_plan
from ..errors import CalibrationError
from ..runs.results import ResultsTable

__all__ = ["synthetic_results"]


def synthetic_results(study, truth: dict, noise: dict | None = None, runs: int | None = None, seed=0):
    """Invented results of a study's builtin model with some coefficients changed, plus Gaussian noise.

    For checking, before anything is recorded, what a calibration with this
    plan and these responses can determine (and for tests). The rows are
    labelled ``source = "invented"``.

    Parameters
    ----------
    study : Study
        Its builtin settings (:func:`builtin_settings_for`), space and responses.
    truth : dict of str to float
        Coefficients to change (the invented truth).
    noise : dict of str to float, optional
        One standard deviation of Gaussian noise per response, its unit; none when omitted.
    runs : int, optional
        Runs of the maximin Latin hypercube (default: the study's plan size).
    seed : int
        Seed of the plan and of the noise.

    Returns
    -------
    ResultsTable
    """
    settings, conversion = builtin_settings_for(study)
    try:
        co = replace(settings.coefficients, **truth)
    except TypeError as exc:
        raise CalibrationError(f"truth names an unknown coefficient ({exc})") from exc
    plan = make_plan(study.space, runs if runs is not None else study.plan.runs, seed).frame
    out = RearPackageModel(replace(settings, coefficients=co)).evaluate(
        {p: plan[p].to_numpy(float) * f for p, f in conversion.items()})
    rng = np.random.default_rng(seed)
    frame = plan.copy()
    for r in study.response_names:
        sd = (noise or {}).get(r, 0.0)
        frame[r] = out.values[r] + (rng.normal(0.0, sd, len(frame)) if sd > 0 else 0.0)
    frame["status"] = np.where(out.ok, "ok", "failed")
    frame["source"] = "invented"
    return ResultsTable(frame, study.space.names, study.response_names)
