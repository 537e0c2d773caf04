"""Reading a study file (TOML) into plain, validated objects.

A study file describes one question: the design space (``[[parameters]]`` and
``[[constraints]]``), what is measured (``[[responses]]``), who measures it
(``[evaluator]``) and how the first runs are chosen (``[plan]``). Any key this
module does not know is an error that names the file, line and key. No string
in a study file is ever evaluated as code.

Minimal example::

    [study]
    name = "rear-package-a"

    [[parameters]]
    name = "flap_angle"
    unit = "deg"
    low = 0.0
    high = 20.0
    tolerance = 0.5

    [[responses]]
    name = "cla_total"
    unit = "m^2"
    goal = "minimize"

    [evaluator]
    kind = "builtin"

    [plan]
    runs = 40
    seed = 1

Besides a continuous range, a parameter may be a stepped knob (``low``,
``high`` and ``step``, the range a whole number of steps; or ``values = [0, 5,
10]`` instead of the range) or a choice knob (``levels = ["on", "off"]`` or
section file names; no range, step or tolerance; ``unit`` optional). A
constraint may not weigh a choice knob.

Optional tables for robust settings and vehicle figures (see
``studies/demo_vehicle.toml`` for a full example):

``[robust]``
    ``objective`` (a response with a goal; default the first), ``k`` (robust
    value = mean -/+ k std, default 1), ``probability`` (each limit must hold
    with this chance, default 0.9), ``samples`` (draws of setup scatter,
    rounded up to a power of two, default 128), ``seed`` (default ``[plan] seed``), ``limits`` (list
    of ``{ response = "...", max = x, min = y }``, either bound optional),
    ``tradeoff`` (responses of the trade-off set; default those with a goal),
    ``targets`` (``{ response = value }`` for trade-off responses with goal none),
    ``baseline`` (``{ parameter = value, ... }``: the setting run now, to compare with; a choice takes a level name).
    The objective may also be a vehicle figure computed from the ``[vehicle]`` axle responses
    (``lap_time_s`` minimised, needs ``[track]``; ``top_speed_kph`` or
    ``corner_speed_<radius>m_kph`` maximised), and a limit may be put on a figure with
    ``{ figure = "balance_shift", min = -0.045 }`` (figures: ``lap_time_s``, ``top_speed_kph``,
    ``front_load_share``, ``balance_shift``, ``corner_speed_<radius>m_kph``).
``[vehicle]``
    ``mass_kg``, ``tyre_mu``, ``power_kw`` (at the wheels), ``wheelbase_m``,
    ``cg_to_front_axle_m`` (required); ``rolling_resistance`` (-, default
    0.012), ``drive`` (front | rear | all), ``brake_limit_g``,
    ``air_density_kg_m3`` (default 1.225); ``cla_response``/``cda_response``
    (default cla_total/cda_total), ``front_share_response`` or
    ``aero_front_share`` (front share of the aero load, -); ``speeds_kph`` and
    ``radii_m`` of the tables; ``balance_speed_kph`` (speed of the balance figures, default 150).
``[track]``
    ``name`` and ``[[track.segments]]``, each ``kind = "straight"`` with
    ``length_m``, or ``kind = "corner"`` with ``radius_m`` and one of
    ``angle_deg`` or ``length_m`` (arc). The lap closes on itself.
"""
from __future__ import annotations

import math
import re
import tomllib
from dataclasses import replace
from pathlib import Path

from ..checks import is_number
from .. import defaults
from ..errors import DoeError, StudyError, where
from ..runs.evaluators import check_settings
from ..space import LinearConstraint, Parameter, Space
from .settings import (EVALUATOR_KINDS, GOALS, PLAN_METHODS, RESERVED_COLUMNS,
                       EvaluatorSettings, FitSettings, LowFidelitySettings, PlanSettings, Response, ResponseLimit,
                       RobustSettings, SensitivitySettings, Study, VehicleSettings, figure_goal)
from .tables import REQUIRED, Source, Table
from ..vehicle import DRIVES, FIGURE_UNITS, RHO_SEA_LEVEL, SEGMENT_KINDS, Segment, Track, Vehicle, VehicleLimit

