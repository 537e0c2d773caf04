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
"""
from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from .errors import StudyError, where
from .space import LinearConstraint, Parameter, Space
from .tables import NAME_PATTERN, Source, Table

__all__ = ["Response", "PlanSettings", "FitSettings", "EvaluatorSettings", "Study", "load_study", "read_study_text",
           "RESERVED_COLUMNS", "GOALS", "PLAN_METHODS"]

#: Column names a parameter or response may not take.
RESERVED_COLUMNS = frozenset({"run_id", "status", "source", "message", "elapsed_s"})
#: Allowed response goals.
GOALS = ("minimize", "maximize", "none")
#: Plan engines of ``[plan] method``.
PLAN_METHODS = ("lhs", "sobol")
#: Evaluator kinds of ``[evaluator] kind``.
EVALUATOR_KINDS = ("builtin", "command", "recorded")


@dataclass(frozen=True)
class Response:
    """A measured quantity.

    Attributes
    ----------
    name : str
        Column name in results files.
    unit : str
        Unit of the values (``"m^2"`` for CLA, ``"N"`` for forces, ``"-"`` for ratios).
    goal : {"minimize", "maximize", "none"}
        What the engineer wants of it (CLA is negative for downforce, so more
        downforce is ``"minimize"``).
    description : str
    """

    name: str
    unit: str
    goal: str = "none"
    description: str = ""

    def label(self) -> str:
        """Name with unit, for axes and tables."""
        return f"{self.name} [{self.unit}]"


@dataclass(frozen=True)
class PlanSettings:
    """``[plan]``: the first plan.

    Attributes
    ----------
    runs : int or None
        Number of runs; None means the default of 10 per parameter.
    seed : int
        Seed of every random choice in the study.
    method : {"lhs", "sobol"}
        Optimised Latin hypercube or scrambled Sobol' sequence.
    """

    runs: int | None = None
    seed: int = 0
    method: str = "lhs"


@dataclass(frozen=True)
class FitSettings:
    """``[fit]``: how surrogates are fitted (see :mod:`doe.surrogate`).

    Attributes
    ----------
    kernel : {"auto", "sqexp", "matern52", "matern32"}
        Kernel family; ``auto`` picks one per response.
    trend : {"auto", "constant", "linear"}
    noise : {"auto", "learn", "fixed"}
        ``auto``: learned when any run comes from outside ``exact_sources`` or
        replicated points disagree; otherwise a small fixed nugget.
    restarts : int
        Extra optimiser starts per kernel.
    nugget : float
        Fixed diagonal term of a deterministic evaluator, relative to the
        response's variance.
    selection : {"loo", "likelihood"}
        Kernel choice by leave-one-out error or marginal likelihood.
    target_q2 : float
        Accuracy wanted: ``q2_loo`` of every response at least this (the
        stopping rule of ``doe next``).
    exact_sources : tuple of str
        Values of the results' ``source`` column that come from a
        deterministic evaluator.
    length_scale_prior : float
        Standard deviation (natural log) of the log-normal prior on each
        length scale, centred on half the parameter's range; 0 for plain
        maximum likelihood.
    """

    kernel: str = "auto"
    trend: str = "auto"
    noise: str = "auto"
    restarts: int = 3
    nugget: float = 1e-6
    selection: str = "loo"
    target_q2: float = 0.9
    exact_sources: tuple = ("builtin", "command")
    length_scale_prior: float = 1.5


@dataclass(frozen=True)
class EvaluatorSettings:
    """``[evaluator]``: which evaluator and its options (checked by the evaluator kind)."""

    kind: str
    options: dict = field(default_factory=dict)
    source: Source | None = field(default=None, compare=False, repr=False)

    def table(self) -> Table:
        """The options (all keys but ``kind``) as a checked :class:`~doe.tables.Table`."""
        return Table(self.options, self.source or Source(None), "evaluator")


@dataclass(frozen=True)
class Study:
    """A validated study.

    Attributes
    ----------
    name : str
        Used in output folder names (``reports/<name>/``).
    path : Path or None
        The study file; relative paths inside it are resolved against its folder.
    space : Space
    responses : tuple of Response
    evaluator : EvaluatorSettings
    plan : PlanSettings
    description : str
    """

    name: str
    path: Path | None
    space: Space
    responses: tuple
    evaluator: EvaluatorSettings
    plan: PlanSettings = PlanSettings()
    description: str = ""
    fit: FitSettings = FitSettings()

    @property
    def folder(self) -> Path:
        """Folder of the study file (the current folder for a study built in memory)."""
        return self.path.parent if self.path is not None else Path.cwd()

    @property
    def response_names(self) -> list[str]:
        """Response names, in file order."""
        return [r.name for r in self.responses]

    def response(self, name: str) -> Response:
        """The response called ``name``."""
        for r in self.responses:
            if r.name == name:
                return r
        raise StudyError(f"{where(self.path)}: no response named '{name}'; the study has {self.response_names}")

    def resolve(self, relative: str | Path) -> Path:
        """A path from the study file, resolved against the study's folder."""
        p = Path(relative)
        return p if p.is_absolute() else self.folder / p

    @property
    def default_output(self) -> Path:
        """``reports/<name>`` under the current folder."""
        return Path("reports") / self.name


