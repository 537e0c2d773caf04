"""doe: plan and analyse aerodynamic experiments on the rear of production-based race cars.

A study flows one way: study -> plan -> evaluations -> surrogate -> analyses -> report.
The folders follow that order:

==================  ==================================================================
folder              job
==================  ==================================================================
``doe.study``       settings dataclasses and the checked TOML reader of a study file
``doe.design``      space-filling plans, augmentation, adaptive and nested next runs
``doe.runs``        outcomes, the results store, execution, executors, evaluators
``doe.surrogate``   kernels, the Gaussian process, two fidelities, paths, the set
``doe.sensitivity`` input distributions, Sobol indices, Morris screening, their words
``doe.robust``      setup scatter, the robust search, trade-off sets
``doe.calibration`` the builtin model's coefficients fitted to recorded results
``doe.workflow``    one function per step of a study (the CLI and ``doe run`` call it)
``doe.report``      figures and the HTML report
``doe.aero``        the built-in low-order aerodynamic model; ``doe.vehicle``: lap time
``doe.testing``     test functions with published answers, synthetic data
==================  ==================================================================

The names below are the public API; each is imported on first use, so
``import doe`` stays light::

    import doe
    study = doe.load_study("studies/demo_hatch.toml")
    plan = doe.make_plan(study.space, runs=30, seed=study.plan.seed)
"""
from __future__ import annotations

from importlib import import_module

from .errors import DoeError
from .version import __version__

#: Public name -> the module that defines it.
_PUBLIC = {
    # errors and the seed rule
    "StudyError": "doe.errors", "PlanError": "doe.errors", "ResultsError": "doe.errors",
    "EvaluatorError": "doe.errors", "SurrogateError": "doe.errors", "SensitivityError": "doe.errors",
    "CalibrationError": "doe.errors", "make_rng": "doe.seeds", "child_seeds": "doe.seeds",
    # the design space and the study
    "Space": "doe.space", "Parameter": "doe.space", "LinearConstraint": "doe.space",
    "Study": "doe.study.reader", "load_study": "doe.study.reader", "read_study_text": "doe.study.reader",
    # plans and next runs
    "make_plan": "doe.design.plans", "augment_plan": "doe.design.plans", "maximin_lhs": "doe.design.plans",
    "propose_runs": "doe.design.adaptive",
    # runs
    "Evaluator": "doe.runs.evaluators", "Outcome": "doe.runs.evaluators", "make_evaluator": "doe.runs.evaluators",
    "evaluate_plan": "doe.runs.execution", "ResultsTable": "doe.runs.results", "read_plan": "doe.runs.results",
    "read_results": "doe.runs.results", "write_plan": "doe.runs.results",
    # surrogates
    "ResponseSurrogate": "doe.surrogate.gp", "TwoFidelitySurrogate": "doe.surrogate.twofidelity",
    "SurrogateSet": "doe.surrogate.set", "load_surrogates": "doe.surrogate.set",
    "prediction_frame": "doe.surrogate.set",
    # analyses
    "InputDistribution": "doe.sensitivity.inputs", "sobol_indices": "doe.sensitivity.sobol",
    "morris_screening": "doe.sensitivity.morris", "scatter_draws": "doe.robust.scatter",
    "propagate": "doe.robust.scatter", "find_settings": "doe.robust.search", "tradeoff_set": "doe.robust.tradeoff",
    "calibrate": "doe.calibration.solver", "Calibration": "doe.calibration.result",
    "load_calibration": "doe.calibration.result",
    # a study's steps
    "fit_surrogates": "doe.workflow.fit", "study_surrogates": "doe.workflow.cheap",
    "study_sensitivity": "doe.workflow.sensitivity", "study_robust": "doe.workflow.robust",
    "calibrate_study": "doe.workflow.calibration", "plan_step": "doe.workflow.steps",
    "evaluate_step": "doe.workflow.steps", "fit_step": "doe.workflow.steps", "sensitivity_step": "doe.workflow.steps",
    "robust_step": "doe.workflow.steps", "next_step": "doe.workflow.steps", "StudyFiles": "doe.workflow.pipeline",
    "run_study": "doe.workflow.pipeline", "analyse_and_report": "doe.workflow.pipeline",
}

__all__ = ["DoeError", "__version__", *_PUBLIC]


def __getattr__(name: str):
    """Import a public name's module on first use (PEP 562)."""
    try:
        module = _PUBLIC[name]
    except KeyError:
        raise AttributeError(f"module 'doe' has no attribute {name!r}") from None
    value = getattr(import_module(module), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_PUBLIC))