#: Level names of a choice knob (they may be file names, e.g. of wing sections).
LEVEL_PATTERN = re.compile(r"^[A-Za-z0-9_][A-Za-z0-9_./-]{0,79}$")
#: Relative slack when checking that a range is a whole number of steps.
STEP_TOLERANCE = 1e-9
#: Most steps a stepped knob may have.
MAX_STEPS = 1000

__all__ = ["Response", "PlanSettings", "FitSettings", "EvaluatorSettings", "SensitivitySettings", "ResponseLimit",
           "RobustSettings", "VehicleSettings", "LowFidelitySettings", "Study", "load_study", "read_study_text",
           "RESERVED_COLUMNS", "GOALS", "PLAN_METHODS"]


def load_study(path: str | Path) -> Study:
    """Read and validate a study file.

    Parameters
    ----------
    path : str or Path
        A TOML file.

    Returns
    -------
    Study

    Raises
    ------
    StudyError
        On any unreadable file, unknown key, bad type or broken rule; the
        message names the file, line and key.
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise StudyError(f"{path}: cannot read the study file ({exc.strerror or exc})") from exc
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise StudyError(f"{path}: the study file is not UTF-8 text (byte {exc.start})") from exc
    return read_study_text(text, path)


def read_study_text(text: str, path: str | Path | None = None) -> Study:
    """Validate a study given as TOML text (see :func:`load_study`)."""
    path = Path(path) if path is not None else None
    text = text.replace("\r\n", "\n")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise StudyError(f"{where(path)}: not valid TOML ({exc})") from exc
    source = Source(path, text)
    top = Table(data, source, "")
    known = ("study", "parameters", "constraints", "responses", "evaluator", "plan", "fit", "sensitivity", "robust",
             "vehicle", "track", "low_fidelity")
    unknown = [k for k in data if k not in known]
    if unknown:
        line = source.line_of(unknown[0]) or source.line_of(None, unknown[0])
        raise StudyError(f"{where(path, line)}: unknown table or key '{unknown[0]}' "
                         f"(known: {', '.join(known)})")

    head = _one_table(top, "study", required=True)
    name = head.take("name", str, check=_safe_folder_name,
                     why="must be a plain folder name (letters, digits, '-', '_', '.'; no '/' or '..')")
    description = head.take("description", str, default="")
    head.finish()

    parameters = tuple(_read_parameter(t) for t in _array(top, "parameters", required=True))
    _no_repeats(parameters, "parameters", source)
    names = [p.name for p in parameters]
    choices = [p.name for p in parameters if p.levels]
    constraints = tuple(_read_constraint(t, names, choices) for t in _array(top, "constraints"))
    _no_repeats(constraints, "constraints", source)
    responses = tuple(_read_response(t) for t in _array(top, "responses", required=True))
    _no_repeats(responses, "responses", source)
    clash = set(names) & {r.name for r in responses}
    if clash:
        raise StudyError(f"{where(path)}: '{sorted(clash)[0]}' is both a parameter and a response")

    evaluator = _read_evaluator(_one_table(top, "evaluator", required=True))
    plan = _read_plan(_one_table(top, "plan"), len(parameters))
    space = Space(parameters, constraints)
    fit = _read_fit(_one_table(top, "fit"))
    sensitivity = _read_sensitivity(_one_table(top, "sensitivity"), parameters)
    has_goal = any(r.goal != "none" for r in responses)
    vehicle = _read_vehicle(_one_table(top, "vehicle"), responses) if "vehicle" in data else None
    track = _read_track(_one_table(top, "track")) if "track" in data else None
    robust = (_read_robust(_one_table(top, "robust"), responses, plan.seed, parameters, vehicle, track)
              if "robust" in data or has_goal else None)
    low = _read_low_fidelity(_one_table(top, "low_fidelity"), plan.seed) if "low_fidelity" in data else None
    if fit.fidelity == "two" and low is None:
        raise StudyError(f"{where(path, source.line_of('fidelity'))}: [fit] fidelity = \"two\" needs a "
                         "[low_fidelity] table (the cheap model)")
    study = Study(name=name, path=path, space=space, responses=responses, evaluator=evaluator,
                  plan=plan, description=description, fit=fit, sensitivity=sensitivity, robust=robust,
                  vehicle=vehicle, track=track, low_fidelity=low)
    check_settings(study)
    if low is not None:
        check_settings(study.with_evaluator(low.evaluator))
    return study


# ---------------------------------------------------------------------------
def _safe_folder_name(name: str) -> bool:
    import re

    return bool(re.match(r"^[A-Za-z0-9_][A-Za-z0-9_.-]{0,79}$", name)) and ".." not in name


def _one_table(top: Table, key: str, required: bool = False) -> Table:
    top._taken.add(key)
    if key not in top.data:
        if required:
            raise StudyError(f"{where(top.source.path)}: missing table [{key}]")
        return Table({}, top.source, key)
    value = top.data[key]
    if isinstance(value, list):
        raise top.error(key, f"write [{key}] once, as a table, not as [[{key}]]")
    return Table(value, top.source, key)


def _array(top: Table, key: str, required: bool = False) -> list:
    top._taken.add(key)
    if key not in top.data:
        if required:
            raise StudyError(f"{where(top.source.path)}: missing [[{key}]] (at least one is needed)")
        return []
    value = top.data[key]
    if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
        raise StudyError(f"{where(top.source.path, top.source.line_of(key))}: "
                         f"'{key}' must be written as [[{key}]] tables")
    if required and not value:
        raise StudyError(f"{where(top.source.path)}: [[{key}]] is empty (at least one is needed)")
    label = f"{top.name}.{key}" if top.name else key
    return [Table(v, top.source, label, i) for i, v in enumerate(value)]


def _no_repeats(items, key: str, source: Source) -> None:
    seen = {}
    for i, item in enumerate(items):
        if item.name in seen:
            line = source.line_of(key, "name", i)
            raise StudyError(f"{where(source.path, line, f'[[{key}]] #{i + 1} name')}: "
                             f"'{item.name}' is used twice (first in #{seen[item.name] + 1})")
        seen[item.name] = i


def _column_name(t: Table) -> str:
    name = t.take_name("name")
    if name in RESERVED_COLUMNS:
        raise t.error("name", f"'{name}' is reserved for a results column; choose another name")
    return name


def _unit(t: Table) -> str:
    unit = t.take("unit", str)
    if not unit.strip():
        raise t.error("unit", "is empty; give the unit (use \"-\" for a pure number)")
    return unit.strip()


def _read_parameter(t: Table) -> Parameter:
    name = _column_name(t)
    if t.has("levels"):
        return _read_choice(t, name)
    unit = _unit(t)
    if t.has("values"):
        return _read_values(t, name, unit)
    low = t.take("low", float)
    high = t.take("high", float)
    if not low < high:
        raise t.error("high", f"must be greater than low ({high:g} <= {low:g})")
    step = t.take("step", float, default=None, check=lambda v: v > 0, why="must be > 0")
    if step is not None:
        return _read_step(t, name, unit, low, high, step)
    tol = t.take("tolerance", float, default=0.0, check=lambda v: v >= 0, why="must be >= 0")
    if tol > (high - low):
        raise t.error("tolerance", f"{tol:g} {unit} is wider than the whole range ({high - low:g} {unit})")
    desc = t.take("description", str, default="")
    t.finish()
    return Parameter(name, unit, low, high, tol, desc)


def _read_choice(t: Table, name: str) -> Parameter:
    levels = t.take("levels", list)
    for key in ("low", "high", "step", "values", "tolerance"):
        if t.has(key):
            raise t.error(key, "leave it out: a choice knob takes only levels (a choice is not scattered or scaled)")
    bad = next((v for v in levels if not isinstance(v, str) or not LEVEL_PATTERN.match(v) or ".." in v), None)
    if bad is not None:
        raise t.error("levels", f"{bad!r} must be a string of letters, digits, '_', '-', '.' or '/' (at most 80)")
    if len(levels) < 2:
        raise t.error("levels", "a choice needs at least two levels")
    twice = next((v for i, v in enumerate(levels) if v in levels[:i]), None)
    if twice is not None:
        raise t.error("levels", f"'{twice}' is listed twice")
    unit = _unit(t) if t.has("unit") else "-"
    desc = t.take("description", str, default="")
    t.finish()
    return replace(Parameter.choice(name, levels, desc), unit=unit)


def _read_values(t: Table, name: str, unit: str) -> Parameter:
    values = t.take("values", list)
    for key in ("low", "high", "step"):
        if t.has(key):
            raise t.error(key, "leave it out: give either values = [...] or low, high (and step), not both")
    if len(values) < 2 or not all(is_number(v) and math.isfinite(v) for v in values):
        raise t.error("values", "must be a list of at least two finite numbers")
    if len(set(values)) != len(values):
        raise t.error("values", "a value is listed twice")
    return _stepped(t, name, unit, values)


def _read_step(t: Table, name: str, unit: str, low: float, high: float, step: float) -> Parameter:
    count = (high - low) / step
    if abs(count - round(count)) > STEP_TOLERANCE * max(count, 1.0):
        raise t.error("step", f"the range {low:g} to {high:g} {unit} is not a whole number of steps of {step:g}")
    if round(count) > MAX_STEPS:
        raise t.error("step", f"{round(count)} steps; at most {MAX_STEPS} (leave step out for a continuous knob)")
    return _stepped(t, name, unit, [low + k * step for k in range(int(round(count)) + 1)])


def _stepped(t: Table, name: str, unit: str, values) -> Parameter:
    span = max(values) - min(values)
    tol = t.take("tolerance", float, default=0.0, check=lambda v: v >= 0, why="must be >= 0")
    if tol > span:
        raise t.error("tolerance", f"{tol:g} {unit} is wider than the whole range ({span:g} {unit})")
    desc = t.take("description", str, default="")
    t.finish()
    return Parameter.stepped(name, unit, values, tol, desc)


def _read_constraint(t: Table, names: list[str], choices=()) -> LinearConstraint:
    name = t.take("name", str)
    unit = t.take("unit", str, default="")
    terms = t.take("terms", dict)
    if not terms:
        raise t.error("terms", "is empty; give at least one parameter and its coefficient")
    clean = {}
    for key, coef in terms.items():
        if key not in names:
            raise t.error("terms", f"'{key}' is not a parameter (parameters: {', '.join(names)})")
        if key in choices:
            raise t.error("terms", f"'{key}' is a choice knob; a constraint weighs only numeric knobs")
        if not is_number(coef) or not math.isfinite(coef):
            raise t.error("terms", f"the coefficient of '{key}' must be a finite number, got {coef!r}")
        clean[key] = float(coef)
    upper = t.take("max", float, default=None)
    lower = t.take("min", float, default=None)
    if upper is None and lower is None:
        raise t.error(None, "give 'max', 'min' or both")
    if upper is not None and lower is not None and not lower <= upper:
        raise t.error("max", f"must be >= min ({upper:g} < {lower:g})")
    desc = t.take("description", str, default="")
    t.finish()
    return LinearConstraint(name, clean, upper, lower, unit, desc)


def _read_response(t: Table) -> Response:
    name = _column_name(t)
    unit = _unit(t)
    goal = t.take("goal", str, default="none", choices=GOALS)
    desc = t.take("description", str, default="")
    t.finish()
    return Response(name, unit, goal, desc)


def _read_evaluator(t: Table) -> EvaluatorSettings:
    kind = t.take("kind", str, choices=EVALUATOR_KINDS)
    return EvaluatorSettings(kind=kind, options=t.rest(), source=t.source)


def _read_low_fidelity(t: Table, seed: int) -> LowFidelitySettings:
    kind = t.take("kind", str, choices=("builtin", "command"))
    runs = t.take("runs", int, default=None, check=lambda v: 3 <= v <= 5000, why="must be between 3 and 5000")
    seed = t.take("seed", int, default=seed, check=lambda v: 0 <= v < 2**63, why="must be between 0 and 2^63-1")
    return LowFidelitySettings(EvaluatorSettings(kind=kind, options=t.rest(), source=t.source,
                                                 table_name="low_fidelity"), runs, seed)


def _read_plan(t: Table, dim: int) -> PlanSettings:
    runs = t.take("runs", int, default=None, check=lambda v: v >= 2, why="must be at least 2")
    seed = t.take("seed", int, default=0, check=lambda v: 0 <= v < 2**63, why="must be between 0 and 2^63-1")
    method = t.take("method", str, default="lhs", choices=PLAN_METHODS)
    t.finish()
    return PlanSettings(runs=runs, seed=seed, method=method)


def _response_name(t: Table, key: str, responses, default=REQUIRED) -> str | None:
    names = [r.name for r in responses]
    value = t.take(key, str, default=default)
    if value is not None and value not in names:
        raise t.error(key, f"'{value}' is not a response (responses: {', '.join(names)})")
    return value


def _numbers(t: Table, key: str, default: tuple) -> tuple:
    values = t.take(key, list, default=list(default))
    if not values or not all(is_number(v) and math.isfinite(v) and v > 0
                             for v in values):
        raise t.error(key, "must be a non-empty list of positive numbers")
    return tuple(float(v) for v in values)


def _read_baseline(t: Table, parameters) -> dict | None:
    """``{name: value}`` in study units; a choice's level name becomes its index."""
    values = t.take("baseline", dict, default=None)
    if values is None:
        return None
    names = [p.name for p in parameters]
    by_name = {p.name: p for p in parameters}
    for name, value in values.items():
        p = by_name.get(name)
        if p is not None and p.levels:
            if value not in p.levels:
                raise t.error("baseline", f"'{name}' is a choice: give one of its levels ({', '.join(p.levels)}), "
                                          f"not {value!r}")
        elif p is None or not is_number(value):
            raise t.error("baseline", f"'{name}' must be a parameter ({', '.join(names)}) with a number as its value")
    for p in parameters:
        if p.name not in values:
            raise t.error("baseline", f"give a value for every parameter; '{p.name}' is missing")
        if not p.levels and not p.low <= values[p.name] <= p.high:
            raise t.error("baseline", f"{p.name} = {values[p.name]:g} is outside [{p.low:g}, {p.high:g}] {p.unit}")
    return {p.name: float(p.levels.index(values[p.name])) if p.levels else float(values[p.name]) for p in parameters}


