"""Test functions with published definitions, for checking surrogates, plans and sensitivity.

Each function takes points as an array of shape ``(n, d)`` in its own domain
(not the unit cube) and returns an array of shape ``(n,)``. A
:class:`TestFunction` bundles a function with its domain, input names, known
optimum and source, and can build a :class:`~doe.space.Space` for it so that
the rest of the package (plans, surrogates, sensitivity) can be run on it.

========================  ====  ===========================================
name                      d     use
========================  ====  ===========================================
``branin``                2     surrogate accuracy, optimisation
``hartmann3``             3     surrogate accuracy, optimisation
``hartmann6``             6     surrogate accuracy, optimisation
``borehole``              8     surrogate accuracy (a smooth physical model)
``ishigami``              3     Sobol indices (analytic: :func:`ishigami_indices`)
``g_function``            any   Sobol indices (analytic: :func:`g_function_indices`)
``forrester`` (+ low)     1     two-fidelity surrogates (Forrester et al. 2007)
``currin`` (+ low)        2     two-fidelity surrogates (Xiong, Qian & Wu 2013)
``park`` (+ low)          4     two-fidelity surrogates (Xiong, Qian & Wu 2013)
``borehole`` (+ low)      8     two-fidelity surrogates (Xiong, Qian & Wu 2013)
========================  ====  ===========================================

The two-fidelity pairs (an expensive "high" function and a cheap,
approximate "low" one on the same domain) are listed in :data:`PAIRS`;
:func:`get_pair` returns both as :class:`TestFunction` objects.

Definitions and domains follow Surjanovic & Bingham's Virtual Library of
Simulation Experiments, which restates the original papers cited in each
docstring.

References
----------
.. [VLSE] Surjanovic, S. and Bingham, D. Virtual Library of Simulation
   Experiments: Test Functions and Datasets. Simon Fraser University.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import DoeError
from ..space import Parameter, Space

__all__ = ["TestFunction", "branin", "hartmann3", "hartmann6", "borehole", "ishigami", "g_function",
           "ishigami_indices", "g_function_indices", "forrester", "forrester_low", "currin", "currin_low",
           "park", "park_low", "borehole_low", "TEST_FUNCTIONS", "PAIRS", "get", "get_pair"]


def _points(X, d: int, name: str) -> np.ndarray:
    X = np.asarray(X, dtype=float)
    if X.ndim == 1:
        X = X.reshape(1, -1)
    if X.ndim != 2 or X.shape[1] != d:
        raise DoeError(f"{name}: points must have shape (n, {d}); got {X.shape}")
    return X


# ---------------------------------------------------------------------------
def branin(X) -> np.ndarray:
    """Branin (Branin-Hoo) function on ``[-5, 10] x [0, 15]``.

    ``f = a (x2 - b x1^2 + c x1 - r)^2 + s (1 - t) cos(x1) + s`` with
    ``a = 1, b = 5.1 / (4 pi^2), c = 5 / pi, r = 6, s = 10, t = 1 / (8 pi)``.
    Global minimum ``5 / (4 pi) = 0.397887`` at ``(-pi, 12.275)``,
    ``(pi, 2.275)`` and ``(9.42478, 2.475)``.

    Parameters
    ----------
    X : array_like, shape (n, 2)
        Points, each coordinate dimensionless.

    Returns
    -------
    ndarray, shape (n,)

    References
    ----------
    Branin, F. H. and Hoo, S. K. (1972). A method for finding multiple extrema
    of a function of n variables. Numerical Methods for Non-linear Optimization.
    Dixon, L. C. W. and Szego, G. P. (1978). The global optimization problem:
    an introduction. Towards Global Optimization 2, 1-15.
    """
    X = _points(X, 2, "branin")
    x1, x2 = X[:, 0], X[:, 1]
    a, b, c, r, s, t = 1.0, 5.1 / (4 * math.pi**2), 5 / math.pi, 6.0, 10.0, 1 / (8 * math.pi)
    return a * (x2 - b * x1**2 + c * x1 - r) ** 2 + s * (1 - t) * np.cos(x1) + s


_H3_A = np.array([[3.0, 10, 30], [0.1, 10, 35], [3.0, 10, 30], [0.1, 10, 35]])
_H3_P = 1e-4 * np.array([[3689, 1170, 2673], [4699, 4387, 7470], [1091, 8732, 5547], [381, 5743, 8828]])
_H6_A = np.array([[10, 3, 17, 3.5, 1.7, 8], [0.05, 10, 17, 0.1, 8, 14],
                  [3, 3.5, 1.7, 10, 17, 8], [17, 8, 0.05, 10, 0.1, 14]])
_H6_P = 1e-4 * np.array([[1312, 1696, 5569, 124, 8283, 5886], [2329, 4135, 8307, 3736, 1004, 9991],
                         [2348, 1451, 3522, 2883, 3047, 6650], [4047, 8828, 8732, 5743, 1091, 381]])
_H_ALPHA = np.array([1.0, 1.2, 3.0, 3.2])


def _hartmann(X, A, P) -> np.ndarray:
    # f = -sum_i alpha_i exp(-sum_j A_ij (x_j - P_ij)^2)
    diff = X[:, None, :] - P[None, :, :]
    return -np.exp(-np.sum(A[None] * diff**2, axis=2)) @ _H_ALPHA


def hartmann3(X) -> np.ndarray:
    """Hartmann 3-D function on ``[0, 1]^3``.

    Global minimum ``-3.86278`` at ``(0.114614, 0.555649, 0.852547)``.

    Parameters
    ----------
    X : array_like, shape (n, 3)

    Returns
    -------
    ndarray, shape (n,)

    References
    ----------
    Dixon, L. C. W. and Szego, G. P. (1978). The global optimization problem:
    an introduction. Towards Global Optimization 2, 1-15.
    """
    return _hartmann(_points(X, 3, "hartmann3"), _H3_A, _H3_P)


def hartmann6(X) -> np.ndarray:
    """Hartmann 6-D function on ``[0, 1]^6``.

    Global minimum ``-3.32237`` at
    ``(0.20169, 0.150011, 0.476874, 0.275332, 0.311652, 0.6573)``.

    Parameters
    ----------
    X : array_like, shape (n, 6)

    Returns
    -------
    ndarray, shape (n,)

    References
    ----------
    Dixon, L. C. W. and Szego, G. P. (1978). The global optimization problem:
    an introduction. Towards Global Optimization 2, 1-15.
    """
    return _hartmann(_points(X, 6, "hartmann6"), _H6_A, _H6_P)


def borehole(X) -> np.ndarray:
    """Borehole function: water flow through a borehole, in m^3/yr.

    ``f = 2 pi T_u (H_u - H_l) / (ln(r / r_w) [1 + 2 L T_u / (ln(r / r_w) r_w^2 K_w) + T_u / T_l])``

    Inputs, in column order, with their domains: ``r_w`` in [0.05, 0.15] m,
    ``r`` in [100, 50000] m, ``T_u`` in [63070, 115600] m^2/yr, ``H_u`` in
    [990, 1110] m, ``T_l`` in [63.1, 116] m^2/yr, ``H_l`` in [700, 820] m,
    ``L`` in [1120, 1680] m, ``K_w`` in [9855, 12045] m/yr.

    Parameters
    ----------
    X : array_like, shape (n, 8)

    Returns
    -------
    ndarray, shape (n,)
        Flow rate, m^3/yr.

    References
    ----------
    Harper, W. V. and Gupta, S. K. (1983). Sensitivity/uncertainty analysis of
    a borehole scenario comparing Latin hypercube sampling and deterministic
    sensitivity approaches. Office of Nuclear Waste Isolation, BMI/ONWI-516.
    Morris, M. D., Mitchell, T. J. and Ylvisaker, D. (1993). Bayesian design
    and analysis of computer experiments: use of derivatives in surface
    prediction. Technometrics 35(3), 243-255.
    """
    return _borehole_flow(_points(X, 8, "borehole"), 2 * math.pi, 1.0)


def _borehole_flow(X, scale: float, constant: float) -> np.ndarray:
    # f = scale T_u (H_u - H_l) / (ln(r/r_w) [constant + 2 L T_u / (ln(r/r_w) r_w^2 K_w) + T_u / T_l]);
    # scale = 2 pi, constant = 1 is the borehole function, scale = 5, constant = 1.5 its low-fidelity form
    rw, r, tu, hu, tl, hl, length, kw = X.T
    log_ratio = np.log(r / rw)
    return scale * tu * (hu - hl) / (log_ratio * (constant + 2 * length * tu / (log_ratio * rw**2 * kw) + tu / tl))


def ishigami(X, a: float = 7.0, b: float = 0.1) -> np.ndarray:
    """Ishigami function on ``[-pi, pi]^3``: ``sin x1 + a sin^2 x2 + b x3^4 sin x1``.

    With uniform inputs its mean is ``a / 2`` and its variance
    ``1/2 + a^2/8 + b pi^4/5 + b^2 pi^8/18`` (13.8446 for a = 7, b = 0.1);
    :func:`ishigami_indices` gives the Sobol indices.

    Parameters
    ----------
    X : array_like, shape (n, 3)
        Angles, rad.
    a, b : float
        Shape constants (7 and 0.1 in the usual benchmark).

    Returns
    -------
    ndarray, shape (n,)

    References
    ----------
    Ishigami, T. and Homma, T. (1990). An importance quantification technique
    in uncertainty analysis for computer models. Proc. ISUMA '90, 398-403.
    Sobol', I. M. and Levitan, Yu. L. (1999). On the use of variance reducing
    multipliers in Monte Carlo computations of a global sensitivity index.
    Comput. Phys. Commun. 117, 52-61.
    """
    X = _points(X, 3, "ishigami")
    return np.sin(X[:, 0]) + a * np.sin(X[:, 1]) ** 2 + b * X[:, 2] ** 4 * np.sin(X[:, 0])


def ishigami_indices(a: float = 7.0, b: float = 0.1) -> dict:
    """Analytic Sobol indices of :func:`ishigami` with uniform inputs on ``[-pi, pi]^3``.

    ``V1 = (1 + b pi^4 / 5)^2 / 2``, ``V2 = a^2 / 8``, ``V3 = 0``,
    ``V13 = 8 b^2 pi^8 / 225``; ``V = V1 + V2 + V13``.

    Returns
    -------
    dict
        ``{"mean", "variance", "S1": (3,), "ST": (3,)}``.

    References
    ----------
    Sobol', I. M. and Levitan, Yu. L. (1999). Comput. Phys. Commun. 117, 52-61.
    """
    pi = math.pi
    v1 = 0.5 * (1 + b * pi**4 / 5) ** 2
    v2 = a**2 / 8
    v13 = 8 * b**2 * pi**8 / 225
    v = v1 + v2 + v13
    return {"mean": a / 2, "variance": v,
            "S1": np.array([v1, v2, 0.0]) / v,
            "ST": np.array([v1 + v13, v2, v13]) / v}


#: The a-weights of the eight-input G-function in Saltelli & Sobol' (1995).
G_WEIGHTS = (0.0, 1.0, 4.5, 9.0, 99.0, 99.0, 99.0, 99.0)


def g_function(X, a=G_WEIGHTS) -> np.ndarray:
    """Sobol' G-function on ``[0, 1]^d``: ``prod_i (|4 x_i - 2| + a_i) / (1 + a_i)``.

    Parameters
    ----------
    X : array_like, shape (n, d)
        Points; ``d = len(a)``.
    a : sequence of float
        Non-negative weights; a small ``a_i`` makes input ``i`` important.
        Default: ``(0, 1, 4.5, 9, 99, 99, 99, 99)``.

    Returns
    -------
    ndarray, shape (n,)
        Mean 1 under uniform inputs.

    References
    ----------
    Saltelli, A. and Sobol', I. M. (1995). About the use of rank transformation
    in sensitivity analysis of model output. Reliab. Eng. Syst. Saf. 50, 225-239.
    """
    a = np.asarray(a, dtype=float)
    if a.ndim != 1 or np.any(a < 0):
        raise DoeError("g_function: the weights a must be a 1-D sequence of numbers >= 0")
    X = _points(X, len(a), "g_function")
    return np.prod((np.abs(4 * X - 2) + a) / (1 + a), axis=1)


def g_function_indices(a=G_WEIGHTS) -> dict:
    """Analytic Sobol indices of :func:`g_function` with uniform inputs.

    ``V_i = 1 / (3 (1 + a_i)^2)``, ``V = prod(1 + V_i) - 1``, ``S_i = V_i / V``,
    ``ST_i = V_i prod_{j != i} (1 + V_j) / V``.

    Returns
    -------
    dict
        ``{"mean": 1.0, "variance", "S1": (d,), "ST": (d,)}``.

    References
    ----------
    Saltelli, A. and Sobol', I. M. (1995). Reliab. Eng. Syst. Saf. 50, 225-239.
    """
    a = np.asarray(a, dtype=float)
    vi = 1.0 / (3.0 * (1.0 + a) ** 2)
    v = float(np.prod(1.0 + vi) - 1.0)
    st = np.array([vi[i] * np.prod(np.delete(1.0 + vi, i)) for i in range(len(a))]) / v
    return {"mean": 1.0, "variance": v, "S1": vi / v, "ST": st}


# ---------------------------------------------------------------------------
# two-fidelity pairs


def forrester(X) -> np.ndarray:
    """Forrester et al. one-dimensional function on ``[0, 1]``: ``(6 x - 2)^2 sin(12 x - 4)``.

    The expensive ("high") member of the pair; :func:`forrester_low` is the
    cheap one. Its global minimum on ``[0, 1]`` is about ``-6.0207`` near
    ``x = 0.7572``.

    Parameters
    ----------
    X : array_like, shape (n, 1)
        Points, dimensionless.

    Returns
    -------
    ndarray, shape (n,)

    References
    ----------
    Forrester, A. I. J., Sobester, A. and Keane, A. J. (2007). Multi-fidelity
    optimization via surrogate modelling. Proc. R. Soc. A 463, 3251-3269.
    doi:10.1098/rspa.2007.1900
    """
    x = _points(X, 1, "forrester")[:, 0]
    return (6 * x - 2) ** 2 * np.sin(12 * x - 4)


def forrester_low(X, A: float = 0.5, B: float = 10.0, C: float = -5.0) -> np.ndarray:
    """Low-fidelity Forrester function on ``[0, 1]``: ``A f(x) + B (x - 0.5) + C``.

    ``f`` is :func:`forrester`; ``A = 0.5, B = 10, C = -5`` as in Forrester,
    Sobester & Keane (2007), so the cheap function is a scaled, tilted and
    shifted copy of the expensive one.

    Parameters
    ----------
    X : array_like, shape (n, 1)
    A, B, C : float
        Scale, slope and offset of the approximation.

    Returns
    -------
    ndarray, shape (n,)

    References
    ----------
    Forrester, A. I. J., Sobester, A. and Keane, A. J. (2007). Proc. R. Soc. A 463, 3251-3269.
    """
    x = _points(X, 1, "forrester_low")[:, 0]
    return A * forrester(x[:, None]) + B * (x - 0.5) + C


def _currin(x1, x2) -> np.ndarray:
    # f = [1 - exp(-1 / (2 x2))] (2300 x1^3 + 1900 x1^2 + 2092 x1 + 60) / (100 x1^3 + 500 x1^2 + 4 x1 + 20);
    # at x2 = 0 the exponential term is exp(-inf) = 0
    with np.errstate(divide="ignore"):
        decay = 1 - np.exp(-1 / (2 * x2))
    return decay * (2300 * x1**3 + 1900 * x1**2 + 2092 * x1 + 60) / (100 * x1**3 + 500 * x1**2 + 4 * x1 + 20)


def currin(X) -> np.ndarray:
    """Currin et al. exponential function on ``[0, 1]^2``.

    ``f = [1 - exp(-1 / (2 x2))] (2300 x1^3 + 1900 x1^2 + 2092 x1 + 60) / (100 x1^3 + 500 x1^2 + 4 x1 + 20)``

    The expensive member of the Currin pair (:func:`currin_low` is the cheap one).

    Parameters
    ----------
    X : array_like, shape (n, 2)
        Points, dimensionless.

    Returns
    -------
    ndarray, shape (n,)

    References
    ----------
    Currin, C., Mitchell, T., Morris, M. and Ylvisaker, D. (1991). Bayesian
    prediction of deterministic functions, with applications to the design and
    analysis of computer experiments. J. Am. Stat. Assoc. 86(416), 953-963.
    """
    X = _points(X, 2, "currin")
    return _currin(X[:, 0], X[:, 1])


def currin_low(X) -> np.ndarray:
    """Low-fidelity Currin function: the mean of :func:`currin` at four shifted points.

    ``f_low(x1, x2) = [f(x1 + h, x2 + h) + f(x1 + h, m) + f(x1 - h, x2 + h) + f(x1 - h, m)] / 4``
    with ``h = 1/20`` and ``m = max(0, x2 - h)``, on ``[0, 1]^2``.

    Parameters
    ----------
    X : array_like, shape (n, 2)

    Returns
    -------
    ndarray, shape (n,)

    References
    ----------
    Xiong, S., Qian, P. Z. G. and Wu, C. F. J. (2013). Sequential design and
    analysis of high-accuracy and low-accuracy computer codes. Technometrics
    55(1), 37-46.
    """
    X = _points(X, 2, "currin_low")
    x1, x2, h = X[:, 0], X[:, 1], 1 / 20
    lower = np.maximum(0.0, x2 - h)
    return (_currin(x1 + h, x2 + h) + _currin(x1 + h, lower) + _currin(x1 - h, x2 + h) + _currin(x1 - h, lower)) / 4


def park(X) -> np.ndarray:
    """Park (1991) function 1 on ``[0, 1]^4``.

    ``f = (x1 / 2) [sqrt(1 + (x2 + x3^2) x4 / x1^2) - 1] + (x1 + 3 x4) exp(1 + sin x3)``

    The first term is evaluated in the equal form ``[sqrt(x1^2 + (x2 + x3^2) x4) - x1] / 2``,
    which stays finite at ``x1 = 0``. The expensive member of the Park pair
    (:func:`park_low` is the cheap one).

    Parameters
    ----------
    X : array_like, shape (n, 4)
        Points, dimensionless.

    Returns
    -------
    ndarray, shape (n,)

    References
    ----------
    Park, J.-S. (1991). Tuning complex computer codes to data and optimal
    designs. PhD thesis, University of Illinois at Urbana-Champaign.
    Cox, D. D., Park, J.-S. and Singer, C. E. (2001). A statistical method for
    tuning a computer code to a data base. Comput. Stat. Data Anal. 37(1), 77-92.
    """
    x1, x2, x3, x4 = _points(X, 4, "park").T
    return (np.sqrt(x1**2 + (x2 + x3**2) * x4) - x1) / 2 + (x1 + 3 * x4) * np.exp(1 + np.sin(x3))


def park_low(X) -> np.ndarray:
    """Low-fidelity Park function on ``[0, 1]^4``: ``(1 + sin(x1) / 10) f(x) - 2 x1 + x2^2 + x3^2 + 1/2``.

    ``f`` is :func:`park`.

    Parameters
    ----------
    X : array_like, shape (n, 4)

    Returns
    -------
    ndarray, shape (n,)

    References
    ----------
    Xiong, S., Qian, P. Z. G. and Wu, C. F. J. (2013). Technometrics 55(1), 37-46.
    """
    X = _points(X, 4, "park_low")
    x1, x2, x3 = X[:, 0], X[:, 1], X[:, 2]
    return (1 + np.sin(x1) / 10) * park(X) - 2 * x1 + x2**2 + x3**2 + 0.5


def borehole_low(X) -> np.ndarray:
    """Low-fidelity borehole function, in m^3/yr, on the domain of :func:`borehole`.

    ``f = 5 T_u (H_u - H_l) / (ln(r / r_w) [1.5 + 2 L T_u / (ln(r / r_w) r_w^2 K_w) + T_u / T_l])``

    Parameters
    ----------
    X : array_like, shape (n, 8)
        Columns as in :func:`borehole`.

    Returns
    -------
    ndarray, shape (n,)
        Approximate flow rate, m^3/yr.

    References
    ----------
    Xiong, S., Qian, P. Z. G. and Wu, C. F. J. (2013). Technometrics 55(1), 37-46.
    """
    return _borehole_flow(_points(X, 8, "borehole_low"), 5.0, 1.5)


# ---------------------------------------------------------------------------
@dataclass(frozen=True)
class TestFunction:
    """A test function with its domain, input names and known optimum.

    Attributes
    ----------
    name : str
    func : callable
        ``func(X) -> y`` with ``X`` of shape ``(n, d)`` in the domain below.
    names : tuple of str
        Input names, in column order.
    lower, upper : tuple of float
        Domain bounds per input.
    units : tuple of str
        Input units (``"-"`` for dimensionless).
    minimum : float or None
        Known global minimum value.
    argmin : tuple or None
        One point where the minimum is reached.
    reference : str
        Where the definition comes from.
    """

    __test__ = False  # not a pytest test class despite its name

    name: str
    func: object
    names: tuple
    lower: tuple
    upper: tuple
    units: tuple = field(default=())
    minimum: float | None = None
    argmin: tuple | None = None
    reference: str = ""

    @property
    def dim(self) -> int:
        """Number of inputs."""
        return len(self.names)

    def __call__(self, X) -> np.ndarray:
        return self.func(X)

    def space(self) -> Space:
        """The function's domain as a :class:`~doe.space.Space`."""
        units = self.units or ("-",) * self.dim
        return Space(tuple(Parameter(n, u, lo, hi) for n, u, lo, hi in
                           zip(self.names, units, self.lower, self.upper)))

    def from_unit(self, U) -> np.ndarray:
        """Map points of ``[0, 1]^d`` to the domain."""
        U = _points(U, self.dim, self.name)
        lo, hi = np.asarray(self.lower), np.asarray(self.upper)
        return lo + U * (hi - lo)

    def on_unit(self, U) -> np.ndarray:
        """Evaluate at points given in the unit cube ``[0, 1]^d``."""
        return self.func(self.from_unit(U))


