"""Closed 2-D outlines of the rear package for meshing (a CFD case, a drawing).

The built-in model (:mod:`doe.aero.model`) needs the body only up to where the
flow leaves it: its panel contour is open at the base. A flow solver needs
closed walls. This module closes the *same* geometry, built by the model's own
geometry step (:meth:`doe.aero.model.RearPackageModel.geometry`, which uses
:func:`doe.aero.car.body_contour`, :func:`doe.aero.car.wing_contour` and
:func:`doe.aero.sections.naca4`), so that a CFD case and the model always see
one car:

* the **body**: the centreline contour from the rear end of the underbody
  forward, round the nose, over the roof and down the rear window, then the
  hatch flap (given a thickness: a real flap is a plate a few mm thick), back
  along the flap's underside and down the base to the start;
* the **wing**: the inverted section, closed at its trailing edge.

Axes as in :mod:`doe.aero.car`: ``x`` rearward from the front bumper's tip,
``y`` up from the ground (the ground is ``y = 0``), metres. Both outlines run
clockwise and do not repeat their first point.

The outlines are only geometry: which flow they see (steady RANS, a 2-D
section standing for a 3-D car) is the case's business. A 2-D centreline is
not a car; see ``docs/cfd.md``.
"""
from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..errors import AeroError
from .model import DESIGN_INPUTS, ModelSettings, RearPackageModel

__all__ = ["RearPackageOutlines", "rear_package_outlines", "DEFAULT_FLAP_THICKNESS"]

#: Thickness given to the hatch flap (the model treats it as a line), m.
DEFAULT_FLAP_THICKNESS = 0.004


@dataclass(frozen=True)
class RearPackageOutlines:
    """Closed outlines of one configuration, m.

    Attributes
    ----------
    body : ndarray, shape (n, 2)
        Clockwise, starting at the rear end of the underbody; not repeated at the end.
    wing : ndarray, shape (m, 2) or None
        Clockwise, starting at the trailing edge; None when the wing is not fitted.
    hatch_edge : ndarray, shape (2,)
        Where the rear window ends (the flap's root).
    flap_tip : ndarray, shape (2,)
        The flap's upper tip (the hatch edge when there is no flap).
    lower_edge : ndarray, shape (2,)
        Rear end of the underbody (the base's lower corner).
    wing_gap : float
        Smallest distance between the wing and the body's nodes, m (inf without a wing).
    point : dict
        The design inputs used, model units (deg, mm, % chord), defaults filled in.
    """

    body: np.ndarray
    wing: np.ndarray | None
    hatch_edge: np.ndarray
    flap_tip: np.ndarray
    lower_edge: np.ndarray
    wing_gap: float
    point: dict

    def corners(self, which: str = "body", min_turn_deg: float = 25.0) -> np.ndarray:
        """Indices of the nodes where an outline turns by more than ``min_turn_deg`` (sharp edges).

        Parameters
        ----------
        which : {"body", "wing"}
        min_turn_deg : float
            Smallest turn between neighbouring segments that counts as a corner, degrees.

        Returns
        -------
        ndarray of int
        """
        poly = self.body if which == "body" else self.wing
        if poly is None:
            return np.zeros(0, dtype=int)
        return sharp_corners(poly, min_turn_deg)


def sharp_corners(poly: np.ndarray, min_turn_deg: float) -> np.ndarray:
    """Indices of the nodes of a closed polygon where its direction turns by more than ``min_turn_deg``."""
    a = np.roll(poly, 1, axis=0)
    b = np.roll(poly, -1, axis=0)
    u, v = poly - a, b - poly
    cross = u[:, 0] * v[:, 1] - u[:, 1] * v[:, 0]
    dot = (u * v).sum(axis=1)
    turn = np.degrees(np.abs(np.arctan2(cross, dot)))
    return np.flatnonzero(turn > min_turn_deg)


