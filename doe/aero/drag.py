"""Drag and stall estimates that potential flow cannot give by itself.

* Section profile drag: turbulent flat-plate skin friction on both surfaces
  times a thickness form factor, plus a lift-dependent viscous term.
* Body drag: a forebody baseline on the frontal area plus the base drag of the
  area behind the separation line, which moves with the flap and the rear
  window (see :mod:`doe.aero.model`).
* Stall: the pressure-difference rule of Valarezo & Chin with an aft
  pressure-recovery term (cambered sections stall from the trailing edge),
  read at chord stations so that it converges with the panel count, and a
  smooth lift limit past it so that a surrogate fitted to the model never meets a step.

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

__all__ = ["flat_plate_cf", "form_factor", "profile_drag", "pressure_difference", "stall_measure", "stall_weights",
           "chord_station_weights", "StallLimit", "smooth_stall"]


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


def chord_station_weights(points, x_chord: float) -> np.ndarray:
    """Node weights that interpolate a node quantity at one chord station on each surface.

    Parameters
    ----------
    points : ndarray, shape (n + 1, 2)
        A section at unit chord in the ordering of :class:`~doe.aero.sections.Section`
        (trailing edge, lower surface, leading edge, upper surface, trailing edge).
    x_chord : float
        Chord station, 0 (leading edge) to 1 (trailing edge).

    Returns
    -------
    ndarray, shape (2, n + 1)
        Row 0 interpolates on the lower surface, row 1 on the upper surface
        (linear in x between the two nodes either side of the station).
    """
    x = np.asarray(points, dtype=float)[:, 0]
    i_le = int(np.argmin(x))
    w = np.zeros((2, len(x)))
    for row, seg in enumerate((np.arange(0, i_le + 1), np.arange(i_le, len(x)))):
        order = np.argsort(x[seg], kind="stable")
        xs, idx = x[seg][order], seg[order]
        j = int(np.clip(np.searchsorted(xs, x_chord), 1, len(xs) - 1))
        t = float(np.clip((x_chord - xs[j - 1]) / max(xs[j] - xs[j - 1], 1e-12), 0.0, 1.0))
        w[row, idx[j - 1]] += 1.0 - t
        w[row, idx[j]] += t
    return w


#: Chord station whose pressure stands for the trailing-edge pressure (both surfaces averaged).
TE_STATION = 0.95
#: Chord station of the aft pressure recovery term of the stall measure.
MID_STATION = 0.5


#: The suction peak is sought ahead of this chord station (the inviscid speed at trailing-edge nodes is spurious).
PEAK_REGION = 0.9


def stall_weights(points) -> np.ndarray:
    """Weights of :func:`stall_measure` for a section, shape ``(4, n + 1)``.

    Rows: trailing-edge pressure (both surfaces at :data:`TE_STATION`), mid-chord
    lower and upper surface (:data:`MID_STATION`), and a mask (1 or 0) of the
    nodes ahead of :data:`PEAK_REGION` where the suction peak is sought.
    """
    te = chord_station_weights(points, TE_STATION).mean(axis=0)
    mask = (np.asarray(points, dtype=float)[:, 0] < PEAK_REGION).astype(float)
    return np.vstack([te[None], chord_station_weights(points, MID_STATION), mask[None]])


def pressure_difference(cp_nodes, weights=None):
    """Valarezo-Chin pressure difference ``Cp_TE - Cp_min`` of one lifting body per configuration.

    Parameters
    ----------
    cp_nodes : ndarray, shape (B, n_nodes)
        Pressure coefficients at the body's nodes (``1 - gamma^2`` on a
        closed body, whose sheet strength is its surface speed: the suction
        peak is resolved better at the nodes than at panel mid-points).
    weights : ndarray, shape (B, 4, n_nodes) or (4, n_nodes), optional
        From :func:`stall_weights`. ``Cp_TE`` is the mean pressure of both
        surfaces at 95 % chord and ``Cp_min`` is sought ahead of 90 % chord:
        the inviscid speed at trailing-edge nodes does not converge as the
        panels shrink. Without weights the first and last nodes are used (the
        classic, panel-dependent reading).

    Returns
    -------
    ndarray, shape (B,)
    """
    if weights is None:
        return 0.5 * (cp_nodes[:, 0] + cp_nodes[:, -1]) - cp_nodes.min(axis=1)
    return stall_measure(cp_nodes, weights, 0.0)[0]


def stall_measure(cp_nodes, weights, aft_weight: float):
    """Stall measure: the leading-edge pressure difference plus the aft pressure recovery.

    ``S = (Cp_TE - Cp_min) + k_aft max(Cp_TE - Cp_mid,lower, Cp_TE - Cp_mid,upper)``.
    The first term is Valarezo & Chin's peak-pressure difference (leading-edge
    stall of thin, lightly cambered sections); the second, the inviscid
    pressure rise from mid-chord to the trailing edge on the suction side,
    stands for the trailing-edge separation that stalls cambered sections
    first. The two-term form and ``k_aft`` are this model's choice, set with
    the critical value so that NACA 0012, 2412, 4412 and 6412 stall near the
    measured c_l,max and angle (Abbott & von Doenhoff 1959, App. IV; see the
    tests and reports/benchmarks.md).

    Parameters
    ----------
    cp_nodes : ndarray, shape (B, n_nodes)
    weights : ndarray, shape (B, 4, n_nodes) or (4, n_nodes)
        From :func:`stall_weights`.
    aft_weight : float
        ``k_aft``.

    Returns
    -------
    dcp, measure : ndarray, shape (B,)
        The Valarezo-Chin difference and the stall measure ``S``.
    """
    w = np.broadcast_to(weights, (cp_nodes.shape[0],) + np.shape(weights)[-2:])
    te = np.einsum("bn,bn->b", w[:, 0], cp_nodes)
    mid = np.einsum("bkn,bn->bk", w[:, 1:3], cp_nodes)
    dcp = te - np.where(w[:, 3] > 0, cp_nodes, np.inf).min(axis=1)
    return dcp, dcp + aft_weight * np.max(te[:, None] - mid, axis=1)


class StallLimit:
    """Stall flag and smooth lift limit from the stall measure.

    The section stalls when the measure ``S`` (:func:`stall_measure`) reaches
    its critical value ``S_crit`` (the criterion follows Valarezo & Chin [1]_).
    With ``r = S / S_crit`` and the smooth maximum ``m = 1 + w ln(1 + exp((r - 1) / w))``,
    the lift is scaled by ``m^-p``: the measure grows about as the square of
    the lift, so ``p = 1/2`` would hold the lift at its stall value and
    ``p > 1/2`` makes it fall past the maximum, as measured lift curves do.
    Profile drag grows by ``k_drag (m - 1)``. The shape of the limit and the
    drag rise are this model's choice (no source); ``w``, ``p`` and ``S_crit``
    are set against measured c_l,max and stall angles.

    Parameters
    ----------
    dcp_crit : float
        Critical value of the stall measure.
    width : float
        Width ``w`` of the smooth maximum (fraction of the criterion).
    drag_rise : float
        ``k_drag``.
    exponent : float
        ``p``.

    References
    ----------
    .. [1] Valarezo, W. O., Chin, V. D. (1994). Method for the prediction of wing
       maximum lift. Journal of Aircraft 31(1), 103-109.
    """

    def __init__(self, dcp_crit: float, width: float = 0.08, drag_rise: float = 0.05, exponent: float = 0.5):
        if dcp_crit <= 0 or width <= 0 or drag_rise < 0 or exponent <= 0:
            raise AeroError("stall limit needs dcp_crit > 0, width > 0, drag_rise >= 0 and exponent > 0")
        self.dcp_crit = float(dcp_crit)
        self.width = float(width)
        self.drag_rise = float(drag_rise)
        self.exponent = float(exponent)

    def apply(self, dcp):
        """Lift factor, extra profile drag and stalled flag for stall measures ``dcp``."""
        r = np.asarray(dcp, dtype=float) / self.dcp_crit
        m = 1.0 + self.width * np.logaddexp(0.0, (r - 1.0) / self.width)
        return m ** -self.exponent, self.drag_rise * (m - 1.0), r >= 1.0


def smooth_stall(cl, dcp, dcp_crit, width=0.08, drag_rise=0.05, exponent=0.5):
    """Convenience wrapper of :class:`StallLimit`: limited lift, extra drag, stalled flag."""
    factor, extra, stalled = StallLimit(dcp_crit, width, drag_rise, exponent).apply(dcp)
    return np.asarray(cl, dtype=float) * factor, extra, stalled
