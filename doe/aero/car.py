"""Geometry of the car's centreline profile, the hatch flap and the rear wing, as panel contours.

Axes: ``x`` rearward from the tip of the front bumper, ``y`` up from the
ground, metres. The flow comes from ``-x``.

The centreline of a parametric (invented) hatchback is built from straight
lines with circular fillets: flat underbody at the ground clearance rising over
the rear overhang, a round nose, bonnet, raked windscreen, roof, rear window
down to the hatch edge. The contour starts at the rear end of the underbody
(where the flow leaves the underside) and ends at the edge where the flow
leaves the upper side: the flap's tip when a flap is fitted, otherwise the
hatch edge. The gap between these two separation edges is the base, the
region of separated flow behind the car, which the panel method leaves open.
A rear window steeper than the critical slant is still panelled (Ahmed, Ramm
& Faltin 1984 found the flow over a rear slant leaves the slant's top edge
above about 30 degrees): the model moves its pressures smoothly towards the
base pressure instead of switching the contour (see :mod:`doe.aero.model`).

The flap is a plate without a slot whose root sits on the rear window: at the
hatch edge by default, or further up the window, up to the roof's rear edge
(``flap_position``); the window behind it lies in its wake. It is panelled as
the last part of the body's upper contour (its underside faces the base and
carries the base pressure). Its angle is measured up from the line of the
rear window.

The wing is an inverted section: its suction side faces the ground. Its angle
of attack is positive when the trailing edge is above the leading edge (more
downforce); its height is that of the leading edge above the hatch edge.

References
----------
.. [1] Ahmed, S. R., Ramm, G., Faltin, B. (1984). Some salient features of the
   time-averaged ground vehicle wake. SAE Technical Paper 840300.
"""
from __future__ import annotations

from dataclasses import dataclass, fields
from functools import lru_cache

import numpy as np

from ..errors import AeroError

__all__ = ["CarGeometry", "BodyContour", "body_contour", "wing_contour", "min_distance", "clearance", "window_panels"]


@dataclass(frozen=True)
class CarGeometry:
    """The parametric centreline of an invented hatchback; lengths in m, angles in degrees.

    Attributes
    ----------
    wheelbase : float
        Front to rear axle.
    front_overhang, rear_overhang : float
        Bumper tip to front axle; rear axle to the rear end.
    ground_clearance : float
        Height of the flat underbody.
    rear_lift : float
        Rise of the underbody over the rear overhang (the rear end of the
        underside sits this much above the clearance).
    nose_height : float
        Height of the bonnet's leading edge.
    bonnet_height : float
        Height of the windscreen's base.
    windscreen_angle : float
        Windscreen rake from the horizontal.
    roof_height : float
        Height of the roof.
    roof_length : float
        Length of the flat roof.
    rear_window_angle : float
        Rear window slope from the horizontal (down towards the rear).
    rear_window_length : float
        Length of the rear window along its slope, roof to hatch edge.
    width : float
        Body width the 2-D centreline results are spread over.
    frontal_area : float
        Frontal area for the forebody drag, m^2.
    """

    wheelbase: float = 2.55
    front_overhang: float = 0.85
    rear_overhang: float = 0.65
    ground_clearance: float = 0.14
    rear_lift: float = 0.03
    nose_height: float = 0.72
    bonnet_height: float = 0.95
    windscreen_angle: float = 30.0
    roof_height: float = 1.44
    roof_length: float = 1.10
    rear_window_angle: float = 26.0
    rear_window_length: float = 0.60
    width: float = 1.75
    frontal_area: float = 2.10

    def __post_init__(self):
        for f in fields(self):
            v = getattr(self, f.name)
            if not np.isfinite(v) or (v <= 0 and f.name != "rear_lift") or v < 0:
                raise AeroError(f"car geometry {f.name} = {v!r} must be a positive number")
        if not 5.0 <= self.windscreen_angle <= 80.0 or not 0.0 < self.rear_window_angle < 80.0:
            raise AeroError("car geometry: windscreen_angle must be 5-80 deg and rear_window_angle 0-80 deg")
        if not self.ground_clearance < self.nose_height < self.bonnet_height < self.roof_height:
            raise AeroError("car geometry: need ground_clearance < nose_height < bonnet_height < roof_height")
        if self.hatch_edge[1] <= self.ground_clearance + self.rear_lift + 0.05:
            raise AeroError("car geometry: the rear window ends below the rear of the underbody; "
                            "shorten rear_window_length or flatten rear_window_angle")
        if self.windscreen_base[0] <= 0.3:
            raise AeroError("car geometry: the bonnet is too short for this roof and windscreen; "
                            "lengthen the car or shorten roof_length")

    @property
    def length(self) -> float:
        """Overall length, m."""
        return self.front_overhang + self.wheelbase + self.rear_overhang

    @property
    def front_axle(self) -> float:
        """x of the front axle, m."""
        return self.front_overhang

    @property
    def rear_axle(self) -> float:
        """x of the rear axle, m."""
        return self.front_overhang + self.wheelbase

    @property
    def hatch_edge(self) -> np.ndarray:
        """(x, y) of the rear window's lower edge, m (2 cm ahead of the rear end)."""
        phi = np.radians(self.rear_window_angle)
        return np.array([self.length - 0.02, self.roof_height - self.rear_window_length * np.sin(phi)])

    @property
    def roof_rear(self) -> np.ndarray:
        """(x, y) of the roof's rear edge (top of the rear window), m."""
        phi = np.radians(self.rear_window_angle)
        return self.hatch_edge + self.rear_window_length * np.array([-np.cos(phi), np.sin(phi)])

    @property
    def windscreen_base(self) -> np.ndarray:
        """(x, y) of the windscreen's base, m."""
        top = self.roof_rear - [self.roof_length, 0.0]
        rise = self.roof_height - self.bonnet_height
        return top - [rise / np.tan(np.radians(self.windscreen_angle)), rise]


