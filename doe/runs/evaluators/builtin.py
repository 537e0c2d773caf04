"""The ``builtin`` evaluator: the low-order rear-package model of :mod:`doe.aero`.

A thin adapter: it reads the ``[evaluator]`` settings, maps study parameters
to the model's inputs by name (converting units) and turns the model's outputs
into :class:`~doe.runs.evaluators.base.Outcome` objects. The physics, its
assumptions and its limits are in :mod:`doe.aero.model`: a low-order model for
ranking and planning, not for certifying loads.

Study parameters must be model inputs (see :data:`doe.aero.DESIGN_INPUTS`):

=============== ========= ===================================================
name            units     meaning
=============== ========= ===================================================
flap_angle      deg, rad  hatch flap angle up from the rear-window line
flap_chord      mm, m     hatch flap length (0: no flap)
wing_height     mm, m     wing leading edge above the hatch edge
wing_aoa        deg, rad  wing angle of attack (trailing edge up = downforce)
wing_camber     %, -      NACA 4-digit camber, % chord ("-": fraction)
wing_thickness  %, -      NACA 4-digit thickness, % chord
wing_overhang   mm, m     wing leading edge behind the hatch edge
=============== ========= ===================================================

Choice knobs (``levels = [...]``) named after :data:`doe.aero.CHOICE_INPUTS`
change the geometry the model solves, run by run (see :mod:`doe.aero.choices`):

=============== =======================================================================
wing_section    NACA 4-digit names (``naca2412``) or coordinate files (relative to the study)
flap_position   ``hatch_edge``, ``roof_edge`` (or a number 0-100, % of the rear window)
flap            ``on``, ``off`` (off: no flap, whatever flap_chord says)
wing            ``on``, ``off`` (off: the car and its flap alone)
=============== =======================================================================

Responses must be model outputs (:data:`doe.aero.OUTPUTS`), in their units.

Study keys (all optional; defaults in brackets)::

    [evaluator]
    kind = "builtin"
    chord = 0.24             # wing chord, m                       [0.24]
    span = 1.30              # wing span, m                        [1.30]
    endplate_height = 0.15   # m (0: none)                         [0.15]
    camber_position = 0.4    # NACA camber position, chords        [0.4]
    speed = 40.0             # m/s                                 [40]
    density = 1.225          # kg/m^3 (ISO 2533 sea level)         [1.225]
    temperature = 288.15     # K, for the viscosity                [288.15]
    wing_panels = 60         # panels on the wing section          [60]
    body_panels = 100        # panels on the body without the flap [100]
    flap_panels = 8          # panels on the flap                  [8]
    wing_section = "s.dat"   # wing section from a coordinate file (then no wing_camber/thickness) [NACA]
    wing = true              # false: the car and flap alone       [true]
    ground = true            # false: free air (no ground image)   [true]
    flap_chord = 60.0        # any design input not varied, in model units (mm, deg, % chord)

    [evaluator.car]          # the invented hatchback: see doe.aero.CarGeometry
    wheelbase = 2.55
    roof_height = 1.44
    ...

    [evaluator.coefficients] # empirical coefficients: see doe.aero.Coefficients
    body_3d_factor = 0.30
    ...

A calibration written by ``doe calibrate`` (see :mod:`doe.calibration`) gives
the coefficients' defaults with ``calibration = "calibration.json"`` in
``[evaluator]`` (relative to the study file); coefficients written in
``[evaluator.coefficients]`` still win.
"""
from __future__ import annotations

import time
from dataclasses import fields

import numpy as np

from ...aero.car import CarGeometry
from ...aero.choices import CHOICE_INPUTS, ChoiceModel
from ...aero.model import DESIGN_INPUTS, OUTPUTS, Coefficients, ModelSettings, RearPackageModel
from ...aero.sections import read_coords
from ...errors import AeroError, DoeError, StudyError, where
from .base import Evaluator, Outcome, failed
from .calibration_file import read_calibrated_coefficients

__all__ = ["BuiltinEvaluator", "check_builtin_settings", "read_builtin_settings", "same_output_unit", "level_index"]

_UNIT_ALIASES = {"m^2": {"m^2", "m2", "m²"}, "-": {"-", "", "1"}, "N": {"n"}}


def _positive(v):
    return v > 0


