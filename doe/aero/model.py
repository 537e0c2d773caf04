"""The rear-package model: body, hatch flap and rear wing together, from geometry to CLA and CDA.

For each configuration:

1. build the car's centreline contour with its flap and the inverted wing
   (:mod:`doe.aero.car`), the wing from a NACA 4-digit section or a
   coordinate file (:mod:`doe.aero.sections`); refuse a wing nearer the body
   than the panels there can represent;
2. solve the 2-D potential flow round both in ground effect
   (:mod:`doe.aero.panels`), with a second solution for a unit upwash at the
   wing. The velocity the body induces at the wing is scaled by the 3-D body
   factor, as the body's own loads are; the flow leaves the flap's tip with a
   weight that grows with the flap's length (so a vanishing flap has a
   vanishing effect);
3. correct the wing's circulation to its 3-D value: lifting line with the
   endplate effective aspect ratio (:mod:`doe.aero.lifting_line`), the viscous
   lift factor and the smooth stall limit (:mod:`doe.aero.drag`: Valarezo-Chin
   difference plus an aft-recovery term, read at chord stations so that it
   converges), applied as the local upwash that gives that circulation, so
   that the body feels the 3-D wing and not the 2-D one;
4. integrate pressures: the changes the flap and the wing make to the body's
   centreline pressures are relieved with distance from the flap's root (3-D
   flow round the car keeps them local), the body's 2-D pressures are scaled
   by the 3-D body factor and spread over the car's width; the rear window's
   pressures move smoothly to the base pressure as its slope passes the
   critical slant; the base carries the base pressure, lower when the flap
   turns the flow up;
5. add drag: wing profile, induced and parasite drag; body forebody baseline,
   rear-window pressure drag, the rear-pillar vortices of an attached window
   flow (which also lift), and base drag;
6. split the vertical load between the axles from the pitching moment about the
   front contact patch (drag moments included).

Sign convention (used everywhere): lift coefficients and CLA are positive
upward, so **negative CLA is downforce**; drag and CDA are positive rearward.
CLA and CDA are in m^2 (force over dynamic pressure).

Assumptions and limits: potential flow with separation fixed by the geometry
(hatch edge or flap tip; the underbody's rear edge); a 2-D centreline section
stands for the 3-D body through one factor and a relief length; the slant
regime, the flap's fade-in, the base-pressure change and the stall measure are
empirical terms set against published trends (see docs/physics.md and the
tests); no yaw, no cooling flow, no rotating wheels or wheel wells, no engine
bay, no boundary-layer displacement, no unsteady wake; the lifting line
ignores the ground's effect on the trailing vortices. Doubling the panels
from the defaults moves lift, drag and the stall margin by under 1.5 %
(reports/benchmarks.md). This is a low-order model for ranking and planning,
not for certifying loads: aero changes alter high-speed handling, wing mounts
must carry the loads, and only validated testing and the class's scrutineers
settle what is safe and legal.
"""
from __future__ import annotations

from dataclasses import dataclass, field, fields, replace

import numpy as np
from threadpoolctl import threadpool_limits

from ..errors import AeroError
from .atmosphere import ISA_DENSITY, ISA_TEMPERATURE, reynolds
from .car import CarGeometry, body_contour, clearance, wing_contour
from .drag import StallLimit, profile_drag, stall_measure, stall_weights
from .lifting_line import endplate_aspect_ratio, glauert
from .panels import Layout, solve_field
from .sections import Section, naca4, read_coords

__all__ = ["Coefficients", "COEFFICIENT_RANGES", "STALL_AFT_WEIGHT", "POST_STALL_EXPONENT", "SLANT_WIDTH",
           "FLAP_FADE_CHORD", "FLAP_BASE_FACTOR", "ModelSettings", "DesignInput", "DESIGN_INPUTS", "OUTPUTS",
           "RearPackageModel", "ModelResult"]


#: Smallest gap, m, between the wing and the body (below it the boundary layers of both would meet).
MIN_GAP = 0.010
#: Weight of the aft pressure recovery in the stall measure (set with ``stall_dcp``; model choice).
STALL_AFT_WEIGHT = 9.0
#: Exponent ``p`` of the stall limit ``m^-p`` (1/2 holds the lift at its maximum; more makes it fall past it).
POST_STALL_EXPONENT = 1.4
#: Width, degrees, of the logistic change from attached to separated rear-window flow (model choice).
SLANT_WIDTH = 2.0
#: Flap length, m, below which the flow hardly leaves the flap's tip: the tip's share of the separation
#: condition is ``1 - exp(-c / FLAP_FADE_CHORD)`` (a flap inside the boundary layer does little; model choice
#: of the order of the boundary-layer thickness at the rear of a car).
FLAP_FADE_CHORD = 0.015
#: Fall of the base pressure coefficient with the square of the sine of the flap's angle above the horizontal
#: (a flap that turns the flow up widens the wake; model choice).
FLAP_BASE_FACTOR = 0.15


