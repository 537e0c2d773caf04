"""Mesh of the rear-package section: gmsh, 2-D, extruded one cell deep, written for gmshToFoam.

The domain is a rectangle over a moving ground (``y = 0``): inlet upstream,
outlet downstream, a slip top far above. The body and the wing are holes in
it, their walls lined with quad layers (gmsh's boundary-layer field) and
triangles elsewhere; the triangles grow away from the walls and stay fine in
the wake behind the car. The 2-D mesh is extruded one cell in ``z`` (prisms and
hexahedra), so that OpenFOAM can run it as a 2-D case with ``empty`` sides.

Patches (gmsh physical groups): ``inlet``, ``outlet``, ``top``, ``ground``,
``body``, ``wing``, ``front``, ``back``; the volume is ``fluid``.
"""
from __future__ import annotations

import signal
from contextlib import contextmanager
from dataclasses import dataclass, asdict

import numpy as np

__all__ = ["MeshSettings", "MESH_LEVELS", "split_at_corners", "write_mesh", "gmsh_session"]


@contextmanager
def gmsh_session():
    """gmsh initialised, then finalised, with the process's signal handling put back.

    gmsh's initialisation resets SIGPIPE to its default action (ending the
    process) at the C level, where Python ignores it; a later write to a
    closed pipe or socket would then kill the whole program (a test run, a
    worker). SIGPIPE and SIGINT are restored after initialising and after
    finalising.
    """
    import gmsh

    saved = {sig: signal.getsignal(sig) for sig in (signal.SIGPIPE, signal.SIGINT)}

    def restore():
        for sig, handler in saved.items():
            if handler is not None:
                signal.signal(sig, handler)

    gmsh.initialize(["-noenv"], interruptible=False)
    restore()
    try:
        gmsh.option.setNumber("General.Terminal", 0)
        yield gmsh
    finally:
        gmsh.finalize()
        restore()


@dataclass(frozen=True)
class MeshSettings:
    """Sizes of the mesh, m.

    Attributes
    ----------
    body_size, wing_size, flap_size : float
        Cell size along the body, the wing and the flap (and the base edges).
    body_first_layer, wing_first_layer : float
        Height of the first quad layer on the walls.
    body_layers_thickness, wing_layers_thickness : float
        Total height of the quad layers.
    layer_ratio : float
        Growth of the quad layers.
    wake_size : float
        Cell size in the wake box behind the car.
    far_size : float
        Cell size at the domain's edges.
    upstream, downstream, height : float
        Domain: inlet ahead of the bumper, outlet behind the car's rear end, top above the ground.
    depth : float
        Extrusion depth (one cell), m; forces are reported per metre of width.
    """

    body_size: float = 0.025
    wing_size: float = 0.0025
    flap_size: float = 0.003
    body_first_layer: float = 0.002
    wing_first_layer: float = 0.0003
    body_layers_thickness: float = 0.02
    wing_layers_thickness: float = 0.006
    layer_ratio: float = 1.25
    wake_size: float = 0.04
    wing_field_size: float = 0.03
    far_size: float = 1.0
    upstream: float = 10.0
    downstream: float = 20.0
    height: float = 10.0
    depth: float = 0.1

    def scaled(self, factor: float) -> "MeshSettings":
        """The same mesh with every cell size (not the domain, not the first layers) times ``factor``."""
        keys = ("body_size", "wing_size", "flap_size", "wake_size", "wing_field_size", "far_size")
        return MeshSettings(**{**asdict(self), **{k: getattr(self, k) * factor for k in keys}})


#: Named meshes: ``coarse`` for tests and quick looks, ``medium`` for the data set, ``fine`` to check it.
MESH_LEVELS = {
    "coarse": MeshSettings(body_size=0.04, wing_size=0.003, flap_size=0.005, wake_size=0.08,
                           wing_field_size=0.05),
    "medium": MeshSettings(),
    "fine": MeshSettings().scaled(0.7),       # for checking the medium mesh's discretisation error
}


def split_at_corners(poly: np.ndarray, corners) -> list:
    """Pieces of a closed polygon between its corner nodes (each piece includes both ends).

    Parameters
    ----------
    poly : ndarray, shape (n, 2)
        Closed polygon, first node not repeated.
    corners : sequence of int
        Indices of corner nodes; at least one (the first is used when empty).

    Returns
    -------
    list of ndarray of int
        Node indices of each piece, in order; the last index of a piece is the
        first of the next, and the last piece ends at the first piece's start.
    """
    n = len(poly)
    cs = sorted(set(int(c) % n for c in corners)) or [0]
    pieces = []
    for k, c in enumerate(cs):
        nxt = cs[(k + 1) % len(cs)]
        stop = nxt if nxt > c else nxt + n
        pieces.append(np.arange(c, stop + 1) % n)
    return pieces


