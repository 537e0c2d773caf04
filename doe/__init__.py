"""doe: plan and analyse aerodynamic experiments on the rear of production-based race cars.

Data flow one way: study -> plan -> evaluations -> surrogate -> analyses -> report.

=================  ==========================================================
module             job
=================  ==========================================================
doe.study.reader          read and validate a study file
doe.space          parameters, bounds, constraints, unit-cube scaling
doe.design.plans          space-filling plans and augmentation
doe.runs.evaluators     who turns a run into numbers (builtin, command, recorded)
doe.runs.execution      running a plan into the append-safe results store
doe.runs.results        reading plans and results; the results store
doe.aero           the built-in low-order aerodynamic model
=================  ==========================================================
"""
from .errors import DoeError
from .study.reader import Study, load_study

__version__ = "0.1.0"
__all__ = ["DoeError", "Study", "load_study", "__version__"]
