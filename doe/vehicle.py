"""From aerodynamic coefficients to what the driver feels: loads, balance, speeds, lap time.

Pure physics on SI units; it knows nothing of plans, surrogates or study files.
A car is a :class:`Vehicle` (mass, tyres, power, axle geometry), its
aerodynamics an :class:`Aero` (CLA at each axle and CDA),
and a track a :class:`Track` (straights and constant-radius corners).

Sign convention: ``cla_m2`` is the lift coefficient times its reference area,
negative for downforce (as the study's responses); ``downforce_n`` is positive
downwards.

==========================  ====================================================
function                    result
==========================  ====================================================
:func:`aero_forces`         downforce and drag at a speed, N
:func:`axle_loads`          front and rear axle loads and front share at a speed
:func:`corner_speed`        quasi-steady speed on a flat corner, m/s
:func:`top_speed`           speed where drive force equals drag plus rolling loss
:func:`lap_time`            quasi-steady point-mass lap time on a :class:`Track`
:func:`vehicle_figures`     all of the above for one configuration, as a record
:func:`compare_figures`     differences between two configurations
:func:`lap_times`           lap time of many configurations at once (fast path)
:func:`top_speeds`,         top and corner speeds of many configurations at once
:func:`corner_speeds`
:func:`front_load_share`    front axle's share of the whole vertical load at speed
:func:`balance_shift`       that share minus the static one (+ towards oversteer)
:func:`balance_change`      which way the balance moves between two configurations,
                            in plain words
:func:`fastest_corner_kph`  speed of the track's fastest corner (where to compare)
:class:`VehicleObjective`   figures, limits and their propagation for a search
==========================  ====================================================

Model and its limits (quasi-steady point mass)
----------------------------------------------
* Corners are driven at constant speed, the largest the tyres allow with the
  aero load (no load transfer, no combined slip, no drag in the corner).
* On straights the car accelerates with ``min(traction, power / v)`` minus drag
  and rolling resistance, and brakes with the tyre grip (optionally capped by
  ``brake_limit_g``) plus drag and rolling resistance; the speed at each point
  is the lower of the accelerating and braking curves.
* Traction is ``tyre_mu`` times the load on the driven axle (static share plus
  the aero share of that axle); no longitudinal load transfer.
* Where a corner follows another corner, the speed steps from one corner speed
  to the next at the junction (quasi-steady).

References
----------
.. [MM] Milliken, W. F. and Milliken, D. L. (1995). Race Car Vehicle Dynamics.
   SAE International. (steady cornering with aero load; power-limited speed)
.. [K] Katz, J. (2006). Aerodynamics of race cars. Annu. Rev. Fluid Mech. 38:27-63.
"""
from __future__ import annotations

import math
import re
from dataclasses import asdict, dataclass, field

import numpy as np

from .aero.atmosphere import ISA_DENSITY
from .checks import check_limit_bounds
from .errors import DoeError

__all__ = ["G", "RHO_SEA_LEVEL", "DRIVES", "Vehicle", "Aero", "Segment", "Track", "aero_forces",
           "axle_loads", "corner_speed", "top_speed", "lap_time", "LapResult", "VehicleFigures",
           "vehicle_figures", "compare_figures", "top_speeds", "corner_speeds", "lap_times",
           "front_load_share", "balance_shift", "BalanceChange", "balance_change", "FIGURE_UNITS", "figure_unit",
           "figure_words", "VehicleLimit", "normal_moments", "VehicleObjective", "fastest_corner_kph"]

#: Standard gravity, m/s^2 (ISO 80000-3).
G = 9.80665
#: ISA sea-level air density, kg/m^3 (ISO 2533:1975): the aero model's own value, one number for both.
RHO_SEA_LEVEL = ISA_DENSITY
#: Driven axles accepted by :class:`Vehicle`.
DRIVES = ("front", "rear", "all")


def _positive(name: str, value: float, allow_zero: bool = False) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError) as exc:
        raise DoeError(f"vehicle: {name} must be a number, got {value!r}") from exc
    if not math.isfinite(v) or v < 0 or (v == 0 and not allow_zero):
        raise DoeError(f"vehicle: {name} must be {'>= 0' if allow_zero else '> 0'}, got {value!r}")
    return v


@dataclass(frozen=True)
class Vehicle:
    """A car as a point mass with two axles.

    Attributes
    ----------
    mass_kg : float
        Mass with driver and fuel, kg.
    tyre_mu : float
        Tyre friction coefficient (lateral and longitudinal), -.
    power_kw : float
        Power at the wheels, kW.
    wheelbase_m : float
        Distance between the axles, m.
    cg_to_front_axle_m : float
        Distance from the front axle back to the centre of gravity, m; the
        static front axle share is ``1 - cg_to_front_axle_m / wheelbase_m``.
    rolling_resistance : float
        Rolling-resistance coefficient C_rr (force per normal load), -.
    drive : {"front", "rear", "all"}
        Driven axle(s), for the traction limit.
    brake_limit_g : float or None
        Largest braking deceleration the brakes give, in g; None means the
        tyres are the only limit.
    air_density_kg_m3 : float
        Air density, kg/m^3.
    """

    mass_kg: float
    tyre_mu: float
    power_kw: float
    wheelbase_m: float = 2.5
    cg_to_front_axle_m: float = 1.0
    rolling_resistance: float = 0.0
    drive: str = "front"
    brake_limit_g: float | None = None
    air_density_kg_m3: float = RHO_SEA_LEVEL

    def __post_init__(self):
        for name in ("mass_kg", "tyre_mu", "power_kw", "wheelbase_m", "air_density_kg_m3"):
            _positive(name, getattr(self, name))
        _positive("rolling_resistance", self.rolling_resistance, allow_zero=True)
        _positive("cg_to_front_axle_m", self.cg_to_front_axle_m, allow_zero=True)
        if self.cg_to_front_axle_m > self.wheelbase_m:
            raise DoeError(f"vehicle: cg_to_front_axle_m ({self.cg_to_front_axle_m:g} m) is longer than "
                           f"the wheelbase ({self.wheelbase_m:g} m)")
        if self.drive not in DRIVES:
            raise DoeError(f"vehicle: drive {self.drive!r} is not one of {', '.join(DRIVES)}")
        if self.brake_limit_g is not None:
            _positive("brake_limit_g", self.brake_limit_g)

    @property
    def weight_n(self) -> float:
        """Weight ``m g``, N."""
        return self.mass_kg * G

    @property
    def static_front_share(self) -> float:
        """Share of the weight on the front axle at rest, -."""
        return 1.0 - self.cg_to_front_axle_m / self.wheelbase_m

    @property
    def power_w(self) -> float:
        """Power at the wheels, W."""
        return self.power_kw * 1e3


