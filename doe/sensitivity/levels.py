"""Sobol indices with discrete inputs: a choice's share of the variance beside the continuous knobs.

A choice knob (named levels, each equally likely) or a stepped knob (each of
its values equally likely) is an input like any other in the variance
decomposition (Sobol' 1993 holds for any independent inputs, discrete or
not). It is estimated here by the estimators of :func:`doe.sensitivity.sobol.sobol_indices`
(Saltelli et al. 2010 for ``S1``, Jansen 1999 for ``ST``, bootstrap and
surrogate-path intervals) through a carrier: each discrete input ``D_j`` with
``L_j`` values is written as a function of a continuous carrier
``U_j ~ U(low, high)``,

``D_j = v_j[floor(L_j (U_j - low) / (high - low))]`` (the last value at ``U_j = high``),

which gives each value probability ``1 / L_j``. The model sees only ``D_j``,
so ``E[Y | U_j] = E[Y | D_j]`` and every index of the carrier is the index of
the discrete input itself; the pick-freeze estimators need nothing else
(when the two rows of a pair happen to share a level, the pair simply adds no
variation, as it should).

The share of a choice is the variance between its levels' mean responses
(first order) or the expected variance across its levels at fixed other
knobs (total) over the response's variance: what choosing the level is
worth next to setting the continuous knobs, under "every level equally likely
and the knobs uniform over their ranges". A different weighting of the levels
(e.g. a section one is already committed to) is a different question.

References
----------
Sobol', I. M. (1993), Saltelli et al. (2010) and Jansen (1999): the full
entries are in :mod:`doe.sensitivity.sobol`, whose estimators are used here.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import qmc

from ..errors import SensitivityError
from ..space import Space
from .inputs import InputDistribution
from .sobol import Z95, SobolResult, sobol_indices

__all__ = ["discrete_values", "level_sobol_indices", "LevelEffects", "level_effects"]


def discrete_values(space: Space, X) -> np.ndarray:
    """Carrier values mapped to the discrete inputs' values (see the module docstring).

    Parameters
    ----------
    space : Space
    X : array_like, shape (n, d)
        Points in study units, uniform carriers in the columns of choice and stepped knobs.

    Returns
    -------
    ndarray, shape (n, d)
        The same points with each choice column holding a level index ``0 .. L-1`` and each
        stepped column one of its values, each equally likely under a uniform carrier.
    """
    X = space.as_points(X).copy()
    for j, p in enumerate(space.parameters):
        values = np.arange(len(p.levels), dtype=float) if p.levels else np.asarray(p.values, dtype=float)
        if len(values) == 0:
            continue
        k = np.floor(len(values) * (X[:, j] - p.low) / (p.high - p.low)).astype(int)
        X[:, j] = values[np.clip(k, 0, len(values) - 1)]
    return X


def level_sobol_indices(model, space: Space, *, paths=None, **options) -> SobolResult:
    """First-order and total Sobol indices over continuous, stepped and choice knobs, with 95 % intervals.

    Parameters
    ----------
    model : callable
        ``model(X) -> y`` with ``X`` of shape ``(n, d)`` in study units, choice
        columns as level indices (e.g. a :class:`~doe.surrogate.mixed.MixedSurrogate`'s
        mean through :meth:`Space.to_unit`); outputs as for :func:`~doe.sensitivity.sobol.sobol_indices`.
    space : Space
        The knobs; continuous knobs are uniform over their bounds, choice and
        stepped knobs uniform over their levels or values. Linear constraints are
        ignored (Sobol indices need independent inputs).
    paths : callable, optional
        ``paths(X, n_paths, seed)``: joint posterior draws of the surrogate at
        ``X`` (same points as ``model``); with it the intervals include the
        surrogate's uncertainty.
    **options
        Passed to :func:`~doe.sensitivity.sobol.sobol_indices` (``base_samples``,
        ``target_conf``, ``n_paths``, ``seed``, ...).

    Returns
    -------
    SobolResult
        Indices per parameter in study order; each discrete knob's entry is
        that knob's share. A note on each response says how the levels were weighted.

    References
    ----------
    Sobol' 1993; Saltelli et al. 2010; Jansen 1999 (see the module docstring).
    """
    if not isinstance(space, Space):
        raise SensitivityError("level_sobol_indices needs the Space of the knobs")
    wrapped_paths = None
    if paths is not None:
        def wrapped_paths(X, n_paths, seed):
            return paths(discrete_values(space, X), n_paths, seed)
    result = sobol_indices(lambda X: model(discrete_values(space, X)), InputDistribution.uniform(space),
                           paths=wrapped_paths, **options)
    discrete = [p.name for p in space.parameters if p.levels or p.values]
    if discrete:
        for res in result.responses.values():
            res.notes.append(f"{', '.join(discrete)}: every level or step taken as equally likely")
    return result


@dataclass
class LevelEffects:
    """Mean response of each level of one choice knob, the other knobs spread as for the Sobol indices.

    Attributes
    ----------
    parameter : str
    levels : tuple of str
    mean : ndarray, shape (L,)
        ``E[Y | level]``: the response averaged over the continuous and stepped
        knobs (uniform) and the other choices (levels equally likely), response unit.
    mean_pm95 : ndarray, shape (L,)
        95 % half-width of each mean (sampling and, with paths, the surrogate).
    difference : ndarray, shape (L, L)
        ``difference[a, b] = mean[a] - mean[b]``: what level ``a`` is worth over level ``b``.
    difference_pm95 : ndarray, shape (L, L)
        Its 95 % half-width, from the same points for every level (common random numbers), so
        it is narrower than the means' own.
    points : int
        Settings of the other knobs averaged over (a scrambled Sobol' sample).
    """

    parameter: str
    levels: tuple
    mean: np.ndarray
    mean_pm95: np.ndarray
    difference: np.ndarray
    difference_pm95: np.ndarray
    points: int


def level_effects(model, space: Space, name: str, *, paths=None, points: int = 512, n_paths: int = 64,
                  seed=0) -> LevelEffects:
    """What each level of a choice knob is worth on average over the other knobs, with 95 % intervals.

    The same ``points`` settings of the other knobs (a scrambled Sobol'
    sample, discrete knobs through :func:`discrete_values`) are evaluated at
    every level, so a difference between levels is free of the sampling noise
    that the settings share. Interval: ``1.96 sqrt(var_sample + var_paths)``,
    ``var_sample`` the variance of the per-setting values over ``points`` (a
    plain Monte-Carlo bound, conservative for a Sobol' sample) and
    ``var_paths`` the spread of the same average over the surrogate's
    posterior paths (when ``paths`` is given).

    Parameters
    ----------
    model : callable
        ``model(X) -> (n,)`` array, ``X`` in study units with choice columns as level indices.
    space : Space
    name : str
        The choice knob.
    paths : callable, optional
        ``paths(X, n_paths, seed) -> (n_paths, n)``: joint posterior draws of the surrogate.
    points : int
        Settings of the other knobs (a power of two keeps the Sobol' sample balanced).
    n_paths : int
    seed : int

    Returns
    -------
    LevelEffects
    """
    p = space.parameter(name)
    if not p.levels:
        raise SensitivityError(f"'{name}' is not a choice knob (it has no levels)")
    if not (isinstance(points, int) and points >= 8):
        raise SensitivityError(f"points must be a whole number of at least 8, got {points!r}")
    j, n_levels = space.names.index(name), len(p.levels)
    rng = np.random.default_rng(seed)
    U = qmc.Sobol(space.dim, scramble=True, seed=rng).random(points)
    X = discrete_values(space, space.lower + U * (space.upper - space.lower))
    X = np.vstack([np.where(np.arange(space.dim) == j, float(k), X) for k in range(n_levels)])
    values = np.asarray(model(X), dtype=float).reshape(n_levels, points)
    if not np.all(np.isfinite(values)):
        raise SensitivityError("the model returned NaN or infinite values")
    mean = values.mean(axis=1)
    diff_rows = values[:, None, :] - values[None, :, :]
    var_mean = values.var(axis=1, ddof=1) / points
    var_diff = diff_rows.var(axis=2, ddof=1) / points
    if paths is not None:
        draws = np.asarray(paths(X, int(n_paths), int(rng.integers(2**31 - 1))), dtype=float)
        path_means = draws.reshape(len(draws), n_levels, points).mean(axis=2)       # (paths, L)
        var_mean = var_mean + path_means.var(axis=0, ddof=1)
        var_diff = var_diff + (path_means[:, :, None] - path_means[:, None, :]).var(axis=0, ddof=1)
    return LevelEffects(name, p.levels, mean, Z95 * np.sqrt(var_mean), mean[:, None] - mean[None, :],
                        Z95 * np.sqrt(var_diff), points)