FIGURE_NAMES = ", ".join(list(FIGURE_UNITS) + ["corner_speed_<radius>m_kph"])


def _figure_usable(t: Table, key: str, name: str, vehicle, track) -> None:
    """A vehicle figure needs ``[vehicle]`` with the axle responses, and lap time a ``[track]``."""
    if vehicle is None or vehicle.cla_front_response is None:
        raise t.error(key, f"the vehicle figure '{name}' needs a [vehicle] table with cla_front_response and "
                           "cla_rear_response (it is computed from their surrogates)")
    if name == "lap_time_s" and track is None:
        raise t.error(key, "the vehicle figure 'lap_time_s' needs a [track] table")


def _objective(t: Table, responses, vehicle, track) -> tuple:
    """``(name, goal, is_figure)`` of ``[robust] objective``: a response with a goal, or a vehicle figure."""
    goals = {r.name: r.goal for r in responses}
    first = next((r.name for r in responses if r.goal != "none"), responses[0].name)
    name = t.take("objective", str, default=first)
    if name in goals:
        if goals[name] == "none":
            raise t.error("objective", f"response '{name}' has goal = \"none\"; give it goal = \"minimize\" "
                                       "or \"maximize\" in [[responses]]")
        return name, goals[name], False
    try:
        goal = figure_goal(name)
    except DoeError:
        raise t.error("objective", f"'{name}' is not a response ({', '.join(goals)}) or a vehicle figure "
                                   f"({FIGURE_NAMES})") from None
    if goal == "none":
        raise t.error("objective", f"the vehicle figure '{name}' has no better direction; put a window on it "
                                   "in limits instead")
    _figure_usable(t, "objective", name, vehicle, track)
    return name, goal, True


