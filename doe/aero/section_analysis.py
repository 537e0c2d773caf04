"""Lift, moment and pressure distribution of an isolated section, in free air or near the ground.

Assumptions and limits: inviscid, incompressible 2-D flow with the Kutta
condition at the trailing edge (the numbers are those of potential flow: a
real section has about 10-15 % less lift slope and stalls; the stall margin
flags that). The lift is the Kutta-Joukowski lift of the section's
circulation (exact to the panel solution); the moment comes from the pressures.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from threadpoolctl import threadpool_limits

from ..errors import AeroError
from .drag import StallLimit, pressure_difference, stall_measure, stall_weights
from .panels import Layout, solve_field
from .sections import Section

__all__ = ["SectionResult", "analyse_section", "section_lift_curve"]


@dataclass
class SectionResult:
    """What :func:`analyse_section` gives.

    Attributes
    ----------
    name : str
    alpha : float
        Angle of attack, degrees.
    cl : float
        Lift coefficient, positive upward (an inverted section makes downforce:
        a negative ``cl``); in free air the Kutta-Joukowski lift of the
        circulation, near the ground the integrated pressures.
    cl_pressure : float
        Lift coefficient from integrating the pressures (checks the panelling).
    cm_quarter : float
        Pitching moment about the quarter chord, clockwise positive with the
        flow from left to right (nose-up for an upright section).
    ground_height : float or None
        Quarter-chord height above the ground, chords (None: free air).
    inverted : bool
    x, y, cp : ndarray
        Panel mid-points (chords, section axes before rotation) and pressure coefficients.
    dcp : float
        Valarezo-Chin pressure difference ``Cp_TE - Cp_min`` (``Cp_TE`` read at 95 % chord).
    cl_viscous : float
        The built-in model's viscous, stall-limited lift coefficient of the
        same section (see :func:`section_lift_curve`; near the ground this is
        where the viscous limit of ground effect shows).
    stall_margin : float
        The model's stall measure over its critical value (stall at 1).
    """

    name: str
    alpha: float
    cl: float
    cl_pressure: float
    cm_quarter: float
    ground_height: float | None
    inverted: bool
    x: np.ndarray
    y: np.ndarray
    cp: np.ndarray
    dcp: float
    cl_viscous: float = float("nan")
    stall_margin: float = float("nan")

    def to_dict(self) -> dict:
        """JSON-ready record (keys documented in :func:`analyse_section`)."""
        return {"section": self.name, "alpha_deg": self.alpha, "cl": self.cl, "cl_pressure": self.cl_pressure,
                "cm_quarter": self.cm_quarter, "ground_height_chords": self.ground_height,
                "inverted": self.inverted, "dcp": self.dcp, "cl_viscous": self.cl_viscous,
                "stall_margin": self.stall_margin,
                "pressure": {"x": self.x.tolist(), "y": self.y.tolist(), "cp": self.cp.tolist()}}


def _placed(section: Section, alpha_deg: float, ground_height, inverted: bool) -> np.ndarray:
    """The section's nodes turned to ``alpha_deg`` about its quarter chord (and inverted, and lifted), chords."""
    pts = section.points.copy()
    if inverted:
        pts = (pts * [1.0, -1.0])[::-1]
    a = np.radians(alpha_deg) * (1.0 if inverted else -1.0)    # geometry turned, the stream stays level
    rot = np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]])
    quarter = np.array([0.25, 0.0])
    world = (pts - quarter) @ rot.T + quarter
    if ground_height is not None:
        world = world + [0.0, ground_height]
        if np.any(world[:, 1] <= 0):
            raise AeroError(f"at {alpha_deg:g} deg the section touches the ground; raise --ground-height")
    return world


def _stall_weights(section: Section, inverted: bool) -> np.ndarray:
    w = stall_weights(section.points)
    return w[:, ::-1] if inverted else w                        # inverting reverses the node order