@dataclass(frozen=True)
class Aero:
    """Aerodynamic coefficients of one configuration, split between the axles.

    Attributes
    ----------
    cla_front_m2, cla_rear_m2 : float
        Lift coefficient times reference area acting at the front and rear
        axle, m^2; negative for downforce. One axle may lift while the other
        is pressed down.
    cda_m2 : float
        Drag coefficient times reference area, m^2; >= 0.
    """

    cla_front_m2: float
    cla_rear_m2: float
    cda_m2: float

    def __post_init__(self):
        for name in ("cla_front_m2", "cla_rear_m2"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
                raise DoeError(f"aero: {name} must be a finite number, got {value!r}")
        _positive("cda_m2", self.cda_m2, allow_zero=True)

    @classmethod
    def from_total(cls, cla_m2: float, cda_m2: float, front_share: float = 0.5) -> "Aero":
        """Build from the whole-car CLA (m^2, negative for downforce), CDA (m^2) and the
        front share of the aero vertical load (-; outside [0, 1] when one axle lifts)."""
        if not math.isfinite(float(cla_m2)) or not math.isfinite(float(front_share)):
            raise DoeError(f"aero: cla_m2 and front_share must be finite, got {cla_m2!r} and {front_share!r}")
        return cls(float(cla_m2) * float(front_share), float(cla_m2) * (1.0 - float(front_share)), cda_m2)

    @property
    def cla_m2(self) -> float:
        """Whole-car CLA, m^2 (negative for downforce)."""
        return float(self.cla_front_m2 + self.cla_rear_m2)

    @property
    def front_share(self) -> float | None:
        """Front share of the aero vertical load, -; None when the total is zero."""
        total = self.cla_m2
        return float(self.cla_front_m2 / total) if total != 0 else None

    @property
    def downforce_area_m2(self) -> float:
        """``S C_L,down = -CLA``, m^2 (positive for downforce)."""
        return -self.cla_m2


# ---------------------------------------------------------------------------
# forces and loads
def _q(vehicle: Vehicle, speed_m_s) -> np.ndarray:
    v = np.asarray(speed_m_s, dtype=float)
    return 0.5 * vehicle.air_density_kg_m3 * v * v


def aero_forces(vehicle: Vehicle, aero: Aero, speed_m_s):
    """Downforce and drag at a speed, ``F = 1/2 rho v^2 C A``.

    Parameters
    ----------
    vehicle : Vehicle
        Only the air density is used.
    aero : Aero
    speed_m_s : float or array_like
        Road speed in still air, m/s.

    Returns
    -------
    downforce_n, drag_n : float or ndarray
        Vertical aero load (positive downwards) and drag, N.
    """
    q = _q(vehicle, speed_m_s)
    return q * aero.downforce_area_m2, q * aero.cda_m2


def _axle_loads(vehicle: Vehicle, cla_front, cla_rear, q):
    """Front and rear axle loads (N) at dynamic pressure ``q`` (Pa); arrays broadcast."""
    w = vehicle.weight_n
    return w * vehicle.static_front_share - q * cla_front, w * (1.0 - vehicle.static_front_share) - q * cla_rear


def axle_loads(vehicle: Vehicle, aero: Aero, speed_m_s):
    """Vertical loads on the axles at a steady speed (weight plus aero, no load transfer).

    Returns
    -------
    front_n, rear_n : float or ndarray
        Axle loads, N.
    front_share : float or ndarray
        ``front_n / (front_n + rear_n)``, -.
    """
    front, rear = _axle_loads(vehicle, aero.cla_front_m2, aero.cla_rear_m2, _q(vehicle, speed_m_s))
    return front, rear, front / (front + rear)


def corner_speed(vehicle: Vehicle, aero: Aero, radius_m: float) -> float:
    """Largest steady speed on a flat corner with the tyres' grip and the aero load.

    ``m V^2 / R = mu (m g + 1/2 rho V^2 S C_L,down)``, solved for V
    ([MM]_ ch. 2; [K]_ eq. for the cornering limit):
    ``V = sqrt(mu g R / (1 - mu rho S C_L,down R / (2 m)))``.

    Parameters
    ----------
    vehicle : Vehicle
    aero : Aero
    radius_m : float
        Corner radius, m (> 0).

    Returns
    -------
    float
        Speed, m/s; ``inf`` when the aero load grows faster than the need for
        grip (then power and drag set the speed, see :func:`lap_time`).

    References
    ----------
    Milliken & Milliken (1995), Race Car Vehicle Dynamics; Katz (2006), Annu. Rev. Fluid Mech. 38:27.
    """
    r = _positive("radius_m", radius_m)
    m, mu = vehicle.mass_kg, vehicle.tyre_mu
    denominator = 1.0 - mu * vehicle.air_density_kg_m3 * aero.downforce_area_m2 * r / (2.0 * m)
    if denominator <= 0.0:
        return math.inf
    return math.sqrt(mu * G * r / denominator)


def _straight_accelerations(vehicle: Vehicle, cla_front, cla_rear, cda, v):
    """Forward acceleration and braking deceleration on a straight at speed v, m/s^2.

    ``cla_front``, ``cla_rear``, ``cda`` (m^2) and ``v`` (m/s) are numbers or
    arrays that broadcast. Acceleration: ``min(traction, P / v)`` minus drag and
    rolling resistance; traction is ``tyre_mu`` times the driven axle's load.
    Deceleration (positive): tyre grip on the whole load (capped by
    ``brake_limit_g``) plus drag and rolling resistance. Both divided by the mass.
    """
    v = np.asarray(v, dtype=float)
    q = 0.5 * vehicle.air_density_kg_m3 * v * v
    w = vehicle.weight_n
    load = w - q * (cla_front + cla_rear)                       # weight plus downforce, N
    resist = q * cda + vehicle.rolling_resistance * load       # drag plus rolling loss, N
    front, rear = _axle_loads(vehicle, cla_front, cla_rear, q)
    driven = {"front": front, "rear": rear, "all": load}[vehicle.drive]
    with np.errstate(divide="ignore", over="ignore"):
        power_limited = np.where(v > 0, vehicle.power_w / np.maximum(v, 1e-300), np.inf)
    drive = np.minimum(vehicle.tyre_mu * np.maximum(driven, 0.0), power_limited)
    grip = vehicle.tyre_mu * np.maximum(load, 0.0)
    if vehicle.brake_limit_g is not None:
        grip = np.minimum(grip, vehicle.brake_limit_g * w)
    return (drive - resist) / vehicle.mass_kg, (grip + resist) / vehicle.mass_kg


def _accel(vehicle: Vehicle, aero: Aero, v) -> np.ndarray:
    """Forward acceleration on a straight at speed v, m/s^2."""
    return _straight_accelerations(vehicle, aero.cla_front_m2, aero.cla_rear_m2, aero.cda_m2, v)[0]


def _decel(vehicle: Vehicle, aero: Aero, v) -> np.ndarray:
    """Braking deceleration on a straight at speed v, m/s^2 (positive)."""
    return _straight_accelerations(vehicle, aero.cla_front_m2, aero.cla_rear_m2, aero.cda_m2, v)[1]


def top_speed(vehicle: Vehicle, aero: Aero) -> float:
    """Speed at which the drive force equals drag plus rolling resistance.

    When power limits the drive force this is the root of
    ``P = 1/2 rho C_D A V^3 + C_rr (m g + 1/2 rho V^2 S C_L,down) V`` ([MM]_);
    when traction limits it first, of ``mu N_driven = drag + rolling``.

    Returns
    -------
    float
        Speed, m/s; ``inf`` when nothing resists motion (no drag, no rolling resistance).

    References
    ----------
    Milliken & Milliken (1995), Race Car Vehicle Dynamics.
    """
    from scipy.optimize import brentq  # late import: keeps `import doe.study` light

    if aero.cda_m2 <= 0 and vehicle.rolling_resistance <= 0:
        return math.inf

    def net(v):
        return float(_accel(vehicle, aero, v))

    hi = 10.0
    while net(hi) > 0:
        hi *= 2.0
        if hi > 1e5:
            raise DoeError("vehicle: no top speed below 100 km/s; check power_kw and cda_m2")
    return brentq(net, 1e-9, hi, xtol=1e-12, rtol=1e-12)


# ---------------------------------------------------------------------------
# track and lap time
SEGMENT_KINDS = ("straight", "corner")


@dataclass(frozen=True)
class Segment:
    """One piece of track.

    Attributes
    ----------
    kind : {"straight", "corner"}
    length_m : float
        Length along the driven line, m (for a corner, the arc length).
    radius_m : float or None
        Corner radius, m; None for a straight.
    """

    kind: str
    length_m: float
    radius_m: float | None = None

    def __post_init__(self):
        if self.kind not in SEGMENT_KINDS:
            raise DoeError(f"track: segment kind {self.kind!r} is not one of {', '.join(SEGMENT_KINDS)}")
        _positive("segment length_m", self.length_m)
        if self.kind == "corner":
            if self.radius_m is None:
                raise DoeError("track: a corner needs radius_m")
            _positive("corner radius_m", self.radius_m)
        elif self.radius_m is not None:
            raise DoeError("track: a straight has no radius_m")

    @classmethod
    def corner(cls, radius_m: float, angle_deg: float | None = None, length_m: float | None = None) -> "Segment":
        """A corner of radius ``radius_m`` (m) given by its turn angle (deg) or arc length (m)."""
        if (angle_deg is None) == (length_m is None):
            raise DoeError("track: give a corner either angle_deg or length_m, not both or neither")
        if angle_deg is not None:
            length_m = _positive("corner radius_m", radius_m) * math.radians(_positive("corner angle_deg", angle_deg))
        return cls("corner", length_m, radius_m)


@dataclass(frozen=True)
class Track:
    """A closed lap: segments driven in order, the last one joining the first.

    Attributes
    ----------
    segments : tuple of Segment
        At least one corner.
    name : str
    """

    segments: tuple
    name: str = ""

    def __post_init__(self):
        if not any(s.kind == "corner" for s in self.segments):
            raise DoeError("track: a lap needs at least one corner")

    @property
    def length_m(self) -> float:
        """Lap length, m."""
        return float(sum(s.length_m for s in self.segments))


@dataclass(frozen=True)
class LapResult:
    """A simulated lap.

    Attributes
    ----------
    time_s : float
        Lap time, s.
    segment_times_s : tuple of float
        Time in each segment, s, in track order.
    min_speed_m_s, max_speed_m_s : float
        Lowest and highest speed on the lap, m/s.
    distance_m, speed_m_s : ndarray
        Speed trace on the lap's grid (distance from the start of the first segment).
    """

    time_s: float
    segment_times_s: tuple
    min_speed_m_s: float
    max_speed_m_s: float
    distance_m: np.ndarray = field(repr=False)
    speed_m_s: np.ndarray = field(repr=False)


def _rk4_v2(rate, v: float, ds: float) -> float:
    """One RK4 step of d(v^2)/ds = 2 rate(v) over ds (ds < 0 integrates backwards with -rate)."""
    def f(u):
        return 2.0 * float(rate(math.sqrt(max(u, 0.0))))

    u = v * v
    k1 = f(u)
    k2 = f(u + 0.5 * ds * k1)
    k3 = f(u + 0.5 * ds * k2)
    k4 = f(u + ds * k3)
    return math.sqrt(max(u + ds * (k1 + 2 * k2 + 2 * k3 + k4) / 6.0, 0.0))


def _grid(track: Track, step_m: float):
    """Cell edges along the lap and the segment index of each cell."""
    edges, owner = [0.0], []
    for i, seg in enumerate(track.segments):
        n = max(int(math.ceil(seg.length_m / step_m)), 4)
        start = edges[-1]
        edges.extend(start + seg.length_m * np.arange(1, n + 1) / n)
        owner.extend([i] * n)
    return np.asarray(edges), np.asarray(owner)


def lap_time(vehicle: Vehicle, aero: Aero, track: Track, step_m: float = 1.0) -> LapResult:
    """Quasi-steady point-mass lap time.

    Each corner caps the speed at :func:`corner_speed` (and at
    :func:`top_speed`); a forward pass accelerates out of every cap and a
    backward pass brakes into it; the speed is the lower of the two
    ([MM]_ ch. 2, the classic "speed trace" method). ``d(v^2)/ds = 2 a(v)`` is
    integrated with RK4 on cells of at most ``step_m``; a cell's time is
    ``2 ds / (v_i + v_{i+1})`` (exact at constant acceleration).

    Parameters
    ----------
    vehicle : Vehicle
    aero : Aero
    track : Track
    step_m : float
        Largest cell length, m.

    Returns
    -------
    LapResult

    References
    ----------
    Milliken & Milliken (1995), Race Car Vehicle Dynamics, ch. 2.
    """
    step_m = _positive("step_m", step_m)
    vmax = top_speed(vehicle, aero)
    edges, owner = _grid(track, step_m)
    cap = np.full(len(edges), vmax)
    for i, seg in enumerate(track.segments):
        if seg.kind == "corner":
            vc = min(corner_speed(vehicle, aero, seg.radius_m), vmax)
            cells = np.flatnonzero(owner == i)
            cap[cells] = np.minimum(cap[cells], vc)
            cap[cells + 1] = np.minimum(cap[cells + 1], vc)
    cap[0] = cap[-1] = min(cap[0], cap[-1])  # the lap's end is its start
    # start at the slowest point so the lap closes on itself (the cap is met there)
    n = len(edges) - 1
    start = int(np.argmin(cap[:-1]))
    if not math.isfinite(cap[start]):
        raise DoeError("lap time: no speed limit anywhere on the lap (no drag, no rolling loss, "
                       "and every corner flat out); give cda_m2 > 0")
    order = (start + np.arange(n + 1)) % n
    ds = np.diff(edges)[order[:-1]]
    limit = cap[order]
    limit[-1] = limit[0]
    v = limit.copy()
    for j in range(n):                       # accelerate
        v[j + 1] = min(limit[j + 1], _rk4_v2(lambda s: _accel(vehicle, aero, s), v[j], ds[j]))
    for j in range(n - 1, -1, -1):           # brake
        v[j] = min(v[j], _rk4_v2(lambda s: _decel(vehicle, aero, s), v[j + 1], ds[j]))
    dt = 2.0 * ds / (v[:-1] + v[1:])
    seg_times = np.zeros(len(track.segments))
    np.add.at(seg_times, owner[order[:-1]], dt)
    back = np.argsort(order[:-1])
    speed = np.append(v[:-1][back], v[:-1][back][0])
    return LapResult(float(dt.sum()), tuple(float(t) for t in seg_times), float(v.min()), float(v.max()),
                     edges, speed)


# ---------------------------------------------------------------------------
# many configurations at once: the fast lap model
#
# On a straight the speed obeys d(v^2)/ds = 2 a(v) (accelerating) or -2 b(v) (braking), which do not
# depend on s. So for each configuration the distance and time to go from rest to v,
#     D_a(v) = int_0^v w / a(w) dw,    T_a(v) = int_0^v dw / a(w)      (same with b for braking),
# are tabulated once; every accelerating or braking curve of the lap is a shifted piece of them. The
# lap's speed is the lower of a forward and a backward sweep over the segment ends (the same
# construction as :func:`lap_time`, segment by segment instead of metre by metre), and a segment's
# time follows from the peak speed v_p where the two curves meet:
#     D_a(v_p) - D_a(v_0) + D_b(v_p) - D_b(v_1) = length,   t = T_a(v_p) - T_a(v_0) + T_b(v_p) - T_b(v_1)
# (with a stretch at the segment's speed cap when v_p would exceed it).

#: Gauss-Legendre nodes and weights on [0, 1], two points (exact for polynomials up to degree 3).
_GL_X = np.array([0.5 - 0.5 / math.sqrt(3.0), 0.5 + 0.5 / math.sqrt(3.0)])
_GL_W = np.array([0.5, 0.5])


#: Nodes of the speed tables per configuration (uniform in speed, and geometric towards the top
#: speed), and how close to the top speed the last one lies (as ``1 - v / v_max``). A faster speed is
#: taken as that one; a car gets that close only after about nine times the distance over which its
#: excess acceleration falls by e near the top speed (kilometres of straight), so its time is unaffected.
TABLE_NODES, TABLE_CLOSEST = (32, 24), 1e-4


def _gap_fractions(n_uniform: int, n_geometric: int) -> np.ndarray:
    """Node positions as shares ``z`` of the gap to the top speed, decreasing from 1 to TABLE_CLOSEST.

    Node j of a configuration is at ``v = v_max (1 - r z_j)``, ``r = 1 - v_low /
    v_max`` (``v_low``: the lap's lowest speed). The union of nodes uniform in
    speed (where the forces change on the scale of the speed) and nodes
    geometric in ``z`` (near the top speed, where the distance to the top speed
    sets the scale).
    """
    uniform = np.linspace(1.0, 0.0, n_uniform, endpoint=False)[1:]
    return np.sort(np.concatenate([uniform, np.geomspace(1.0, TABLE_CLOSEST, n_geometric)]))[::-1]


def _hermite(t, h, y0, y1, d0, d1):
    """Cubic Hermite interpolation on an interval of width h at fraction t (0..1)."""
    t2 = t * t
    return ((1 + 2 * t) * (1 - t) ** 2 * y0 + t * (1 - t) ** 2 * h * d0 + t2 * (3 - 2 * t) * y1
            + t2 * (t - 1) * h * d1)


def _hermite_slope(t, h, y0, y1, d0, d1):
    """Derivative (per unit x) of :func:`_hermite` at fraction t of an interval of width h."""
    t2 = t * t
    return ((6 * t2 - 6 * t) * y0 + (3 * t2 - 4 * t + 1) * h * d0 + (6 * t - 6 * t2) * y1
            + (3 * t2 - 2 * t) * h * d1) / h


class _RowSearch:
    """Interval look-up in every row of a table whose rows increase, in one sorted search.

    Row i is shifted by ``i * step`` with ``step`` larger than any row's range,
    so the flattened table increases and ``numpy.searchsorted`` serves all rows.
    """

    def __init__(self, table: np.ndarray):
        n, self.m = table.shape
        self.low = table[:, 0]
        self.shift = np.arange(n) * (float(np.max(table[:, -1] - table[:, 0])) * 2.0 + 1.0)
        self.flat = (table - self.low[:, None] + self.shift[:, None]).ravel()
        self.start = np.arange(n) * self.m

    def __call__(self, y: np.ndarray) -> np.ndarray:
        """Per row i, the flat index ``i M + j`` of the interval ``table[i, j] <= y[i] < table[i, j+1]``
        (j clipped to [0, M-2]); ``y`` has one row per table row and any further axes."""
        low, shift, start = (_rows(a, y) for a in (self.low, self.shift, self.start))
        k = np.searchsorted(self.flat, y - low + shift, side="right") - 1 - start
        return start + np.clip(k, 0, self.m - 2)


def _rows(a: np.ndarray, like: np.ndarray) -> np.ndarray:
    """``a`` (one value per row) shaped to broadcast against ``like`` (rows on axis 0)."""
    return a.reshape((-1,) + (1,) * (np.ndim(like) - 1))


def top_speeds(vehicle: Vehicle, cla_front, cla_rear, cda) -> np.ndarray:
    """:func:`top_speed` of many configurations at once (bisection), m/s.

    Parameters
    ----------
    vehicle : Vehicle
    cla_front, cla_rear, cda : array_like
        CLA at each axle (m^2, negative for downforce) and CDA (m^2, >= 0);
        they broadcast against each other.

    Returns
    -------
    ndarray
        Top speed, m/s, of the broadcast shape; the largest speed found at
        which the car still accelerates (within 1e-13 relative of the root).

    Raises
    ------
    DoeError
        When a configuration cannot move off or has no top speed below 100 km/s.
    """
    cf, cr, cd = _aero_arrays(cla_front, cla_rear, cda)
    if vehicle.rolling_resistance <= 0 and np.any(cd <= 0):
        raise DoeError("vehicle: no top speed without drag or rolling resistance; give cda_m2 > 0")

    def accelerates(v):
        return _straight_accelerations(vehicle, cf, cr, cd, v)[0] > 0

    if not np.all(accelerates(np.zeros_like(cf))):
        raise DoeError("vehicle: the car cannot move off (traction below rolling resistance)")
    hi = np.full_like(cf, 10.0)
    while np.any(grow := accelerates(hi)):
        hi = np.where(grow, 2.0 * hi, hi)
        if np.any(hi > 1e5):
            raise DoeError("vehicle: no top speed below 100 km/s; check power_kw and cda_m2")
    return _falling_root(lambda v: _straight_accelerations(vehicle, cf, cr, cd, v)[0], np.zeros_like(cf), hi)


def _falling_root(f, lo, hi, iterations: int = 40, rtol: float = 1e-13):
    """Per element, a point just below the root of ``f`` in ``[lo, hi]``, where ``f(lo) > 0 >= f(hi)``.

    Regula falsi with the Illinois modification (the stale end's value is
    halved), bracket kept; returns the end where ``f > 0``. Stops when every
    bracket is narrower than ``rtol`` of its end.

    References
    ----------
    Dowell, M. and Jarratt, P. (1971). A modified regula falsi method for
    computing the root of an equation. BIT 11:168-174.
    """
    lo, hi = lo.astype(float), hi.astype(float)
    f_lo, f_hi = f(lo), f(hi)
    side = np.zeros(lo.shape, dtype=int)
    for _ in range(iterations):
        with np.errstate(divide="ignore", invalid="ignore"):
            x = hi - f_hi * (hi - lo) / (f_hi - f_lo)
        x = np.where(np.isfinite(x) & (x > lo) & (x < hi), x, 0.5 * (lo + hi))
        fx = f(x)
        up = fx > 0
        # Illinois: when the same end moves twice running, halve the other end's value
        f_hi = np.where(up & (side == 1), 0.5 * f_hi, f_hi)
        f_lo = np.where(~up & (side == -1), 0.5 * f_lo, f_lo)
        lo, f_lo = np.where(up, x, lo), np.where(up, fx, f_lo)
        hi, f_hi = np.where(up, hi, x), np.where(up, f_hi, fx)
        side = np.where(up, 1, -1)
        if np.all(hi - lo <= rtol * np.maximum(hi, 1e-300)):
            break
    return lo


def corner_speeds(vehicle: Vehicle, cla_front, cla_rear, radius_m: float) -> np.ndarray:
    """:func:`corner_speed` of many configurations at once, m/s (``inf`` where aero outgrows the need).

    ``V = sqrt(mu g R / (1 - mu rho S C_L,down R / (2 m)))`` with
    ``S C_L,down = -(cla_front + cla_rear)`` (Milliken & Milliken 1995; Katz 2006).
    """
    r = _positive("radius_m", radius_m)
    down_area = -(np.asarray(cla_front, dtype=float) + np.asarray(cla_rear, dtype=float))
    denominator = 1.0 - vehicle.tyre_mu * vehicle.air_density_kg_m3 * down_area * r / (2.0 * vehicle.mass_kg)
    with np.errstate(divide="ignore"):
        return np.where(denominator > 0, np.sqrt(vehicle.tyre_mu * G * r / np.maximum(denominator, 1e-300)),
                        np.inf)


def _aero_arrays(cla_front, cla_rear, cda):
    """Flat float arrays of the broadcast aero inputs, checked finite and CDA >= 0."""
    cf, cr, cd = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (cla_front, cla_rear, cda)))
    if not (np.all(np.isfinite(cf)) and np.all(np.isfinite(cr)) and np.all(np.isfinite(cd))):
        raise DoeError("vehicle: CLA and CDA must be finite numbers")
    if np.any(cd < 0):
        raise DoeError(f"vehicle: cda_m2 must be >= 0, got {float(cd.min()):g}")
    return cf.ravel(), cr.ravel(), cd.ravel()


