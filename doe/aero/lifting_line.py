"""Three-dimensional wing corrections: Prandtl's lifting line (Glauert's Fourier solution) and endplates.

A straight, untwisted wing of span ``b`` whose sections all have the lift
slope ``a0`` (per radian) carries a lift coefficient

    C_L = a0 (alpha - alpha_L0) / (1 + a0 (1 + tau) / (pi AR)),
    C_Di = C_L^2 (1 + delta) / (pi AR),

with ``tau = delta = 0`` for an elliptic planform. Glauert's method gives
``tau`` and ``delta`` for any chord distribution by collocating the monoplane
equation at stations ``theta_i`` across the span. Endplates are represented by
an effective aspect ratio ``AR_eff = AR (1 + 1.9 h / b)``.

Assumptions and limits: attached flow, small angles, a single straight lifting
line in free air (the ground's effect on the trailing vortices is not
modelled: the two-dimensional ground effect is in the panel solution), no
sweep, no yaw.

References
----------
.. [1] Glauert, H. (1926). The Elements of Aerofoil and Airscrew Theory.
   Cambridge University Press, ch. 11 (Fourier solution of the lifting line).
.. [2] Anderson, J. D. (2011). Fundamentals of Aerodynamics, 5th ed.
   McGraw-Hill, §5.3 (general lift distribution, eqs. 5.52-5.62).
.. [3] Katz, J. (1995). Race Car Aerodynamics. Bentley, ch. 6 (endplate
   effective aspect ratio, credited to Hoerner).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import AeroError

__all__ = ["LiftingLine", "glauert", "endplate_aspect_ratio", "ENDPLATE_FACTOR", "DEFAULT_TERMS"]

#: Coefficient of the endplate correction AR_eff = AR (1 + 1.9 h / b) (Katz 1995 [3]).
ENDPLATE_FACTOR = 1.9
#: Odd Fourier terms kept in Glauert's series (enough for 3 significant figures of delta at AR 2-20).
DEFAULT_TERMS = 24


@dataclass(frozen=True)
class LiftingLine:
    """Glauert's solution for one or several wings.

    Attributes
    ----------
    lift_slope : ndarray
        3-D lift-curve slope ``dC_L/dalpha``, per radian.
    tau : ndarray
        Lift-slope factor: ``lift_slope = a0 / (1 + a0 (1 + tau) / (pi AR))``.
    delta : ndarray
        Induced-drag factor: ``C_Di = C_L^2 (1 + delta) / (pi AR)`` (span efficiency ``1 / (1 + delta)``).
    aspect_ratio : ndarray
        The aspect ratio the solution was made for.
    """

    lift_slope: np.ndarray
    tau: np.ndarray
    delta: np.ndarray
    aspect_ratio: np.ndarray

    def lift_factor(self, a0) -> np.ndarray:
        """Ratio of 3-D to 2-D lift at the same incidence, ``lift_slope / a0``."""
        return self.lift_slope / np.asarray(a0, dtype=float)

    def induced_drag(self, cl) -> np.ndarray:
        """Induced-drag coefficient for the wing lift coefficient ``cl`` (either sign)."""
        return np.asarray(cl, dtype=float) ** 2 * (1.0 + self.delta) / (np.pi * self.aspect_ratio)


def endplate_aspect_ratio(aspect_ratio, endplate_height, span):
    """Effective aspect ratio of a wing with endplates.

    Parameters
    ----------
    aspect_ratio : array_like
        Geometric aspect ratio ``b^2 / S``.
    endplate_height : array_like
        Endplate height ``h`` (same unit as ``span``); 0 for none.
    span : array_like
        Wing span ``b``.

    Returns
    -------
    ndarray
        ``AR (1 + 1.9 h / b)``.

    References
    ----------
    .. [1] Katz, J. (1995). Race Car Aerodynamics. Bentley, ch. 6 (after Hoerner).
    """
    h = np.asarray(endplate_height, dtype=float)
    b = np.asarray(span, dtype=float)
    if np.any(h < 0) or np.any(b <= 0):
        raise AeroError("endplate height must be >= 0 and span > 0")
    return np.asarray(aspect_ratio, dtype=float) * (1.0 + ENDPLATE_FACTOR * h / b)


def glauert(aspect_ratio, a0=2 * np.pi, planform: str = "rectangular", taper: float = 1.0,
            terms: int = DEFAULT_TERMS) -> LiftingLine:
    """Solve the lifting-line (monoplane) equation with Glauert's Fourier series.

    The circulation is ``Gamma(theta) = 2 b V sum_n A_n sin(n theta)`` with
    ``y = -(b/2) cos(theta)``; for a symmetric wing only odd ``n`` appear. At
    stations ``theta_i`` (Anderson [2]_, eq. 5.52)::

        sum_n A_n sin(n theta_i) (sin(theta_i) + n mu_i) = mu_i (alpha - alpha_L0) sin(theta_i),
        mu_i = a0 c(theta_i) / (4 b),

    solved with ``alpha - alpha_L0 = 1``; then ``C_L = pi AR A_1`` and
    ``delta = sum_{n>1} n (A_n / A_1)^2`` (eqs. 5.53-5.62).

    Parameters
    ----------
    aspect_ratio : array_like
        Aspect ratio (effective, when endplates are fitted); > 0.5.
    a0 : array_like
        Section lift slope, per radian (broadcasts with ``aspect_ratio``).
    planform : {"rectangular", "elliptic", "tapered"}
    taper : float
        Tip-to-root chord ratio of a ``"tapered"`` (trapezoidal) wing.
    terms : int
        Odd Fourier terms.

    Returns
    -------
    LiftingLine

    References
    ----------
    .. [1] Glauert, H. (1926). The Elements of Aerofoil and Airscrew Theory, ch. 11.
    .. [2] Anderson, J. D. (2011). Fundamentals of Aerodynamics, 5th ed., §5.3.
    """
    ar, a0 = np.broadcast_arrays(np.asarray(aspect_ratio, dtype=float), np.asarray(a0, dtype=float))
    if np.any(ar <= 0.5) or np.any(a0 <= 0):
        raise AeroError("lifting line needs an aspect ratio above 0.5 and a positive section lift slope")
    n = 2 * np.arange(terms) + 1                                  # odd terms
    theta = np.pi * (np.arange(1, terms + 1) - 0.5) / (2 * terms)  # half span, 0 < theta < pi/2
    chord = _chord_shape(theta, planform, taper)                  # c(theta) / mean chord
    # mu = a0 c / (4 b) = a0 (c / c_mean) / (4 AR)
    mu = a0[..., None] * chord / (4.0 * ar[..., None])            # (..., stations)
    sin_nt = np.sin(n[None, :] * theta[:, None])                  # (stations, terms)
    M = sin_nt * (np.sin(theta)[:, None] + n[None, :] * mu[..., :, None])
    rhs = mu * np.sin(theta)
    A = np.linalg.solve(M, rhs[..., None])[..., 0]
    a1 = A[..., 0]
    slope = np.pi * ar * a1
    delta = np.sum(n[1:] * (A[..., 1:] / a1[..., None]) ** 2, axis=-1)
    tau = (a0 / slope - 1.0) * np.pi * ar / a0 - 1.0
    return LiftingLine(slope, tau, delta, ar)


def _chord_shape(theta, planform, taper):
    if planform == "rectangular":
        return np.ones_like(theta)
    if planform == "elliptic":
        return 4.0 / np.pi * np.sin(theta)                        # mean chord of an ellipse is pi/4 of the root
    if planform == "tapered":
        if not 0 < taper <= 1:
            raise AeroError(f"taper ratio {taper:g} must be in (0, 1]")
        root = 2.0 / (1.0 + taper)
        return root * (1.0 - (1.0 - taper) * np.abs(np.cos(theta)))
    raise AeroError(f"planform {planform!r} is not one of 'rectangular', 'elliptic', 'tapered'")
