"""Drag and stall estimates that potential flow cannot give by itself.

* Section profile drag: turbulent flat-plate skin friction on both surfaces
  times a thickness form factor, plus a lift-dependent viscous term.
* Body drag: a forebody baseline on the frontal area plus the base drag of the
  area behind the separation line, which moves with the flap and the rear
  window (see :mod:`doe.aero.model`).
* Stall: the pressure-difference rule of Valarezo & Chin, with a smooth lift
  limit past it so that a surrogate fitted to the model never meets a step.

Assumptions and limits: fully turbulent boundary layers (no laminar runs, no
transition), no roughness, no compressibility; the stall rule was built for
wings in free air and is used here on the installed wing section.

References
----------
.. [1] Schlichting, H. (1979). Boundary-Layer Theory, 7th ed. McGraw-Hill,
   ch. 21 (Prandtl-Schlichting skin-friction law for the turbulent flat plate).
.. [2] Hoerner, S. F. (1965). Fluid-Dynamic Drag. Hoerner, ch. 6 (form factor
   of streamlined sections, 1 + 2 t/c + 60 (t/c)^4).
.. [3] Valarezo, W. O., Chin, V. D. (1994). Method for the prediction of wing
   maximum lift. Journal of Aircraft 31(1), 103-109.
"""
from __future__ import annotations

import numpy as np

from ..errors import AeroError

__all__ = ["flat_plate_cf", "form_factor", "profile_drag", "pressure_difference", "StallLimit", "smooth_stall"]


def flat_plate_cf(reynolds):
    """Mean skin-friction coefficient of a fully turbulent flat plate, one side.

    ``C_f = 0.455 / (log10 Re)^2.58`` (Prandtl-Schlichting).

    Parameters
    ----------
    reynolds : array_like
        Reynolds number on the plate length; 1e5 to 1e9.

    Returns
    -------
    ndarray

    References
    ----------
    .. [1] Schlichting, H. (1979). Boundary-Layer Theory, 7th ed., ch. 21.
    """
    re = np.asarray(reynolds, dtype=float)
    if np.any(re < 1e5) or np.any(re > 1e9):
        raise AeroError("the turbulent skin-friction law is used for Reynolds numbers 1e5 to 1e9 only")
    return 0.455 / np.log10(re) ** 2.58


def form_factor(thickness):
    """Profile-drag form factor of a streamlined section, ``1 + 2 t/c + 60 (t/c)^4``.

    Parameters
    ----------
    thickness : array_like
        Thickness ratio t/c.

    References
    ----------
    .. [1] Hoerner, S. F. (1965). Fluid-Dynamic Drag, ch. 6.
    """
    t = np.asarray(thickness, dtype=float)
    return 1.0 + 2.0 * t + 60.0 * t**4


def profile_drag(reynolds, thickness, cl, lift_factor=0.0):
    """Section profile-drag coefficient, ``2 C_f FF + k c_l^2``.

    Parameters
    ----------
    reynolds : array_like
        Chord Reynolds number.
    thickness : array_like
        Thickness ratio t/c.
    cl : array_like
        Section lift coefficient (either sign).
    lift_factor : float
        ``k`` of the lift-dependent viscous drag (common practice, no source).

    Returns
    -------
    ndarray
        Drag per unit span over dynamic pressure and chord.
    """
    return 2.0 * flat_plate_cf(reynolds) * form_factor(thickness) + lift_factor * np.asarray(cl, dtype=float) ** 2


def pressure_difference(cp_nodes):
    """Valarezo-Chin pressure difference ``Cp_TE - Cp_min`` of one lifting body per configuration.

    Parameters
    ----------
    cp_nodes : ndarray, shape (B, n_nodes)
        Pressure coefficients at the body's nodes, first and last at the
        trailing edge (``1 - gamma^2`` on a closed body, whose sheet strength
        is its surface speed: the suction peak is resolved better at the nodes
        than at panel mid-points).

    Returns
    -------
    ndarray, shape (B,)
    """
    cp_te = 0.5 * (cp_nodes[:, 0] + cp_nodes[:, -1])
    return cp_te - cp_nodes.min(axis=1)


class StallLimit:
    """Stall flag and smooth lift limit from the pressure-difference rule.

    The section stalls when ``dCp = Cp_TE - Cp_min`` reaches the critical
    value ``dcp_crit`` (Valarezo & Chin [1]_). With ``r = dCp / dcp_crit`` and
    the smooth maximum ``m = 1 + w ln(1 + exp((r - 1) / w))``, the lift is
    scaled by ``m^-1/2``: since the suction peak grows about as the square of
    the lift, this holds the lift near its stall value past stall (a plateau,
    not a step). Profile drag grows by ``k_drag (m - 1)``. The plateau and the
    drag rise are this model's choice (no source); only the criterion is published.

    Parameters
    ----------
    dcp_crit : float
        Critical pressure difference (about 10 to 14 at chord Reynolds numbers
        of 1e6 to 1e7 in Valarezo & Chin's chart; memory).
    width : float
        Width ``w`` of the smooth maximum (fraction of the criterion).
    drag_rise : float
        ``k_drag``.

    References
    ----------
    .. [1] Valarezo, W. O., Chin, V. D. (1994). Method for the prediction of wing
       maximum lift. Journal of Aircraft 31(1), 103-109.
    """

    def __init__(self, dcp_crit: float, width: float = 0.08, drag_rise: float = 0.05):
        if dcp_crit <= 0 or width <= 0 or drag_rise < 0:
            raise AeroError("stall limit needs dcp_crit > 0, width > 0 and drag_rise >= 0")
        self.dcp_crit = float(dcp_crit)
        self.width = float(width)
        self.drag_rise = float(drag_rise)

    def apply(self, dcp):
        """Lift factor, extra profile drag and stalled flag for pressure differences ``dcp``."""
        r = np.asarray(dcp, dtype=float) / self.dcp_crit
        m = 1.0 + self.width * np.logaddexp(0.0, (r - 1.0) / self.width)
        return m ** -0.5, self.drag_rise * (m - 1.0), r >= 1.0


def smooth_stall(cl, dcp, dcp_crit, width=0.08, drag_rise=0.05):
    """Convenience wrapper of :class:`StallLimit`: limited lift, extra drag, stalled flag."""
    factor, extra, stalled = StallLimit(dcp_crit, width, drag_rise).apply(dcp)
    return np.asarray(cl, dtype=float) * factor, extra, stalled