def read_builtin_settings(study, evaluator=None) -> tuple[ModelSettings, dict]:
    """Read and check the ``[evaluator]`` table of a builtin study.

    Parameters
    ----------
    study : Study
    evaluator : EvaluatorSettings, optional
        The table of builtin settings to read (default ``study.evaluator``;
        another table of the same keys, such as a low-fidelity model's).

    Returns
    -------
    settings : ModelSettings
    conversion : dict
        Study parameter name -> multiplier from the study's unit to the model's.

    Raises
    ------
    StudyError
        On an unknown key, a bad value, an unknown parameter or response, or a unit the model cannot convert.
    """
    t = (evaluator or study.evaluator).table()
    kw = {}
    for key in ("chord", "span", "speed", "density", "temperature"):
        kw[key] = t.take(key, float, default=getattr(ModelSettings, key), check=_positive, why="must be > 0")
    kw["endplate_height"] = t.take("endplate_height", float, default=ModelSettings.endplate_height,
                                   check=lambda v: v >= 0, why="must be >= 0 m")
    kw["camber_position"] = t.take("camber_position", float, default=ModelSettings.camber_position,
                                   check=lambda v: 0.1 <= v <= 0.9, why="must be 0.1 to 0.9 chords")
    for key, low in (("wing_panels", 20), ("body_panels", 40), ("flap_panels", 2)):
        kw[key] = t.take(key, int, default=getattr(ModelSettings, key), check=lambda v, lo=low: v >= lo,
                         why=f"must be at least {low}")
    kw["has_wing"] = t.take("wing", bool, default=True)
    kw["ground"] = t.take("ground", bool, default=True)
    names = study.space.names
    _check_choice_clashes(study, t)
    section = t.take("wing_section", str, default=None)
    if section is not None:
        if {"wing_camber", "wing_thickness"} & set(names):
            raise t.error("wing_section", "a section from a file has no wing_camber or wing_thickness to vary")
        try:
            kw["wing_section"] = read_coords(study.resolve(section), n_panels=kw["wing_panels"])
        except AeroError as exc:
            raise t.error("wing_section", str(exc)) from exc
    fixed = {}
    for name, d in DESIGN_INPUTS.items():
        if t.has(name) and name in names:
            raise t.error(name, f"'{name}' is a study parameter; do not also fix it here")
        value = t.take(name, float, default=None)
        if value is not None:
            if not d.low <= value <= d.high:
                raise t.error(name, f"{value:g} {d.unit} is outside the model's range {d.low:g} to {d.high:g}")
            fixed[name] = value
    kw["fixed"] = fixed
    kw["car"] = _read_dataclass(t, "car", CarGeometry)
    kw["coefficients"] = _read_dataclass(t, "coefficients", Coefficients, _calibrated(study, t))
    t.finish()
    try:
        settings = ModelSettings(**kw)
    except AeroError as exc:
        raise t.error(None, str(exc)) from exc
    conversion = _conversions(study, t)
    _check_levels(study, t, settings)
    return settings, conversion


def _check_choice_clashes(study, t) -> None:
    """A choice knob must be one the model knows, and not also be fixed by an ``[evaluator]`` key."""
    names = set(study.space.names)
    for p in study.space.choices:
        if p.name not in CHOICE_INPUTS:
            raise _parameter_error(study, t, p.name, "name", f"choice knob '{p.name}' is not a choice of the builtin "
                                   f"model (choices: {', '.join(CHOICE_INPUTS)})")
    clashes = {"wing_section": ("wing_section", "wing_camber", "wing_thickness"), "wing": ("wing",)}
    for knob, keys in clashes.items():
        if knob not in names:
            continue
        key = next((k for k in keys if t.has(k) or (k != knob and k in names)), None)
        if key is not None:
            raise t.error(key if t.has(key) else None, f"'{key}' clashes with the choice knob '{knob}' "
                                                       f"(the choice sets it run by run); leave it out")


def _check_levels(study, t, settings) -> None:
    """Every level of every choice knob must be usable (a section file is read here, once)."""
    for p in study.space.choices:
        try:
            ChoiceModel(settings, {p.name: p.levels}, study.folder)
        except AeroError as exc:
            raise _parameter_error(study, t, p.name, "levels", str(exc)) from exc


def _parameter_error(study, t, name, key, problem):
    """A StudyError located at ``key`` of the ``[[parameters]]`` entry called ``name``."""
    index = study.space.names.index(name)
    line = t.source.line_of("parameters", key, index)
    return StudyError(f"{where(t.source.path, line, f'[[parameters]] #{index + 1} {key}')}: {problem}")


def _calibrated(study, t) -> dict:
    """Coefficients of the calibration file named by ``calibration`` (empty when none is named)."""
    name = t.take("calibration", str, default=None)
    if name is None:
        return {}
    try:
        return read_calibrated_coefficients(study.resolve(name))
    except DoeError as exc:
        raise t.error("calibration", str(exc)) from exc


def _read_dataclass(t, key, cls, defaults=None):
    sub = t.sub(key)
    if sub is None:
        return cls(**(defaults or {}))
    values = dict(defaults or {})
    for f in fields(cls):
        v = sub.take(f.name, float, default=None)
        if v is not None:
            values[f.name] = v
    sub.finish()
    try:
        return cls(**values)
    except AeroError as exc:
        raise sub.error(None, str(exc)) from exc