def rear_package_outlines(settings: ModelSettings | None = None, point: dict | None = None, *,
                          flap_thickness: float = DEFAULT_FLAP_THICKNESS, body_panels: int = 400,
                          wing_panels: int = 160) -> RearPackageOutlines:
    """The closed body and wing outlines of one configuration (see the module docstring).

    Parameters
    ----------
    settings : ModelSettings, optional
        The model's settings (car, wing chord, fixed inputs); defaults when None.
    point : dict, optional
        Design inputs in model units (deg, mm, % chord; see :data:`doe.aero.DESIGN_INPUTS`);
        missing ones take ``settings.fixed`` and then their defaults.
    flap_thickness : float
        Thickness given to the flap plate, m (> 0).
    body_panels, wing_panels : int
        Nodes along the body (without the flap) and round the wing section:
        enough to carry the fillets' and the nose's curvature to a mesher.

    Returns
    -------
    RearPackageOutlines

    Raises
    ------
    AeroError
        When an input is outside the model's range, the wing touches the
        body (less than 10 mm apart), or the flap thickness is not positive.
    """
    settings = settings or ModelSettings()
    if not (np.isfinite(flap_thickness) and flap_thickness > 0):
        raise AeroError(f"flap thickness {flap_thickness!r} m must be > 0")
    fine = replace(settings, body_panels=body_panels, wing_panels=wing_panels, flap_panels=2)
    model = RearPackageModel(fine)
    inputs = model.inputs({k: v for k, v in (point or {}).items()})
    p = {k: float(v[0]) for k, v in inputs.items()}
    geom = model.geometry(p)                  # the model's own geometry step: one description of the car
    contour = geom["body"]
    nodes = np.asarray(contour.nodes, dtype=float)
    car = settings.car
    lower = nodes[0].copy()
    he = car.hatch_edge.copy()
    if contour.flap_panels > 0:
        root, tip = nodes[-contour.flap_panels - 1], nodes[-1]
        d = (tip - root) / np.hypot(*(tip - root))
        n = np.array([d[1], -d[0]])           # right of the flap's direction: the body's side of it
        closing = [tip + flap_thickness * n, root + flap_thickness * n]
        flap_tip = tip.copy()
    else:
        root = nodes[-1]
        closing = []
        flap_tip = nodes[-1].copy()
    if contour.separation_at_roof:            # the model's contour ends at the roof: add the window
        closing.append(he)
    body = np.vstack([nodes, np.array(closing).reshape(-1, 2)])
    body = _drop_repeats(body)
    wing = None
    gap = np.inf
    if geom["wing"] is not None:
        wing = _drop_repeats(np.asarray(geom["wing"], dtype=float))
        gap = _segment_gap(wing, body)
        if gap < 0.01:
            raise AeroError(f"the wing comes within {gap * 1000:.0f} mm of the body (at least 10 mm needed)")
    return RearPackageOutlines(body, wing, he, flap_tip, lower, gap, p)


def _drop_repeats(poly: np.ndarray, tol: float = 1e-9) -> np.ndarray:
    """A closed polygon without consecutive repeated nodes (and without the closing repeat)."""
    keep = np.r_[True, np.hypot(*np.diff(poly, axis=0).T) > tol]
    poly = poly[keep]
    if np.hypot(*(poly[-1] - poly[0])) <= tol:
        poly = poly[:-1]
    return poly


def _segment_gap(a: np.ndarray, b: np.ndarray) -> float:
    """Smallest distance from the nodes of ``a`` to the segments of closed polygon ``b``, m."""
    p0, p1 = b, np.roll(b, -1, axis=0)
    seg = p1 - p0
    l2 = np.maximum((seg * seg).sum(axis=1), 1e-30)
    rel = a[:, None, :] - p0[None, :, :]
    t = np.clip((rel * seg[None]).sum(axis=-1) / l2[None], 0.0, 1.0)
    d = rel - t[..., None] * seg[None]
    return float(np.sqrt((d * d).sum(axis=-1).min()))