def _read_limit(lt: Table, responses, vehicle, track):
    """One entry of ``[robust] limits``: ``{ response = ... }`` or ``{ figure = ... }`` with ``min``/``max``."""
    if lt.has("figure") and lt.has("response"):
        raise lt.error("figure", "give 'response' or 'figure', not both")
    if lt.has("figure"):
        name = lt.take("figure", str)
        try:
            figure_goal(name)
        except DoeError:
            raise lt.error("figure", f"'{name}' is not a vehicle figure ({FIGURE_NAMES})") from None
        _figure_usable(lt, "figure", name, vehicle, track)
    else:
        name = _response_name(lt, "response", responses)
    hi, lo = lt.take("max", float, default=None), lt.take("min", float, default=None)
    lt.finish()
    if hi is None and lo is None:
        raise lt.error(None, "give 'max', 'min' or both")
    if hi is not None and lo is not None and not lo < hi:
        raise lt.error("max", f"must be greater than min ({hi:g} <= {lo:g})")
    return VehicleLimit(name, lo, hi) if lt.has("figure") else ResponseLimit(name, hi, lo)


def _read_robust(t: Table, responses, plan_seed: int, parameters, vehicle=None, track=None) -> RobustSettings:
    goals = {r.name: r.goal for r in responses}
    objective, goal, is_figure = _objective(t, responses, vehicle, track)
    k = t.take("k", float, default=1.0, check=lambda v: v >= 0, why="must be >= 0")
    prob = t.take("probability", float, default=0.9, check=lambda v: 0 < v < 1, why="must be between 0 and 1")
    samples = t.take("samples", int, default=128, check=lambda v: 16 <= v <= 65536, why="must be 16 to 65536")
    seed = t.take("seed", int, default=plan_seed, check=lambda v: 0 <= v < 2**63, why="must be between 0 and 2^63-1")
    limits = [_read_limit(lt, responses, vehicle, track) for lt in _array(t, "limits")]
    with_goal = tuple(r.name for r in responses if r.goal != "none")
    tradeoff = tuple(t.take("tradeoff", list, default=list(with_goal)))
    targets = t.take("targets", dict, default={})
    for name in tradeoff:
        if name not in goals:
            raise t.error("tradeoff", f"'{name}' is not a response (responses: {', '.join(goals)})")
        if goals[name] == "none" and name not in targets:
            raise t.error("tradeoff", f"'{name}' has goal = \"none\"; give its aim in targets = {{ {name} = ... }}")
    for name, value in targets.items():
        if name not in tradeoff or not is_number(value):
            raise t.error("targets", f"'{name}' must be a trade-off response with a number as its target")
    baseline = _read_baseline(t, parameters)
    t.finish()
    return RobustSettings(objective, goal, k, prob, tuple(lim for lim in limits if isinstance(lim, ResponseLimit)),
                          samples, seed, tradeoff, {n: float(v) for n, v in targets.items()}, baseline,
                          tuple(lim for lim in limits if isinstance(lim, VehicleLimit)), is_figure)