_VLSE = "Surjanovic & Bingham, Virtual Library of Simulation Experiments"
TEST_FUNCTIONS = {
    "branin": TestFunction("branin", branin, ("x1", "x2"), (-5.0, 0.0), (10.0, 15.0),
                           minimum=5 / (4 * math.pi), argmin=(math.pi, 2.275),
                           reference="Branin & Hoo 1972; Dixon & Szego 1978; " + _VLSE),
    "hartmann3": TestFunction("hartmann3", hartmann3, ("x1", "x2", "x3"), (0.0,) * 3, (1.0,) * 3,
                              minimum=-3.86278, argmin=(0.114614, 0.555649, 0.852547),
                              reference="Dixon & Szego 1978; " + _VLSE),
    "hartmann6": TestFunction("hartmann6", hartmann6, tuple(f"x{i}" for i in range(1, 7)), (0.0,) * 6, (1.0,) * 6,
                              minimum=-3.32237, argmin=(0.20169, 0.150011, 0.476874, 0.275332, 0.311652, 0.6573),
                              reference="Dixon & Szego 1978; " + _VLSE),
    "borehole": TestFunction("borehole", borehole, ("r_w", "r", "T_u", "H_u", "T_l", "H_l", "L", "K_w"),
                             (0.05, 100.0, 63070.0, 990.0, 63.1, 700.0, 1120.0, 9855.0),
                             (0.15, 50000.0, 115600.0, 1110.0, 116.0, 820.0, 1680.0, 12045.0),
                             units=("m", "m", "m^2/yr", "m", "m^2/yr", "m", "m", "m/yr"),
                             reference="Harper & Gupta 1983; Morris, Mitchell & Ylvisaker 1993; " + _VLSE),
    "ishigami": TestFunction("ishigami", ishigami, ("x1", "x2", "x3"), (-math.pi,) * 3, (math.pi,) * 3,
                             units=("rad",) * 3,
                             reference="Ishigami & Homma 1990; Sobol' & Levitan 1999; " + _VLSE),
    "g_function": TestFunction("g_function", g_function, tuple(f"x{i}" for i in range(1, 9)), (0.0,) * 8, (1.0,) * 8,
                               minimum=0.0, reference="Saltelli & Sobol' 1995; " + _VLSE),
}
_FSK = "Forrester, Sobester & Keane 2007, Proc. R. Soc. A 463:3251"
_XQW = "Xiong, Qian & Wu 2013, Technometrics 55:37"
TEST_FUNCTIONS.update({
    "forrester": TestFunction("forrester", forrester, ("x",), (0.0,), (1.0,), minimum=-6.02074, argmin=(0.757249,),
                              reference=_FSK),
    "forrester_low": TestFunction("forrester_low", forrester_low, ("x",), (0.0,), (1.0,), reference=_FSK),
    "currin": TestFunction("currin", currin, ("x1", "x2"), (0.0, 0.0), (1.0, 1.0),
                           reference="Currin, Mitchell, Morris & Ylvisaker 1991; " + _VLSE),
    "currin_low": TestFunction("currin_low", currin_low, ("x1", "x2"), (0.0, 0.0), (1.0, 1.0),
                               reference=_XQW + "; " + _VLSE),
    "park": TestFunction("park", park, ("x1", "x2", "x3", "x4"), (0.0,) * 4, (1.0,) * 4,
                         reference="Park 1991; Cox, Park & Singer 2001; " + _VLSE),
    "park_low": TestFunction("park_low", park_low, ("x1", "x2", "x3", "x4"), (0.0,) * 4, (1.0,) * 4,
                             reference=_XQW + "; " + _VLSE),
    "borehole_low": TestFunction("borehole_low", borehole_low, TEST_FUNCTIONS["borehole"].names,
                                 TEST_FUNCTIONS["borehole"].lower, TEST_FUNCTIONS["borehole"].upper,
                                 units=TEST_FUNCTIONS["borehole"].units, reference=_XQW + "; " + _VLSE),
})