def _add_outline(geo, poly, corners, size):
    """Points and splines of one closed outline; returns the curve tags and the corner point tags."""
    pts = [geo.addPoint(float(x), float(y), 0.0, size) for x, y in poly]
    curves = []
    for piece in split_at_corners(poly, corners):
        tags = [pts[i] for i in piece]
        curves.append(geo.addSpline(tags) if len(tags) > 2 else geo.addLine(*tags))
    return curves, [pts[i] for i in corners]


def write_mesh(outlines, settings: MeshSettings, path, car_length: float, roof_height: float,
               corner_turn_deg: float = 20.0) -> dict:
    """Mesh the section round ``outlines`` and write it (gmsh format 2.2) to ``path``.

    Parameters
    ----------
    outlines : doe.aero.outline.RearPackageOutlines
    settings : MeshSettings
    path : str or Path
        The ``.msh`` file to write.
    car_length, roof_height : float
        For the wake box, m.
    corner_turn_deg : float
        Turn that counts as a sharp edge (the outline is split there into splines).

    Returns
    -------
    dict
        ``cells_2d`` (elements of the 2-D mesh, i.e. cells of the case),
        ``body_wall_faces``, ``wing_wall_faces``, gmsh's version.
    """
    s = settings
    with gmsh_session() as gmsh:
        gmsh.option.setNumber("General.NumThreads", 1)
        gmsh.model.add("rear_package")
        geo = gmsh.model.geo
        x0, x1 = -s.upstream, car_length + s.downstream
        corners = [geo.addPoint(x, y, 0.0, s.far_size if y > 0 else s.far_size / 2)
                   for x, y in ((x0, 0.0), (x1, 0.0), (x1, s.height), (x0, s.height))]
        ground = geo.addLine(corners[0], corners[1])
        outlet = geo.addLine(corners[1], corners[2])
        top = geo.addLine(corners[2], corners[3])
        inlet = geo.addLine(corners[3], corners[0])
        outer = geo.addCurveLoop([ground, outlet, top, inlet])
        hatch = int(np.argmin(np.hypot(*(outlines.body - outlines.hatch_edge).T)))
        # quad layers run from just ahead of the underbody's end (ending them at that sharp edge
        # inverts a cell) to the hatch edge
        arc = np.r_[0.0, np.cumsum(np.hypot(*np.diff(outlines.body, axis=0).T))]
        start = int(np.searchsorted(arc, 2.5 * s.body_layers_thickness))
        sharp = outlines.corners("body", corner_turn_deg)
        body_corner_idx = np.union1d(sharp, [0, start, hatch])
        body_curves, split_pts = _add_outline(geo, outlines.body, body_corner_idx, s.body_size)
        body_corner_pts = [p for i, p in zip(body_corner_idx, split_pts) if i in sharp or i in (0, hatch)]
        layered = body_curves[1:int(np.searchsorted(body_corner_idx, hatch))]
        loops = [outer, geo.addCurveLoop(body_curves)]
        wing_curves, wing_corner_pts = [], []
        if outlines.wing is not None:
            te = 0                                       # the wing outline starts at its trailing edge
            le = int(np.argmax(np.hypot(*(outlines.wing - outlines.wing[te]).T)))
            wing_corner_idx = np.array([te, le])
            wing_curves, wing_corner_pts = _add_outline(geo, outlines.wing, wing_corner_idx, s.wing_size)
            loops.append(geo.addCurveLoop(wing_curves))
        surface = geo.addPlaneSurface(loops)
        geo.synchronize()
        _size_fields(s, body_curves, layered, wing_curves, body_corner_pts, wing_corner_pts,
                     car_length, roof_height)
        ext = geo.extrude([(2, surface)], 0.0, 0.0, s.depth, numElements=[1], recombine=True)
        geo.synchronize()
        _physical_groups(surface, ext, ground, outlet, top, inlet, body_curves, wing_curves)
        gmsh.option.setNumber("Mesh.MeshSizeExtendFromBoundary", 0)
        gmsh.option.setNumber("Mesh.MeshSizeFromPoints", 0)
        gmsh.option.setNumber("Mesh.MeshSizeFromCurvature", 0)
        gmsh.option.setNumber("Mesh.Algorithm", 6)
        gmsh.option.setNumber("Mesh.MshFileVersion", 2.2)
        gmsh.model.mesh.generate(2)
        gmsh.model.mesh.generate(3)
        info = _count(surface, body_curves, wing_curves)
        info["gmsh_version"] = gmsh.__version__
        gmsh.write(str(path))
    return info