# ---------------------------------------------------------------------------
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
    known = ("study", "parameters", "constraints", "responses", "evaluator", "plan", "fit")
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
    constraints = tuple(_read_constraint(t, names) for t in _array(top, "constraints"))
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
    study = Study(name=name, path=path, space=space, responses=responses, evaluator=evaluator,
                  plan=plan, description=description, fit=fit)
    from .evaluators import check_settings  # late import: evaluators build on studies

    check_settings(study)
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
    return [Table(v, top.source, key, i) for i, v in enumerate(value)]


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
    unit = _unit(t)
    low = t.take("low", float)
    high = t.take("high", float)
    if not low < high:
        raise t.error("high", f"must be greater than low ({high:g} <= {low:g})")
    tol = t.take("tolerance", float, default=0.0, check=lambda v: v >= 0, why="must be >= 0")
    if tol > (high - low):
        raise t.error("tolerance", f"{tol:g} {unit} is wider than the whole range ({high - low:g} {unit})")
    desc = t.take("description", str, default="")
    t.finish()
    return Parameter(name, unit, low, high, tol, desc)


def _read_constraint(t: Table, names: list[str]) -> LinearConstraint:
    name = t.take("name", str)
    unit = t.take("unit", str, default="")
    terms = t.take("terms", dict)
    if not terms:
        raise t.error("terms", "is empty; give at least one parameter and its coefficient")
    clean = {}
    for key, coef in terms.items():
        if key not in names:
            raise t.error("terms", f"'{key}' is not a parameter (parameters: {', '.join(names)})")
        if isinstance(coef, bool) or not isinstance(coef, (int, float)) or not math.isfinite(coef):
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


def _read_plan(t: Table, dim: int) -> PlanSettings:
    runs = t.take("runs", int, default=None, check=lambda v: v >= 2, why="must be at least 2")
    seed = t.take("seed", int, default=0, check=lambda v: 0 <= v < 2**63, why="must be between 0 and 2^63-1")
    method = t.take("method", str, default="lhs", choices=PLAN_METHODS)
    t.finish()
    return PlanSettings(runs=runs, seed=seed, method=method)


def _read_fit(t: Table) -> FitSettings:
    kernel = t.take("kernel", str, default="auto", choices=("auto", "sqexp", "matern52", "matern32"))
    trend = t.take("trend", str, default="auto", choices=("auto", "constant", "linear"))
    noise = t.take("noise", str, default="auto", choices=("auto", "learn", "fixed"))
    restarts = t.take("restarts", int, default=3, check=lambda v: 0 <= v <= 50, why="must be between 0 and 50")
    nugget = t.take("nugget", float, default=1e-6, check=lambda v: 0 < v < 1, why="must be in (0, 1)")
    selection = t.take("selection", str, default="loo", choices=("loo", "likelihood"))
    target = t.take("target_q2", float, default=0.9, check=lambda v: 0 < v < 1, why="must be in (0, 1)")
    exact = t.take("exact_sources", list, default=["builtin", "command"],
                   check=lambda v: all(isinstance(x, str) for x in v), why="must be a list of strings")
    prior = t.take("length_scale_prior", float, default=1.5, check=lambda v: 0 <= v <= 10, why="must be in [0, 10]")
    t.finish()
    return FitSettings(kernel, trend, noise, restarts, nugget, selection, target, tuple(exact), prior)