#: Two-fidelity pairs: pair name -> (expensive function, cheap function), names in :data:`TEST_FUNCTIONS`.
PAIRS = {
    "forrester": ("forrester", "forrester_low"),
    "currin": ("currin", "currin_low"),
    "park": ("park", "park_low"),
    "borehole": ("borehole", "borehole_low"),
}


def get(name: str) -> TestFunction:
    """The test function called ``name`` (see :data:`TEST_FUNCTIONS`)."""
    try:
        return TEST_FUNCTIONS[name]
    except KeyError:
        raise DoeError(f"no test function '{name}'; choose one of {', '.join(TEST_FUNCTIONS)}") from None


def get_pair(name: str) -> tuple[TestFunction, TestFunction]:
    """The expensive and the cheap function of the two-fidelity pair ``name`` (see :data:`PAIRS`).

    Returns
    -------
    high, low : TestFunction
        On the same domain, with the same input names.
    """
    try:
        high, low = PAIRS[name]
    except KeyError:
        raise DoeError(f"no two-fidelity pair '{name}'; choose one of {', '.join(PAIRS)}") from None
    return TEST_FUNCTIONS[high], TEST_FUNCTIONS[low]


# ---------------------------------------------------------------------------
# engineering test functions for calibration benchmarks (appended; definitions as published)