def analyse_section(section: Section, alpha_deg: float, ground_height: float | None = None,
                    inverted: bool = False) -> SectionResult:
    """Solve the flow round one section.

    Parameters
    ----------
    section : Section
    alpha_deg : float
        Angle of attack, degrees (-30 to 30). For an inverted section a
        positive angle raises the trailing edge (more downforce).
    ground_height : float, optional
        Height of the quarter-chord point above the ground, chords (> 0);
        None for free air.
    inverted : bool
        Turn the section upside down (a wing making downforce).

    Returns
    -------
    SectionResult
        JSON keys of :meth:`SectionResult.to_dict`: ``section``, ``alpha_deg``,
        ``cl``, ``cl_pressure``, ``cm_quarter`` (about x/c = 0.25, clockwise
        positive: nose-up for an upright section), ``ground_height_chords``, ``inverted``, ``dcp``,
        ``cl_viscous`` and ``stall_margin`` (the built-in model's viscous, stall-limited lift and its
        stall measure over the critical value), and ``pressure`` with lists ``x``, ``y`` (chords) and ``cp``.
    """
    if not np.isfinite(alpha_deg) or abs(alpha_deg) > 30:
        raise AeroError(f"angle of attack {alpha_deg!r} deg must be between -30 and 30")
    if ground_height is not None and not (np.isfinite(ground_height) and ground_height > 0):
        raise AeroError(f"ground height {ground_height!r} chords must be a positive number")
    world = _placed(section, alpha_deg, ground_height, inverted)
    quarter = np.array([0.25, 0.0])
    a = np.radians(alpha_deg) * (1.0 if inverted else -1.0)
    rot = np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]])
    sol = solve_field(world, Layout(("section",), (len(world),)), ground=ground_height is not None)
    cp = sol.cp()
    f = sol.sheet_forces()[0]                                    # exact integral of the linear sheet's pressures
    r = sol.mid[0] - quarter - [0.0, ground_height or 0.0]
    cl_p = float(f[:, 1].sum())
    mz = float(np.sum(r[:, 0] * f[:, 1] - r[:, 1] * f[:, 0]))
    # in free air the Kutta-Joukowski lift of the circulation (chord 1, unit speed) is exact to the panel
    # solution; near the ground the image's induced velocity changes the force, so the pressures are used
    cl = 2.0 * float(sol.circulation()[0, 0]) if ground_height is None else cl_p
    mid_local = (sol.mid[0] - [0.0, ground_height or 0.0] - quarter) @ rot + quarter
    if inverted:
        mid_local = mid_local * [1.0, -1.0]
    weights = _stall_weights(section, inverted)
    dcp = float(pressure_difference(1.0 - sol.node_strength() ** 2, weights)[0])
    cl_v, margin = _limited(cl, 1.0 - sol.node_strength() ** 2, weights, None)
    return SectionResult(section.name, float(alpha_deg), cl, cl_p, -mz,
                         ground_height, inverted, mid_local[:, 0], mid_local[:, 1], cp[0], dcp,
                         float(cl_v[0]), float(margin[0]))


def _limited(cl_inviscid, cp_nodes, weights, coefficients):
    """The model's viscous, stall-limited lift and stall margin from inviscid lift and node pressures."""
    from .model import POST_STALL_EXPONENT, STALL_AFT_WEIGHT, Coefficients

    co = coefficients or Coefficients()
    _, measure = stall_measure(cp_nodes, weights, STALL_AFT_WEIGHT)
    factor, _, _ = StallLimit(co.stall_dcp, co.stall_width, co.post_stall_drag, POST_STALL_EXPONENT).apply(measure)
    return co.viscous_lift_factor * np.asarray(cl_inviscid) * factor, measure / co.stall_dcp


def section_lift_curve(section: Section, alphas, coefficients=None, ground_gap=None, inverted: bool = False):
    """Viscous, stall-limited lift curve of a section, as the built-in model treats its wing.

    ``c_l = k_v c_l,inviscid m^-p`` with the stall measure and limit of
    :mod:`doe.aero.drag` and the coefficients of
    :class:`doe.aero.model.Coefficients` (``viscous_lift_factor``,
    ``stall_dcp``, ``stall_width``) and the constants ``STALL_AFT_WEIGHT`` and
    ``POST_STALL_EXPONENT`` of :mod:`doe.aero.model`.
    Near the ground the stall measure is the viscous limit of ground effect:
    the flow under the section speeds up, its pressure recovery steepens and
    the limit caps the lift (the boundary-layer separation that Zerihan &
    Zhang [1]_ found to end the rise of downforce near a gap of 0.1 chord).

    Parameters
    ----------
    section : Section
    alphas : array_like
        Angles of attack, degrees (-30 to 30).
    coefficients : Coefficients, optional
        Default: the model's defaults.
    ground_gap : float, optional
        Height of the section's lowest point above the ground at each angle,
        chords (> 0); None for free air.
    inverted : bool
        Turn the section upside down (a wing making downforce; ``cl`` negative).

    Returns
    -------
    cl, stall_margin : ndarray
        Limited lift coefficient and stall measure over its critical value, per angle.

    References
    ----------
    .. [1] Zerihan, J., Zhang, X. (2000). Aerodynamics of a single element wing
       in ground effect. Journal of Aircraft 37(6), 1058-1064.
    """
    alphas = np.atleast_1d(np.asarray(alphas, dtype=float))
    if not np.all(np.isfinite(alphas)) or np.any(np.abs(alphas) > 30):
        raise AeroError("angles of attack must be between -30 and 30 deg")
    if ground_gap is not None and not (np.isfinite(ground_gap) and ground_gap > 0):
        raise AeroError(f"ground gap {ground_gap!r} chords must be a positive number")
    worlds = []
    for a in alphas:
        w = _placed(section, a, None, inverted)
        if ground_gap is not None:
            w = w + [0.0, ground_gap - w[:, 1].min()]
        worlds.append(w)
    worlds = np.stack(worlds)
    with threadpool_limits(limits=1, user_api="blas"):       # small matrices: threads only contend
        sol = solve_field(worlds, Layout(("section",), (worlds.shape[1],)), ground=ground_gap is not None)
    if ground_gap is None:
        cl_inv = 2.0 * sol.circulation()[:, 0]                   # Kutta-Joukowski, chord 1, unit speed
    else:
        cl_inv = sol.sheet_forces()[..., 1].sum(axis=1)
    return _limited(cl_inv, 1.0 - sol.node_strength() ** 2, _stall_weights(section, inverted), coefficients)