def _kink_speeds(vehicle: Vehicle, cf, cr, cd, v_max):
    """Speeds (m/s) where traction gives way to power, and tyre grip to the brakes' limit (or v_max).

    Traction to power: the root of ``traction(v) v = P`` below ``v_max``
    (bisection). Brakes: ``mu (W - q CLA) = brake_limit_g W`` gives
    ``q = W (1 - brake_limit_g / mu) / CLA`` where that is positive.
    """
    w, mu = vehicle.weight_n, vehicle.tyre_mu

    def power_to_spare(v):
        front, rear = _axle_loads(vehicle, cf, cr, 0.5 * vehicle.air_density_kg_m3 * v * v)
        driven = {"front": front, "rear": rear, "all": front + rear}[vehicle.drive]
        return vehicle.power_w - mu * np.maximum(driven, 0.0) * v

    spare = power_to_spare(v_max) > 0                   # traction limits all the way to the top speed
    lo = np.where(spare, v_max, _falling_root(power_to_spare, np.zeros_like(v_max), v_max, rtol=1e-10))
    brake = v_max.copy()
    if vehicle.brake_limit_g is not None:
        cla = cf + cr
        with np.errstate(divide="ignore", invalid="ignore"):
            q = w * (1.0 - vehicle.brake_limit_g / mu) / cla
            brake = np.where((cla != 0) & (q > 0), np.sqrt(2.0 * np.maximum(q, 0.0) / vehicle.air_density_kg_m3),
                             v_max)
    return lo, np.minimum(brake, v_max)