def otl_circuit(X) -> np.ndarray:
    """OTL circuit: midpoint voltage of an output-transformerless push-pull circuit, in V.

    ``V_b1 = 12 R_b2 / (R_b1 + R_b2)`` and, with ``g = beta (R_c2 + 9)``,

    ``V_m = (V_b1 + 0.74) g / (g + R_f) + 11.35 R_f / (g + R_f) + 0.74 R_f g / ((g + R_f) R_c1)``

    Inputs, in column order, with their domains: ``R_b1`` in [50, 150] kOhm,
    ``R_b2`` in [25, 70] kOhm, ``R_f`` in [0.5, 3] kOhm, ``R_c1`` in
    [1.2, 2.5] kOhm, ``R_c2`` in [0.25, 1.2] kOhm, current gain ``beta`` in
    [50, 300] (dimensionless).

    Parameters
    ----------
    X : array_like, shape (n, 6)

    Returns
    -------
    ndarray, shape (n,)
        Midpoint voltage, V.

    References
    ----------
    Ben-Ari, E. N. and Steinberg, D. M. (2007). Modeling data from computer
    experiments: an empirical comparison of kriging with MARS and projection
    pursuit regression. Quality Engineering 19(4), 327-338.
    """
    rb1, rb2, rf, rc1, rc2, beta = _points(X, 6, "otl_circuit").T
    vb1 = 12 * rb2 / (rb1 + rb2)
    g = beta * (rc2 + 9)
    return (vb1 + 0.74) * g / (g + rf) + 11.35 * rf / (g + rf) + 0.74 * rf * g / ((g + rf) * rc1)