def _read_vehicle(t: Table, responses) -> VehicleSettings:
    positive = dict(check=lambda v: v > 0, why="must be > 0")
    car = dict(mass_kg=t.take("mass_kg", float, **positive), tyre_mu=t.take("tyre_mu", float, **positive),
               power_kw=t.take("power_kw", float, **positive),
               wheelbase_m=t.take("wheelbase_m", float, **positive),
               cg_to_front_axle_m=t.take("cg_to_front_axle_m", float, check=lambda v: v >= 0, why="must be >= 0"),
               rolling_resistance=t.take("rolling_resistance", float, default=0.012,
                                         check=lambda v: v >= 0, why="must be >= 0"),
               drive=t.take("drive", str, default="front", choices=DRIVES),
               brake_limit_g=t.take("brake_limit_g", float, default=None, **positive),
               air_density_kg_m3=t.take("air_density_kg_m3", float, default=RHO_SEA_LEVEL, **positive))
    if car["cg_to_front_axle_m"] > car["wheelbase_m"]:
        raise t.error("cg_to_front_axle_m", "is longer than wheelbase_m")
    front = _response_name(t, "cla_front_response", responses, default=None)
    rear = _response_name(t, "cla_rear_response", responses, default=None)
    if (front is None) != (rear is None):
        raise t.error("cla_front_response" if front is None else "cla_rear_response",
                      "give both cla_front_response and cla_rear_response, or neither")
    if front is not None:
        for key in ("cla_response", "front_share_response", "aero_front_share"):
            if t.has(key):
                raise t.error(key, "leave it out: cla_front_response and cla_rear_response give the aero load")
    settings = VehicleSettings(
        car=Vehicle(**car),
        cla_response=_response_name(t, "cla_response", responses, default=None if front else "cla_total"),
        cda_response=_response_name(t, "cda_response", responses, default="cda_total"),
        cla_front_response=front, cla_rear_response=rear,
        front_share_response=_response_name(t, "front_share_response", responses, default=None),
        aero_front_share=t.take("aero_front_share", float, default=0.5),
        speeds_kph=_numbers(t, "speeds_kph", VehicleSettings.speeds_kph),
        radii_m=_numbers(t, "radii_m", VehicleSettings.radii_m),
        balance_speed_kph=t.take("balance_speed_kph", float, default=VehicleSettings.balance_speed_kph,
                                 check=lambda v: 0 < v < 500, why="must be between 0 and 500 km/h"))
    t.finish()
    return settings