@dataclass(frozen=True)
class BodyContour:
    """The body's panel nodes and where its parts are.

    Attributes
    ----------
    nodes : ndarray, shape (n + 1, 2)
        Clockwise, from the underbody's rear end to the upper separation edge, m.
    upper_separation, lower_separation : ndarray, shape (2,)
        The two ends of the contour (the base lies between them), m.
    flap_panels : int
        Number of panels on the flap (the last ones of the contour).
    rear_panels : int
        Panels aft of the roof's rear edge (the rear window ahead of the flap, and the flap).
    separation_at_roof : bool
        Whether the rear window is steeper than the critical slant (the
        model then lets its flow leave the roof's rear edge, smoothly; see
        :mod:`doe.aero.model`).
    static_nodes : int
        Leading nodes that are the same for every flap (front to the roof's rear edge).
    flap_root : ndarray, shape (2,)
        Where the flap (or, without one, the contour) ends on the rear window, m.
    """

    nodes: np.ndarray
    upper_separation: np.ndarray
    lower_separation: np.ndarray
    flap_panels: int
    rear_panels: int
    separation_at_roof: bool
    static_nodes: int = 0
    flap_root: np.ndarray = None


def _fillet(points, radius, n_arc):
    """Round the interior corners of a polyline with circular arcs of the given radii."""
    out = [points[0]]
    for i in range(1, len(points) - 1):
        p0, p1, p2 = points[i - 1], points[i], points[i + 1]
        r = radius[i - 1]
        u, v = p0 - p1, p2 - p1
        lu, lv = np.hypot(*u), np.hypot(*v)
        u, v = u / lu, v / lv
        half = 0.5 * np.arccos(np.clip(u @ v, -1.0, 1.0))
        if r <= 0 or half > np.pi / 2 - 1e-6:
            out.append(p1)
            continue
        d = min(r / np.tan(half), 0.45 * lu, 0.45 * lv)     # tangent length, kept inside both segments
        a, b = p1 + u * d, p1 + v * d
        bis = (u + v) / np.hypot(*(u + v))
        centre = p1 + bis * d / np.cos(half)
        t0 = np.arctan2(*(a - centre)[::-1])
        t1 = np.arctan2(*(b - centre)[::-1])
        dt = (t1 - t0 + np.pi) % (2 * np.pi) - np.pi
        rr = np.hypot(*(a - centre))
        ts = t0 + dt * np.linspace(0.0, 1.0, n_arc)
        out.extend(centre + rr * np.column_stack([np.cos(ts), np.sin(ts)]))
    out.append(points[-1])
    return np.array(out)


def _resample(poly, n, cluster_ends=True):
    """``n`` panels along a polyline by arc length (denser at both ends when asked)."""
    s = np.r_[0.0, np.cumsum(np.hypot(*np.diff(poly, axis=0).T))]
    u = np.linspace(0.0, 1.0, n + 1)
    if cluster_ends:
        u = 0.5 * (1.0 - np.cos(np.pi * u)) * 0.85 + 0.15 * u   # 85 % cosine, 15 % uniform
    return np.column_stack([np.interp(u * s[-1], s, poly[:, 0]), np.interp(u * s[-1], s, poly[:, 1])])