def piston(X) -> np.ndarray:
    """Piston simulation: time of one cycle of a piston in a cylinder, in s.

    ``A = P_0 S + 19.62 M - k V_0 / S``,
    ``V = S / (2 k) [sqrt(A^2 + 4 k P_0 V_0 T_a / T_0) - A]``,
    ``C = 2 pi sqrt(M / (k + S^2 P_0 V_0 T_a / (T_0 V^2)))``.

    Inputs, in column order, with their domains: piston mass ``M`` in [30, 60]
    kg, surface area ``S`` in [0.005, 0.020] m^2, initial gas volume ``V_0``
    in [0.002, 0.010] m^3, spring coefficient ``k`` in [1000, 5000] N/m,
    atmospheric pressure ``P_0`` in [90000, 110000] N/m^2, ambient
    temperature ``T_a`` in [290, 296] K, filling gas temperature ``T_0`` in
    [340, 360] K.

    Parameters
    ----------
    X : array_like, shape (n, 7)

    Returns
    -------
    ndarray, shape (n,)
        Cycle time, s.

    References
    ----------
    Kenett, R. and Zacks, S. (1998). Modern Industrial Statistics: Design and
    Control of Quality and Reliability. Duxbury Press.
    Ben-Ari, E. N. and Steinberg, D. M. (2007). Quality Engineering 19(4), 327-338.
    """
    m, s, v0, k, p0, ta, t0 = _points(X, 7, "piston").T
    a = p0 * s + 19.62 * m - k * v0 / s
    v = s / (2 * k) * (np.sqrt(a**2 + 4 * k * p0 * v0 * ta / t0) - a)
    return 2 * math.pi * np.sqrt(m / (k + s**2 * p0 * v0 * ta / (t0 * v**2)))