def _size_fields(s, body_curves, layered, wing_curves, body_corner_pts, wing_corner_pts, length, roof):
    """Cell sizes: fine at the walls, growing away; a wake box; quad layers on ``layered`` and the wing.

    The flap and the base get no quad layers: the flap is thinner than the
    layers would be, and the base lies in separated flow.
    """
    import gmsh

    f = gmsh.model.mesh.field
    fields = []

    def threshold(curves, size_min, size_max, dist_min, dist_max):
        d = f.add("Distance")
        f.setNumbers(d, "CurvesList", curves)
        f.setNumber(d, "Sampling", 200)
        t = f.add("Threshold")
        f.setNumber(t, "InField", d)
        f.setNumber(t, "SizeMin", size_min)
        f.setNumber(t, "SizeMax", size_max)
        f.setNumber(t, "DistMin", dist_min)
        f.setNumber(t, "DistMax", dist_max)
        f.setNumber(t, "StopAtDistMax", 1)      # no say beyond DistMax: the other fields decide there
        fields.append(t)

    threshold(body_curves, s.body_size, s.far_size, 0.02, 8.0)
    if wing_curves:
        threshold(wing_curves, s.wing_size, s.wing_field_size, 0.005, 0.25)
    # the flap and the base edges: fine near the sharp edges where the flow separates
    pd = f.add("Distance")
    f.setNumbers(pd, "PointsList", body_corner_pts)
    pt = f.add("Threshold")
    f.setNumber(pt, "InField", pd)
    f.setNumber(pt, "SizeMin", s.flap_size)
    f.setNumber(pt, "SizeMax", s.far_size)
    f.setNumber(pt, "DistMin", 0.01)
    f.setNumber(pt, "DistMax", 3.0)
    fields.append(pt)
    box = f.add("Box")
    f.setNumber(box, "VIn", s.wake_size)
    f.setNumber(box, "VOut", s.far_size)
    f.setNumber(box, "XMin", length - 0.5)
    f.setNumber(box, "XMax", length + 3.0)
    f.setNumber(box, "YMin", 0.0)
    f.setNumber(box, "YMax", roof + 0.3)
    f.setNumber(box, "Thickness", 2.0)
    fields.append(box)
    under = f.add("Box")              # the gap under the car: enough cells across the clearance
    f.setNumber(under, "VIn", 2.0 * s.body_size)
    f.setNumber(under, "VOut", s.far_size)
    f.setNumber(under, "XMin", -0.5)
    f.setNumber(under, "XMax", length + 0.5)
    f.setNumber(under, "YMin", 0.0)
    f.setNumber(under, "YMax", 0.3)
    f.setNumber(under, "Thickness", 1.0)
    fields.append(under)
    m = f.add("Min")
    f.setNumbers(m, "FieldsList", fields)
    f.setAsBackgroundMesh(m)
    for curves, first, thick, size, fans in (
            (layered, s.body_first_layer, s.body_layers_thickness, s.body_size, []),
            (wing_curves, s.wing_first_layer, s.wing_layers_thickness, s.wing_size, wing_corner_pts[:1])):
        if not curves:
            continue
        bl = f.add("BoundaryLayer")
        f.setNumbers(bl, "CurvesList", curves)
        f.setNumber(bl, "Size", first)
        f.setNumber(bl, "Ratio", s.layer_ratio)
        f.setNumber(bl, "Thickness", thick)
        f.setNumber(bl, "Quads", 1)
        if fans:
            f.setNumbers(bl, "FanPointsList", fans)
        f.setAsBoundaryLayer(bl)


def _physical_groups(surface, ext, ground, outlet, top, inlet, body_curves, wing_curves):
    """Name the extruded faces after the curves they were swept from."""
    import gmsh

    # geo.extrude returns: the top surface, the volume, then one surface per boundary curve in loop order
    back = ext[0][1]
    volume = ext[1][1]
    swept = [t for d, t in ext[2:] if d == 2]
    curves = [ground, outlet, top, inlet] + list(body_curves) + list(wing_curves)
    by_curve = dict(zip(curves, swept))
    groups = {"ground": [ground], "outlet": [outlet], "top": [top], "inlet": [inlet],
              "body": list(body_curves), "wing": list(wing_curves)}
    for name, cs in groups.items():
        if cs:
            gmsh.model.addPhysicalGroup(2, [by_curve[c] for c in cs], name=name)
    gmsh.model.addPhysicalGroup(2, [surface], name="front")
    gmsh.model.addPhysicalGroup(2, [back], name="back")
    gmsh.model.addPhysicalGroup(3, [volume], name="fluid")


def _count(surface, body_curves, wing_curves) -> dict:
    import gmsh

    types, tags, _ = gmsh.model.mesh.getElements(2, surface)
    cells = int(sum(len(t) for t in tags))

    def edges(curves):
        return int(sum(len(t) for c in curves for t in gmsh.model.mesh.getElements(1, c)[1]))

    return {"cells_2d": cells, "body_wall_faces": edges(body_curves), "wing_wall_faces": edges(wing_curves)}