def _rear_share(n_body: int) -> int:
    """Panels on the rear window (roof's rear edge to hatch edge) out of ``n_body``."""
    return max(6, int(round(n_body * 0.12)))


@lru_cache(maxsize=16)
def _car_outline(car: CarGeometry, n_body: int, critical_slant: float = 30.0):
    """Nodes of the car without its flap (cached: the same for every configuration of a study).

    Returns the nodes from the underbody's rear end to the hatch edge, the
    number of rear-window panels (the last ones) and whether the window is
    steeper than ``critical_slant`` (the contour includes the window either
    way; the model treats the steep window's separation smoothly).
    """
    L, hc = car.length, car.ground_clearance
    kick = car.rear_axle + 0.25 * car.rear_overhang
    lower = np.array([L, hc + car.rear_lift])
    ws, rr, he = car.windscreen_base, car.roof_rear, car.hatch_edge
    rt = rr - [car.roof_length, 0.0]
    steep = car.rear_window_angle > critical_slant
    key = [lower, [kick, hc], [0.25, hc], [0.0, 0.5 * (hc + car.nose_height)], [0.12, car.nose_height],
           ws, rt, rr, he]
    radii = [0.30, 0.25, 0.25, 0.20, 0.10, 0.30, 0.25]
    poly = _fillet(np.array(key, dtype=float), radii, 9)
    n_rear = _rear_share(n_body)
    i_rr = int(np.argmin(np.hypot(*(poly - rr).T)))
    head = _resample(poly[: i_rr + 1], n_body - n_rear)
    window = _resample(np.array([head[-1], he]), n_rear)
    main = np.vstack([head, window[1:]])
    main.setflags(write=False)
    return main, n_rear, steep


def window_panels(n_rear: int, flap_position: float) -> int:
    """Panels kept on the rear window ahead of a flap whose root is ``flap_position`` of the way up it."""
    return int(np.ceil(n_rear * (1.0 - flap_position) - 1e-9))


def body_contour(car: CarGeometry, flap_angle, flap_chord: float, n_body: int, n_flap: int,
                 critical_slant: float = 30.0, *, flap_position: float = 0.0) -> BodyContour:
    """Panel nodes of the centreline profile, with the flap (see the module docstring).

    Parameters
    ----------
    car : CarGeometry
    flap_angle : float
        Flap angle up from the rear-window line, degrees.
    flap_chord : float
        Flap length, m; 0 for no flap.
    n_body : int
        Panels on the body without the flap (when the flap sits up the window,
        the window panels behind it are dropped).
    n_flap : int
        Panels on the flap (ignored without one).
    critical_slant : float
        Rear-window slope, degrees, above which the window counts as steep (``separation_at_roof``).
    flap_position : float, keyword-only
        Where the flap's root sits on the rear window: 0 at the hatch edge,
        1 at the roof's rear edge (fraction of the window length). The window
        behind the flap lies in its wake (the base).

    Returns
    -------
    BodyContour
    """
    if flap_chord < 0:
        raise AeroError(f"flap chord {flap_chord:g} m must be >= 0")
    if not 0.0 <= flap_position <= 1.0:
        raise AeroError(f"flap position {flap_position:g} must be between 0 (hatch edge) and 1 (roof's rear edge)")
    main, n_rear, steep = _car_outline(car, n_body, critical_slant)
    he, rr = car.hatch_edge, car.roof_rear
    lower = main[0]
    n_static = len(main) - n_rear
    flap_panels = 0
    if flap_chord > 0 and flap_position > 0:                 # the window ends at the flap's root
        root = he + flap_position * (rr - he)
        n_win = window_panels(n_rear, flap_position)
        if n_win:
            window = _resample(np.array([main[n_static - 1], root]), n_win)
            main = np.vstack([main[:n_static], window[1:]])
        else:
            main = main[:n_static]
        rear_panels = n_win
    else:
        rear_panels = n_rear
    root = main[-1]
    edge = root
    if flap_chord > 0:
        base_dir = (he - rr) / np.hypot(*(he - rr))
        ang = np.radians(flap_angle)
        d = np.array([base_dir[0] * np.cos(ang) - base_dir[1] * np.sin(ang),
                      base_dir[0] * np.sin(ang) + base_dir[1] * np.cos(ang)])
        t = 0.5 * (1.0 - np.cos(np.pi * np.linspace(0.0, 1.0, n_flap + 1)))
        flap = edge + flap_chord * t[:, None] * d
        main = np.vstack([main, flap[1:]])
        flap_panels = n_flap
        rear_panels += n_flap
        edge = flap[-1]
    return BodyContour(main, edge, lower, flap_panels, rear_panels, steep, n_static, root)