def wing_weight(X) -> np.ndarray:
    """Wing weight of a light aircraft, in lb.

    ``W = 0.036 S_w^0.758 W_fw^0.0035 (A / cos^2 L)^0.6 q^0.006 lam^0.04 (100 t_c / cos L)^-0.3
    (N_z W_dg)^0.49 + S_w W_p``

    Inputs, in column order, with their domains: wing area ``S_w`` in
    [150, 200] ft^2, weight of fuel in the wing ``W_fw`` in [220, 300] lb,
    aspect ratio ``A`` in [6, 10], quarter-chord sweep ``L`` in [-10, 10]
    deg, dynamic pressure at cruise ``q`` in [16, 45] lb/ft^2, taper ratio
    ``lam`` in [0.5, 1], thickness to chord ratio ``t_c`` in [0.08, 0.18],
    ultimate load factor ``N_z`` in [2.5, 6], flight design gross weight
    ``W_dg`` in [1700, 2500] lb, paint weight ``W_p`` in [0.025, 0.08] lb/ft^2.

    Parameters
    ----------
    X : array_like, shape (n, 10)

    Returns
    -------
    ndarray, shape (n,)
        Wing weight, lb.

    References
    ----------
    Forrester, A. I. J., Sobester, A. and Keane, A. J. (2008). Engineering
    Design via Surrogate Modelling: A Practical Guide. Wiley, sec. 1.3.
    doi:10.1002/9780470770801
    """
    sw, wfw, ar, sweep_deg, q, lam, tc, nz, wdg, wp = _points(X, 10, "wing_weight").T
    cos_sweep = np.cos(np.radians(sweep_deg))
    return (0.036 * sw**0.758 * wfw**0.0035 * (ar / cos_sweep**2) ** 0.6 * q**0.006 * lam**0.04
            * (100 * tc / cos_sweep) ** -0.3 * (nz * wdg) ** 0.49 + sw * wp)