class _SpeedTables:
    """``D`` and ``T`` of accelerating and braking, tabulated per configuration (rows) over speed.

    The tables use the coordinate ``w = -ln(1 - v / v_max)``: near the top speed
    the acceleration vanishes linearly, so ``D_a`` and ``T_a`` grow like ``w``
    there and stay smooth in it. Nodes are uniform in ``w`` from the lap's
    lowest speed ``v_low`` to ``1 - v / v_max = TABLE_CLOSEST``, plus the speeds
    where the drive or braking force changes law (so no interval straddles a
    kink, and the Gauss quadrature and the cubic interpolation stay high order).
    """

    def __init__(self, vehicle: Vehicle, cf, cr, cd, v_max, v_low, nodes=TABLE_NODES):
        self.rows, self.v_max = np.arange(len(cf)), v_max[:, None]
        span = 1.0 - np.minimum(v_low, 0.5 * v_max) / v_max                  # share of v_max the rows span
        w = -np.log(span[:, None] * _gap_fractions(*nodes)[None, :])
        kinks = -np.log1p(-np.minimum(np.column_stack(_kink_speeds(vehicle, cf, cr, cd, v_max)) / self.v_max,
                                      1.0 - TABLE_CLOSEST))
        inner = np.clip(kinks, w[:, :1] + 1e-6 * (w[:, 1:2] - w[:, :1]), w[:, -1:] - 1e-6 * (w[:, -1:] - w[:, -2:-1]))
        self.w = np.sort(np.concatenate([w, inner], axis=1), axis=1)          # (n, m)
        self.v = self._speed(self.w)
        self.v_top = self.v[:, -1]
        col = (cf[:, None], cr[:, None], cd[:, None])
        a, b = _straight_accelerations(vehicle, *col, self.v)
        gap = self.v_max - self.v                                              # dv/dw, m/s
        # derivatives in w at the nodes: dD/dw = v gap / a, dT/dw = gap / a (and with b when braking)
        self.dDa, self.dTa, self.dDb, self.dTb = self.v * gap / a, gap / a, self.v * gap / b, gap / b
        # d(v^2)/dD at the nodes, for the inverse look-ups (v^2 is linear in D at constant acceleration)
        self.du = {"a": 2.0 * a, "b": 2.0 * b, "ab": 2.0 * a * b / (a + b)}
        h = np.diff(self.w, axis=1)
        wg = self.w[:, :-1, None] + h[:, :, None] * _GL_X                     # Gauss points in each interval
        vg = self._speed(wg, self.v_max[:, :, None])
        ag, bg = _straight_accelerations(vehicle, *(c[:, :, None] for c in col), vg)
        gg = self.v_max[:, :, None] - vg

        def cumulative(integrand):
            steps = h * np.sum(_GL_W * integrand, axis=2)
            return np.concatenate([np.zeros((len(cf), 1)), np.cumsum(steps, axis=1)], axis=1)

        self.Da, self.Ta = cumulative(vg * gg / ag), cumulative(gg / ag)
        self.Db, self.Tb = cumulative(vg * gg / bg), cumulative(gg / bg)
        self.Dab = self.Da + self.Db
        self.find = {key: _RowSearch(t) for key, t in (("w", self.w), ("a", self.Da), ("b", self.Db),
                                                         ("ab", self.Dab))}
        # flat copies: a look-up reads elements k and k + 1 at the flat index k of its interval
        self.flat = {name: np.ascontiguousarray(t).ravel() for name, t in (
            ("w", self.w), ("u", self.v ** 2), ("Da", self.Da), ("Ta", self.Ta), ("Db", self.Db), ("Tb", self.Tb),
            ("dDa", self.dDa), ("dTa", self.dTa), ("dDb", self.dDb), ("dTb", self.dTb), ("a", self.Da),
            ("b", self.Db), ("ab", self.Dab), ("du_a", self.du["a"]), ("du_b", self.du["b"]),
            ("du_ab", self.du["ab"]), ("dDab", self.dDa + self.dDb))}

    def _speed(self, w, v_max=None):
        return (self.v_max if v_max is None else v_max) * -np.expm1(-w)

    def at(self, speed):
        """``(w of the speed clipped to the rows' span, flat index of its interval)``: what the look-ups take.

        ``speed`` (m/s) has one row per configuration and any further axes (e.g. segments).
        """
        s = np.clip(speed, _rows(self.v[:, 0], speed), _rows(self.v_top, speed))
        w = -np.log1p(-s / _rows(self.v_max[:, 0], speed))
        return w, self.find["w"](w)

    def _hermite_at(self, x_name, y_name, slope_name, x, k):
        """Cubic Hermite of table ``y_name`` against ``x_name`` at x in the interval at flat index k."""
        f = self.flat
        x0, x1 = f[x_name][k], f[x_name][k + 1]
        return _hermite((x - x0) / (x1 - x0), x1 - x0, f[y_name][k], f[y_name][k + 1], f[slope_name][k],
                        f[slope_name][k + 1])

    def distance(self, where, braking: bool):
        """``D_a`` or ``D_b`` at ``where = at(speed)``, m."""
        return self._hermite_at("w", "Db", "dDb", *where) if braking else self._hermite_at("w", "Da", "dDa", *where)

    def time(self, where, braking: bool):
        """``T_a`` or ``T_b`` at ``where = at(speed)``, s."""
        return self._hermite_at("w", "Tb", "dTb", *where) if braking else self._hermite_at("w", "Ta", "dTa", *where)

    def _speed_at(self, key: str, target):
        """Speed where table ``key`` (``a``: D_a, ``b``: D_b, ``ab``: their sum) reaches ``target`` (m).

        A first guess from the cubic Hermite of v^2 against the table (exact at
        constant acceleration), then two Newton steps on the forward
        interpolant in w (accurate near the top speed, where v^2 is not).
        """
        table = {"a": self.Da, "b": self.Db, "ab": self.Dab}[key]
        target = np.clip(target, _rows(table[:, 0], target), _rows(table[:, -1], target))
        k = self.find[key](target)
        f = self.flat
        u = np.clip(self._hermite_at(key, "u", "du_" + key, target, k), f["u"][k], f["u"][k + 1])
        w0, w1 = f["w"][k], f["w"][k + 1]
        v_max = _rows(self.v_max[:, 0], target)
        w = np.clip(-np.log1p(-np.sqrt(u) / v_max), w0, w1)
        slope = {"a": "dDa", "b": "dDb", "ab": "dDab"}[key]
        h = w1 - w0
        for _ in range(2):
            t = (w - w0) / h
            value = _hermite(t, h, f[key][k], f[key][k + 1], f[slope][k], f[slope][k + 1])
            deriv = _hermite_slope(t, h, f[key][k], f[key][k + 1], f[slope][k], f[slope][k + 1])
            w = np.clip(w - (value - target) / np.where(deriv > 0, deriv, np.inf), w0, w1)
        return self._speed(w, v_max)

    def after_accelerating(self, speed, length):
        """Speed after accelerating flat out over ``length`` (m) from ``speed``."""
        return self._speed_at("a", self.distance(self.at(speed), False) + length)

    def before_braking(self, speed, length):
        """Speed from which braking over ``length`` (m) ends at ``speed``."""
        return self._speed_at("b", self.distance(self.at(speed), True) + length)

    def segment_time(self, v_start, v_end, cap, length):
        """Time (s) over ``length`` (m) from ``v_start`` to ``v_end``: accelerate, hold ``cap``, brake.

        Arrays with one row per configuration and a column per segment (or one value per row).
        """
        cap = np.clip(cap, _rows(self.v[:, 0], cap), _rows(self.v_top, cap))
        start, end, top = self.at(v_start), self.at(v_end), self.at(cap)
        target = length + self.distance(start, False) + self.distance(end, True)
        held = self.distance(top, False) + self.distance(top, True)
        plateau = held <= target
        peak = self.at(np.where(plateau, cap, self._speed_at("ab", target)))
        t = self.time(peak, False) - self.time(start, False) + self.time(peak, True) - self.time(end, True)
        return t + np.where(plateau, (target - held) / cap, 0.0)


