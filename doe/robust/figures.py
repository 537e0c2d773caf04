"""Vehicle figures (lap time, balance, top speed) as if they were responses of a robust search.

A :class:`FigureTerms` turns the surrogates of CLA front, CLA rear and CDA into
vehicle figures through a :class:`doe.vehicle.VehicleObjective`, in the two
layouts a search reads:

* as a predictor, ``terms(X) -> {name: (mean, std)}``: the responses of the
  wrapped predictor plus each figure at the surrogate means, with the
  surrogate's standard deviation carried through the figure's slopes
  (first order; the three aero coefficients taken as independent);
* as spreads under setup scatter, :meth:`FigureTerms.add_spreads`: the figures
  at each scatter draw, from the responses' draws (``VehicleObjective.draws``:
  slopes at each candidate's mean draw, 7 lap simulations per candidate); without
  scatter (the nominal search) the figures at the means only, with no surrogate
  std (the nominal limits are judged on the means).

So the objective and the limits of :func:`doe.robust.search.find_settings` may
name a figure just like a response. CDA means below zero are clipped to zero
(a surrogate can stray there; a car cannot).
"""
from __future__ import annotations

import numpy as np

from ..vehicle import VehicleObjective
from .scatter import Spread, predict_checked

__all__ = ["FigureTerms"]


class FigureTerms:
    """Vehicle figures from three aero responses, for a search.

    Parameters
    ----------
    predict : callable
        ``predict(X) -> {response: (mean, std)}`` giving at least the three aero responses.
    objective : doe.vehicle.VehicleObjective
    aero : (str, str, str)
        Names of the responses holding CLA front, CLA rear and CDA, m^2.
    figures : sequence of str
        Figures to add (names of :func:`doe.vehicle.figure_unit`).
    """

    def __init__(self, predict, objective: VehicleObjective, aero, figures):
        self.predict, self.objective = predict, objective
        self.aero = tuple(aero)
        self.names = tuple(dict.fromkeys(figures))

    def is_figure(self, name: str) -> bool:
        return name in self.names

    def __call__(self, X) -> dict:
        """Responses of the wrapped predictor plus the figures, each ``(mean, std)`` of shape ``(n,)``."""
        out = dict(self.predict(X))
        pred = predict_checked(self.predict, np.atleast_2d(X), self.aero)
        (cf, scf), (cr, scr), (cd, scd) = (pred[n] for n in self.aero)
        lin = self.objective.linearised(cf, cr, np.maximum(cd, 0.0), self.names)
        sig2 = np.stack([scf, scr, scd], axis=-1) ** 2
        for name, (value, slope) in lin.items():
            out[name] = (np.asarray(value, dtype=float).reshape(-1), np.sqrt(np.sum(slope**2 * sig2, axis=-1)))
        return out

    def add_spreads(self, spreads: dict, names=None) -> dict:
        """``spreads`` (of the aero responses, :func:`doe.robust.scatter.propagate`) with the figures added."""
        names = self.names if names is None else tuple(names)
        if not names:
            return spreads
        cf, cr, cd = (spreads[n] for n in self.aero)
        if cf.draws_mean.shape[1] == 1:     # no scatter (a nominal search): the figures at the means suffice
            values = self.objective.figures(cf.draws_mean, cr.draws_mean, np.maximum(cd.draws_mean, 0.0), names)
            draws = {name: (v, np.zeros_like(v)) for name, v in values.items()}
        else:
            draws = self.objective.draws(cf.draws_mean, cr.draws_mean, np.maximum(cd.draws_mean, 0.0),
                                         stds=(cf.draws_std, cr.draws_std, cd.draws_std), names=names)
        out = dict(spreads)
        for name, (values, std) in draws.items():
            n = values.shape[1]
            spread = values.std(axis=1, ddof=1) if n > 1 else np.zeros(len(values))
            out[name] = Spread(values.mean(axis=1), spread, np.sqrt(np.mean(std**2, axis=1)), values, std)
        return out