_BAS = "Ben-Ari & Steinberg 2007, Qual. Eng. 19:327; " + _VLSE
TEST_FUNCTIONS.update({
    "otl_circuit": TestFunction("otl_circuit", otl_circuit, ("R_b1", "R_b2", "R_f", "R_c1", "R_c2", "beta"),
                                (50.0, 25.0, 0.5, 1.2, 0.25, 50.0), (150.0, 70.0, 3.0, 2.5, 1.2, 300.0),
                                units=("kOhm",) * 5 + ("-",), reference=_BAS),
    "piston": TestFunction("piston", piston, ("M", "S", "V_0", "k", "P_0", "T_a", "T_0"),
                           (30.0, 0.005, 0.002, 1000.0, 90000.0, 290.0, 340.0),
                           (60.0, 0.020, 0.010, 5000.0, 110000.0, 296.0, 360.0),
                           units=("kg", "m^2", "m^3", "N/m", "N/m^2", "K", "K"),
                           reference="Kenett & Zacks 1998; " + _BAS),
    "wing_weight": TestFunction("wing_weight", wing_weight,
                                ("S_w", "W_fw", "A", "sweep", "q", "taper", "t_c", "N_z", "W_dg", "W_p"),
                                (150.0, 220.0, 6.0, -10.0, 16.0, 0.5, 0.08, 2.5, 1700.0, 0.025),
                                (200.0, 300.0, 10.0, 10.0, 45.0, 1.0, 0.18, 6.0, 2500.0, 0.08),
                                units=("ft^2", "lb", "-", "deg", "lb/ft^2", "-", "-", "-", "lb", "lb/ft^2"),
                                reference="Forrester, Sobester & Keane 2008, Engineering Design via Surrogate "
                                          "Modelling, sec. 1.3; " + _VLSE),
})
__all__ += ["otl_circuit", "piston", "wing_weight"]