def _conversions(study, t) -> dict:
    conv = {}
    for p in study.space.parameters:
        if p.levels:
            continue
        d = DESIGN_INPUTS.get(p.name)
        if d is None and p.name in CHOICE_INPUTS:
            raise t.error(None, f"parameter '{p.name}' is a choice of the builtin model: give it levels "
                                f"({CHOICE_INPUTS[p.name]})")
        if d is None:
            raise t.error(None, f"parameter '{p.name}' is not an input of the builtin model "
                                f"(known inputs: {', '.join(DESIGN_INPUTS)})")
        factor = d.units.get(p.unit)
        if factor is None:
            raise t.error(None, f"parameter '{p.name}' has unit '{p.unit}'; the builtin model accepts "
                                f"{', '.join(repr(u) for u in d.units)}")
        lo, hi = p.low * factor, p.high * factor
        if lo < d.low or hi > d.high:
            raise t.error(None, f"parameter '{p.name}' spans {lo:g} to {hi:g} {d.unit}; the model accepts "
                                f"{d.low:g} to {d.high:g} {d.unit}")
        conv[p.name] = factor
    for r in study.responses:
        if r.name not in OUTPUTS:
            raise t.error(None, f"response '{r.name}' is not an output of the builtin model "
                                f"(outputs: {', '.join(OUTPUTS)})")
        unit = OUTPUTS[r.name][0]
        if not same_output_unit(r.unit, unit):
            raise t.error(None, f"response '{r.name}' has unit '{r.unit}'; the builtin model gives it in '{unit}'")
    return conv


def same_output_unit(unit: str, model_unit: str) -> bool:
    """Whether a response's ``unit`` names the model output's ``model_unit`` (``m2`` is ``m^2``, ...)."""
    accepted = {u.lower() for u in _UNIT_ALIASES.get(model_unit, {model_unit})} | {model_unit.lower()}
    return unit.strip().lower() in accepted


def check_builtin_settings(study) -> None:
    """Validate a builtin study's ``[evaluator]`` options (called when the study is loaded)."""
    read_builtin_settings(study)


def level_index(value, knob: str, names) -> int:
    """A choice's level given by name (a string) or by index (a whole number ``0 .. L-1``), as its index.

    Plans and results files carry names; points built from ``Space.to_unit``-style arrays
    (e.g. :func:`doe.workflow.sensitivity.evaluate_points`) carry indices. A ValueError otherwise.
    """
    if isinstance(value, str):
        if value in names:
            return names.index(value)
        raise ValueError(f"{value[:40]!r} is not a level of {knob} (levels: {', '.join(names)})")
    index = float(value)
    if index.is_integer() and 0 <= index < len(names):
        return int(index)
    raise ValueError(f"{knob} must be a level name or a level index 0 to {len(names) - 1}, got {value!r}")


class BuiltinEvaluator(Evaluator):
    """Evaluate runs with :class:`doe.aero.RearPackageModel` (vectorised in :meth:`evaluate_many`).

    Parameters
    ----------
    settings : ModelSettings
    conversion : dict
        Study parameter -> factor to the model's unit.
    responses : list of str
    choices : dict of str to tuple of str, optional
        Choice knob -> its level names (see :mod:`doe.aero.choices`).
    folder : path
        Folder that coordinate files named as levels are relative to.
    """

    kind = "builtin"

    def __init__(self, settings: ModelSettings, conversion: dict, responses, choices=None, folder="."):
        super().__init__(responses)
        self.choices = {k: tuple(v) for k, v in (choices or {}).items()}
        self.model = ChoiceModel(settings, self.choices, folder) if self.choices else RearPackageModel(settings)
        self.conversion = dict(conversion)

    @classmethod
    def from_study(cls, study) -> "BuiltinEvaluator":
        """Build from a study's ``[evaluator]`` table."""
        settings, conv = read_builtin_settings(study)
        return cls(settings, conv, study.response_names, {p.name: p.levels for p in study.space.choices},
                   study.folder)

    def evaluate(self, run_id: str, point: dict) -> Outcome:
        return self.evaluate_many([run_id], [point])[0]

    def evaluate_many(self, run_ids, points) -> list:
        start = time.monotonic()
        try:
            inputs = {name: np.array([float(p[name]) * f for p in points]) for name, f in self.conversion.items()}
            levels = {name: np.array([level_index(p[name], name, names) for p in points])
                      for name, names in self.choices.items()}
        except (KeyError, TypeError, ValueError) as exc:
            return [failed(self.responses, f"point is missing or has a bad value: {exc}", self.kind)
                    for _ in points]
        try:
            result = self.model.evaluate(inputs, levels) if self.choices else self.model.evaluate(inputs)
        except AeroError as exc:
            return [failed(self.responses, str(exc), self.kind) for _ in points]
        each = (time.monotonic() - start) / max(len(points), 1)
        out = []
        for i in range(len(points)):
            if not result.ok[i]:
                out.append(failed(self.responses, result.messages[i], self.kind, each))
                continue
            values = {r: float(result.values[r][i]) for r in self.responses}
            bad = [r for r, v in values.items() if not np.isfinite(v)]
            if bad:
                out.append(failed(self.responses, f"{bad[0]} is not defined here (e.g. balance with no net "
                                                  "vertical load)", self.kind, each))
            else:
                out.append(Outcome(values, "ok", "", self.kind, each))
        return out