def lap_times(vehicle: Vehicle, track: Track, cla_front, cla_rear, cda, nodes=TABLE_NODES) -> np.ndarray:
    """Lap times of many aero configurations at once, s (the model of :func:`lap_time`, without a grid).

    Same quasi-steady point mass as :func:`lap_time`: corners capped at
    :func:`corner_speed`, straights at :func:`top_speed`, flat-out
    acceleration and braking between the caps, speed the lower of the two.
    Instead of integrating metre by metre, the distance and time to reach each
    speed are tabulated once per configuration (two-point Gauss-Legendre
    quadrature on about 60 speeds, finer towards the top speed, with the
    traction-to-power and grip-to-brake kinks as nodes) and each segment is
    solved from them (see the comment above :class:`_SpeedTables`). Agrees with
    :func:`lap_time` at 0.25 m steps to about 1e-5 s on a 40-60 s lap
    (``tests/test_vehicle_fast.py``), and costs tens of microseconds per
    configuration in batches of thousands (``benchmarks/bench_lap.py``).

    Parameters
    ----------
    vehicle : Vehicle
    track : Track
    cla_front, cla_rear, cda : array_like
        CLA at the front and rear axle (m^2, negative for downforce) and CDA
        (m^2, >= 0); broadcast against each other.
    nodes : (int, int)
        Table nodes uniform in speed and geometric towards the top speed
        (accuracy against cost; the default gives a few 1e-6 s on a 60 s lap).

    Returns
    -------
    ndarray
        Lap time, s, of the broadcast shape.

    References
    ----------
    Milliken & Milliken (1995), Race Car Vehicle Dynamics, ch. 2 (the speed-trace method).
    """
    shape = np.broadcast_shapes(*(np.shape(a) for a in (cla_front, cla_rear, cda)))
    cf, cr, cd = _aero_arrays(cla_front, cla_rear, cda)
    return _lap_times(vehicle, track, cf, cr, cd, top_speeds(vehicle, cf, cr, cd), nodes).reshape(shape)


def _lap_times(vehicle: Vehicle, track: Track, cf, cr, cd, v_max, nodes=TABLE_NODES) -> np.ndarray:
    """:func:`lap_times` of flat, checked aero arrays whose top speeds ``v_max`` (m/s) are known."""
    segs = track.segments
    n_seg = len(segs)
    corners = {i: corner_speeds(vehicle, cf, cr, s.radius_m) for i, s in enumerate(segs) if s.kind == "corner"}
    v_low = np.minimum(np.min(list(corners.values()), axis=0), v_max) * (1.0 - 1e-3)
    tab = _SpeedTables(vehicle, cf, cr, cd, v_max, v_low, nodes)
    caps = np.column_stack([np.minimum(corners[i], tab.v_top) if i in corners else tab.v_top for i in range(n_seg)])
    lengths = np.array([s.length_m for s in segs])
    # node k is where segment k starts; it obeys the caps of both segments that meet there
    node_cap = np.minimum(caps, np.roll(caps, 1, axis=1))
    fwd, bwd = node_cap.copy(), node_cap.copy()
    # each row's sweeps start at its slowest node, where both sweeps equal the cap (no curve from a point
    # at least as fast can undercut it), so one lap of each sweep settles every node
    rows = np.arange(len(cf))
    order = (np.argmin(node_cap, axis=1)[:, None] + np.arange(n_seg + 1)) % n_seg
    for j in range(n_seg):
        a, b = order[:, j], order[:, j + 1]                       # forward over segment a
        fwd[rows, b] = np.minimum(fwd[rows, b], tab.after_accelerating(fwd[rows, a], lengths[a]))
        a, b = order[:, n_seg - j - 1], order[:, n_seg - j]       # backward over segment a
        bwd[rows, a] = np.minimum(bwd[rows, a], tab.before_braking(bwd[rows, b], lengths[a]))
    v = np.minimum(fwd, bwd)
    return np.sum(tab.segment_time(v, np.roll(v, -1, axis=1), caps, lengths), axis=1)