@dataclass(frozen=True)
class Coefficients:
    """The model's empirical coefficients, in one place so that they can be calibrated.

    Attributes
    ----------
    body_3d_factor : float
        Share of the 2-D centreline lift, pitching moment and rear-window
        pressure drag (per unit width, spread over the car's width) that the 3-D
        body keeps; the flow round the sides relieves the centreline pressures.
        Model choice, set so that the invented hatchback's lift lies in the
        handbook range (Hucho; memory).
    base_pressure : float
        Base pressure coefficient on the base, behind the separation line
        (Hucho gives about -0.1 to -0.3 for cars; memory). It gives the base
        drag and the base's share of lift and moment; the potential flow does
        not know it (it only fixes where the flow leaves the body).
    forebody_cd : float
        Drag coefficient on the frontal area of everything the centreline model
        does not see (forebody, wheels, mirrors, underbody friction, cooling).
    viscous_lift_factor : float
        Share of the inviscid wing lift kept by the real section (boundary-layer
        decambering; measured slopes of 12 % sections are about 0.87 of the
        inviscid ones in Abbott & von Doenhoff's data).
    stall_dcp : float
        Critical value of the stall measure (:func:`doe.aero.drag.stall_measure`:
        Valarezo-Chin pressure difference plus :data:`STALL_AFT_WEIGHT` times
        the aft pressure recovery). Set with ``stall_width`` and the constants
        :data:`STALL_AFT_WEIGHT` and :data:`POST_STALL_EXPONENT` so that NACA
        0012, 2412, 4412 and 6412 reach c_l,max near Abbott & von Doenhoff's
        values at Re 3e6 (memory), and so that a section's downforce over the
        road peaks near a 0.1-chord gap (Zerihan & Zhang 2000; memory).
    stall_width : float
        Width of the smooth stall limit (fraction of ``stall_dcp``).
    post_stall_drag : float
        Profile-drag rise past stall per unit of smooth stall excess (model choice).
    lift_drag_factor : float
        ``k`` of the wing's lift-dependent profile drag ``k c_l^2`` (common practice, no source).
    wing_parasite_cd : float
        Drag coefficient on the wing's plan area of its endplates, supports and
        interference with the body's low-energy flow (common practice, no source).
    critical_slant : float
        Rear-window slope, degrees, at the middle of the smooth change (width
        :data:`SLANT_WIDTH`) from flow that follows the window to flow that
        leaves the roof's rear edge (Ahmed, Ramm & Faltin 1984: about 30 degrees).
    slant_vortex_cd : float
        Drag coefficient, on the frontal area and times ``sin^2`` of the window
        slope, of the trailing vortices that an attached rear-window flow sheds
        from the rear pillars; their suction on the window also lifts (drag
        over the tangent of the slope); both go with the attached flow. Set so that the
        drag rises from a minimum near 12 degrees to a peak near the critical
        slant (the trend Ahmed, Ramm & Faltin 1984 measured; model choice).
    relief_length : float
        Distance, m, over which a change that the flap or the wing makes to the
        centreline pressures is felt by the 3-D body (weight ``exp(-d / L)``
        of the change at distance ``d`` from the flap's root or hatch edge).
        In 2-D such a change moves the whole body's circulation; round a 3-D
        car it stays local (model choice, about a third of the car's width).
    """

    body_3d_factor: float = 0.12
    base_pressure: float = -0.15
    forebody_cd: float = 0.18
    viscous_lift_factor: float = 0.88
    stall_dcp: float = 23.0
    stall_width: float = 0.15
    post_stall_drag: float = 0.05
    lift_drag_factor: float = 0.005
    wing_parasite_cd: float = 0.030
    critical_slant: float = 30.0
    slant_vortex_cd: float = 0.15
    relief_length: float = 0.5

    def __post_init__(self):
        for f in fields(self):
            lo, hi = COEFFICIENT_RANGES[f.name]
            v = getattr(self, f.name)
            if not (np.isfinite(v) and lo <= v <= hi):
                raise AeroError(f"coefficient {f.name} = {v!r} is outside its plausible range {lo:g} to {hi:g}")


#: Plausible range of each coefficient (what a calibration may explore).
COEFFICIENT_RANGES = {
    "body_3d_factor": (0.03, 0.5),
    "base_pressure": (-0.4, -0.05),
    "forebody_cd": (0.08, 0.30),
    "viscous_lift_factor": (0.75, 1.0),
    "stall_dcp": (12.0, 35.0),
    "stall_width": (0.02, 0.3),
    "post_stall_drag": (0.0, 0.2),
    "lift_drag_factor": (0.0, 0.02),
    "wing_parasite_cd": (0.0, 0.05),
    "critical_slant": (20.0, 40.0),
    "slant_vortex_cd": (0.0, 0.3),
    "relief_length": (0.15, 3.0),
}


