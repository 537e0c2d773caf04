"""A study's settings: plain frozen dataclasses, one per table of the study file.

:mod:`doe.study.reader` fills them from a TOML file and checks every key;
the file's keys and their meaning are described there.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from .. import defaults
from ..errors import StudyError, where
from ..space import Space
from ..vehicle import Track, Vehicle, figure_unit
from .tables import Source, Table

__all__ = ["Response", "PlanSettings", "FitSettings", "EvaluatorSettings", "SensitivitySettings", "ResponseLimit",
           "RobustSettings", "VehicleSettings", "LowFidelitySettings", "Study", "RESERVED_COLUMNS", "GOALS",
           "PLAN_METHODS", "EVALUATOR_KINDS", "LOW_RUNS_PER_PARAMETER", "LOW_RUNS_MAX", "figure_goal"]

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
    """``[fit]``: how surrogates are fitted (see :mod:`doe.surrogate.gp`).

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
    fidelity : {"auto", "single", "two"}
        ``two``: a two-fidelity surrogate per response (the results are the
        expensive level, the ``[low_fidelity]`` model the cheap one, see
        :mod:`doe.surrogate.twofidelity`); ``single``: the results alone; ``auto``:
        ``two`` when the study has a ``[low_fidelity]`` table.
    uncertainty : {"auto", "mixture", "plugin"}
        How the kernel's unknown settings enter predictions, bands and
        intervals (:mod:`doe.surrogate.hyperposterior`): ``mixture`` averages
        over settings sampled from their posterior; ``plugin`` uses the fitted
        settings alone; ``auto`` uses the mixture unless the runs pin the
        settings down (the fit summary says which and why).
    """

    kernel: str = defaults.KERNEL
    trend: str = defaults.TREND
    noise: str = defaults.NOISE
    restarts: int = defaults.RESTARTS
    nugget: float = defaults.NUGGET
    selection: str = defaults.SELECTION
    target_q2: float = defaults.TARGET_Q2
    exact_sources: tuple = defaults.EXACT_SOURCES
    length_scale_prior: float = defaults.LENGTH_SCALE_PRIOR
    fidelity: str = defaults.FIDELITY
    uncertainty: str = defaults.UNCERTAINTY


@dataclass(frozen=True)
class EvaluatorSettings:
    """``[evaluator]``: which evaluator and its options (checked by the evaluator kind)."""

    kind: str
    options: dict = field(default_factory=dict)
    source: Source | None = field(default=None, compare=False, repr=False)
    table_name: str = "evaluator"

    def table(self) -> Table:
        """The options (all keys but ``kind``) as a checked :class:`~doe.study.tables.Table`."""
        return Table(self.options, self.source or Source(None), self.table_name)


@dataclass(frozen=True)
class LowFidelitySettings:
    """``[low_fidelity]``: the cheap model behind a two-fidelity surrogate (see :mod:`doe.surrogate.twofidelity`).

    Attributes
    ----------
    evaluator : EvaluatorSettings
        ``kind`` (``builtin`` or ``command``) and its options, the same keys
        as in ``[evaluator]``.
    runs : int or None
        Cheap runs spread over the space, besides one at every expensive run
        (a nested plan); None: :data:`LOW_RUNS_PER_PARAMETER` per parameter,
        at most :data:`LOW_RUNS_MAX`.
    seed : int
        Seed of the cheap runs' plan.
    """

    evaluator: EvaluatorSettings
    runs: int | None = None
    seed: int = 0

    def runs_for(self, dim: int) -> int:
        """The number of spread cheap runs for ``dim`` parameters."""
        return self.runs if self.runs is not None else min(LOW_RUNS_PER_PARAMETER * dim, LOW_RUNS_MAX)


#: Default cheap runs per parameter of ``[low_fidelity]``, and their cap (a GP fit grows as runs^2 to runs^3).
LOW_RUNS_PER_PARAMETER = 30
LOW_RUNS_MAX = 300


@dataclass(frozen=True)
class SensitivitySettings:
    """``[sensitivity]``: the question ``doe sensitivity`` asks.

    Attributes
    ----------
    distribution : {"uniform", "normal", "truncnormal"}
        Input distribution: uniform over the bounds, or scatter (one standard
        deviation = the parameter's tolerance) around ``nominal``.
    nominal : dict of str to float
        The setting the scatter is around, study units; a parameter left out
        sits at the middle of its range.
    base_samples : int or None
        Saltelli base sample (a power of two); None chooses it (see doe.sensitivity.sobol).
    second_order : bool
        Also estimate second-order indices.
    paths : int
        Surrogate posterior sample paths for the surrogate's share of the intervals.
    """

    distribution: str = "uniform"
    nominal: dict = field(default_factory=dict)
    base_samples: int | None = None
    second_order: bool = False
    paths: int = 64


@dataclass(frozen=True)
class ResponseLimit:
    """One limit of ``[robust] limits``: ``min <= response <= max`` (in the response's unit)."""

    response: str
    max: float | None = None
    min: float | None = None

    def describe(self) -> str:
        """``"0.3 <= balance_front <= 0.5"``."""
        left = f"{self.min:g} <= " if self.min is not None else ""
        right = f" <= {self.max:g}" if self.max is not None else ""
        return f"{left}{self.response}{right}"


def figure_goal(name: str) -> str:
    """The direction a driver wants of a vehicle figure: ``"minimize"``, ``"maximize"`` or ``"none"``.

    Lap time is minimised, top speed and corner speeds (``corner_speed_<radius>m_kph``) maximised;
    the balance figures have no direction (put a window on them as a limit). A DoeError for an
    unknown name.
    """
    figure_unit(name)
    if name == "lap_time_s":
        return "minimize"
    if name == "top_speed_kph" or name.startswith("corner_speed_"):
        return "maximize"
    return "none"


@dataclass(frozen=True)
class RobustSettings:
    """``[robust]``: what the robust search looks for (see :mod:`doe.robust.search`).

    Attributes
    ----------
    objective : str
        Response or vehicle figure (:func:`doe.vehicle.figure_unit`, e.g. ``"lap_time_s"``) to
        optimise, in the direction of its ``goal``.
    goal : {"minimize", "maximize"}
        The objective's goal (a figure's from :func:`figure_goal`).
    k : float
        Robust score is mean - k * std (maximize) or mean + k * std (minimize), -.
    probability : float
        Chance, under setup scatter and surrogate error, that each limit holds at
        the robust point, -.
    limits : tuple of ResponseLimit
    vehicle_limits : tuple of doe.vehicle.VehicleLimit
        Limits on vehicle figures (e.g. a ``balance_shift`` window, a top-speed floor), computed
        from the ``[vehicle]`` aero responses.
    samples : int
        Monte-Carlo draws of setup scatter per candidate point.
    seed : int
        Seed of the draws and of the global search.
    tradeoff : tuple of str
        Responses of the trade-off (non-dominated) set.
    targets : dict of str to float
        For trade-off responses with goal ``none``: the value aimed at (distance to it is minimised).
    baseline : dict of str to float or None
        The setting the car runs now, one value per parameter (its unit), to compare with.
    objective_is_figure : bool
        True when ``objective`` names a vehicle figure, not a response.
    """

    objective: str
    goal: str
    k: float = 1.0
    probability: float = 0.9
    limits: tuple = ()
    samples: int = 128
    seed: int = 0
    tradeoff: tuple = ()
    targets: dict = field(default_factory=dict)
    baseline: dict | None = None
    vehicle_limits: tuple = ()
    objective_is_figure: bool = False

    @property
    def figures(self) -> list:
        """Vehicle figures the search reads (the objective when it is one, then the limited ones), in order."""
        names = [self.objective] if self.objective_is_figure else []
        return list(dict.fromkeys(names + [lim.figure for lim in self.vehicle_limits]))


@dataclass(frozen=True)
class VehicleSettings:
    """``[vehicle]``: the car, and which responses give its CLA, CDA and aero balance.

    Attributes
    ----------
    car : doe.vehicle.Vehicle
    cla_response, cda_response : str
        Responses holding CLA and CDA of the whole car, m^2 (CLA negative for
        downforce); ``cla_response`` is None when the axle responses are given.
    cla_front_response, cla_rear_response : str or None
        Responses holding the CLA at each axle, m^2 (both or neither).
    front_share_response : str or None
        Response holding the front share of the aero load (-); None uses ``aero_front_share``.
    aero_front_share : float
        Fixed front share of the aero load when no response gives it, -.
    speeds_kph : tuple of float
        Speeds of the force tables, km/h.
    radii_m : tuple of float
        Radii of the corner-speed tables, m.
    balance_speed_kph : float
        Speed at which the balance figures (``front_load_share``, ``balance_shift``) are taken
        for limits and the report, km/h.
    """

    car: Vehicle
    cla_response: str | None = "cla_total"
    cda_response: str = "cda_total"
    cla_front_response: str | None = None
    cla_rear_response: str | None = None
    front_share_response: str | None = None
    aero_front_share: float = 0.5
    speeds_kph: tuple = (100.0, 150.0, 200.0)
    radii_m: tuple = (25.0, 50.0, 100.0, 200.0)
    balance_speed_kph: float = 150.0


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
    robust : RobustSettings or None
        ``[robust]``: goals of the robust search (None for a study built in
        memory without one; :func:`read_study_text` always sets it).
    vehicle : VehicleSettings or None
        ``[vehicle]``: the car the aero numbers are translated for (optional).
    track : doe.vehicle.Track or None
        ``[track]``: the lap for lap-time estimates (optional).
    low_fidelity : LowFidelitySettings or None
        ``[low_fidelity]``: a cheap model of the same responses (optional).
    """

    name: str
    path: Path | None
    space: Space
    responses: tuple
    evaluator: EvaluatorSettings
    plan: PlanSettings = PlanSettings()
    description: str = ""
    fit: FitSettings = FitSettings()
    sensitivity: SensitivitySettings = SensitivitySettings()
    robust: "RobustSettings | None" = None
    vehicle: "VehicleSettings | None" = None
    track: Track | None = None
    low_fidelity: LowFidelitySettings | None = None

    def with_evaluator(self, evaluator: EvaluatorSettings) -> "Study":
        """The same study with another evaluator (how the ``[low_fidelity]`` model is built and checked)."""
        from dataclasses import replace

        return replace(self, evaluator=evaluator)

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