# ---------------------------------------------------------------------------
# handling balance
def front_load_share(vehicle: Vehicle, cla_front, cla_rear, speed_m_s) -> np.ndarray:
    """Front axle's share of the car's whole vertical load (weight plus aero) at a steady speed, -.

    ``(W b/L - q CLA_f) / (W - q CLA)`` with ``q = 1/2 rho V^2`` (statics, no
    load transfer). Unlike the aero-only front share ``CLA_f / CLA`` (the centre
    of pressure), it stays finite and smooth as the net lift passes through
    zero: the weight is always in the denominator. NaN only where the lift
    exceeds the weight (the car would leave the ground).

    Parameters
    ----------
    vehicle : Vehicle
    cla_front, cla_rear : array_like
        CLA at each axle, m^2 (negative for downforce); broadcast.
    speed_m_s : float or array_like
        Road speed in still air, m/s.

    Returns
    -------
    ndarray
        Share, -.
    """
    cf, cr = np.asarray(cla_front, dtype=float), np.asarray(cla_rear, dtype=float)
    front, rear = _axle_loads(vehicle, cf, cr, _q(vehicle, speed_m_s))
    total = front + rear
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(total > 0, front / np.where(total > 0, total, 1.0), np.nan)


def balance_shift(vehicle: Vehicle, cla_front, cla_rear, speed_m_s) -> np.ndarray:
    """How far the aero load moves the handling balance at a speed: front load share minus the static one, -.

    In steady cornering each axle must give lateral force in proportion to the
    weight it carries at rest (``m a_y b/L`` at the front), while its grip grows
    with the load it carries at speed. Aero load that is spread forward of the
    weight distribution (a positive shift) gives the front more grip than its
    share of the work: the car moves towards oversteer as speed rises; a
    negative shift moves it towards understeer (the rule that the centre of
    pressure should sit a little behind the centre of gravity for a stable car
    at speed; Milliken & Milliken 1995, ch. on aerodynamics (memory); common
    practice). Same tyres front and rear and no tyre load sensitivity are
    assumed: it gives the direction and size of the change, not the car's
    whole balance (springs, bars and tyres set that).

    Equivalent form: ``-q (CLA_f a/L - CLA_r b/L) / (W - q CLA)``, zero when the
    aero load is split like the weight (``a``, ``b``: centre of gravity to the
    front and rear axle).

    Returns
    -------
    ndarray
        Shift, - (0.01 = one percentage point of the car's load moved to the front).
    """
    return front_load_share(vehicle, cla_front, cla_rear, speed_m_s) - vehicle.static_front_share


@dataclass(frozen=True)
class BalanceChange:
    """How the handling balance at speed moves between two aero configurations.

    Attributes
    ----------
    speed_kph : float
        Speed of the comparison, km/h.
    static_front_share : float
        Front axle's share of the weight at rest, -.
    front_share_before, front_share_after : float
        Front axle's share of the whole vertical load at that speed, -.
    change : float
        ``after - before``, -; negative moves the car towards understeer.
    direction : {"towards understeer", "towards oversteer", "unchanged"}
    sentence : str
        The same in plain words.
    """

    speed_kph: float
    static_front_share: float
    front_share_before: float
    front_share_after: float
    change: float
    direction: str
    sentence: str

    def to_dict(self) -> dict:
        """Plain dict, ready for JSON."""
        return asdict(self)


def balance_change(vehicle: Vehicle, before: Aero, after: Aero, speed_kph: float = 150.0,
                   unchanged_below: float = 0.002, names=("the car as it runs now", "the new setting")) -> BalanceChange:
    """Which way the handling balance at speed moves from ``before`` to ``after``, with the sentence for a driver.

    Parameters
    ----------
    vehicle : Vehicle
    before, after : Aero
    speed_kph : float
        Speed of the comparison, km/h (a fast corner of the track is a good choice).
    unchanged_below : float
        A change of the front load share smaller than this (-) is reported as
        unchanged; 0.002 (0.2 percentage points) is a display threshold, common
        practice, no source.
    names : (str, str)
        How the sentence calls the two configurations.

    Returns
    -------
    BalanceChange
        See :func:`balance_shift` for why the front load share is the measure.
    """
    v = _positive("speed_kph", speed_kph) / 3.6
    share = [float(front_load_share(vehicle, a.cla_front_m2, a.cla_rear_m2, v)) for a in (before, after)]
    change = share[1] - share[0]
    if abs(change) < unchanged_below:
        direction, effect = "unchanged", "practically the same balance at speed"
    elif change < 0:
        direction, effect = "towards understeer", "the car moves towards understeer at speed"
    else:
        direction, effect = "towards oversteer", "the car moves towards oversteer at speed"
    points = abs(change) * 100.0
    where = "less" if change < 0 else "more"
    sentence = (f"At {speed_kph:.0f} km/h the front axle carries {100 * share[1]:.1f} % of the car's load with "
                f"{names[1]} against {100 * share[0]:.1f} % with {names[0]} ({100 * vehicle.static_front_share:.1f} % "
                f"at rest): " + (f"{points:.1f} points {where} at the front, so {effect}." if direction != "unchanged"
                                 else f"a change under {100 * unchanged_below:.1f} points, {effect}."))
    return BalanceChange(float(speed_kph), vehicle.static_front_share, share[0], share[1], change, direction, sentence)


def fastest_corner_kph(vehicle: Vehicle, aero: Aero, track: Track) -> float:
    """Quasi-steady speed of the track's fastest corner for ``aero`` (capped at the top speed), km/h.

    Where the handling balance at speed matters most on this track: a natural
    ``speed_kph`` for :func:`balance_change` and ``balance_speed_kph`` for
    :class:`VehicleObjective`.
    """
    radius = max(s.radius_m for s in track.segments if s.kind == "corner")
    return min(corner_speed(vehicle, aero, radius), top_speed(vehicle, aero)) * 3.6


# ---------------------------------------------------------------------------
# the objective and limits of a search
_CORNER_FIGURE = re.compile(r"corner_speed_(\d+(?:\.\d+)?)m_kph")
#: Vehicle figures a :class:`VehicleObjective` computes, with their units (corner speeds are named
#: ``corner_speed_<radius>m_kph``, e.g. ``corner_speed_50m_kph``, in km/h).
FIGURE_UNITS = {"lap_time_s": "s", "top_speed_kph": "km/h", "front_load_share": "-", "balance_shift": "-"}


#: Plain words for the vehicle figures, for reports (the names above are file keys).
FIGURE_WORDS = {"lap_time_s": "lap time", "top_speed_kph": "top speed",
                "front_load_share": "front axle share of the car's load", "balance_shift": "balance shift"}


def figure_words(name: str) -> str:
    """Plain words for a vehicle figure (``"lap time"`` for ``lap_time_s``); the name itself for anything else."""
    if name in FIGURE_WORDS:
        return FIGURE_WORDS[name]
    corner = _CORNER_FIGURE.fullmatch(name)
    return f"corner speed at {corner.group(1)} m radius" if corner else name


def figure_unit(name: str) -> str:
    """Unit of a vehicle figure of :data:`FIGURE_UNITS` or a ``corner_speed_<radius>m_kph``."""
    if name in FIGURE_UNITS:
        return FIGURE_UNITS[name]
    if _CORNER_FIGURE.fullmatch(name):
        return "km/h"
    raise DoeError(f"vehicle: unknown figure {name!r}; use one of {', '.join(FIGURE_UNITS)} or "
                   "corner_speed_<radius>m_kph")


@dataclass(frozen=True)
class VehicleLimit:
    """A limit ``min <= figure <= max`` on a vehicle figure (e.g. a balance window or a top-speed floor).

    Attributes
    ----------
    figure : str
        A name of :data:`FIGURE_UNITS` or ``corner_speed_<radius>m_kph``.
    min, max : float or None
        Bounds in the figure's unit; at least one.
    """

    figure: str
    min: float | None = None
    max: float | None = None

    def __post_init__(self):
        figure_unit(self.figure)
        check_limit_bounds("vehicle", self.figure, self.min, self.max)

    @property
    def unit(self) -> str:
        """Unit of the figure and the bounds."""
        return figure_unit(self.figure)

    def violation(self, values) -> np.ndarray:
        """How far ``values`` lie outside the limit (0 inside), figure unit."""
        v = np.asarray(values, dtype=float)
        over = np.maximum(v - self.max, 0.0) if self.max is not None else 0.0
        under = np.maximum(self.min - v, 0.0) if self.min is not None else 0.0
        return np.zeros_like(v) + over + under

    def probability(self, mean, std) -> np.ndarray:
        """Chance that a normal figure with ``mean`` and ``std`` (figure unit) meets the limit, -."""
        from scipy.special import ndtr

        m, s = np.broadcast_arrays(np.asarray(mean, dtype=float), np.asarray(std, dtype=float))
        with np.errstate(divide="ignore", invalid="ignore"):
            up = np.ones_like(m) if self.max is None else np.where(s > 0, ndtr((self.max - m) / s), m <= self.max)
            down = np.zeros_like(m) if self.min is None else np.where(s > 0, ndtr((self.min - m) / s), m < self.min)
        return up - down


