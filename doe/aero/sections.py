"""Aerofoil sections: NACA 4-digit geometry and sections read from coordinate files.

A :class:`Section` is one contour at unit chord, leading edge at ``(0, 0)`` and
trailing edge at ``(1, 0)``, ordered the way the panel method wants it:
from the trailing edge along the lower surface to the leading edge, then along
the upper surface back to the trailing edge (clockwise). A finite trailing edge
is left open (the first and last points differ by the trailing-edge gap).

References
----------
.. [1] Abbott, I. H., von Doenhoff, A. E. (1959). Theory of Wing Sections.
   Dover, section 6.4 (NACA four-digit thickness and mean lines).
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy.interpolate import CubicSpline

from ..errors import AeroError

__all__ = ["Section", "naca4", "parse_naca", "read_coords", "section_from_points", "repanel",
           "DEFAULT_SECTION_PANELS", "MAX_TE_GAP"]

#: Default number of panels on a section (both surfaces together).
DEFAULT_SECTION_PANELS = 70
#: Largest trailing-edge gap, as a fraction of chord, before a contour counts as unclosed.
MAX_TE_GAP = 0.02
#: Cosine spacing of NACA sections in ``beta = pi (s u + (1 - s) u^2)``: s < 1 packs the leading edge, where
#: the suction peak that sets the stall lies (its value converges to 0.5 % at 60 panels, 4 % with s = 1).
LE_STRETCH = 0.7
_MONOTONE_SLACK = 1e-6   # chord fractions: rounding noise allowed in x along each surface


@dataclass(frozen=True)
class Section:
    """A section contour at unit chord (see the module docstring for the ordering).

    Attributes
    ----------
    x, y : ndarray, shape (n + 1,)
        Node coordinates in chords; ``n`` panels.
    name : str
        Label for output (``"NACA 4412"``, a file name, ...).
    thickness : float
        Largest thickness, in chords (used by the form-factor drag estimate).
    """

    x: np.ndarray
    y: np.ndarray
    name: str = ""
    thickness: float = 0.0

    @property
    def n_panels(self) -> int:
        """Number of panels."""
        return len(self.x) - 1

    @property
    def points(self) -> np.ndarray:
        """Nodes as an array of shape ``(n + 1, 2)``, in chords."""
        return np.column_stack([self.x, self.y])

    @property
    def te_gap(self) -> float:
        """Distance between the first and last nodes, in chords (0 for a closed trailing edge)."""
        return float(np.hypot(self.x[-1] - self.x[0], self.y[-1] - self.y[0]))


# ---------------------------------------------------------------------------
def parse_naca(code: str) -> tuple[float, float, float]:
    """Split a NACA 4-digit designation into camber, camber position and thickness.

    Parameters
    ----------
    code : str
        Four digits, e.g. ``"4412"`` (an optional ``"NACA"`` prefix is allowed).

    Returns
    -------
    m, p, t : float
        Maximum camber, its chordwise position and maximum thickness, in chords.
    """
    digits = str(code).upper().replace("NACA", "").strip()
    if len(digits) != 4 or not digits.isdigit():
        raise AeroError(f"NACA designation {code!r} must be four digits, e.g. 4412")
    m, p, t = int(digits[0]) / 100, int(digits[1]) / 10, int(digits[2:]) / 100
    if t <= 0:
        raise AeroError(f"NACA {digits}: thickness must be more than 0")
    if (m == 0) != (p == 0):
        raise AeroError(f"NACA {digits}: a cambered section needs a camber position (second digit) and vice versa")
    return m, p, t


def _camber_line(x, m, p):
    """Mean line ordinate and slope of the NACA 4-digit family (Abbott & von Doenhoff [1], §6.4)."""
    yc = np.zeros_like(x)
    dyc = np.zeros_like(x)
    if m > 0:
        fore = x < p
        yc[fore] = m / p**2 * (2 * p * x[fore] - x[fore] ** 2)
        dyc[fore] = 2 * m / p**2 * (p - x[fore])
        aft = ~fore
        yc[aft] = m / (1 - p) ** 2 * ((1 - 2 * p) + 2 * p * x[aft] - x[aft] ** 2)
        dyc[aft] = 2 * m / (1 - p) ** 2 * (p - x[aft])
    return yc, dyc


def naca4(m: float, p: float, t: float, n_panels: int = DEFAULT_SECTION_PANELS, closed_te: bool = True,
          name: str | None = None, le_stretch: float = None) -> Section:
    """A NACA 4-digit section from its published equations, cosine-spaced.

    Thickness ``y_t = 5 t (0.2969 sqrt(x) - 0.1260 x - 0.3516 x^2 + 0.2843 x^3 + a4 x^4)``
    with ``a4 = -0.1015`` (finite trailing edge, as published) or ``-0.1036``
    (closed trailing edge), laid perpendicular to the mean line [1]_.

    Parameters
    ----------
    m : float
        Maximum camber, in chords (0.04 for a NACA 4412); 0 to 0.095.
    p : float
        Chordwise position of the maximum camber, in chords (0.4 for a 4412); ignored when ``m == 0``.
    t : float
        Maximum thickness, in chords (0.12 for a 4412); 0.01 to 0.40.
    n_panels : int
        Panels on the whole contour (even; at least 20).
    closed_te : bool
        Closed trailing edge (``a4 = -0.1036``) or the published finite one.
    name : str, optional
        Label; default ``"NACA mptt"`` when the values are whole digits.
    le_stretch : float, optional
        ``s`` of the spacing ``beta = pi (s u + (1 - s) u^2)``, 0.3 to 1 (default :data:`LE_STRETCH`;
        1 is plain cosine spacing).

    Returns
    -------
    Section

    References
    ----------
    .. [1] Abbott, I. H., von Doenhoff, A. E. (1959). Theory of Wing Sections. Dover, §6.4.
    """
    if not (0.0 <= m <= 0.095):
        raise AeroError(f"NACA camber m = {m:g} chords is outside 0 to 0.095")
    if m > 0 and not (0.05 <= p <= 0.95):
        raise AeroError(f"NACA camber position p = {p:g} chords is outside 0.05 to 0.95")
    if not (0.01 <= t <= 0.40):
        raise AeroError(f"NACA thickness t = {t:g} chords is outside 0.01 to 0.40")
    n_panels = _check_panels(n_panels)
    half = n_panels // 2
    u = np.linspace(0.0, 1.0, half + 1)
    k = LE_STRETCH if le_stretch is None else float(le_stretch)
    if not 0.3 <= k <= 1.0:
        raise AeroError(f"le_stretch = {k:g} is outside 0.3 to 1")
    beta = np.pi * (k * u + (1.0 - k) * u * u)
    xc = 0.5 * (1.0 - np.cos(beta))                       # cosine spacing, LE to TE, denser at the LE
    a4 = -0.1036 if closed_te else -0.1015
    yt = 5 * t * (0.2969 * np.sqrt(xc) - 0.1260 * xc - 0.3516 * xc**2 + 0.2843 * xc**3 + a4 * xc**4)
    yc, dyc = _camber_line(xc, m, p)
    th = np.arctan(dyc)
    xu, yu = xc - yt * np.sin(th), yc + yt * np.cos(th)
    xl, yl = xc + yt * np.sin(th), yc - yt * np.cos(th)
    x = np.concatenate([xl[::-1], xu[1:]])
    y = np.concatenate([yl[::-1], yu[1:]])
    if closed_te:
        x[0], y[0], x[-1], y[-1] = 1.0, 0.0, 1.0, 0.0
    if name is None:
        name = _naca_name(m, p, t)
    return Section(x, y, name, float(t))


def _naca_name(m, p, t) -> str:
    digits = (m * 100, p * 10 if m > 0 else 0.0, t * 100)
    if all(abs(d - round(d)) < 1e-9 for d in digits) and digits[2] < 100:
        return f"NACA {int(round(digits[0]))}{int(round(digits[1]))}{int(round(digits[2])):02d}"
    return f"NACA-type m={m:.4g} p={p:.3g} t={t:.3g}"


def _check_panels(n_panels) -> int:
    if isinstance(n_panels, bool) or not isinstance(n_panels, (int, np.integer)) or n_panels < 20:
        raise AeroError(f"panel count {n_panels!r} must be a whole number of at least 20")
    return int(n_panels) + (int(n_panels) % 2)


# ---------------------------------------------------------------------------
def read_coords(path, n_panels: int | None = DEFAULT_SECTION_PANELS) -> Section:
    """Read a section from a plain text file of ``x y`` pairs.

    The file holds one contour, one point per line (two numbers separated by
    spaces, tabs or a comma), from the trailing edge round the leading edge and
    back to the trailing edge, in either direction. Blank lines and lines
    starting with ``#`` are skipped, and a first line that is not two numbers is
    taken as the section's name. The contour is scaled to unit chord.

    Parameters
    ----------
    path : str or Path
    n_panels : int or None
        Repanel to this many cosine-spaced panels; None keeps the file's points.

    Returns
    -------
    Section

    Raises
    ------
    AeroError
        When the file cannot be read, a line is not two numbers, or the
        contour is unclosed, badly ordered or self-intersecting.
    """
    path = Path(path)
    try:
        lines = path.read_text(encoding="utf-8-sig").splitlines()
    except (OSError, UnicodeDecodeError) as exc:
        raise AeroError(f"{path}: cannot read the section file ({exc})") from exc
    name, rows = path.stem, []
    for number, line in enumerate(lines, start=1):
        text = line.strip()
        if not text or text.startswith("#"):
            continue
        parts = text.replace(",", " ").split()
        try:
            values = [float(v) for v in parts]
        except ValueError:
            values = None
        if values is None or len(values) != 2:
            if not rows and name == path.stem:
                name = text
                continue
            raise AeroError(f"{path}:{number}: expected two numbers 'x y', got {text[:40]!r}")
        rows.append(values)
    if len(rows) < 12:
        raise AeroError(f"{path}: a section needs at least 12 points, found {len(rows)}")
    pts = np.array(rows, dtype=float)
    if not np.all(np.isfinite(pts)):
        raise AeroError(f"{path}: coordinates must be finite numbers")
    section = section_from_points(pts, name=name, where=str(path))
    return repanel(section, n_panels) if n_panels is not None else section


def section_from_points(points, name: str = "", where: str = "<points>") -> Section:
    """Check a contour and bring it to unit chord and the panel method's ordering.

    Parameters
    ----------
    points : array_like, shape (n, 2)
        Contour from the trailing edge round the leading edge back to the
        trailing edge, in either direction, any scale and incidence.
    name : str
    where : str
        Where the points come from, for messages.

    Returns
    -------
    Section
    """
    pts = np.asarray(points, dtype=float)
    keep = np.r_[True, np.any(np.abs(np.diff(pts, axis=0)) > 0, axis=1)]
    pts = pts[keep]                                          # repeated points (a doubled LE) are dropped
    te = 0.5 * (pts[0] + pts[-1])
    i_le = int(np.argmax(np.hypot(*(pts - te).T)))
    chord_vec = te - pts[i_le]
    chord = float(np.hypot(*chord_vec))
    if chord <= 0 or i_le in (0, len(pts) - 1):
        raise AeroError(f"{where}: points are badly ordered: the contour must start and end at the "
                        "trailing edge and pass the leading edge in between")
    gap = np.hypot(*(pts[-1] - pts[0])) / chord
    if gap > MAX_TE_GAP:
        raise AeroError(f"{where}: the contour is not closed: its ends are {gap:.3f} chords apart "
                        f"(at most {MAX_TE_GAP} allowed); start and end at the trailing edge")
    ang = np.arctan2(chord_vec[1], chord_vec[0])
    rot = np.array([[np.cos(ang), np.sin(ang)], [-np.sin(ang), np.cos(ang)]])
    local = (pts - pts[i_le]) @ rot.T / chord               # LE at (0, 0), TE mid-point at (1, 0)
    _check_order(local, i_le, where)
    _check_simple(local, where)
    if _signed_area(local) > 0:                              # counter-clockwise (Selig order): reverse
        local = local[::-1]
    thickness = _max_thickness(local)
    return Section(local[:, 0].copy(), local[:, 1].copy(), name, thickness)


def _check_order(local, i_le, where) -> None:
    first, second = local[: i_le + 1, 0], local[i_le:, 0]
    if np.any(np.diff(first) > _MONOTONE_SLACK) or np.any(np.diff(second) < -_MONOTONE_SLACK):
        raise AeroError(f"{where}: points are badly ordered: they must run from the trailing edge round the "
                        "leading edge and back to the trailing edge, one surface after the other")
    upper_first = np.mean(local[1:i_le, 1]) if i_le > 1 else 0.0
    lower_next = np.mean(local[i_le + 1:-1, 1]) if i_le < len(local) - 2 else 0.0
    if abs(upper_first - lower_next) < 1e-12:
        raise AeroError(f"{where}: the two surfaces coincide; the contour has no thickness")


def _signed_area(p) -> float:
    x, y = p[:, 0], p[:, 1]
    return 0.5 * float(np.sum(x * np.roll(y, -1) - np.roll(x, -1) * y))


def _check_simple(p, where) -> None:
    """Reject a contour whose segments cross (the closing trailing-edge segment included)."""
    closed = np.vstack([p, p[:1]])
    a, b = closed[:-1], closed[1:]
    n = len(a)
    d = b - a

    def cross(u, v):
        return u[..., 0] * v[..., 1] - u[..., 1] * v[..., 0]

    ai, di = a[:, None, :], d[:, None, :]
    aj, dj = a[None, :, :], d[None, :, :]
    denom = cross(di, dj)
    with np.errstate(divide="ignore", invalid="ignore"):
        s = cross(aj - ai, dj) / denom
        u = cross(aj - ai, di) / denom
    i, j = np.meshgrid(np.arange(n), np.arange(n), indexing="ij")
    far = (np.abs(i - j) > 1) & ~((i == 0) & (j == n - 1)) & ~((j == 0) & (i == n - 1)) & (i < j)
    hits = far & (np.abs(denom) > 0) & (s > 0) & (s < 1) & (u > 0) & (u < 1)
    if np.any(hits):
        k, m = np.argwhere(hits)[0]
        raise AeroError(f"{where}: the contour crosses itself (segments {k + 1} and {m + 1})")


def _max_thickness(local) -> float:
    i_le = int(np.argmin(local[:, 0]))
    lower, upper = local[: i_le + 1][::-1], local[i_le:]
    xs = np.linspace(0.0, 1.0, 201)
    yl = np.interp(xs, lower[:, 0], lower[:, 1])
    yu = np.interp(xs, upper[:, 0], upper[:, 1])
    return float(np.max(np.abs(yu - yl)))


def repanel(section: Section, n_panels: int = DEFAULT_SECTION_PANELS) -> Section:
    """Redistribute a section's nodes: cosine spacing in arc length on each surface.

    Each surface is interpolated with a cubic spline in arc length, so the
    shape is kept while the panel count changes (for grid-convergence studies
    and for coordinate files with uneven points).

    Parameters
    ----------
    section : Section
    n_panels : int
        Panels on the whole contour (even; at least 20).

    Returns
    -------
    Section
    """
    n_panels = _check_panels(n_panels)
    pts = section.points
    i_le = int(np.argmin(pts[:, 0]))
    half = n_panels // 2
    beta = np.linspace(0.0, np.pi, half + 1)
    out = []
    for part in (pts[: i_le + 1], pts[i_le:]):
        s = np.r_[0.0, np.cumsum(np.hypot(*np.diff(part, axis=0).T))]
        spline = CubicSpline(s, part, axis=0)
        out.append(spline(s[-1] * 0.5 * (1.0 - np.cos(beta))))   # dense at both ends of each surface
    new = np.vstack([out[0], out[1][1:]])
    return Section(new[:, 0], new[:, 1], section.name, section.thickness)
