"""Screening by Morris elementary effects: which parameters can be dropped before the expensive plan.

With many parameters, a few hundred runs of a cheap model (the built-in one, a
Python function) tell the knobs that do nothing from those that do, at
``r (d + 1)`` evaluations for ``r`` trajectories. For each parameter ``i``
and trajectory, the elementary effect is (Morris 1991, eq. 1)

    ``EE_i = [f(x + Delta e_i) - f(x)] / Delta``

with ``x`` on a grid of ``levels`` levels in the unit cube and ``Delta =
levels / (2 (levels - 1))``; it is therefore in the response's unit per *full
range* of the parameter. ``mu_star`` is the mean of ``|EE_i|`` (Campolongo,
Cariboni & Saltelli 2007), a proxy for the total index; ``sigma`` their
standard deviation (non-linearity or interaction). Trajectories are chosen
from four times as many candidates to spread well (Campolongo et al. 2007,
with the local optimisation of Ruano et al. 2012), all as SALib implements
them.

A choice knob's grid column is split into equal parts, one per level, so an
elementary effect of a choice is the change when the level switches (per grid
step, like every other knob's); its order of levels is arbitrary, so read its
``mu_star`` (a size), not its ``mu`` (a sign).

A parameter is called *inert* when, for every response, the upper end of the
95 % bootstrap interval of its ``mu_star`` is below ``inert_fraction`` (5 %)
of the largest ``mu_star`` of that response (common practice, no source).
Screening ranks; it does not measure shares of variance: use
:mod:`doe.sensitivity.sobol` on the parameters that remain.

Screening JSON: ``{"<response>": {"<parameter>": {"mu_star": x, "mu_star_pm95":
x, "mu": x, "sigma": x, "mu_star_rel": x, "inert": bool}, ...}, ...,
"_meta": {"method", "trajectories", "levels", "evaluations", "inert_fraction",
"inert": [parameters inert for every response], "seed", "library"}}``; ``mu_star``,
``mu_star_pm95`` (95 % half-width), ``mu`` and ``sigma`` in the response's
unit per full range of the parameter, ``mu_star_rel`` as a share of the
largest ``mu_star`` of the response.

References
----------
Morris, M. D. (1991). Factorial sampling plans for preliminary computational
experiments. Technometrics 33(2), 161-174.
Campolongo, F., Cariboni, J. and Saltelli, A. (2007). An effective screening
design for sensitivity analysis of large models. Environ. Model. Softw. 22,
1509-1518.
Ruano, M. V., Ribes, J., Seco, A. and Ferrer, J. (2012). An improved sampling
strategy based on trajectory design for application of the Morris method to
systems with many input factors. Environ. Model. Softw. 37, 103-109.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from SALib.analyze import morris as _morris_analyze
from SALib.sample import morris as _morris_sample

from ..checks import is_whole
from ..errors import SensitivityError
from ..seeds import seed_value
from .levels import discrete_values
from .sobol import evaluate_model, output_names
from .words import LIBRARY
from ..space import Space

__all__ = ["ScreeningResult", "morris_screening", "INERT_FRACTION"]

#: Share of the largest mu_star under which a parameter is inert (common practice, no source).
INERT_FRACTION = 0.05


@dataclass
class ScreeningResult:
    """Morris measures per response; arrays have one entry per parameter, study order.

    Attributes
    ----------
    parameters : tuple of str
    measures : dict of str to dict
        Per response: ``mu_star``, ``mu_star_pm95``, ``mu``, ``sigma`` (response
        unit per full range of the parameter), ``mu_star_rel``, ``inert``.
    trajectories, levels, evaluations : int
    inert_fraction : float
    seed : int
    """

    parameters: tuple
    measures: dict
    trajectories: int
    levels: int
    evaluations: int
    inert_fraction: float
    seed: int

    @property
    def inert(self) -> list[str]:
        """Parameters inert for every response."""
        flags = np.all([m["inert"] for m in self.measures.values()], axis=0)
        return [p for p, f in zip(self.parameters, flags) if f]

    def to_dict(self) -> dict:
        """The screening JSON (keys in the module docstring)."""
        out = {}
        for r, m in self.measures.items():
            out[r] = {p: {k: (bool(m[k][i]) if k == "inert" else float(m[k][i])) for k in m}
                      for i, p in enumerate(self.parameters)}
        out["_meta"] = {"method": "Morris elementary effects (Morris 1991; mu_star of Campolongo et al. 2007; SALib)",
                        "trajectories": self.trajectories, "levels": self.levels, "evaluations": self.evaluations,
                        "inert_fraction": self.inert_fraction, "inert": self.inert, "seed": self.seed,
                        "library": LIBRARY}
        return out


def morris_screening(model, space: Space, *, trajectories: int = 20, levels: int = 4, responses=None,
                     n_resamples: int = 1000, inert_fraction: float = INERT_FRACTION, seed=0) -> ScreeningResult:
    """Morris screening of a cheap model over the bounds of ``space``.

    Parameters
    ----------
    model : callable
        ``model(X) -> y`` with ``X`` of shape ``(n, d)`` in the study's units;
        ``y`` of shape ``(n,)``, ``(n, k)`` or a dict of responses.
    space : Space
    trajectories : int
        Number of trajectories ``r`` (at least 4); ``r (d + 1)`` evaluations.
    levels : int
        Grid levels (an even number, at least 4).
    responses : list of str, optional
        Names of the model's outputs (see :func:`doe.sensitivity.sobol.sobol_indices`).
    n_resamples : int
        Bootstrap resamples of ``mu_star``'s interval.
    inert_fraction : float
        Threshold of the inert flag, share of the largest ``mu_star``.
    seed : int or numpy.random.Generator

    Returns
    -------
    ScreeningResult

    References
    ----------
    Morris 1991; Campolongo, Cariboni & Saltelli 2007; Ruano et al. 2012 (see the module docstring).
    """
    if not is_whole(trajectories) or trajectories < 4:
        raise SensitivityError(f"screening: trajectories must be a whole number of at least 4, got {trajectories!r}")
    if not is_whole(levels) or levels < 4 or levels % 2:
        raise SensitivityError(f"screening: levels must be an even whole number of at least 4, got {levels!r}")
    if not 0 < inert_fraction < 1:
        raise SensitivityError(f"screening: inert_fraction must be between 0 and 1, got {inert_fraction!r}")
    rng = np.random.default_rng(seed)
    sample_seed, boot_seed = (int(v) for v in rng.integers(1, 2**31 - 1, size=2))
    problem = {"num_vars": space.dim, "names": space.names, "bounds": [[0.0, 1.0]] * space.dim}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # SALib's notes on grid sizes; the arguments are checked above
        U = _morris_sample.sample(problem, 4 * int(trajectories), num_levels=int(levels),
                                  optimal_trajectories=int(trajectories), local_optimization=True, seed=sample_seed)
    X = _on_knobs(space, U)
    responses = output_names(model(X[:1]), responses)
    Y = evaluate_model(model, X, responses)
    measures = {r: _measures(problem, U, Y[r], levels, n_resamples, boot_seed, inert_fraction) for r in responses}
    return ScreeningResult(tuple(space.names), measures, int(trajectories), int(levels), len(X),
                           float(inert_fraction), seed_value(seed))


def _on_knobs(space: Space, U: np.ndarray) -> np.ndarray:
    """The grid points in study units. With choice knobs, each choice and stepped knob's grid column
    is a carrier split into equal parts, one per level or step (:func:`doe.sensitivity.levels.discrete_values`),
    so every level is reached and a grid step across parts switches the level."""
    if not space.choices:
        return space.from_unit(U)
    return discrete_values(space, space.lower + U * (space.upper - space.lower))


def _measures(problem, U, y, levels, n_resamples, boot_seed, inert_fraction) -> dict:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        si = _morris_analyze.analyze(problem, U, y, num_resamples=n_resamples, conf_level=0.95,
                                     num_levels=int(levels), seed=boot_seed)
    m = {k: np.asarray(si[k], dtype=float) for k in ("mu_star", "mu", "sigma")}
    m["mu_star_pm95"] = np.asarray(si["mu_star_conf"], dtype=float)    # the library's key, our name
    top = float(np.max(m["mu_star"]))
    m["mu_star_rel"] = m["mu_star"] / top if top > 0 else np.zeros_like(m["mu_star"])
    if top > 0:
        m["inert"] = (m["mu_star"] + m["mu_star_pm95"]) < inert_fraction * top
    else:  # a constant response: nothing moves it
        m["inert"] = np.ones(len(m["mu"]), dtype=bool)
    return m
