"""Forces of a finished rear-package run: read the force-coefficient files, judge steadiness, scale.

Definitions (the same as the built-in model's outputs, :data:`doe.aero.OUTPUTS`,
from a 2-D section):

* ``forceCoeffs`` writes, for the body and the wing patches separately,
  ``Cl = Fy / (q A)``, ``Cd = Fx / (q A)`` and ``Cm = Mz / (q A l)`` (read
  from ``CmPitch`` times the z component of the pitch axis in the file's header) with
  ``A`` the extrusion depth (so ``Cl`` is the force per metre of width over
  ``q``, in m^2 per m) and ``l = 1 m``; ``Mz`` is taken about the front tyre's
  contact patch (``x`` = front axle, ``y = 0``).
* Spread over a width: the body's by the car's ``width``, the wing's by its
  ``span``::

      cla_body = Cl_body * width        cla_wing = Cl_wing * span
      cda_body = Cd_body * width        cda_wing = Cd_wing * span
      cla_total = cla_body + cla_wing   cda_total = cda_body + cda_wing
      cla_rear  = (Cm_body * width + Cm_wing * span) / wheelbase
      cla_front = cla_total - cla_rear

  (the rear axle's share from the moment about the front contact patch, lifts
  at their ``x``, drags at their height, as in the built-in model).

These are **2-D numbers spread over a width**: no flow round the body's sides,
no wing tips. The built-in model scales the body's centreline lift by its
``body_3d_factor`` (0.12 by default) and gives the wing its 3-D lift; a 2-D
section's body lift is therefore several times the model's, and the wing's
lift is its 2-D (infinite-span) value. Compare trends and ranks, not levels.
"""
from __future__ import annotations

from dataclasses import dataclass
import re
from pathlib import Path

import numpy as np

__all__ = ["read_force_coefficients", "ForceHistory", "WindowStats", "window_stats",
           "RESPONSES", "find_coefficient_file", "response_series",
           "Verdict", "steady_verdict", "WATCHED"]

#: Responses a run reports (each also as ``<name>_std``): the built-in model's names.
RESPONSES = ("cla_total", "cla_front", "cla_rear", "cla_wing", "cla_body", "cda_total", "cda_wing", "cda_body")


@dataclass
class ForceHistory:
    """One patch's coefficients against iteration."""

    iteration: np.ndarray
    cl: np.ndarray
    cd: np.ndarray
    cm: np.ndarray

    def __len__(self):
        return len(self.iteration)


def find_coefficient_file(post: Path, name: str) -> Path | None:
    """The coefficient file of function object ``name`` under ``postProcessing`` (any start time)."""
    folder = post / name
    if not folder.is_dir():
        return None
    for fname in ("coefficient.dat", "forceCoeffs.dat"):
        hits = sorted(folder.glob(f"*/{fname}"), key=lambda p: float(p.parent.name)
                      if _is_number(p.parent.name) else 0.0)
        if hits:
            return hits[-1]
    return None


def _is_number(s: str) -> bool:
    try:
        float(s)
        return True
    except ValueError:
        return False


def read_force_coefficients(path: Path) -> ForceHistory:
    """Read a ``forceCoeffs`` output file (``forceCoeffs.dat`` of v1912, ``coefficient.dat`` later).

    The column order differs between versions; the header line naming
    ``Time``, ``Cm``, ``Cd``, ``Cl`` decides. Non-numeric values (``nan``)
    are kept as NaN.

    Raises
    ------
    ValueError
        When the file has no header with those columns or no rows.
    """
    header = None
    axis_z = 1.0
    rows = []
    with open(path, encoding="utf-8", errors="replace") as fh:
        for line in fh:
            s = line.strip()
            if not s:
                continue
            if s.startswith("#"):
                words = s.lstrip("#").split()
                if "Time" in words and "Cl" in words and "Cd" in words:
                    header = words
                m = re.match(r"#\s*pitchAxis\s*:\s*\(([^)]*)\)", s)
                if m:
                    axis_z = float(m.group(1).split()[2])
                continue
            parts = s.split()
            try:
                rows.append([float(w) for w in parts])
            except ValueError:
                continue
    if header is None:
        raise ValueError(f"{path}: no header line naming Time, Cd and Cl")
    if not rows:
        raise ValueError(f"{path}: no rows")
    width = min(len(r) for r in rows)
    data = np.array([r[:width] for r in rows])

    def col(name):
        k = header.index(name) if name in header else None
        return data[:, k] if k is not None and k < width else np.full(len(data), np.nan)

    # the pitching moment about +z (x rearward, y up): v1912's patched forceCoeffs writes CmPitch about
    # the pitch axis named in its header, (0 0 -1) for these directions; older files write Cm about +z
    cm = col("CmPitch") * axis_z if "CmPitch" in header else col("Cm")
    return ForceHistory(col("Time").astype(int), col("Cl"), col("Cd"), cm)