@dataclass(frozen=True)
class DesignInput:
    """One input of the model that a study may vary.

    Attributes
    ----------
    name : str
    unit : str
        The model's unit; :attr:`units` lists the accepted study units and
        their factor to the model's unit.
    default : float
        Value used when the study does not vary it (an ``[evaluator]`` setting of the same name overrides it).
    low, high : float
        Range the model accepts, model unit.
    units : dict
        Study unit -> multiplier to the model unit.
    description : str
    """

    name: str
    unit: str
    default: float
    low: float
    high: float
    units: dict
    description: str


_DEG = {"deg": 1.0, "rad": 180.0 / np.pi}
_MM = {"mm": 1.0, "m": 1000.0}
_PCT = {"%": 1.0, "% chord": 1.0, "-": 100.0}

#: Inputs a study may vary (model units: deg, mm, % chord).
DESIGN_INPUTS = {d.name: d for d in (
    DesignInput("flap_angle", "deg", 30.0, -10.0, 60.0, _DEG, "hatch flap angle up from the rear-window line"),
    DesignInput("flap_chord", "mm", 60.0, 0.0, 200.0, _MM, "hatch flap length (0: no flap)"),
    DesignInput("flap_position", "%", 0.0, 0.0, 100.0, {"%": 1.0, "-": 100.0},
                "flap root up the rear window: 0 at the hatch edge, 100 at the roof's rear edge (% of the window)"),
    DesignInput("wing_height", "mm", 120.0, 20.0, 600.0, _MM, "height of the wing's leading edge above the hatch edge"),
    DesignInput("wing_aoa", "deg", 6.0, -5.0, 25.0, _DEG,
                "wing angle of attack, positive with the trailing edge above the leading edge (downforce)"),
    DesignInput("wing_camber", "% chord", 4.0, 0.0, 9.5, _PCT, "NACA 4-digit maximum camber of the wing section"),
    DesignInput("wing_thickness", "% chord", 12.0, 6.0, 24.0, _PCT, "NACA 4-digit thickness of the wing section"),
    DesignInput("wing_overhang", "mm", 20.0, -300.0, 500.0, _MM,
                "horizontal position of the wing's leading edge behind the hatch edge"),
)}

#: Model outputs: name -> (unit, description).
OUTPUTS = {
    "cla_total": ("m^2", "lift coefficient times area of the whole car (negative = downforce)"),
    "cla_front": ("m^2", "share of cla_total carried by the front axle"),
    "cla_rear": ("m^2", "share of cla_total carried by the rear axle"),
    "cla_wing": ("m^2", "the wing's own lift (3-D)"),
    "cla_body": ("m^2", "the body's lift with the flap, in the wing's presence"),
    "cda_total": ("m^2", "drag coefficient times area of the whole car"),
    "cda_wing": ("m^2", "the wing's drag: profile, induced, parasite (endplates, supports) and post-stall"),
    "cda_body": ("m^2", "the body's drag: forebody baseline, rear-window pressure and base"),
    "lift_to_drag": ("-", "downforce over drag of the whole car, -cla_total / cda_total"),
    "balance_front": ("-", "share of the downforce on the front axle, cla_front / cla_total"),
    "downforce": ("N", "downforce at the study speed, -cla_total q (positive = down)"),
    "drag": ("N", "drag at the study speed, cda_total q"),
    "cl_wing": ("-", "3-D wing lift coefficient on its plan area"),
    "stall_margin": ("-", "stall measure (Valarezo-Chin pressure difference plus aft recovery) over its critical "
                          "value (stall at 1)"),
    "stalled": ("-", "1 when the wing is past the stall criterion, else 0"),
}