def wing_contour(section_points, chord: float, aoa_deg, leading_edge) -> np.ndarray:
    """Panel nodes of the inverted wing section, m.

    Parameters
    ----------
    section_points : ndarray, shape (n + 1, 2)
        Section at unit chord in the ordering of :class:`~doe.aero.sections.Section`.
    chord : float
        m.
    aoa_deg : float
        Angle of attack, degrees; positive raises the trailing edge (more downforce).
    leading_edge : array_like, shape (2,)
        Position of the leading edge, m.

    Returns
    -------
    ndarray, shape (n + 1, 2)
        Clockwise nodes starting and ending at the trailing edge.
    """
    p = np.asarray(section_points, dtype=float) * [chord, -chord]      # inverted: suction side down
    p = p[::-1]                                                        # flipping reversed the direction
    a = np.radians(aoa_deg)
    rot = np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]])
    return p @ rot.T + np.asarray(leading_edge, dtype=float)


def _node_to_panels(nodes, contour):
    """Distances (N, S) from nodes to the panels of a contour, and the panels' lengths (S,)."""
    p1, p2 = contour[:-1], contour[1:]
    seg = p2 - p1
    length = np.hypot(seg[:, 0], seg[:, 1])
    rel = nodes[:, None, :] - p1[None]
    t = np.clip(np.einsum("wsk,sk->ws", rel, seg) / (length**2)[None], 0.0, 1.0)
    return np.hypot(*(rel - t[..., None] * seg[None]).transpose(2, 0, 1)), length


def _crosses(a, b) -> bool:
    """Whether any panel of contour ``a`` crosses any panel of contour ``b``."""
    a1, a2, b1, b2 = a[:-1, None], a[1:, None], b[None, :-1], b[None, 1:]

    def orient(p, q, r):
        return np.sign((q[..., 0] - p[..., 0]) * (r[..., 1] - p[..., 1]) - (q[..., 1] - p[..., 1]) * (r[..., 0] - p[..., 0]))
    return bool(np.any((orient(a1, a2, b1) * orient(a1, a2, b2) < 0) & (orient(b1, b2, a1) * orient(b1, b2, a2) < 0)))


def clearance(wing, body):
    """Smallest distance between the wing and the body's panels, and the panel length there, m.

    Parameters
    ----------
    wing : ndarray, shape (n + 1, 2)
        Wing nodes (a closed contour).
    body : ndarray, shape (m + 1, 2)
        Body nodes (an open contour).

    Returns
    -------
    gap : float
        Smallest distance from a node of either contour to a panel of the
        other (0 when their panels cross).
    panel : float
        The longest panel on either side of that closest approach: a gap
        much smaller than the panels beside it is not represented by the
        panel method (the flow through it is that of the panels' end points).
    """
    lo, hi = wing.min(axis=0) - 0.3, wing.max(axis=0) + 0.3          # farther body nodes cannot be nearest
    keep = np.all((body > lo) & (body < hi), axis=1)
    keep = keep | np.r_[keep[1:], False] | np.r_[False, keep[:-1]]           # and their neighbours
    if keep.sum() < 2:
        return np.inf, 0.0
    idx = np.flatnonzero(keep)
    body = body[idx[0]: idx[-1] + 1]
    if _crosses(wing, body):
        return 0.0, float(np.max(np.hypot(*np.diff(body, axis=0).T)))
    d_wb, l_b = _node_to_panels(wing, body)
    d_bw, l_w = _node_to_panels(body, wing)
    if d_wb.min() <= d_bw.min():
        i, j = np.unravel_index(np.argmin(d_wb), d_wb.shape)
        local = max(l_b[j], l_w[max(i - 1, 0)], l_w[min(i, len(l_w) - 1)])
        return float(d_wb[i, j]), float(local)
    i, j = np.unravel_index(np.argmin(d_bw), d_bw.shape)
    local = max(l_w[j], l_b[max(i - 1, 0)], l_b[min(i, len(l_b) - 1)])
    return float(d_bw[i, j]), float(local)


def min_distance(a, b) -> float:
    """Smallest distance between the nodes of two contours, m."""
    lo, hi = a.min(axis=0), a.max(axis=0)
    near = np.all((b > lo - 0.5) & (b < hi + 0.5), axis=1)    # only nodes within 0.5 m can be the closest
    b = b[near] if near.any() else b
    d = a[:, None, :] - b[None, :, :]
    return float(np.sqrt(np.min(np.sum(d * d, axis=-1))))
