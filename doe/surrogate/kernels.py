"""Kernels of the Gaussian-process surrogates: families, trends, hyperparameter bounds, labels.

The kernel (see :mod:`doe.surrogate.gp`) is
``k(z, z') = s^2 K_family(z, z'; l_1..l_d) + trend(z, z') [+ noise^2 delta(z, z')]``
on centred unit-cube inputs and normalised outputs, so every bound below is a
fraction of a parameter's range or of the response's variance.

References
----------
.. [1] Rasmussen, C. E. and Williams, C. K. I. (2006). Gaussian Processes for
   Machine Learning. MIT Press. Ch. 4 (covariance functions, Matern kernels).
"""
from __future__ import annotations

import numpy as np
from sklearn.gaussian_process.kernels import RBF, ConstantKernel, DotProduct, Matern, WhiteKernel

__all__ = ["FAMILIES", "TRENDS", "LENGTH_SCALE_BOUNDS", "AMPLITUDE_BOUNDS", "TREND_BOUNDS", "NOISE_BOUNDS",
           "NU", "build_kernel", "kernel_label", "unit_correlation"]

FAMILIES = ("sqexp", "matern52", "matern32")
TRENDS = ("constant", "linear")
#: Length-scale bounds, in fractions of each parameter's range.
LENGTH_SCALE_BOUNDS = (1e-2, 1e2)
#: Bounds of the signal variance ``s^2``, relative to the response's variance.
AMPLITUDE_BOUNDS = (1e-3, 1e2)
#: Bounds of the trend variance ``c``, relative to the response's variance.
TREND_BOUNDS = (1e-5, 1e2)
#: Bounds of a learned noise variance, relative to the response's variance.
NOISE_BOUNDS = (1e-8, 1.0)
#: Smoothness ``nu`` of each Matern family.
NU = {"matern52": 2.5, "matern32": 1.5}


def build_kernel(family: str, trend: str, d: int, learn_noise: bool):
    """The kernel structure (initial values; the optimiser sets them). See the module docstring."""
    ls = np.full(d, 0.3)
    if family == "sqexp":
        base = RBF(ls, LENGTH_SCALE_BOUNDS)
    else:
        base = Matern(ls, LENGTH_SCALE_BOUNDS, nu=NU[family])
    kernel = ConstantKernel(1.0, AMPLITUDE_BOUNDS) * base
    if trend == "linear":
        kernel = kernel + ConstantKernel(0.1, TREND_BOUNDS) * DotProduct(sigma_0=1.0, sigma_0_bounds="fixed")
    else:
        kernel = kernel + ConstantKernel(0.1, TREND_BOUNDS)
    if learn_noise:
        kernel = kernel + WhiteKernel(1e-2, NOISE_BOUNDS)
    return kernel


def kernel_label(family: str, trend: str) -> str:
    """Plain name of a kernel, e.g. ``"Matern 5/2, linear trend"``."""
    names = {"sqexp": "squared-exponential", "matern52": "Matern 5/2", "matern32": "Matern 3/2"}
    return f"{names[family]}, {trend} trend"


def unit_correlation(family: str, r: np.ndarray) -> np.ndarray:
    """The stationary correlation of ``family`` at scaled distance ``r`` (Rasmussen & Williams 2006, eqs. 4.9,
    4.17): the same numbers as scikit-learn's ``RBF`` and ``Matern`` with unit length scale. Computed in place
    where it can (large covariance matrices of sample paths)."""
    if family == "sqexp":
        out = np.square(r)
        out *= -0.5
        return np.exp(out, out=out)
    a = np.multiply(r, np.sqrt(3.0) if family == "matern32" else np.sqrt(5.0))
    e = np.exp(np.negative(a))
    if family == "matern32":
        a += 1.0
    else:
        poly = np.square(a)
        poly *= 1.0 / 3.0
        a += poly
        a += 1.0
    a *= e
    return a