def normal_moments(func, means, stds):
    """Mean and standard deviation of ``func`` of independent normal inputs, by the unscented transform.

    The ``2 d`` sigma points ``mean +- sqrt(d + kappa) std_i e_i`` with
    ``kappa = 3 - d`` (Julier & Uhlmann's choice for normal inputs; for
    ``d = 3`` the centre point has weight 0) and weights ``1 / (2 (d + kappa))``.
    Exact for the mean and variance of a function that is a sum of quadratics
    of single inputs; second order otherwise (products of two inputs lose
    their ``std_i^2 std_j^2`` term).

    Parameters
    ----------
    func : callable
        ``func(*inputs) -> dict of str to ndarray`` (or one ndarray); every
        input and output of the broadcast shape of ``means``.
    means, stds : sequence of array_like
        One array per input (``d`` of them); stds >= 0.

    Returns
    -------
    dict of str to (ndarray, ndarray), or (ndarray, ndarray)
        Mean and standard deviation of each output.

    References
    ----------
    Julier, S. J. and Uhlmann, J. K. (2004). Unscented filtering and nonlinear
    estimation. Proc. IEEE 92(3):401-422.
    """
    means = np.broadcast_arrays(*(np.asarray(m, dtype=float) for m in means))
    stds = np.broadcast_arrays(*(np.asarray(s, dtype=float) for s in stds), means[0])[:-1]
    d = len(means)
    kappa = 3.0 - d
    if d + kappa <= 0 or any(np.any(s < 0) for s in stds):
        raise DoeError("normal moments: give at least one input and standard deviations >= 0")
    scale = math.sqrt(d + kappa)
    # all points in one call: the centre, then +- each input, stacked on a new leading axis
    stacked = [np.stack([m] + [m + sign * scale * s * (i == k) for i in range(d) for sign in (1.0, -1.0)])
               for k, (m, s) in enumerate(zip(means, stds))]
    weights = np.array([kappa / (d + kappa)] + [0.5 / (d + kappa)] * (2 * d))
    out = func(*stacked)
    single = not isinstance(out, dict)

    def moments(values):
        values = np.asarray(values, dtype=float)
        w = weights.reshape((-1,) + (1,) * (values.ndim - 1))
        mean = np.sum(w * values, axis=0)
        return mean, np.sqrt(np.maximum(np.sum(w * (values - mean) ** 2, axis=0), 0.0))

    return moments(out) if single else {name: moments(v) for name, v in out.items()}


class VehicleObjective:
    """Lap time and other vehicle figures of many aero configurations at once, for a search.

    Everything is vectorised over arrays of CLA front, CLA rear and CDA (m^2,
    CLA negative for downforce): pass surrogate means to get figures, scatter
    draws of shape ``(m, n)`` to get figures per draw, or means and standard
    deviations to :meth:`normal` to get the figures' means and standard
    deviations.

    Parameters
    ----------
    vehicle : Vehicle
    track : Track, optional
        Needed for ``lap_time_s``.
    balance_speed_kph : float
        Speed at which ``front_load_share`` and ``balance_shift`` are taken, km/h.
    limits : sequence of VehicleLimit
        Limits on figures (e.g. ``VehicleLimit("balance_shift", min=-0.03, max=0.0)``).

    Attributes
    ----------
    limits : tuple of VehicleLimit
    figure_names : tuple of str
        Figures :meth:`figures` gives by default: the lap time (with a track),
        top speed, balance figures, and the corner speeds the limits name.

    Notes
    -----
    Use in a search over settings ``X`` (surrogates of CLA front, CLA rear and
    CDA): on the surrogate means, ``figures(cf, cr, cd)``; under setup scatter,
    ``draws(cf_draws, cr_draws, cd_draws, stds=...)`` gives each figure at each
    scattered setting with the surrogate's std there (the layout of a
    response's draws, so limits and probabilities are handled as for a
    response); for one setting's figures with the surrogate's uncertainty,
    ``normal(means, stds)``. Costs: about 7 lap simulations per candidate for
    ``draws`` and ``linearised``, 6 for ``normal``; a lap simulation costs tens
    of microseconds in a batch (``benchmarks/bench_lap.py``). CDA below 0 is
    refused by :meth:`figures`; clip surrogate means first.

    A point-mass model: the lap time says what downforce and drag are worth,
    not whether the car can be driven there. Keep a balance window among the
    limits, and try any new setting progressively: aero changes alter the
    car's handling at speed.
    """

    def __init__(self, vehicle: Vehicle, track: Track | None = None, *, balance_speed_kph: float = 150.0,
                 limits=()):
        self.vehicle, self.track = vehicle, track
        self.balance_speed_kph = _positive("balance_speed_kph", balance_speed_kph)
        self.limits = tuple(limits)
        for lim in self.limits:
            if not isinstance(lim, VehicleLimit):
                raise DoeError(f"vehicle: a limit must be a VehicleLimit, got {lim!r}")
            if lim.figure == "lap_time_s" and track is None:
                raise DoeError("vehicle: a limit on lap_time_s needs a track")
        names = (["lap_time_s"] if track is not None else []) + ["top_speed_kph", "front_load_share",
                                                                 "balance_shift"]
        self.figure_names = tuple(dict.fromkeys(names + [lim.figure for lim in self.limits]))

    def lap_time(self, cla_front, cla_rear, cda) -> np.ndarray:
        """Lap time on the track, s (:func:`lap_times`); the broadcast shape of the inputs."""
        if self.track is None:
            raise DoeError("vehicle: lap time needs a track")
        return lap_times(self.vehicle, self.track, cla_front, cla_rear, cda)

    def figures(self, cla_front, cla_rear, cda, names=None) -> dict:
        """Vehicle figures of each configuration: ``{name: ndarray}`` in the units of :func:`figure_unit`.

        ``names`` defaults to :attr:`figure_names`.
        """
        names = self.figure_names if names is None else tuple(names)
        shape = np.broadcast_shapes(*(np.shape(a) for a in (cla_front, cla_rear, cda)))
        cf, cr, cd = _aero_arrays(cla_front, cla_rear, cda)
        for name in names:
            figure_unit(name)
        out = {}
        speeds = [n for n in names if n in ("lap_time_s", "top_speed_kph") or _CORNER_FIGURE.fullmatch(n)]
        vmax = top_speeds(self.vehicle, cf, cr, cd) if speeds else None
        for name in names:
            if name == "lap_time_s":
                if self.track is None:
                    raise DoeError("vehicle: lap time needs a track")
                out[name] = _lap_times(self.vehicle, self.track, cf, cr, cd, vmax)
            elif name == "top_speed_kph" or _CORNER_FIGURE.fullmatch(name):
                if name == "top_speed_kph":
                    out[name] = vmax * 3.6
                else:
                    radius = float(_CORNER_FIGURE.fullmatch(name).group(1))
                    out[name] = np.minimum(corner_speeds(self.vehicle, cf, cr, radius), vmax) * 3.6
            elif name == "front_load_share":
                out[name] = front_load_share(self.vehicle, cf, cr, self.balance_speed_kph / 3.6)
            else:
                out[name] = balance_shift(self.vehicle, cf, cr, self.balance_speed_kph / 3.6)
        return {name: np.asarray(v, dtype=float).reshape(shape) for name, v in out.items()}

    def linearised(self, cla_front, cla_rear, cda, names=None, step_m2: float = 1e-4) -> dict:
        """Figures and their slopes against CLA front, CLA rear and CDA (central differences).

        Parameters
        ----------
        cla_front, cla_rear, cda : array_like
            Configurations, m^2 (broadcast shape ``S``).
        names : sequence of str, optional
        step_m2 : float
            Difference step, m^2 (the lap tables are smooth to well below it).

        Returns
        -------
        dict of str to (ndarray, ndarray)
            ``{figure: (value, slope)}``: value of shape ``S`` (figure unit) and
            slope of shape ``S + (3,)`` (figure unit per m^2), in the order
            CLA front, CLA rear, CDA. Seven configurations per point, one batch.
        """
        base = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (cla_front, cla_rear, cda)))
        h = _positive("step_m2", step_m2)
        stacked = [np.stack([b] + [b + sign * h * (i == k) for i in range(3) for sign in (1.0, -1.0)])
                   for k, b in enumerate(base)]
        out = self.figures(*stacked[:2], np.maximum(stacked[2], 0.0), names)
        return {name: (v[0], np.stack([(v[1 + 2 * i] - v[2 + 2 * i]) / (2 * h) for i in range(3)], axis=-1))
                for name, v in out.items()}

    def draws(self, cla_front, cla_rear, cda, stds=None, names=None, exact: bool = False) -> dict:
        """Figures at each draw of the aero coefficients, with the surrogate's uncertainty carried through.

        Meant for setup scatter: ``cla_front[i, j]`` is the surrogate mean at the
        j-th scattered setting around candidate i (shape ``(m, n)``, m^2); the
        result has the layout of the responses' draws in a robust search, so a
        figure can be handled like one more response.

        Parameters
        ----------
        cla_front, cla_rear, cda : array_like, shape (m, n)
            Surrogate means at the draws, m^2.
        stds : (array_like, array_like, array_like), optional
            Surrogate standard deviations at the draws, m^2, same shape; taken
            as independent. Without them the figures' std is 0.
        names : sequence of str, optional
        exact : bool
            True evaluates every draw (``m n`` configurations); False (default)
            evaluates the figures and their slopes at each candidate's mean draw
            and moves them linearly to the draws (7 configurations per
            candidate). The scatter in the aero coefficients is small against
            the scale on which the figures bend, so the two agree closely
            (``tests/test_vehicle_fast.py``); use ``exact`` when it is not.

        Returns
        -------
        dict of str to (ndarray, ndarray)
            ``{figure: (values, std)}``, each of shape ``(m, n)``, figure unit:
            the figure at each draw and the surrogate's std of it there
            (``sqrt(sum_i (d figure / d c_i)^2 s_i^2)``, slopes at the candidate's
            mean draw).
        """
        draws = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (cla_front, cla_rear, cda)))
        if draws[0].ndim < 1:
            raise DoeError("vehicle: draws need a last axis of draws")
        centre = [d.mean(axis=-1) for d in draws]
        lin = self.linearised(*centre, names)
        delta = np.stack([d - c[..., None] for d, c in zip(draws, centre)], axis=-1)      # (m, n, 3)
        exact_values = self.figures(*draws[:2], np.maximum(draws[2], 0.0), names) if exact else None
        sig = None if stds is None else np.stack(np.broadcast_arrays(*(np.asarray(x, dtype=float) for x in stds),
                                                                     draws[0])[:3], axis=-1)
        out = {}
        for name, (value, slope) in lin.items():
            values = (exact_values[name] if exact else
                      value[..., None] + np.einsum("...nk,...k->...n", delta, slope))
            std = (np.zeros_like(values) if sig is None else
                   np.sqrt(np.einsum("...nk,...k->...n", sig**2, slope**2)))
            out[name] = (values, std)
        return out

    def spread(self, cla_front, cla_rear, cda, names=None, exact: bool = False) -> dict:
        """Mean and standard deviation (ddof 1) over the last axis of :meth:`draws`.

        Returns
        -------
        dict of str to (ndarray, ndarray)
            ``{figure: (mean, std)}`` of shape ``(m,)``, figure unit.
        """
        if np.shape(cla_front)[-1:] in ((), (0,), (1,)):
            raise DoeError("vehicle: spread needs at least two draws along the last axis")
        out = self.draws(cla_front, cla_rear, cda, names=names, exact=exact)
        return {name: (v.mean(axis=-1), v.std(axis=-1, ddof=1)) for name, (v, _) in out.items()}

    def normal(self, means, stds, names=None) -> dict:
        """Mean and standard deviation of each figure when CLA front, CLA rear and CDA are independent normals.

        Parameters
        ----------
        means, stds : (array_like, array_like, array_like)
            Means and standard deviations of ``(cla_front, cla_rear, cda)``, m^2
            (e.g. surrogate means and standard deviations at candidate settings).
        names : sequence of str, optional

        Returns
        -------
        dict of str to (ndarray, ndarray)
            ``{figure: (mean, std)}`` in the figure's unit, by :func:`normal_moments`
            (six configurations per point, in one batch).
        """
        def figures(cf, cr, cd):
            return self.figures(cf, cr, np.maximum(cd, 0.0), names)

        return normal_moments(figures, means, stds)


