"""Design spaces: parameters with units and bounds, linear constraints, scaling.

Every plan is generated in the unit hypercube ``[0, 1]^d`` and converted to the
study's units by :meth:`Space.from_unit`; :meth:`Space.to_unit` goes back. Points
are always 2-D arrays of shape ``(n, d)`` with columns in the order of
:attr:`Space.names`.

Three kinds of knob share these arrays:

* continuous: any value in ``[low, high]``, scaled linearly;
* stepped: only the listed ``values`` (a wing mount with holes every 2 deg);
  scaled linearly like a continuous knob, and :meth:`Space.from_unit` snaps
  each value to the nearest step;
* choice: named ``levels`` (a wing section, the flap on or off); the column holds
  the level's index ``0 .. L-1`` in study units and in the unit cube alike (never
  scaled, never interpolated).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .errors import DoeError, PlanError

__all__ = ["Parameter", "LinearConstraint", "Space"]


@dataclass(frozen=True)
class Parameter:
    """One design parameter (a knob the engineer can set).

    Attributes
    ----------
    name : str
        Column name in every plan and results file.
    unit : str
        Unit of ``low``, ``high`` and ``tolerance`` (e.g. ``"deg"``, ``"mm"``).
    low, high : float
        Bounds of the design space, in ``unit``; ``low < high``.
    tolerance : float
        One standard deviation of setup scatter at the track, in ``unit``;
        0 when the setting is exact.
    description : str
        Free text shown in reports.
    values : tuple of float
        Stepped knob: the allowed settings, increasing (``low`` and ``high`` are
        the first and last); empty for a continuous knob.
    levels : tuple of str
        Choice knob: the level names; the column then holds the index ``0 .. L-1``
        (``low = 0``, ``high = L-1``); empty for other knobs.
    """

    name: str
    unit: str
    low: float
    high: float
    tolerance: float = 0.0
    description: str = ""
    values: tuple = ()
    levels: tuple = ()

    @classmethod
    def choice(cls, name: str, levels, description: str = "") -> "Parameter":
        """A choice knob over named ``levels`` (at least two, all different)."""
        levels = tuple(str(v) for v in levels)
        if len(levels) < 2 or len(set(levels)) != len(levels):
            raise DoeError(f"choice '{name}' needs at least two different levels, got {list(levels)}")
        return cls(name, "-", 0.0, float(len(levels) - 1), 0.0, description, levels=levels)

    @classmethod
    def stepped(cls, name: str, unit: str, values, tolerance: float = 0.0, description: str = "") -> "Parameter":
        """A stepped knob taking only ``values`` (at least two, all different; sorted here)."""
        values = tuple(sorted(float(v) for v in values))
        if len(values) < 2 or len(set(values)) != len(values):
            raise DoeError(f"stepped knob '{name}' needs at least two different values, got {list(values)}")
        return cls(name, unit, values[0], values[-1], tolerance, description, values=values)

    @property
    def kind(self) -> str:
        """``"choice"``, ``"stepped"`` or ``"continuous"``."""
        return "choice" if self.levels else "stepped" if self.values else "continuous"

    def snap(self, x) -> np.ndarray:
        """The allowed setting nearest to each of ``x`` (study units); ``x`` itself for a continuous knob."""
        x = np.asarray(x, dtype=float)
        if self.levels:
            return np.clip(np.rint(x), 0, len(self.levels) - 1)
        if not self.values:
            return x
        v = np.asarray(self.values)
        i = np.clip(np.searchsorted(v, x), 1, len(v) - 1)
        return np.where(np.abs(x - v[i - 1]) <= np.abs(v[i] - x), v[i - 1], v[i])

    def level_index(self, level: str) -> int:
        """Index of a level name of a choice knob; a DoeError for an unknown name."""
        try:
            return self.levels.index(level)
        except ValueError:
            raise DoeError(f"'{level}' is not a level of '{self.name}' (levels: {', '.join(self.levels)})") from None

    @property
    def span(self) -> float:
        """Width of the range, ``high - low``, in ``unit``."""
        return self.high - self.low

    def label(self) -> str:
        """Name with unit, for axes and tables: ``"flap_angle [deg]"``."""
        return f"{self.name} [{self.unit}]"


@dataclass(frozen=True)
class LinearConstraint:
    """A linear inequality between parameters, ``min <= sum(c_i * x_i) <= max``.

    Class rules are often of this kind: the wing's top must stay under the
    roofline, so ``wing_height + k * wing_angle <= limit`` where ``k`` is the
    chord times the slope of ``sin`` in the parameter's unit.

    Attributes
    ----------
    name : str
        Short name shown in messages and reports.
    terms : dict of str to float
        Coefficient per parameter name, in ``unit`` per parameter unit.
    max, min : float or None
        Bounds on the weighted sum, in ``unit``; at least one is set.
    unit : str
        Unit of the weighted sum.
    description : str
        Free text, e.g. the rule it comes from.
    """

    name: str
    terms: dict
    max: float | None = None
    min: float | None = None
    unit: str = ""
    description: str = ""

    def value(self, X: np.ndarray, names: list[str]) -> np.ndarray:
        """Weighted sum ``sum(c_i * x_i)`` for each row of ``X`` (study units)."""
        coef = np.array([self.terms.get(n, 0.0) for n in names], dtype=float)
        return np.asarray(X, dtype=float) @ coef

    def satisfied(self, X: np.ndarray, names: list[str], rtol: float = 1e-12) -> np.ndarray:
        """Boolean array: which rows of ``X`` meet the constraint."""
        v = self.value(X, names)
        scale = max(abs(self.max or 0.0), abs(self.min or 0.0), 1.0)
        ok = np.ones(v.shape, dtype=bool)
        if self.max is not None:
            ok &= v <= self.max + rtol * scale
        if self.min is not None:
            ok &= v >= self.min - rtol * scale
        return ok

    def describe(self) -> str:
        """Human-readable form, e.g. ``"1*wing_height + 4.4*wing_aoa <= 150 mm"``."""
        lhs = " + ".join(f"{c:g}*{n}" for n, c in self.terms.items())
        parts = []
        if self.min is not None:
            parts.append(f"{self.min:g} <=")
        parts.append(lhs)
        if self.max is not None:
            parts.append(f"<= {self.max:g}")
        return " ".join(parts) + (f" {self.unit}" if self.unit else "")


@dataclass(frozen=True)
class Space:
    """A box of parameters, optionally cut by linear constraints.

    Attributes
    ----------
    parameters : tuple of Parameter
    constraints : tuple of LinearConstraint
    """

    parameters: tuple
    constraints: tuple = field(default=())

    def __post_init__(self):
        if len(self.parameters) == 0:
            raise DoeError("a design space needs at least one parameter")
        names = [p.name for p in self.parameters]
        if len(set(names)) != len(names):
            raise DoeError(f"parameter names repeat: {names}")
        levels = {p.name for p in self.parameters if p.levels}
        for c in self.constraints:
            used = sorted(levels & set(c.terms))
            if used:
                raise DoeError(f"constraint '{c.name}' uses the choice knob '{used[0]}'; a choice has no value to weigh")

    # -- basic facts -------------------------------------------------------
    @property
    def names(self) -> list[str]:
        """Parameter names, in column order."""
        return [p.name for p in self.parameters]

    @property
    def dim(self) -> int:
        """Number of parameters."""
        return len(self.parameters)

    @property
    def choices(self) -> list:
        """The choice knobs (named levels), in column order."""
        return [p for p in self.parameters if p.levels]

    @property
    def choice_columns(self) -> list:
        """Column indices of the choice knobs."""
        return [j for j, p in enumerate(self.parameters) if p.levels]

    def refuse_choices(self, step: str) -> None:
        """Raise a one-line DoeError when the space has choice knobs that ``step`` cannot handle yet."""
        if self.choices:
            raise DoeError(f"choice knobs are not yet supported by {step}; "
                           f"the study's choice knobs: {', '.join(p.name for p in self.choices)}")

    def settable(self) -> "Space":
        """The space without its choice knobs (continuous and stepped knobs, same constraints)."""
        rest = tuple(p for p in self.parameters if not p.levels)
        if not rest:
            raise DoeError("a design space of choice knobs only has no continuous or stepped knob to spread runs over")
        return Space(rest, self.constraints)

    @property
    def lower(self) -> np.ndarray:
        """Lower bounds, shape ``(d,)``, study units."""
        return np.array([p.low for p in self.parameters], dtype=float)

    @property
    def upper(self) -> np.ndarray:
        """Upper bounds, shape ``(d,)``, study units."""
        return np.array([p.high for p in self.parameters], dtype=float)

    @property
    def tolerances(self) -> np.ndarray:
        """Setup scatter (one standard deviation), shape ``(d,)``, study units."""
        return np.array([p.tolerance for p in self.parameters], dtype=float)

    def parameter(self, name: str) -> Parameter:
        """The parameter called ``name``."""
        for p in self.parameters:
            if p.name == name:
                return p
        raise DoeError(f"no parameter named '{name}'; the study has {self.names}")

    # -- scaling -----------------------------------------------------------
    def as_points(self, X) -> np.ndarray:
        """``X`` as a float array of shape ``(n, dim)`` (one point may be given flat); a DoeError otherwise."""
        X = np.asarray(X, dtype=float)
        if X.ndim == 1:
            X = X.reshape(1, -1)
        if X.ndim != 2 or X.shape[1] != self.dim:
            raise DoeError(f"points must have {self.dim} columns ({self.names}); got shape {X.shape}")
        return X

    def to_unit(self, X) -> np.ndarray:
        """Map points in study units to the unit hypercube.

        Parameters
        ----------
        X : array_like, shape (n, d)
            Points in the study's units.

        Returns
        -------
        ndarray, shape (n, d)
            ``(X - low) / (high - low)``, column by column.
        """
        X = self.as_points(X)
        U = (X - self.lower) / (self.upper - self.lower)
        for j in self.choice_columns:
            U[:, j] = X[:, j]
        return U

    def from_unit(self, U) -> np.ndarray:
        """Map points of the unit hypercube to study units (inverse of :meth:`to_unit`).

        Stepped knobs snap to their nearest value; choice columns (level
        indices) are rounded to whole levels, not scaled.
        """
        U = self.as_points(U)
        X = self.lower + U * (self.upper - self.lower)
        for j, p in enumerate(self.parameters):
            if p.levels:
                X[:, j] = p.snap(U[:, j])
            elif p.values:
                X[:, j] = p.snap(X[:, j])
        return X

    # -- feasibility -------------------------------------------------------
    def in_bounds(self, X, rtol: float = 1e-9) -> np.ndarray:
        """Boolean array: which rows lie inside the bounds (with a relative slack)."""
        X = self.as_points(X)
        slack = rtol * (self.upper - self.lower)
        return np.all((X >= self.lower - slack) & (X <= self.upper + slack), axis=1)

    def feasible(self, X) -> np.ndarray:
        """Boolean array: which rows meet the bounds and every constraint."""
        X = self.as_points(X)
        ok = self.in_bounds(X)
        for c in self.constraints:
            ok &= c.satisfied(X, self.names)
        return ok

    def feasible_unit(self, U) -> np.ndarray:
        """:meth:`feasible` for points given in the unit hypercube."""
        return self.feasible(self.from_unit(U))

    def feasible_fraction(self, n: int = 4096, seed: int = 0) -> float:
        """Share of the box that meets the constraints, estimated on a Sobol' sample."""
        if not self.constraints:
            return 1.0
        from scipy.stats import qmc

        m = int(np.ceil(np.log2(max(n, 2))))
        U = qmc.Sobol(self.dim, scramble=True, seed=seed).random_base2(m)
        return float(np.mean(self.feasible_unit(U)))

    def check_feasible(self) -> None:
        """Raise :class:`PlanError` when the constraints leave no room at all."""
        if self.constraints and self.feasible_fraction() == 0.0:
            rules = "; ".join(c.describe() for c in self.constraints)
            raise PlanError(f"no point of the design space meets the constraints ({rules})")