@dataclass(frozen=True)
class WindowStats:
    """Mean and spread of a coefficient over the last iterations.

    Attributes
    ----------
    mean, std : float
    drift : float
        Mean of the window's second half minus that of its first half.
    n : int
        Iterations in the window.
    """

    mean: float
    std: float
    drift: float
    n: int


def window_stats(values: np.ndarray, window: int) -> WindowStats:
    """Statistics of the last ``window`` values (all of them when fewer)."""
    v = np.asarray(values, dtype=float)[-max(2, int(window)):]
    half = len(v) // 2
    return WindowStats(float(v.mean()), float(v.std(ddof=1)), float(v[half:].mean() - v[:half].mean()), len(v))


def response_series(body: ForceHistory, wing: ForceHistory | None, width: float, span: float,
                    wheelbase: float) -> dict:
    """Each response at every iteration both histories share (see the module docstring for the definitions).

    Parameters
    ----------
    body, wing : ForceHistory
        ``wing`` None for a case without a wing.
    width, span, wheelbase : float
        m.

    Returns
    -------
    dict of str to ndarray
        ``iteration`` and one series per name of :data:`RESPONSES`.
    """
    if wing is None:
        it = body.iteration
        b = body
        w = ForceHistory(it, *(np.zeros(len(it)),) * 3)
    else:
        it, ib, iw = np.intersect1d(body.iteration, wing.iteration, return_indices=True)
        b = ForceHistory(it, body.cl[ib], body.cd[ib], body.cm[ib])
        w = ForceHistory(it, wing.cl[iw], wing.cd[iw], wing.cm[iw])
    out = {"iteration": it,
           "cla_body": b.cl * width, "cla_wing": w.cl * span,
           "cda_body": b.cd * width, "cda_wing": w.cd * span,
           "cla_rear": (b.cm * width + w.cm * span) / wheelbase}
    out["cla_total"] = out["cla_body"] + out["cla_wing"]
    out["cda_total"] = out["cda_body"] + out["cda_wing"]
    out["cla_front"] = out["cla_total"] - out["cla_rear"]
    return out


#: A response oscillates when its spread exceeds this many times its drift tolerance.
OSCILLATION_FACTOR = 5.0
#: Responses whose windowed mean must have settled before a run counts as converged.
WATCHED = ("cla_total", "cda_total", "cla_wing", "cla_rear")


@dataclass(frozen=True)
class Verdict:
    """Whether a run's forces settled, and how much they still move.

    Attributes
    ----------
    settled : bool
        Every watched response's windowed mean drifted less than its tolerance.
    oscillating : bool
        Some watched response's spread over the window exceeds
        :data:`OSCILLATION_FACTOR` times its tolerance (the mean is reported
        with its spread; the solution is not steady).
    drift, std : dict
        Per watched response, m^2.
    iterations : int
    """

    settled: bool
    oscillating: bool
    drift: dict
    std: dict
    iterations: int


def steady_verdict(series: dict, window: int, min_iterations: int, rel_tol: float = 0.002,
                   abs_tol: float = 0.002) -> Verdict:
    """Judge the last ``window`` iterations of the response series.

    A response has settled when the means of the window's two halves differ by
    less than ``max(rel_tol * |mean|, abs_tol)`` (m^2); it oscillates when the
    window's standard deviation exceeds :data:`OSCILLATION_FACTOR` times it. Nothing settles before
    ``min_iterations`` or before a full window. (The windowed-mean rule is the
    one of OpenFOAM's runTimeControl ``average`` condition, applied here so that
    the verdict can be tested and recorded; common practice, no source.)
    """
    its = series["iteration"]
    n = int(its[-1]) if len(its) else 0
    drift, std = {}, {}
    settled = n >= min_iterations and len(its) >= window
    oscillating = False
    for name in WATCHED:
        st = window_stats(series[name], window)
        tol = max(rel_tol * abs(st.mean), abs_tol)
        drift[name], std[name] = st.drift, st.std
        settled = settled and abs(st.drift) < tol
        oscillating = oscillating or st.std > OSCILLATION_FACTOR * tol
    return Verdict(bool(settled), bool(oscillating), drift, std, n)