@dataclass(frozen=True)
class ModelSettings:
    """Fixed settings of the model (the ``[evaluator]`` keys of the builtin kind).

    Attributes
    ----------
    chord : float
        Wing chord, m.
    span : float
        Wing span, m.
    endplate_height : float
        Endplate height, m (0 for none).
    camber_position : float
        NACA camber position of the wing section, chords.
    speed : float
        Air speed, m/s.
    density : float
        Air density, kg/m^3 (ISO 2533 sea level by default).
    temperature : float
        Air temperature for the viscosity, K.
    wing_panels, body_panels, flap_panels : int
        Panel counts.
    wing_section : Section, str or Path, optional
        The wing's section from a coordinate file (read with
        :func:`doe.aero.sections.read_coords` and repanelled to
        ``wing_panels``) instead of the NACA 4-digit section of
        ``wing_camber`` and ``wing_thickness`` (which then have no effect).
    ground : bool
        Ground effect (image method); off only for checks.
    has_wing : bool
        Whether the wing is fitted (off: the car with its flap alone).
    fixed : dict
        Values of design inputs the study does not vary, model units.
    car : CarGeometry
    coefficients : Coefficients
    """

    chord: float = 0.24
    span: float = 1.30
    endplate_height: float = 0.15
    camber_position: float = 0.4
    speed: float = 40.0
    density: float = ISA_DENSITY
    temperature: float = ISA_TEMPERATURE
    wing_panels: int = 60
    body_panels: int = 100
    flap_panels: int = 8
    wing_section: object = None
    ground: bool = True
    has_wing: bool = True
    fixed: dict = field(default_factory=dict)
    car: CarGeometry = CarGeometry()
    coefficients: Coefficients = Coefficients()

    def __post_init__(self):
        for name in ("chord", "span", "speed", "density", "temperature"):
            v = getattr(self, name)
            if not (np.isfinite(v) and v > 0):
                raise AeroError(f"setting {name} = {v!r} must be a positive number")
        if self.endplate_height < 0:
            raise AeroError("setting endplate_height must be >= 0")
        if self.span / self.chord < 1.0:
            raise AeroError(f"wing aspect ratio span/chord = {self.span / self.chord:.2f} is below 1")
        if not 0.1 <= self.camber_position <= 0.9:
            raise AeroError("setting camber_position must be between 0.1 and 0.9 chords")
        if self.body_panels < 40 or self.flap_panels < 2 or self.wing_panels < 20:
            raise AeroError("panel counts: body_panels >= 40, flap_panels >= 2, wing_panels >= 20")
        sec = self.wing_section
        if sec is not None and not isinstance(sec, Section):
            sec = read_coords(sec, n_panels=self.wing_panels)
        elif sec is not None and sec.n_panels != self.wing_panels:
            from .sections import repanel
            sec = repanel(sec, self.wing_panels)
        object.__setattr__(self, "wing_section", sec)

    @property
    def dynamic_pressure(self) -> float:
        """``q = rho V^2 / 2``, Pa."""
        return 0.5 * self.density * self.speed**2


@dataclass
class ModelResult:
    """Outputs of a batch: one array per output name, plus status per configuration.

    Attributes
    ----------
    values : dict of str to ndarray
        See :data:`OUTPUTS`.
    ok : ndarray of bool
    messages : list of str
        Why a configuration failed ("" when it did not).
    cp : list of dict
        Per configuration (when asked): ``{"body": (x, y, cp), "wing": (x, y, cp)}``
        at the panel mid-points, m.
    """

    values: dict
    ok: np.ndarray
    messages: list
    cp: list = field(default_factory=list)


@dataclass
class _WingState:
    """The wing's 3-D correction of one batch (see :meth:`RearPackageModel._wing_3d`)."""

    weights: np.ndarray        # (B, 2): free stream and local upwash to superpose
    cl3d: np.ndarray           # 3-D, viscous, stall-limited lift coefficient
    lifting_line: object       # LiftingLine, for the induced drag
    extra_cd: object           # post-stall profile-drag rise
    dcp: np.ndarray            # stall measure (Valarezo-Chin difference plus aft recovery)
    stalled: np.ndarray


