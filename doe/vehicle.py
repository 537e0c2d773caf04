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
from dataclasses import asdict, dataclass, field

import numpy as np

from .errors import DoeError

__all__ = ["G", "RHO_SEA_LEVEL", "DRIVES", "Vehicle", "Aero", "Segment", "Track", "aero_forces",
           "axle_loads", "corner_speed", "top_speed", "lap_time", "LapResult", "VehicleFigures",
           "vehicle_figures", "compare_figures"]

#: Standard gravity, m/s^2 (ISO 80000-3).
G = 9.80665
#: ISA sea-level air density, kg/m^3 (ISO 2533:1975).
RHO_SEA_LEVEL = 1.2250
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


def axle_loads(vehicle: Vehicle, aero: Aero, speed_m_s):
    """Vertical loads on the axles at a steady speed (weight plus aero, no load transfer).

    Returns
    -------
    front_n, rear_n : float or ndarray
        Axle loads, N.
    front_share : float or ndarray
        ``front_n / (front_n + rear_n)``, -.
    """
    q = _q(vehicle, speed_m_s)
    w = vehicle.weight_n
    front = w * vehicle.static_front_share - q * aero.cla_front_m2
    rear = w * (1.0 - vehicle.static_front_share) - q * aero.cla_rear_m2
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


def _resistance_n(vehicle: Vehicle, aero: Aero, v) -> np.ndarray:
    down, drag = aero_forces(vehicle, aero, v)
    return drag + vehicle.rolling_resistance * (vehicle.weight_n + down)


def _traction_n(vehicle: Vehicle, aero: Aero, v) -> np.ndarray:
    front, rear, _ = axle_loads(vehicle, aero, v)
    driven = {"front": front, "rear": rear, "all": front + rear}[vehicle.drive]
    return vehicle.tyre_mu * np.maximum(driven, 0.0)


def _drive_n(vehicle: Vehicle, aero: Aero, v) -> np.ndarray:
    v = np.asarray(v, dtype=float)
    with np.errstate(divide="ignore"):
        power_limited = np.where(v > 0, vehicle.power_w / np.maximum(v, 1e-300), np.inf)
    return np.minimum(_traction_n(vehicle, aero, v), power_limited)


def _accel(vehicle: Vehicle, aero: Aero, v) -> np.ndarray:
    """Forward acceleration on a straight at speed v, m/s^2."""
    return (_drive_n(vehicle, aero, v) - _resistance_n(vehicle, aero, v)) / vehicle.mass_kg


def _decel(vehicle: Vehicle, aero: Aero, v) -> np.ndarray:
    """Braking deceleration on a straight at speed v, m/s^2 (positive)."""
    down, _ = aero_forces(vehicle, aero, v)
    grip = vehicle.tyre_mu * np.maximum(vehicle.weight_n + down, 0.0)
    if vehicle.brake_limit_g is not None:
        grip = np.minimum(grip, vehicle.brake_limit_g * vehicle.weight_n)
    return (grip + _resistance_n(vehicle, aero, v)) / vehicle.mass_kg


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
        return float(_drive_n(vehicle, aero, v) - _resistance_n(vehicle, aero, v))

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
# figures for reports
@dataclass(frozen=True)
class VehicleFigures:
    """What one aero configuration is worth on this car (plain record for reports and JSON).

    Attributes
    ----------
    cla_m2, cla_front_m2, cla_rear_m2, cda_m2 : float
        The configuration, m^2 (CLA negative for downforce).
    aero_front_share : float or None
        Front share of the aero vertical load, - (None when the total is zero).
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
        Gives ``lap_time_s`` when set.
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
    lap = lap_time(vehicle, aero, track).time_s if track is not None else None

    def tup(a):
        return tuple(float(x) for x in np.atleast_1d(a))

    return VehicleFigures(aero.cla_m2, float(aero.cla_front_m2), float(aero.cla_rear_m2), float(aero.cda_m2),
                          aero.front_share, tup(speeds * 3.6),
                          tup(down), tup(drag), tup(front), tup(rear), tup(share), tup(radii_m), tup(corners),
                          vmax * 3.6, lap)


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