def _read_track(t: Table) -> Track:
    name = t.take("name", str, default="")
    segments = []
    for st in _array(t, "segments", required=True):
        kind = st.take("kind", str, choices=SEGMENT_KINDS)
        positive = dict(default=None, check=lambda v: v > 0, why="must be > 0")
        length, radius = st.take("length_m", float, **positive), st.take("radius_m", float, **positive)
        angle = st.take("angle_deg", float, **positive)
        st.finish()
        if kind == "straight":
            if length is None or radius is not None or angle is not None:
                raise st.error(None, "a straight takes length_m only")
            segments.append(Segment("straight", length))
        else:
            if radius is None or (length is None) == (angle is None):
                raise st.error(None, "a corner takes radius_m and one of length_m (arc) or angle_deg")
            segments.append(Segment.corner(radius, angle_deg=angle, length_m=length))
    t.finish()
    if not any(s.kind == "corner" for s in segments):
        raise t.error("segments", "a lap needs at least one corner")
    return Track(tuple(segments), name)


def _read_fit(t: Table) -> FitSettings:
    kernel = t.take("kernel", str, default=defaults.KERNEL, choices=("auto", "sqexp", "matern52", "matern32"))
    trend = t.take("trend", str, default=defaults.TREND, choices=("auto", "constant", "linear"))
    noise = t.take("noise", str, default=defaults.NOISE, choices=("auto", "learn", "fixed"))
    restarts = t.take("restarts", int, default=defaults.RESTARTS, check=lambda v: 0 <= v <= 50, why="must be between 0 and 50")
    nugget = t.take("nugget", float, default=defaults.NUGGET, check=lambda v: 0 < v < 1, why="must be in (0, 1)")
    selection = t.take("selection", str, default=defaults.SELECTION, choices=("loo", "likelihood"))
    target = t.take("target_q2", float, default=defaults.TARGET_Q2, check=lambda v: 0 < v < 1, why="must be in (0, 1)")
    exact = t.take("exact_sources", list, default=list(defaults.EXACT_SOURCES),
                   check=lambda v: all(isinstance(x, str) for x in v), why="must be a list of strings")
    prior = t.take("length_scale_prior", float, default=defaults.LENGTH_SCALE_PRIOR, check=lambda v: 0 <= v <= 10, why="must be in [0, 10]")
    fidelity = t.take("fidelity", str, default=defaults.FIDELITY, choices=("auto", "single", "two"))
    uncertainty = t.take("uncertainty", str, default=defaults.UNCERTAINTY, choices=("auto", "mixture", "plugin"))
    t.finish()
    return FitSettings(kernel, trend, noise, restarts, nugget, selection, target, tuple(exact), prior, fidelity,
                       uncertainty)


def _read_sensitivity(t: Table, parameters) -> SensitivitySettings:
    distribution = t.take("distribution", str, default="uniform", choices=("uniform", "normal", "truncnormal"))
    nominal = t.take("nominal", dict, default={})
    by_name = {p.name: p for p in parameters}
    for key, value in nominal.items():
        if key not in by_name:
            raise t.error("nominal", f"'{key}' is not a parameter (parameters: {', '.join(by_name)})")
        p = by_name[key]
        if not is_number(value) or not p.low <= value <= p.high:
            raise t.error("nominal", f"'{key}' must be a number in [{p.low:g}, {p.high:g}] {p.unit}, got {value!r}")
    base = t.take("base_samples", int, default=None, check=lambda v: v >= 8 and not v & (v - 1),
                  why="must be a power of two of at least 8")
    second = t.take("second_order", bool, default=False)
    paths = t.take("paths", int, default=64, check=lambda v: v >= 8, why="must be at least 8")
    t.finish()
    return SensitivitySettings(distribution, {k: float(v) for k, v in nominal.items()}, base, second, paths)