class RearPackageModel:
    """Evaluate rear-package configurations (see the module docstring).

    Parameters
    ----------
    settings : ModelSettings
    """

    def __init__(self, settings: ModelSettings | None = None):
        self.settings = settings or ModelSettings()

    def inputs(self, points: dict) -> dict:
        """Fill in defaults and check ranges; ``points`` maps input names to arrays (model units)."""
        n = max((np.size(v) for v in points.values()), default=1)
        out = {}
        for name, d in DESIGN_INPUTS.items():
            v = points.get(name, self.settings.fixed.get(name, d.default))
            arr = np.broadcast_to(np.asarray(v, dtype=float), (n,)).copy()
            out[name] = arr
        unknown = set(points) - set(DESIGN_INPUTS)
        if unknown:
            raise AeroError(f"unknown model input '{sorted(unknown)[0]}' (known: {', '.join(DESIGN_INPUTS)})")
        if self.settings.wing_section is not None:
            for name in ("wing_camber", "wing_thickness"):
                if name in points or name in self.settings.fixed:
                    raise AeroError(f"{name} has no effect when the wing's section comes from a coordinate file "
                                    f"(wing_section); leave it out")
        return out

    def evaluate(self, points: dict, keep_cp: bool = False, batch: int = 32) -> ModelResult:
        """Evaluate configurations.

        Parameters
        ----------
        points : dict of str to array_like
            Design inputs in model units (see :data:`DESIGN_INPUTS`); missing ones take their defaults.
        keep_cp : bool
            Keep the pressure distributions (for plots).
        batch : int
            Configurations solved together (32: the fastest on one core; memory grows with it).

        Returns
        -------
        ModelResult
        """
        x = self.inputs(points)
        n = len(x["flap_angle"])
        values = {k: np.full(n, np.nan) for k in OUTPUTS}
        ok = np.zeros(n, dtype=bool)
        messages = [""] * n
        cps = [None] * n
        geoms = [self._geometry({k: v[i] for k, v in x.items()}) for i in range(n)]
        good = []
        for i, g in enumerate(geoms):
            if isinstance(g, str):
                messages[i] = g
            else:
                good.append(i)
        keys = sorted({self._group_key(geoms[i]) for i in good})
        groups = [[i for i in good if self._group_key(geoms[i]) == key] for key in keys]
        chunks = [grp[s:s + batch] for grp in groups for s in range(0, len(grp), batch)]
        with threadpool_limits(limits=1, user_api="blas"):       # small matrices: threads only contend
            for idx in chunks:
                out, cp = self._solve([geoms[i] for i in idx], keep_cp)
                for k, v in out.items():
                    values[k][idx] = v
                ok[idx] = True
                for j, i in enumerate(idx):
                    cps[i] = cp[j] if keep_cp else None
        return ModelResult(values, ok, messages, cps if keep_cp else [])

    # ------------------------------------------------------------------
    @staticmethod
    def _group_key(g):
        """Configurations solved together need the same panel counts."""
        return len(g["body"].nodes), g["body"].flap_panels

    def _geometry(self, p: dict):
        """Nodes and facts of one configuration, or a message saying why it cannot be built."""
        st = self.settings
        for name, d in DESIGN_INPUTS.items():
            if not (d.low <= p[name] <= d.high) or not np.isfinite(p[name]):
                return f"{name} = {p[name]:g} {d.unit} is outside the model's range {d.low:g} to {d.high:g}"
        try:
            body = body_contour(st.car, p["flap_angle"], p["flap_chord"] / 1000.0, st.body_panels,
                                st.flap_panels, st.coefficients.critical_slant,
                                flap_position=p["flap_position"] / 100.0)
            section = st.wing_section
            if section is None:
                section = naca4(p["wing_camber"] / 100.0, st.camber_position, p["wing_thickness"] / 100.0,
                                st.wing_panels)
        except AeroError as exc:
            return str(exc)
        if not st.has_wing:
            return {"body": body, "wing": None, "thickness": section.thickness, "p": p}
        le = st.car.hatch_edge + [p["wing_overhang"] / 1000.0, p["wing_height"] / 1000.0]
        wing = wing_contour(section.points, st.chord, p["wing_aoa"], le)
        gap, panel = clearance(wing, body.nodes)
        need = max(MIN_GAP, panel)
        if gap < need:
            what = " (they overlap)" if gap == 0.0 else ""
            return (f"the wing comes within {gap * 1000:.1f} mm of the body{what}; the panels there "
                    f"({panel * 1000:.0f} mm) need a gap of at least {need * 1000:.0f} mm (move the wing away or "
                    f"raise the panel counts)")
        return {"body": body, "wing": wing, "thickness": section.thickness, "p": p,
                "stall_w": stall_weights(section.points)[:, ::-1]}        # the wing's nodes run backwards

    def geometry(self, p: dict) -> dict:
        """The geometry this model solves for one configuration (what a CFD case or a drawing must match).

        Parameters
        ----------
        p : dict of str to float
            Every design input of one configuration, model units (one value each, e.g.
            ``{k: float(v[0]) for k, v in model.inputs(point).items()}``).

        Returns
        -------
        dict
            ``body``: the body's panel contour (:class:`doe.aero.car.BodyContour`, m); ``wing``: the
            wing's nodes, m (None without a wing); ``thickness``: the section's thickness, chord
            fraction; ``p``: the inputs; with a wing also ``stall_w``, the stall weights of its nodes.

        Raises
        ------
        AeroError
            An input outside the model's range, or a wing too close to the body.
        """
        geom = self._geometry(p)
        if isinstance(geom, str):
            raise AeroError(geom)
        return geom

    def _solve(self, geoms, keep_cp):
        st, co = self.settings, self.settings.coefficients
        nb = len(geoms[0]["body"].nodes)
        body_nodes = np.stack([g["body"].nodes for g in geoms])
        same = np.all(body_nodes == body_nodes[:1], axis=(0, 2))             # nodes shared by the whole batch
        static = nb if same.all() else int(np.argmin(same))                  # (at least front to the roof's edge)
        if st.has_wing:
            layout = Layout(("body", "wing"), (nb, len(geoms[0]["wing"])), (True, False))
            nodes = np.stack([np.vstack([g["body"].nodes, g["wing"]]) for g in geoms])
        else:
            layout = Layout(("body",), (nb,), (True,))
            nodes = np.stack([g["body"].nodes for g in geoms])
        # the 3-D body relieves its own centreline pressures to body_3d_factor of their 2-D values; the
        # velocity it induces at the wing is relieved alike (the wing's effect on the body is relieved with
        # the body's loads, in _body_loads)
        coupling = [[1.0, 1.0], [co.body_3d_factor, 1.0]] if st.has_wing else None
        flap = geoms[0]["body"].flap_panels
        edge = None
        if flap:                                            # the flow leaves the flap's tip as the flap grows
            fade = np.array([1.0 - np.exp(-g["p"]["flap_chord"] / 1000.0 / FLAP_FADE_CHORD) for g in geoms])
            edge = (nb - 1 - flap, fade)
        sol = solve_field(nodes, layout, ground=st.ground, upwash_body="wing" if st.has_wing else None,
                          static_nodes=static, coupling=coupling, upper_edge=edge)
        n = len(geoms)
        if st.has_wing:
            ws = self._wing_3d(sol, np.stack([g["stall_w"] for g in geoms]))
        else:
            ws = _WingState(np.array([1.0]), np.zeros(n), None, 0.0, np.zeros(n), np.zeros(n, dtype=bool))
        cp = sol.cp(ws.weights)
        f = self._panel_forces(sol, cp)
        bodyp = sol.body == 0
        f[:, bodyp] = self._panel_forces(sol, self._body_pressures(geoms, sol, cp))[:, bodyp]
        if st.has_wing:                                     # the wing is closed: exact sheet pressures
            wing = sol.body == 1
            f[:, wing] = sol.sheet_forces(ws.weights)[:, wing]
        out = self._loads(geoms, sol, f, ws)
        out["stall_margin"] = ws.dcp / co.stall_dcp
        out["stalled"] = ws.stalled.astype(float)
        cps = []
        if keep_cp:
            for j in range(len(geoms)):
                cps.append({name: (sol.mid[j, sol.body == k, 0], sol.mid[j, sol.body == k, 1], cp[j, sol.body == k])
                            for k, name in enumerate(layout.names)})
        return out, cps

    def _wing_3d(self, sol, stall_w, k=1):
        """The field with the wing's circulation (body ``k``) brought to its 3-D, viscous, stall-limited value."""
        st, co = self.settings, self.settings.coefficients
        wing = sol.body == k
        a, b, _ = sol.layout.panel_index()
        a, b = a[wing], b[wing]
        g0, g1 = sol.gamma[..., 0], sol.gamma[..., 1]
        ln_y = (sol.length * sol.normal[..., 1])[:, wing]
        mean_cp = 1.0 - (g0[:, a] ** 2 + g0[:, a] * g0[:, b] + g0[:, b] ** 2) / 3.0
        fy2d = -(ln_y * mean_cp).sum(axis=1)
        # d(fy_wing)/d(upwash) of the same exact sheet-pressure integral
        dfy = (ln_y * (2 * g0[:, a] * g1[:, a] + g0[:, a] * g1[:, b] + g1[:, a] * g0[:, b]
                       + 2 * g0[:, b] * g1[:, b]) / 3.0).sum(axis=1)
        c = st.chord
        cl2d, a_w = fy2d / c, np.clip(dfy / c, 2.0, 12.0)
        ar_eff = endplate_aspect_ratio(st.span / c, st.endplate_height, st.span)
        ll = glauert(ar_eff, a_w)
        inviscid = cl2d * ll.lift_factor(a_w)
        target = inviscid * co.viscous_lift_factor
        # the stall rule reads the inviscid pressures of the 3-D loading, as its authors did
        g1 = sol.node_strength(np.stack([np.ones_like(cl2d), (inviscid - cl2d) / a_w], axis=1))
        start = sol.layout.starts[k]
        cp_w = 1.0 - g1[:, start:start + sol.layout.nodes[k]] ** 2
        dcp, measure = stall_measure(cp_w, stall_w, STALL_AFT_WEIGHT)
        factor, extra_cd, stalled = StallLimit(co.stall_dcp, co.stall_width, co.post_stall_drag,
                                               POST_STALL_EXPONENT).apply(measure)
        cl3d = target * factor
        weights = np.stack([np.ones_like(cl2d), (cl3d - cl2d) / a_w], axis=1)   # free stream + local upwash
        return _WingState(weights, cl3d, ll, extra_cd, measure, stalled)

    def isolated_wing(self, points: dict) -> np.ndarray:
        """3-D lift coefficient of the wing alone (no car; same height above the road), per configuration.

        Parameters
        ----------
        points : dict of str to array_like
            Design inputs as for :meth:`evaluate`.

        Returns
        -------
        ndarray
            ``cl_wing`` of the wing without the car (NaN where the configuration cannot be built).
        """
        if not self.settings.has_wing:
            raise AeroError("the model has no wing (wing = false)")
        x = self.inputs(points)
        n = len(x["flap_angle"])
        out = np.full(n, np.nan)
        for i in range(n):
            g = self._geometry({k: v[i] for k, v in x.items()})
            if isinstance(g, str):
                continue
            sol = solve_field(g["wing"], Layout(("wing",), (len(g["wing"]),)), ground=self.settings.ground,
                              upwash_body="wing")
            out[i] = self._wing_3d(sol, g["stall_w"][None], k=0).cl3d[0]
        return out

    def _bare_head_cp(self, n_head: int):
        """The bare car's (no flap, no wing) pressures on its first ``n_head`` panels, and their relieved
        change when the flow leaves the roof's rear edge instead of the hatch edge (both cached)."""
        cache = self.__dict__.setdefault("_bare_cache", {})
        if n_head not in cache:
            st = self.settings
            body = body_contour(st.car, 0.0, 0.0, st.body_panels, st.flap_panels, st.coefficients.critical_slant)
            sol = solve_field(body.nodes, Layout(("body",), (len(body.nodes),), (True,)), ground=st.ground)
            head = body.nodes[:n_head + 1]                     # the flow leaving the roof's rear edge
            sep = solve_field(head, Layout(("body",), (len(head),), (True,)), ground=st.ground)
            mid = sol.mid[0, :n_head]
            relief = np.exp(-np.hypot(*(mid - st.car.roof_rear).T) / st.coefficients.relief_length)
            cache[n_head] = (sol.cp()[0, :n_head], relief * (sep.cp()[0] - sol.cp()[0, :n_head]))
        return cache[n_head]

    def slant_separation(self) -> float:
        """Share of the rear window's flow that has left the roof's rear edge (0 attached, 1 separated).

        A logistic step in the window slope, centred on ``critical_slant`` with
        width :data:`SLANT_WIDTH` (Ahmed, Ramm & Faltin 1984 for the change near 30 deg;
        the smooth form is this model's choice, so that a surrogate or a
        calibration never meets a step).
        """
        co = self.settings.coefficients
        return float(1.0 / (1.0 + np.exp(-(self.settings.car.rear_window_angle - co.critical_slant) / SLANT_WIDTH)))

    def _body_pressures(self, geoms, sol, cp):
        """The body's centreline pressures as its 3-D loads see them, shape (B, P) (zero off the body).

        Head (front to the roof's rear edge): the bare car's 2-D pressures plus
        the change the flap and the wing make, relieved with distance from the
        flap's root (``relief_length``), plus the change of the flow leaving
        the roof's rear edge (the bare car's, relieved with distance from that
        edge, times :meth:`slant_separation`), all times ``body_3d_factor``. Rear
        window: its 2-D pressures times the factor while the flow follows it,
        moving to the base pressure as the flow leaves the roof's edge
        (:meth:`slant_separation`). Flap: its 2-D pressures times the factor.
        """
        co = self.settings.coefficients
        bodyp = sol.body == 0
        b = geoms[0]["body"]
        n_head = b.static_nodes - 1
        n_win = b.rear_panels - b.flap_panels
        out = np.zeros_like(cp)
        cpb = cp[:, bodyp].copy()
        bare, separated = self._bare_head_cp(n_head)
        s = self.slant_separation()
        root = np.stack([g["body"].flap_root for g in geoms])[:, None, :]
        dist = np.hypot(*(sol.mid[:, bodyp][:, :n_head] - root).transpose(2, 0, 1))
        cpb[:, :n_head] = bare + np.exp(-dist / co.relief_length) * (cpb[:, :n_head] - bare) + s * separated
        cpb *= co.body_3d_factor
        win = slice(n_head, n_head + n_win)
        cpb[:, win] = (1.0 - s) * cpb[:, win] + s * self._base_pressure(geoms)[:, None]
        out[:, bodyp] = cpb
        return out

    def _base_pressure(self, geoms) -> np.ndarray:
        """Base pressure coefficient per configuration: lower when the flap turns the flow up."""
        co, car = self.settings.coefficients, self.settings.car
        p = [g["p"] for g in geoms]
        chord = np.array([q["flap_chord"] / 1000.0 for q in p])
        up = np.radians(np.array([q["flap_angle"] for q in p]) - car.rear_window_angle)   # above the horizontal
        fade = 1.0 - np.exp(-chord / FLAP_FADE_CHORD)
        return co.base_pressure - FLAP_BASE_FACTOR * fade * np.where(up > 0, np.sin(up), 0.0) ** 2

    @staticmethod
    def _panel_forces(sol, cp):
        """Pressure force of every panel per unit span over q, m (B, P, 2)."""
        return -cp[..., None] * sol.normal * sol.length[..., None]

    def _loads(self, geoms, sol, f, ws):
        """All outputs from the panel forces ``f`` (B, P, 2) of a batch."""
        st, car = self.settings, self.settings.car
        x = sol.mid[..., 0] - car.front_axle
        body = self._body_loads(geoms, sol, f, x)
        cla_wing, cda_wing, x_wing, y_wing = self._wing_loads(geoms, sol, f, x, ws)
        # axle loads from the moment about the front contact patch: lifts at their x, drags at their height
        moment = body["moment"] + x_wing * cla_wing - cda_wing * y_wing
        cla_total = body["cla"] + cla_wing
        cla_rear = moment / car.wheelbase
        cla_front = cla_total - cla_rear
        cda_total = body["cda"] + cda_wing
        q = st.dynamic_pressure
        with np.errstate(divide="ignore", invalid="ignore"):
            balance = np.where(np.abs(cla_total) > 1e-9, cla_front / cla_total, np.nan)
        return {"cla_total": cla_total, "cla_front": cla_front, "cla_rear": cla_rear, "cla_wing": cla_wing,
                "cla_body": body["cla"], "cda_total": cda_total, "cda_wing": cda_wing, "cda_body": body["cda"],
                "lift_to_drag": -cla_total / cda_total, "balance_front": balance,
                "downforce": -cla_total * q, "drag": cda_total * q, "cl_wing": ws.cl3d}

    def _body_loads(self, geoms, sol, f, x):
        """The body's CLA, CDA and pitching moment about the front contact patch (m^3).

        ``f`` carries the body's panel forces of :meth:`_body_pressures` (3-D
        factor already applied); they are spread over the car's width.
        """
        co, car = self.settings.coefficients, self.settings.car
        y = sol.mid[..., 1]
        bodyp = sol.body == 0
        up = np.stack([g["body"].upper_separation for g in geoms])
        lo = np.stack([g["body"].lower_separation for g in geoms])
        base_vec = lo - up                                                  # base line, clockwise
        base_len = np.hypot(base_vec[:, 0], base_vec[:, 1])
        base_n = np.stack([-base_vec[:, 1], base_vec[:, 0]], axis=1) / base_len[:, None]
        cp_base = self._base_pressure(geoms)
        f_base = -cp_base[:, None] * base_n * base_len[:, None]             # (B, 2), per q per width
        base_mid = 0.5 * (up + lo) - [car.front_axle, 0.0]
        w = car.width
        fy = f[..., 1][:, bodyp].sum(1) + f_base[:, 1]
        my = (x * f[..., 1])[:, bodyp].sum(1) + base_mid[:, 0] * f_base[:, 1]
        # drag: forebody baseline, rear-window/flap pressure drag, rear-pillar vortices, base drag
        rear = np.zeros(len(sol.body), dtype=bool)
        n_rear = geoms[0]["body"].rear_panels
        if n_rear:
            rear[np.flatnonzero(bodyp)[-n_rear:]] = True
        fx_rear = f[..., 0][:, rear].sum(1)
        h_rear = (y * f[..., 0])[:, rear].sum(1) / np.where(np.abs(fx_rear) > 1e-12, fx_rear, 1.0)
        d_rear = fx_rear * w
        phi = np.radians(car.rear_window_angle)
        # rear-pillar vortices of the attached window flow: their suction on the window gives drag and, normal
        # to the window, lift d / tan(phi); both go as the flow leaves the roof's edge
        d_vortex = (1.0 - self.slant_separation()) * co.slant_vortex_cd * car.frontal_area * np.sin(phi) ** 2
        l_vortex = d_vortex / np.tan(phi)
        win_mid = 0.5 * (car.roof_rear + car.hatch_edge) - [car.front_axle, 0.0]
        d_base = f_base[:, 0] * w
        d_fore = np.full(len(geoms), co.forebody_cd * car.frontal_area)
        moment = (my * w - d_fore * 0.5 * car.roof_height - d_rear * h_rear - d_base * base_mid[:, 1]
                  - d_vortex * win_mid[1] + l_vortex * win_mid[0])
        return {"cla": fy * w + l_vortex, "cda": d_fore + d_rear + d_base + d_vortex, "moment": moment}

    def _wing_loads(self, geoms, sol, f, x, ws):
        """The wing's CLA and CDA (3-D), and the x and height of its force, m."""
        st, co = self.settings, self.settings.coefficients
        zero = np.zeros(len(geoms))
        if not st.has_wing:
            return zero, zero, zero, zero
        wing = sol.body == 1
        s_area = st.span * st.chord
        cl3d = ws.cl3d
        cla_wing = cl3d * s_area
        fyw = f[..., 1][:, wing].sum(1)
        x_wing = (x * f[..., 1])[:, wing].sum(1) / np.where(np.abs(fyw) > 1e-12, fyw, 1.0)
        y_wing = sol.mid[:, wing, 1].mean(axis=1)
        re = reynolds(st.speed, st.chord, st.density, st.temperature)
        thick = np.array([g["thickness"] for g in geoms])
        cd_wing = (profile_drag(re, thick, cl3d, co.lift_drag_factor) + ws.lifting_line.induced_drag(cl3d)
                   + co.wing_parasite_cd + ws.extra_cd)
        # the 2-D wing's pressure force along the stream (its lift tilted by the body's downwash, and by the
        # upwash of the 3-D correction) is not counted: the centreline exaggerates the downwash over the
        # hatch, and the induced drag comes from the lifting line
        cda_wing = cd_wing * s_area
        return cla_wing, cda_wing, x_wing, y_wing

    def with_coefficients(self, **changes) -> "RearPackageModel":
        """A copy of the model with some coefficients changed."""
        return RearPackageModel(replace(self.settings, coefficients=replace(self.settings.coefficients, **changes)))