# ---------------------------------------------------------------------------
# Mixed inputs: continuous columns in the unit square, then one column of level indices 0 .. L-1.
#: Values of Hartmann 3-D's first input behind the three levels of :func:`hartmann3_levels`.
HARTMANN_LEVELS = (0.2, 0.5, 0.8)


def hartmann3_levels(X, values=HARTMANN_LEVELS, column: int = 0) -> np.ndarray:
    """Hartmann 3-D with one input held at a few values: two continuous inputs and a choice.

    ``X[:, :2]`` are the other two inputs in ``[0, 1]``, ``X[:, 2]`` the level
    index ``c``; the function is ``hartmann3`` with input ``column`` set to
    ``values[c]``. With the first input at 0.2, 0.5 and 0.8 the three level
    surfaces are slices of one smooth surface (their correlation over the
    square is 0.88 to 0.98) yet differ in shape and scale: the case in which a
    kernel that shares information across levels should beat one surrogate per
    level. Holding the third input instead (``column=2``; correlations -0.6 to
    0.2) gives levels that share little, the case in which it should not.

    Defining a mixed test problem by restricting a continuous input of a
    published function to a few values keeps its exact values known at every
    level (Hartmann 3-D: Dixon & Szego 1978; [VLSE]_).
    """
    X = _points(X, 3, "hartmann3_levels")
    c = _level_column(X[:, 2], len(values), "hartmann3_levels")
    full = np.insert(X[:, :2], column, np.asarray(values, dtype=float)[c], axis=1)
    return hartmann3(full)


def _level_column(c, n_levels: int, name: str) -> np.ndarray:
    idx = np.rint(c).astype(int)
    if np.any(np.abs(c - idx) > 1e-9) or idx.min() < 0 or idx.max() >= n_levels:
        raise DoeError(f"{name}: the last column must hold level indices 0 to {n_levels - 1}")
    return idx


#: Level effects ``h(c)`` of :func:`additive_levels` (three levels, equally likely).
ADDITIVE_LEVEL_EFFECTS = (0.0, 0.8, -0.5)


def additive_levels(X, a: float = 2.0, b: float = 1.0, h=ADDITIVE_LEVEL_EFFECTS) -> np.ndarray:
    """An additive mixed function ``g(x) + h(c)`` with Sobol indices known in closed form.

    ``g(x1, x2) = a sin(pi x1) + b (2 x2 - 1)^2`` on ``[0, 1]^2`` and ``h`` a
    level effect per level of the choice ``c`` in ``X[:, 2]``. With
    independent ``x1, x2 ~ U(0, 1)`` and every level equally likely the
    variance splits into the parts' own variances (the ANOVA decomposition of
    an additive function has no interaction terms; Sobol' 1993, Math. Model.
    Comput. Exp. 1:407):

    ``V1 = a^2 (1/2 - 4/pi^2)``, ``V2 = 4 b^2 / 45``, ``Vc = mean(h^2) - mean(h)^2``,

    and ``S_i = ST_i = V_i / (V1 + V2 + Vc)`` (see :func:`additive_levels_indices`).
    """
    X = _points(X, 3, "additive_levels")
    h = np.asarray(h, dtype=float)
    c = _level_column(X[:, 2], len(h), "additive_levels")
    return a * np.sin(np.pi * X[:, 0]) + b * (2 * X[:, 1] - 1) ** 2 + h[c]


def additive_levels_indices(a: float = 2.0, b: float = 1.0, h=ADDITIVE_LEVEL_EFFECTS) -> dict:
    """Partial variances and Sobol indices of :func:`additive_levels` (first order = total)."""
    h = np.asarray(h, dtype=float)
    # E[sin^2(pi x)] = 1/2, E[sin(pi x)] = 2/pi; E[(2x-1)^4] = 1/5, E[(2x-1)^2] = 1/3 for x ~ U(0, 1)
    parts = {"x1": a**2 * (0.5 - 4 / math.pi**2), "x2": b**2 * (1 / 5 - 1 / 9), "c": float(np.var(h))}
    total = sum(parts.values())
    return {"V": parts, "S": {k: v / total for k, v in parts.items()}}


__all__ += ["hartmann3_levels", "HARTMANN_LEVELS", "additive_levels", "additive_levels_indices",
            "ADDITIVE_LEVEL_EFFECTS"]