# ---------------------------------------------------------------------------
# figures for reports
@dataclass(frozen=True)
class VehicleFigures:
    """What one aero configuration is worth on this car (plain record for reports and JSON).

    Attributes
    ----------
    cla_m2, cla_front_m2, cla_rear_m2, cda_m2 : float
        The configuration, m^2 (CLA negative for downforce).
    aero_front_share : float or None
        Front share of the aero vertical load (the centre of pressure), - (None
        when the total is zero). Meaningless when the net lift is near zero (a
        share of almost nothing): show ``front_load_share`` and
        ``balance_shift`` to a driver instead.
    speeds_kph : tuple of float
        Speeds of the force table, km/h.
    downforce_n, drag_n : tuple of float
        Aero load (positive down) and drag at each speed, N.
    front_axle_n, rear_axle_n, front_load_share : tuple of float
        Axle loads (N) and front share of the total vertical load (-) at each speed.
    radii_m : tuple of float
        Corner radii of the corner-speed table, m.
    corner_speed_kph : tuple of float
        Quasi-steady corner speed at each radius, km/h (capped at the top speed).
    top_speed_kph : float
        Power-limited top speed, km/h.
    lap_time_s : float or None
        Lap time on the study's track, s (None without a track).
    static_front_share : float or None
        Front axle's share of the weight at rest, -.
    balance_shift : tuple of float
        ``front_load_share`` minus ``static_front_share`` at each speed, -
        (negative: the aero load moves the car towards understeer at that
        speed; :func:`balance_shift`).
    """

    cla_m2: float
    cla_front_m2: float
    cla_rear_m2: float
    cda_m2: float
    aero_front_share: float | None
    speeds_kph: tuple
    downforce_n: tuple
    drag_n: tuple
    front_axle_n: tuple
    rear_axle_n: tuple
    front_load_share: tuple
    radii_m: tuple
    corner_speed_kph: tuple
    top_speed_kph: float
    lap_time_s: float | None = None
    static_front_share: float | None = None
    balance_shift: tuple = ()

    def to_dict(self) -> dict:
        """Plain dict (lists for tuples; an infinite speed becomes None), ready for JSON."""
        def plain(v):
            if isinstance(v, tuple):
                return [plain(x) for x in v]
            return None if isinstance(v, float) and not math.isfinite(v) else v

        return {k: plain(v) for k, v in asdict(self).items()}


def vehicle_figures(vehicle: Vehicle, aero: Aero, track: Track | None = None,
                    speeds_kph=(100.0, 150.0, 200.0), radii_m=(25.0, 50.0, 100.0, 200.0)) -> VehicleFigures:
    """Forces, axle loads, corner speeds, top speed and lap time for one configuration.

    Parameters
    ----------
    vehicle : Vehicle
    aero : Aero
    track : Track, optional
        Gives ``lap_time_s`` when set (by :func:`lap_times`, within about 1e-5 s
        of the step-by-step :func:`lap_time` and thousands of times faster).
    speeds_kph : sequence of float
        Speeds for the force and axle-load table, km/h.
    radii_m : sequence of float
        Radii for the corner-speed table, m.

    Returns
    -------
    VehicleFigures
    """
    speeds = np.asarray([_positive("speed", s) for s in speeds_kph], dtype=float) / 3.6
    down, drag = aero_forces(vehicle, aero, speeds)
    front, rear, share = axle_loads(vehicle, aero, speeds)
    vmax = top_speed(vehicle, aero)
    corners = [min(corner_speed(vehicle, aero, r), vmax) * 3.6 for r in radii_m]
    lap = (float(lap_times(vehicle, track, aero.cla_front_m2, aero.cla_rear_m2, aero.cda_m2))
           if track is not None else None)

    def tup(a):
        return tuple(float(x) for x in np.atleast_1d(a))

    return VehicleFigures(aero.cla_m2, float(aero.cla_front_m2), float(aero.cla_rear_m2), float(aero.cda_m2),
                          aero.front_share, tup(speeds * 3.6),
                          tup(down), tup(drag), tup(front), tup(rear), tup(share), tup(radii_m), tup(corners),
                          vmax * 3.6, lap, vehicle.static_front_share,
                          tup(np.atleast_1d(share) - vehicle.static_front_share))


def compare_figures(base: VehicleFigures, other: VehicleFigures) -> dict:
    """Differences ``other - base`` of every number in two :class:`VehicleFigures`.

    Returns
    -------
    dict
        Same keys as :meth:`VehicleFigures.to_dict` (units as there) except the
        table axes ``speeds_kph`` and ``radii_m``; lists stay lists; the lap-time
        difference is None when either has no lap time. A negative
        ``lap_time_s`` means ``other`` is faster.
    """
    if base.speeds_kph != other.speeds_kph or base.radii_m != other.radii_m:
        raise DoeError("vehicle figures: compare two sets made at the same speeds and radii")
    a, b = base.to_dict(), other.to_dict()
    out = {}
    for key in a:
        if key in ("speeds_kph", "radii_m"):
            continue
        x, y = a[key], b[key]
        if x is None or y is None:
            out[key] = None
        elif isinstance(x, list):
            out[key] = [q - p for p, q in zip(x, y)]
        else:
            out[key] = y - x
    return out
