"""Probability distributions of the inputs of a sensitivity analysis.

A Sobol index answers "which share of the variance of a response comes from
this input" *for a stated input distribution*; the distribution is part of the
question, so it is written into every sensitivity output.

===============  ==============================================================
kind             question it answers
===============  ==============================================================
``uniform``      which knobs matter over the whole design space (the default):
                 independent, uniform over each parameter's bounds
``normal``       what drives the scatter at one setup: independent normals with
                 the mean at a nominal setting and one standard deviation equal
                 to the parameter's tolerance; may leave the bounds, where a
                 surrogate extrapolates (:meth:`InputDistribution.outside_probability`)
``truncnormal``  the same normal, cut at the bounds (the safe default around a
                 setting)
===============  ==============================================================

A parameter with zero spread (tolerance 0 around a setting) is held at its
nominal value: it is not an input of that analysis, and its indices are zero
by definition. Linear constraints of the space are not part of the
distribution (Sobol indices need independent inputs); callers warn about them.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from ..errors import SensitivityError
from ..space import Space

__all__ = ["DISTRIBUTIONS", "InputDistribution"]

#: Kinds of input distribution.
DISTRIBUTIONS = ("uniform", "normal", "truncnormal")
_SALIB_NAMES = {"uniform": "unif", "normal": "norm", "truncnormal": "truncnorm"}


@dataclass(frozen=True)
class InputDistribution:
    """Independent input distributions over a design space.

    Parameters
    ----------
    space : Space
        The study's parameters (names, units, bounds).
    kind : {"uniform", "normal", "truncnormal"}
    centre : sequence of float, optional
        Nominal setting, one value per parameter in the study's units; needed
        for the normal kinds, not allowed for ``uniform``.
    scale : sequence of float, optional
        One standard deviation per parameter, study units, ``>= 0``; needed for
        the normal kinds. Zero holds the parameter fixed at ``centre``.

    Use :meth:`uniform` or :meth:`around` rather than the constructor.
    """

    space: Space
    kind: str = "uniform"
    centre: tuple | None = None
    scale: tuple | None = None

    def __post_init__(self):
        if self.kind not in DISTRIBUTIONS:
            raise SensitivityError(f"input distribution {self.kind!r} is not one of {', '.join(DISTRIBUTIONS)}")
        if self.kind == "uniform":
            if self.centre is not None or self.scale is not None:
                raise SensitivityError("a uniform input distribution takes no centre or scale (it spans the bounds)")
            return
        centre = self._vector(self.centre, "centre (nominal setting)")
        scale = self._vector(self.scale, "scale (standard deviation)")
        if np.any(scale < 0):
            bad = self.space.names[int(np.argmax(scale < 0))]
            raise SensitivityError(f"input distribution: the standard deviation of '{bad}' is negative")
        outside = ~((centre >= self.space.lower) & (centre <= self.space.upper))
        if outside.any():
            i = int(np.argmax(outside))
            p = self.space.parameters[i]
            raise SensitivityError(f"input distribution: the nominal '{p.name}' = {centre[i]:g} {p.unit} "
                                   f"is outside [{p.low:g}, {p.high:g}]")
        if not np.any(scale > 0):
            raise SensitivityError("input distribution: no parameter has a spread around the setting "
                                   "(give the parameters a tolerance, or use the uniform distribution)")
        object.__setattr__(self, "centre", tuple(float(v) for v in centre))
        object.__setattr__(self, "scale", tuple(float(v) for v in scale))

    def _vector(self, values, what: str) -> np.ndarray:
        if values is None:
            raise SensitivityError(f"a {self.kind} input distribution needs a {what}")
        v = np.asarray(values, dtype=float).reshape(-1)
        if v.shape != (self.space.dim,) or not np.all(np.isfinite(v)):
            raise SensitivityError(f"input distribution: the {what} needs {self.space.dim} finite numbers "
                                   f"({', '.join(self.space.names)}); got {np.asarray(values).tolist()!r}")
        return v

    # -- construction ------------------------------------------------------
    @classmethod
    def uniform(cls, space: Space) -> "InputDistribution":
        """Independent uniform inputs over the bounds of ``space``."""
        return cls(space)

    @classmethod
    def around(cls, space: Space, point, kind: str = "truncnormal", scale=None) -> "InputDistribution":
        """Normal (or truncated normal) scatter around a setting.

        Parameters
        ----------
        space : Space
        point : dict of str to float, or sequence of float
            The setting, study units; a dict must name every parameter.
        kind : {"truncnormal", "normal"}
        scale : sequence of float, optional
            Standard deviations, study units; the parameters' tolerances by default.
        """
        if kind == "uniform":
            raise SensitivityError("a distribution around a setting is 'normal' or 'truncnormal', not 'uniform'")
        if isinstance(point, dict):
            unknown = [k for k in point if k not in space.names]
            missing = [n for n in space.names if n not in point]
            if unknown or missing:
                what = f"unknown parameter '{unknown[0]}'" if unknown else f"no value for '{missing[0]}'"
                raise SensitivityError(f"setting for the input distribution: {what} (parameters: "
                                       f"{', '.join(space.names)})")
            point = [point[n] for n in space.names]
        return cls(space, kind, tuple(point), tuple(space.tolerances if scale is None else scale))

    # -- facts -------------------------------------------------------------
    @property
    def varying(self) -> list[int]:
        """Column indices of the parameters that vary (all of them for ``uniform``)."""
        if self.kind == "uniform":
            return list(range(self.space.dim))
        return [i for i, s in enumerate(self.scale) if s > 0]

    @property
    def names(self) -> list[str]:
        """Names of the varying parameters, in study order."""
        return [self.space.names[i] for i in self.varying]

    def problem(self) -> dict:
        """A fresh SALib problem over the varying parameters (SALib mutates the dict it samples)."""
        lo, hi = self.space.lower, self.space.upper
        bounds = []
        for i in self.varying:
            if self.kind == "uniform":
                bounds.append([lo[i], hi[i]])
            elif self.kind == "normal":
                bounds.append([self.centre[i], self.scale[i]])
            else:
                bounds.append([lo[i], hi[i], self.centre[i], self.scale[i]])
        return {"num_vars": len(bounds), "names": self.names, "bounds": bounds,
                "dists": [_SALIB_NAMES[self.kind]] * len(bounds)}

    def full(self, Xv) -> np.ndarray:
        """Points of the varying parameters, shape ``(n, k)``, completed to ``(n, d)`` study units."""
        Xv = np.asarray(Xv, dtype=float)
        if self.kind == "uniform":
            return Xv
        X = np.tile(np.asarray(self.centre), (len(Xv), 1))
        X[:, self.varying] = Xv
        return X

    def outside_probability(self) -> np.ndarray:
        """Probability that each parameter falls outside its bounds, shape ``(d,)`` (0 unless ``normal``)."""
        if self.kind != "normal":
            return np.zeros(self.space.dim)
        c, s = np.asarray(self.centre), np.asarray(self.scale)
        with np.errstate(divide="ignore", invalid="ignore"):
            below = np.where(s > 0, stats.norm.cdf((self.space.lower - c) / np.where(s > 0, s, 1)), 0.0)
            above = np.where(s > 0, stats.norm.sf((self.space.upper - c) / np.where(s > 0, s, 1)), 0.0)
        return below + above

    def describe(self) -> dict:
        """JSON-ready description: kind and, per parameter, its bounds or mean and sd (study units)."""
        out = {}
        for i, p in enumerate(self.space.parameters):
            if self.kind == "uniform":
                out[p.name] = {"low": p.low, "high": p.high, "unit": p.unit}
            else:
                out[p.name] = {"mean": self.centre[i], "sd": self.scale[i], "unit": p.unit,
                               "fixed": self.scale[i] == 0}
                if self.kind == "truncnormal":
                    out[p.name].update(low=p.low, high=p.high)
        return {"kind": self.kind, "parameters": out}
