"""Gaussian-process surrogates of the responses: fitting, kernel choice, leave-one-out checks, save/load.

One :class:`ResponseSurrogate` per response (a scikit-learn
``GaussianProcessRegressor`` with kernels, bounds, restarts and seed set here,
never the library's defaults); a :class:`SurrogateSet` holds one per response
of a study together with its design space, predicts in the study's units, and
is saved to a folder of JSON and NPZ files that loading never executes.

Model
-----
Inputs are scaled to the unit cube (then centred, ``z = u - 1/2``); outputs
are normalised to mean 0 and standard deviation 1 over the runs. The kernel is

``k(z, z') = s^2 K_family(z, z'; l_1..l_d) + trend(z, z') [+ noise^2 delta(z, z')]``

with one length scale per parameter (anisotropic), ``K_family`` one of
squared-exponential (``sqexp``), Matern 5/2 (``matern52``) or Matern 3/2
(``matern32``), and ``trend`` either a constant (``c``) or a linear trend
(``c (1 + z . z')``, a Bayesian linear regression on the inputs). Each
kernel is fitted by maximum marginal likelihood (``restarts`` extra starts
drawn from the seed) times a weak log-normal prior on each length scale
(``length_scale_prior``; 0 for plain maximum likelihood). With
``kernel = "auto"`` the three families are fitted with the first trend, the
other trend is tried with the best family, and the kernel with the smallest
leave-one-out error is kept (``selection = "likelihood"``: the largest
marginal likelihood).

Noise: a learned white-noise term when the data are noisy (recorded CFD,
tunnel or track data, or replicated points whose values differ); otherwise a
small fixed nugget (``nugget``, relative to the response's variance) that only
keeps the kernel matrix well conditioned. Exact duplicates of a deterministic
evaluator are merged into one point before fitting.

Leave-one-out
-------------
With the hyperparameters fixed, the leave-one-out residual and variance of
run ``i`` follow from one inverse ``K^{-1}`` of the training covariance
(Rasmussen & Williams 2006, eq. 5.12; Dubrule 1983)::

    y_i - mu_{-i} = [K^{-1} y]_i / [K^{-1}]_ii,     var_{-i} = 1 / [K^{-1}]_ii

``q2_loo = 1 - sum(residual^2) / sum((y - mean(y))^2)`` and ``rmse_loo`` (in
the response's unit) summarise them; the standardised residuals
``residual / sqrt(var_{-i})`` should look like draws of a standard normal.

References
----------
.. [1] Rasmussen, C. E. and Williams, C. K. I. (2006). Gaussian Processes for
   Machine Learning. MIT Press. Ch. 2 (prediction), 4.2 (Matern kernels),
   5.4 (marginal likelihood, eq. 5.8), 5.4.2 (leave-one-out, eqs. 5.10-5.12).
.. [2] Dubrule, O. (1983). Cross validation of kriging in a unique
   neighborhood. Mathematical Geology 15(6), 687-699.
.. [3] Loeppky, J. L., Sacks, J. and Welch, W. J. (2009). Choosing the sample
   size of a computer experiment: a practical guide. Technometrics 51(4), 366-376.
"""
from __future__ import annotations

import copy
import json
import os
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy.linalg import cho_solve, solve_triangular
from scipy.optimize import minimize
from sklearn.exceptions import ConvergenceWarning
from threadpoolctl import threadpool_limits
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import RBF, ConstantKernel, DotProduct, Matern, WhiteKernel

from . import paths as gppaths
from ..errors import NotFittedError, SurrogateError
from .diagnostics import hyperparameter_statements, response_report

__all__ = ["ResponseSurrogate", "SurrogateSet", "LooResult", "fit_surrogates", "load_surrogates", "prediction_frame",
           "FAMILIES", "TRENDS", "NOISE_MODES", "SELECTIONS", "LENGTH_SCALE_BOUNDS", "NOISE_BOUNDS",
           "DEFAULT_NUGGET", "FORMAT"]

FAMILIES = ("sqexp", "matern52", "matern32")
TRENDS = ("constant", "linear")
NOISE_MODES = ("auto", "learn", "fixed")
SELECTIONS = ("loo", "likelihood")
#: Length-scale bounds, in fractions of each parameter's range.
LENGTH_SCALE_BOUNDS = (1e-2, 1e2)
#: Bounds of the signal variance ``s^2``, relative to the response's variance.
AMPLITUDE_BOUNDS = (1e-3, 1e2)
#: Bounds of the trend variance ``c``, relative to the response's variance.
TREND_BOUNDS = (1e-5, 1e2)
#: Bounds of a learned noise variance, relative to the response's variance.
NOISE_BOUNDS = (1e-8, 1.0)
#: Fixed nugget of a deterministic evaluator, relative to the response's variance.
DEFAULT_NUGGET = 1e-6
#: Standard deviation of the log-normal prior on length scales (natural log; 0: maximum likelihood).
DEFAULT_LENGTH_SCALE_PRIOR = 1.5
#: Two points closer than this in every scaled coordinate are the same point.
DUPLICATE_TOL = 1e-9
#: Query points predicted at once (bounds memory at CHUNK x runs).
CHUNK = 20000
#: Name and version written in a saved surrogate folder.
FORMAT = ("doe-surrogate", 1)
_NU = {"matern52": 2.5, "matern32": 1.5}


def _build_kernel(family: str, trend: str, d: int, learn_noise: bool):
    """The kernel structure (initial values; the optimiser sets them). See the module docstring."""
    ls = np.full(d, 0.3)
    if family == "sqexp":
        base = RBF(ls, LENGTH_SCALE_BOUNDS)
    else:
        base = Matern(ls, LENGTH_SCALE_BOUNDS, nu=_NU[family])
    kernel = ConstantKernel(1.0, AMPLITUDE_BOUNDS) * base
    if trend == "linear":
        kernel = kernel + ConstantKernel(0.1, TREND_BOUNDS) * DotProduct(sigma_0=1.0, sigma_0_bounds="fixed")
    else:
        kernel = kernel + ConstantKernel(0.1, TREND_BOUNDS)
    if learn_noise:
        kernel = kernel + WhiteKernel(1e-2, NOISE_BOUNDS)
    return kernel


def _label(family: str, trend: str) -> str:
    names = {"sqexp": "squared-exponential", "matern52": "Matern 5/2", "matern32": "Matern 3/2"}
    return f"{names[family]}, {trend} trend"


@dataclass
class LooResult:
    """Closed-form leave-one-out results of one response (Rasmussen & Williams 2006, eq. 5.12).

    Attributes
    ----------
    observed, predicted, std : ndarray, shape (n,)
        Value at each training point, its leave-one-out prediction and the
        predictive standard deviation of an observation there; response unit.
    residual : ndarray
        ``observed - predicted``, response unit.
    standardised : ndarray
        ``residual / std``, dimensionless.
    q2 : float
        ``1 - sum(residual^2) / sum((observed - mean)^2)``.
    rmse : float
        Root mean square of ``residual``, response unit.
    """

    observed: np.ndarray
    predicted: np.ndarray
    std: np.ndarray
    q2: float
    rmse: float

    @property
    def residual(self) -> np.ndarray:
        return self.observed - self.predicted

    @property
    def standardised(self) -> np.ndarray:
        return self.residual / self.std


def _merge_duplicates(X: np.ndarray, y: np.ndarray):
    """Groups of rows at the same point: (unique X, mean y, list of row-index arrays, max spread)."""
    keys = np.round(X / DUPLICATE_TOL).astype(np.int64) if np.all(np.abs(X) < 1e6) else X
    _, first, inverse = np.unique(keys, axis=0, return_index=True, return_inverse=True)
    inverse = inverse.ravel()
    order = np.argsort(first)                       # keep the first appearance order
    groups = [np.flatnonzero(inverse == g) for g in order]
    Xu = np.array([X[g[0]] for g in groups])
    yu = np.array([y[g].mean() for g in groups])
    spread = max((float(np.ptp(y[g])) for g in groups if len(g) > 1), default=0.0)
    return Xu, yu, groups, spread


class ResponseSurrogate:
    """A Gaussian-process surrogate of one response, on inputs in the unit cube.

    Parameters
    ----------
    kernel : {"auto", "sqexp", "matern52", "matern32"}
        Kernel family; ``"auto"`` tries all three.
    trend : {"auto", "constant", "linear"}
        Prior trend; ``"auto"`` tries both.
    noise : {"auto", "learn", "fixed"}
        ``"learn"``: a white-noise variance is fitted; ``"fixed"``: only the
        nugget; ``"auto"``: learn when replicated points disagree.
    restarts : int
        Extra optimiser starts per kernel, drawn log-uniformly within the
        bounds from ``seed``.
    nugget : float
        Fixed diagonal term, relative to the response's variance.
    selection : {"loo", "likelihood"}
        How ``"auto"`` picks among kernels: smallest leave-one-out mean square
        error, or largest log marginal likelihood.
    seed : int
        Seed of the optimiser starts; same seed, same surrogate.
    names : sequence of str, optional
        Parameter names, used in the plain statements of :attr:`statements_`.
    length_scale_prior : float
        Standard deviation (natural log) of the log-normal prior on each
        length scale, centred on half the range; 0 for maximum likelihood.

    Attributes
    ----------
    X_unit_ : ndarray, shape (n, d)
        Training points (duplicates merged unless noise is learned).
    y_ : ndarray, shape (n,)
        Training values, response unit.
    groups_ : list of ndarray
        Rows of the data given to :meth:`fit` behind each training point.
    family_, trend_ : str
        The kernel kept.
    learn_noise_ : bool
    theta_ : ndarray
        Log hyperparameters of the kept kernel (scikit-learn order).
    length_scales_ : ndarray, shape (d,)
        In fractions of each parameter's range.
    noise_std_ : float
        Standard deviation of the noise plus nugget, response unit.
    log_marginal_likelihood_ : float
    loo_ : LooResult
    candidates_ : list of dict
        Every kernel tried, with its leave-one-out error and likelihood.
    statements_ : list of str
        Plain-language diagnostics (bounds reached, optimiser trouble, few data).
    fit_seconds_ : float

    References
    ----------
    Rasmussen & Williams (2006), ch. 2, 4.2, 5.4; Dubrule (1983). See the module docstring.
    """

    def __init__(self, kernel="auto", trend="auto", noise="auto", restarts=3, nugget=DEFAULT_NUGGET,
                 selection="loo", seed=0, names=None, length_scale_prior=DEFAULT_LENGTH_SCALE_PRIOR):
        self.kernel = kernel
        self.trend = trend
        self.noise = noise
        self.restarts = restarts
        self.nugget = nugget
        self.selection = selection
        self.length_scale_prior = length_scale_prior
        self.seed = seed
        self.names = names

    # -- checks ------------------------------------------------------------
    def _check_options(self):
        for key, value, allowed in (("kernel", self.kernel, ("auto", *FAMILIES)), ("trend", self.trend, ("auto", *TRENDS)),
                                    ("noise", self.noise, NOISE_MODES), ("selection", self.selection, SELECTIONS)):
            if value not in allowed:
                raise SurrogateError(f"surrogate option {key}={value!r} is not one of {', '.join(allowed)}")
        if isinstance(self.restarts, bool) or not isinstance(self.restarts, (int, np.integer)) or self.restarts < 0:
            raise SurrogateError(f"surrogate option restarts={self.restarts!r} must be a whole number >= 0")
        if not (isinstance(self.nugget, (int, float)) and 0 < self.nugget < 1):
            raise SurrogateError(f"surrogate option nugget={self.nugget!r} must be a number in (0, 1)")
        if not (isinstance(self.length_scale_prior, (int, float)) and 0 <= self.length_scale_prior <= 10):
            raise SurrogateError(f"surrogate option length_scale_prior={self.length_scale_prior!r} must be a "
                                 "number in [0, 10] (0: plain maximum likelihood)")

    def _check_fitted(self):
        if not hasattr(self, "gp_"):
            raise NotFittedError("this surrogate is not fitted yet; call fit(X_unit, y) first")

    def _check_points(self, X_unit) -> np.ndarray:
        X = np.asarray(X_unit, dtype=float)
        if X.ndim == 1:
            X = X.reshape(1, -1)
        d = self.X_unit_.shape[1]
        if X.ndim != 2 or X.shape[1] != d:
            raise SurrogateError(f"points must have shape (n, {d}); got {X.shape}")
        if not np.all(np.isfinite(X)):
            raise SurrogateError("points hold NaN or infinite values")
        return X

    # -- fitting -----------------------------------------------------------
    def fit(self, X_unit, y) -> "ResponseSurrogate":
        """Fit the surrogate.

        Parameters
        ----------
        X_unit : array_like, shape (n, d)
            Training points scaled to the unit cube.
        y : array_like, shape (n,)
            Response values, in the response's unit.

        Returns
        -------
        self

        Raises
        ------
        SurrogateError
            Bad options or data (too few distinct points, NaN), or a kernel
            matrix that stays singular.
        """
        start = time.perf_counter()
        self._check_options()
        X, y = self._check_data(X_unit, y)
        learn = self.noise == "learn"
        Xu, yu, groups, spread = _merge_duplicates(X, y)
        self.statements_ = []
        if self.noise == "auto" and spread > 1e-12 * max(1.0, float(np.max(np.abs(y)))):
            learn = True
            self.statements_.append(f"replicated points differ by up to {spread:.3g}: a noise level is learned")
        if not learn:
            if spread > 0:
                self.statements_.append(f"replicated points differ by up to {spread:.3g} but noise is fixed: "
                                        "their mean is fitted")
            X, y = Xu, yu
        else:
            groups = [np.array([i]) for i in range(len(y))]
        if len(Xu) < 3:
            raise SurrogateError(f"only {len(Xu)} distinct point(s): a surrogate needs at least 3")
        self.learn_noise_ = learn
        self.groups_ = groups
        self._set_data(X, y)
        with threadpool_limits(limits=1, user_api="blas"):  # small matrices: threads only contend
            best, self.candidates_ = self._select(learn)
        self._adopt(best["gp"], best["family"], best["trend"], best["alpha"])
        self.loo_ = self._loo()
        self.statements_ += best["notes"] + hyperparameter_statements(self)
        self.fit_seconds_ = time.perf_counter() - start
        return self

    def _check_data(self, X_unit, y):
        X = np.asarray(X_unit, dtype=float)
        y = np.asarray(y, dtype=float).ravel()
        if X.ndim != 2 or len(X) != len(y):
            raise SurrogateError(f"X_unit must have shape (n, d) and y shape (n,); got {X.shape} and {y.shape}")
        if not (np.all(np.isfinite(X)) and np.all(np.isfinite(y))):
            raise SurrogateError("training data hold NaN or infinite values; drop failed runs first")
        if self.names is not None and len(self.names) != X.shape[1]:
            raise SurrogateError(f"{len(self.names)} parameter names for {X.shape[1]} columns")
        return X, y

    def _set_data(self, X, y):
        self.X_unit_ = X
        self.y_ = y
        self.Z_ = X - 0.5
        self.y_mean_ = float(np.mean(y))
        std = float(np.std(y))
        self.constant_ = std <= 1e-12 * max(1.0, abs(self.y_mean_))
        if self.constant_:
            self.statements_.append("the response has the same value at every run: the surrogate is a constant")
            std = 1.0
        self.y_std_ = std
        self.yn_ = (y - self.y_mean_) / std

    def _select(self, learn):
        # Two stages: the families with the first trend, then the other trends with the best family
        # (4 fits instead of 6 when both are "auto").
        families = FAMILIES if self.kernel == "auto" else (self.kernel,)
        trends = TRENDS if self.trend == "auto" else (self.trend,)
        rng = np.random.default_rng(self.seed)
        key = (lambda f: f["loo_mse"]) if self.selection == "loo" else (lambda f: -f["lml"])
        fits = [self._fit_one(family, trends[0], learn, int(rng.integers(2**31 - 1))) for family in families]
        good = [f for f in fits if f["gp"] is not None]
        if not good:
            raise SurrogateError(f"no kernel could be fitted ({fits[0]['error']}); the runs may be nearly "
                                 "duplicated: remove near-copies or set a larger [fit] nugget")
        family = min(good, key=key)["family"]
        fits += [self._fit_one(family, trend, learn, int(rng.integers(2**31 - 1))) for trend in trends[1:]]
        best = min((f for f in fits if f["gp"] is not None), key=key)
        table = [{"kernel": _label(f["family"], f["trend"]), "family": f["family"], "trend": f["trend"],
                  "rmse_loo": (float(np.sqrt(f["loo_mse"])) * self.y_std_ if f["gp"] is not None else None),
                  "log_marginal_likelihood": f["lml"] if f["gp"] is not None else None,
                  "chosen": f is best} for f in fits]
        return best, table

    def _fit_one(self, family, trend, learn, seed):
        """Fit one kernel by maximum likelihood; escalate the nugget if the matrix is singular."""
        alpha = float(self.nugget)
        notes, error = [], ""
        for _ in range(4):
            gp = GaussianProcessRegressor(_build_kernel(family, trend, self.Z_.shape[1], learn), alpha=alpha,
                                          optimizer=self._optimizer(), n_restarts_optimizer=int(self.restarts),
                                          normalize_y=False, copy_X_train=True, random_state=seed)
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                try:
                    gp.fit(self.Z_, self.yn_)
                except (np.linalg.LinAlgError, ValueError) as exc:
                    error = str(exc).splitlines()[0]
                    alpha *= 100
                    continue
            notes += _optimiser_notes(caught, int(self.restarts) + 1)
            if alpha > self.nugget:
                notes.append(f"the kernel matrix was singular with the nugget {self.nugget:g}; "
                             f"{alpha:g} was used (points very close together?)")
            Kinv = cho_solve((gp.L_, True), np.eye(len(self.yn_)))
            loo_n = gp.alpha_ / np.diag(Kinv)
            gp.log_marginal_likelihood_value_ = float(gp.log_marginal_likelihood(gp.kernel_.theta))  # without prior
            return {"gp": gp, "family": family, "trend": trend, "alpha": alpha, "notes": notes,
                    "lml": float(gp.log_marginal_likelihood_value_), "loo_mse": float(np.mean(loo_n**2)),
                    "error": ""}
        return {"gp": None, "family": family, "trend": trend, "alpha": alpha, "notes": notes,
                "lml": None, "loo_mse": np.inf, "error": error}

    def _optimizer(self):
        """L-BFGS-B on minus the log marginal likelihood, plus the length-scale prior when it is set.

        The prior is ``ln(l_k) ~ N(ln 0.5, s^2)`` per parameter (``l_k`` in
        fractions of its range, ``s = length_scale_prior``), a weakly
        informative prior that keeps a few runs from declaring a parameter
        irrelevant (maximum a posteriori estimation, Rasmussen & Williams
        2006, sec. 5.2). With ``s = 0`` this is plain maximum likelihood.
        """
        sd = float(self.length_scale_prior)
        if sd == 0:
            return "fmin_l_bfgs_b"
        d, centre = self.Z_.shape[1], np.log(0.5)

        def optimise(obj_func, theta0, bounds):
            def objective(theta):
                value, grad = obj_func(theta)
                ls = theta[1:1 + d] - centre
                grad = np.array(grad, dtype=float)
                grad[1:1 + d] += ls / sd**2
                return value + float(np.sum(ls**2)) / (2 * sd**2), grad

            res = minimize(objective, theta0, jac=True, bounds=bounds, method="L-BFGS-B")
            if not res.success:
                warnings.warn(f"lbfgs failed to converge: {res.message}", ConvergenceWarning)
            return res.x, res.fun

        return optimise

    def _adopt(self, gp, family, trend, alpha):
        """Take a fitted scikit-learn model as this surrogate's state."""
        self.gp_ = gp
        self.family_ = family
        self.trend_ = trend
        self.nugget_ = float(alpha)
        self.L_ = gp.L_
        self.alpha_vec_ = gp.alpha_
        self.theta_ = np.array(gp.kernel_.theta)
        self.log_marginal_likelihood_ = float(gp.log_marginal_likelihood_value_)
        parts = self._parts()
        self.length_scales_ = parts["length_scales"]
        self.noise_var_n_ = parts["noise"]
        self.noise_std_ = float(np.sqrt(parts["noise"] + alpha) * self.y_std_)

    def _parts(self) -> dict:
        """Hyperparameters by name (normalised units), from ``theta_``."""
        d = self.X_unit_.shape[1]
        p = np.exp(self.theta_)
        return {"family": self.family_, "trend": self.trend_, "nu": _NU.get(self.family_),
                "amplitude": float(p[0]), "length_scales": p[1:1 + d], "trend_variance": float(p[1 + d]),
                "noise": float(p[2 + d]) if self.learn_noise_ else 0.0}

    def _signal_kernel(self):
        """The kernel of the mean function (without the white-noise term)."""
        return self.gp_.kernel_.k1 if self.learn_noise_ else self.gp_.kernel_

    def _loo(self) -> LooResult:
        # Rasmussen & Williams 2006, eqs. 5.10-5.12: residual = [K^-1 y]_i / [K^-1]_ii, var = 1 / [K^-1]_ii
        Kinv = cho_solve((self.L_, True), np.eye(len(self.yn_)))
        dinv = np.diag(Kinv)
        resid = self.alpha_vec_ / dinv * self.y_std_
        std = np.sqrt(1.0 / dinv) * self.y_std_
        total = float(np.sum((self.y_ - self.y_.mean()) ** 2))
        q2 = 1.0 - float(np.sum(resid**2)) / total if total > 0 else float("nan")
        return LooResult(self.y_.copy(), self.y_ - resid, std, q2, float(np.sqrt(np.mean(resid**2))))

    # -- prediction --------------------------------------------------------
    def _posterior_normalised(self, Z, full_cov=False):
        kern = self._signal_kernel()
        Ks = kern(Z, self.Z_)
        mean = Ks @ self.alpha_vec_
        v = solve_triangular(self.L_, Ks.T, lower=True, check_finite=False)
        if full_cov:
            return mean, kern(Z) - v.T @ v
        var = kern.diag(Z) - np.einsum("ij,ij->j", v, v)
        return mean, np.clip(var, 0.0, None)

    def predict(self, X_unit, return_std=False):
        """Posterior mean (and standard deviation) of the response.

        Parameters
        ----------
        X_unit : array_like, shape (m, d)
            Points scaled to the unit cube.
        return_std : bool
            Also return the standard deviation of the mean function (the
            surrogate's own uncertainty, without the noise of a new
            observation; add ``noise_std_**2`` in quadrature for that).

        Returns
        -------
        mean : ndarray, shape (m,)
            Response unit.
        std : ndarray, shape (m,), only with ``return_std``
            Response unit.

        Notes
        -----
        Cost ``O(m n d + m n^2)`` for ``n`` runs, in chunks of :data:`CHUNK`
        points (memory ``O(CHUNK n)``).
        """
        self._check_fitted()
        X = self._check_points(X_unit)
        mean = np.empty(len(X))
        std = np.empty(len(X))
        for s in range(0, len(X), CHUNK):
            m, v = self._posterior_normalised(X[s:s + CHUNK] - 0.5)
            mean[s:s + CHUNK] = self.y_mean_ + self.y_std_ * m
            std[s:s + CHUNK] = self.y_std_ * np.sqrt(v)
        return (mean, std) if return_std else mean

    def predict_cov(self, XA_unit, XB_unit=None) -> np.ndarray:
        """Posterior covariance of the mean function between two point sets, response unit squared."""
        self._check_fitted()
        ZA = self._check_points(XA_unit) - 0.5
        ZB = None if XB_unit is None else self._check_points(XB_unit) - 0.5
        return gppaths.posterior_cov(self, ZA, ZB) * self.y_std_**2

    def sample_paths(self, X_unit, n_paths: int, seed=0, method: str = "auto") -> np.ndarray:
        """Joint posterior draws of the mean function (no observation noise).

        Parameters
        ----------
        X_unit : array_like, shape (m, d)
        n_paths : int
        seed : int or numpy.random.Generator
        method : {"auto", "exact", "features"}
            ``exact``: Cholesky of the ``m x m`` posterior covariance, cost
            ``O(m^3)``, used by ``auto`` up to ``gppaths.EXACT_MAX`` points;
            ``features``: pathwise conditioning of a random-feature prior
            draw, cost linear in ``m`` (see :mod:`doe.surrogate.paths`).

        Returns
        -------
        ndarray, shape (n_paths, m)
            Response unit.

        References
        ----------
        Wilson, J. T. et al. (2020). Efficiently sampling functions from
        Gaussian process posteriors. Proc. ICML 2020.
        """
        self._check_fitted()
        X = self._check_points(X_unit)
        if isinstance(n_paths, bool) or not isinstance(n_paths, (int, np.integer)) or n_paths < 1:
            raise SurrogateError(f"n_paths must be a whole number >= 1, got {n_paths!r}")
        if method not in ("auto", "exact", "features"):
            raise SurrogateError(f"method={method!r} is not one of auto, exact, features")
        draws = gppaths.draw_paths(self, X - 0.5, int(n_paths), np.random.default_rng(seed), method)
        return self.y_mean_ + self.y_std_ * draws

    # -- fixed-hyperparameter refits -------------------------------------
    def _refit_fixed(self, X, y) -> None:
        """Condition on (X, y) with the hyperparameters, family and scaling kept."""
        self.X_unit_ = X
        self.y_ = y
        self.Z_ = X - 0.5
        self.yn_ = (y - self.y_mean_) / self.y_std_
        kernel = _build_kernel(self.family_, self.trend_, X.shape[1], self.learn_noise_)
        kernel.theta = self.theta_
        gp = GaussianProcessRegressor(kernel, alpha=self.nugget_, optimizer=None, normalize_y=False,
                                      copy_X_train=True)
        try:
            gp.fit(self.Z_, self.yn_)
        except (np.linalg.LinAlgError, ValueError) as exc:
            raise SurrogateError(f"the kernel matrix is singular with the stored hyperparameters ({exc}); "
                                 "points may repeat") from exc
        self._adopt(gp, self.family_, self.trend_, self.nugget_)

    def conditioned(self, X_unit, y=None) -> "ResponseSurrogate":
        """A copy conditioned on more points, hyperparameters unchanged.

        Parameters
        ----------
        X_unit : array_like, shape (k, d)
        y : array_like, shape (k,), optional
            Values there, response unit; by default the current posterior mean
            (the kriging-believer fantasy of pending runs, Ginsbourger, Le
            Riche & Carraro 2010).

        Returns
        -------
        ResponseSurrogate
            Leave-one-out results are not recomputed for the copy.
        """
        self._check_fitted()
        X = self._check_points(X_unit)
        y = self.predict(X) if y is None else np.asarray(y, dtype=float).ravel()
        other = copy.copy(self)
        other.statements_ = list(self.statements_)
        other._refit_fixed(np.vstack([self.X_unit_, X]), np.concatenate([self.y_, y]))
        return other

    def capped(self, max_length_scale: float) -> "ResponseSurrogate":
        """A copy whose length scales (fractions of each range) are at most ``max_length_scale``.

        Used to score candidate runs without trusting a parameter's apparent
        irrelevance: a few runs can make a weak effect look absent.
        """
        self._check_fitted()
        other = copy.copy(self)
        d = self.X_unit_.shape[1]
        theta = self.theta_.copy()
        theta[1:1 + d] = np.minimum(theta[1:1 + d], np.log(max_length_scale))
        other.theta_ = theta
        other._refit_fixed(self.X_unit_, self.y_)
        return other

    # -- records -----------------------------------------------------------
    def to_arrays(self) -> dict:
        """Training data for the NPZ file: ``X`` (unit cube) and ``y`` (response unit)."""
        self._check_fitted()
        return {"X": self.X_unit_, "y": self.y_}

    def to_record(self) -> dict:
        """Hyperparameters and scaling as plain JSON values (training data go to NPZ)."""
        self._check_fitted()
        return {"family": self.family_, "trend": self.trend_, "learn_noise": bool(self.learn_noise_),
                "nugget": self.nugget_, "theta": [float(t) for t in self.theta_],
                "y_mean": self.y_mean_, "y_std": self.y_std_, "constant": bool(self.constant_),
                "log_marginal_likelihood": self.log_marginal_likelihood_,
                "options": {"kernel": self.kernel, "trend": self.trend, "noise": self.noise,
                            "restarts": int(self.restarts), "nugget": float(self.nugget),
                            "selection": self.selection, "seed": int(self.seed),
                            "length_scale_prior": float(self.length_scale_prior)},
                "statements": list(self.statements_), "candidates": self.candidates_,
                "groups": [[int(i) for i in g] for g in self.groups_], "fit_seconds": self.fit_seconds_}

    @classmethod
    def from_record(cls, record: dict, X_unit, y, names=None) -> "ResponseSurrogate":
        """Rebuild a fitted surrogate from :meth:`to_record` and its training data (no optimisation)."""
        try:
            model = cls(names=names, **record["options"])
            model._check_options()
            model.family_, model.trend_ = record["family"], record["trend"]
            if model.family_ not in FAMILIES or model.trend_ not in TRENDS:
                raise SurrogateError(f"unknown kernel {model.family_!r} / trend {model.trend_!r}")
            model.learn_noise_ = bool(record["learn_noise"])
            model.nugget_ = float(record["nugget"])
            model.theta_ = np.array(record["theta"], dtype=float)
            model.y_mean_, model.y_std_ = float(record["y_mean"]), float(record["y_std"])
            model.constant_ = bool(record["constant"])
            model.log_marginal_likelihood_ = float(record["log_marginal_likelihood"])
            model.statements_ = [str(s) for s in record["statements"]]
            model.candidates_ = list(record["candidates"])
            model.groups_ = [np.array(g, dtype=int) for g in record["groups"]]
            model.fit_seconds_ = float(record["fit_seconds"])
        except (KeyError, TypeError, ValueError) as exc:
            raise SurrogateError(f"the saved surrogate record is incomplete or malformed ({exc!r})") from exc
        X = np.asarray(X_unit, dtype=float)
        d = X.shape[1]
        if len(model.theta_) != d + 2 + int(model.learn_noise_):
            raise SurrogateError(f"the saved hyperparameters do not fit {d} parameters")
        model._refit_fixed(X, np.asarray(y, dtype=float))
        model.loo_ = model._loo()
        return model


def _optimiser_notes(caught, starts: int) -> list:
    """Plain statements from the warnings the optimiser raised (bound warnings are judged separately)."""
    notes, failed, other = [], 0, []
    for w in caught:
        text = str(w.message)
        if issubclass(w.category, ConvergenceWarning):
            if "close to the specified" in text:
                continue  # hyperparameters at a bound: see doe.surrogate.diagnostics.hyperparameter_statements
            failed += 1
        else:
            other.append(text.splitlines()[0])
    if failed:
        notes.append(f"the optimiser stopped early on {failed} of {starts} start(s); the best start was kept")
    notes += sorted(set(other))
    return notes


# ---------------------------------------------------------------------------
# a surrogate per response of a study


@dataclass
class SurrogateSet:
    """One fitted :class:`ResponseSurrogate` per response of a study, in the study's units.

    Attributes
    ----------
    space : Space
    models : dict of str to ResponseSurrogate
    units : dict of str to str
        Unit of each response.
    goals : dict of str to str
    run_ids : list of str
        The runs the surrogates were fitted on, in row order.
    target_q2 : float
        The accuracy wanted (``[fit] target_q2``), for verdicts and the stopping rule.
    study_name : str
    noise_reason : dict of str to str
        Why a noise level was learned for a response (empty when it was not
        decided by the runs' sources).
    """

    space: object
    models: dict
    units: dict
    goals: dict
    run_ids: list
    target_q2: float = 0.9
    study_name: str = ""
    noise_reason: dict = field(default_factory=dict)

    @property
    def responses(self) -> list:
        """Response names, in study order."""
        return list(self.models)

    def _unit_points(self, X) -> np.ndarray:
        from ..errors import DoeError

        try:
            return self.space.to_unit(X)
        except DoeError as exc:
            raise SurrogateError(str(exc)) from exc

    def predict(self, X) -> dict:
        """Mean and standard deviation of every response.

        Parameters
        ----------
        X : array_like, shape (n, d)
            Points in the STUDY'S UNITS, columns in ``space.names`` order.

        Returns
        -------
        dict of str to (ndarray, ndarray)
            ``{response: (mean, std)}``, each of shape ``(n,)``, in the
            response's unit; ``std`` is the surrogate's own uncertainty.
        """
        U = self._unit_points(X)
        return {name: m.predict(U, return_std=True) for name, m in self.models.items()}

    def sample_paths(self, X, n_paths: int, seed=0, method: str = "auto") -> dict:
        """Joint posterior draws per response at points in study units.

        Returns
        -------
        dict of str to ndarray, shape (n_paths, n)
            Response unit. Each response gets its own stream from ``seed``.
            Cost: see :meth:`ResponseSurrogate.sample_paths`.
        """
        U = self._unit_points(X)
        seeds = np.random.default_rng(seed).integers(2**63 - 1, size=len(self.models))
        return {name: m.sample_paths(U, n_paths, int(s), method) for (name, m), s in zip(self.models.items(), seeds)}

    def fit_report(self) -> dict:
        """The content of ``fit.json``: ``{response: {...}}`` (keys in :mod:`doe.surrogate.diagnostics`)."""
        return {name: response_report(m, self, name) for name, m in self.models.items()}

    def accuracy_met(self) -> bool:
        """Whether every response has ``q2_loo >= target_q2`` (the stopping rule; constant responses pass)."""
        return all(m.constant_ or m.loo_.q2 >= self.target_q2 for m in self.models.values())

    # -- save / load -------------------------------------------------------
    def save(self, folder) -> Path:
        """Write ``model.json`` (hyperparameters, scaling), ``data.npz`` (training data) and ``fit.json``.

        Nothing in the folder is code or a pickle: loading reads JSON and NPZ
        (``allow_pickle=False``) and refits with the stored hyperparameters.
        """
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        meta = {"format": FORMAT[0], "version": FORMAT[1], "study": self.study_name,
                "parameters": [{"name": p.name, "unit": p.unit, "low": p.low, "high": p.high}
                               for p in self.space.parameters],
                "run_ids": list(self.run_ids), "target_q2": self.target_q2,
                "responses": {name: {"unit": self.units[name], "goal": self.goals[name],
                                     "noise_reason": self.noise_reason.get(name, ""), **m.to_record()}
                              for name, m in self.models.items()}}
        arrays = {}
        for i, m in enumerate(self.models.values()):
            arrays.update({f"{key}{i}": value for key, value in m.to_arrays().items()})
        _atomic_write(folder / "model.json", json.dumps(meta, indent=1, allow_nan=False))
        tmp = folder / "data.tmp.npz"
        np.savez(tmp, **arrays)
        os.replace(tmp, folder / "data.npz")
        _atomic_write(folder / "fit.json", json.dumps(self.fit_report(), indent=2, allow_nan=False))
        return folder


def _atomic_write(path: Path, text: str) -> None:
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(text + "\n")
    os.replace(tmp, path)


def load_surrogates(folder, study) -> SurrogateSet:
    """Load a surrogate folder written by :meth:`SurrogateSet.save`.

    Parameters
    ----------
    folder : str or Path
    study : Study
        Its parameters (names and bounds) must match those saved.

    Returns
    -------
    SurrogateSet
        Predictions are identical to those of the saved set.

    Raises
    ------
    SurrogateError
        Missing or malformed files, or a study that does not match.
    """
    folder = Path(folder)
    try:
        meta = json.loads((folder / "model.json").read_text())
        with np.load(folder / "data.npz", allow_pickle=False) as data:
            arrays = {k: data[k] for k in data.files}
    except (OSError, ValueError) as exc:
        raise SurrogateError(f"{folder}: cannot read the saved surrogate ({exc})") from exc
    if not isinstance(meta, dict) or meta.get("format") != FORMAT[0] or meta.get("version") != FORMAT[1]:
        raise SurrogateError(f"{folder}/model.json: not a '{FORMAT[0]}' version {FORMAT[1]} file")
    saved = [(p["name"], float(p["low"]), float(p["high"])) for p in meta["parameters"]]
    ours = [(p.name, p.low, p.high) for p in study.space.parameters]
    if saved != ours:
        raise SurrogateError(f"{folder}: saved for parameters {saved}, but the study has {ours}; refit with 'doe fit'")
    models, units, goals, reasons = {}, {}, {}, {}
    for i, (name, rec) in enumerate(meta["responses"].items()):
        if f"X{i}" not in arrays or f"y{i}" not in arrays:
            raise SurrogateError(f"{folder}/data.npz: training data of '{name}' are missing")
        if rec.get("fidelity") == "two":
            from .twofidelity import TwoFidelitySurrogate

            mine = {k[:-len(str(i))]: v for k, v in arrays.items() if k.endswith(str(i)) and k[:-len(str(i))].isalpha()}
            models[name] = TwoFidelitySurrogate.from_record(rec, mine, study.space.names)
        else:
            models[name] = ResponseSurrogate.from_record(rec, arrays[f"X{i}"], arrays[f"y{i}"], study.space.names)
        units[name], goals[name], reasons[name] = rec["unit"], rec["goal"], rec.get("noise_reason", "")
    return SurrogateSet(study.space, models, units, goals, list(meta["run_ids"]), float(meta["target_q2"]),
                        str(meta["study"]), reasons)


def fit_surrogates(study, results, seed=0, low_results=None, **options) -> SurrogateSet:
    """Fit one surrogate per response of a study to its ok runs.

    Parameters
    ----------
    study : Study
        Supplies the space and the ``[fit]`` settings.
    results : ResultsTable
        Only ``status == "ok"`` rows are used.
    seed : int
        Seed of the optimiser restarts.
    low_results : ResultsTable, optional
        Cheap runs of the study's low-fidelity model (``[low_fidelity]``).
        With them (and ``fidelity`` not ``"single"``) each response gets a
        :class:`doe.surrogate.twofidelity.TwoFidelitySurrogate`: ``results`` are the
        expensive level.
    **options
        Override ``[fit]`` settings: ``kernel``, ``trend``, ``noise``,
        ``restarts``, ``nugget``, ``selection``, ``target_q2``,
        ``exact_sources``, ``length_scale_prior``, ``fidelity``.

    Returns
    -------
    SurrogateSet

    Raises
    ------
    SurrogateError
        No ok runs, a response that cannot be fitted, or ``fidelity = "two"``
        without cheap runs.

    Notes
    -----
    With ``noise = "auto"``, a noise level is learned for every response when
    any run comes from a source other than the study's exact sources
    (``[fit] exact_sources``, by default ``builtin`` and ``command``), and for
    a response whose replicated points disagree.
    """
    settings = _settings(study, options)
    ok = results.ok
    if len(ok) == 0:
        raise SurrogateError(f"{results.path or 'results'}: no ok runs to fit")
    two = _two_fidelity(settings["fidelity"], low_results)
    X = study.space.to_unit(results.X())
    given = ok["source"] if "source" in ok.columns else ["recorded"] * len(ok)
    sources = sorted({str(s) for s in given} - set(settings["exact_sources"]))
    noise, reason = settings["noise"], ""
    if noise == "auto" and sources:
        noise, reason = "learn", f"runs from {', '.join(sources)} are treated as noisy: a noise level is learned"
    models, reasons = {}, {}
    names = study.space.names
    for k, resp in enumerate(study.responses):
        options = dict(kernel=settings["kernel"], trend=settings["trend"], noise=noise,
                       restarts=settings["restarts"], nugget=settings["nugget"], selection=settings["selection"],
                       seed=int(seed) + 1000 * k, names=names, length_scale_prior=settings["length_scale_prior"])
        try:
            if two:
                from .twofidelity import TwoFidelitySurrogate

                cheap = low_results.ok[np.isfinite(low_results.ok[resp.name].to_numpy(float))]
                model = TwoFidelitySurrogate(**options).fit(study.space.to_unit(cheap[names].to_numpy(float)),
                                                            cheap[resp.name].to_numpy(float),
                                                            X, results.y(resp.name))
            else:
                model = ResponseSurrogate(**options).fit(X, results.y(resp.name))
        except SurrogateError as exc:
            raise SurrogateError(f"response '{resp.name}': {exc}") from exc
        models[resp.name] = model
        reasons[resp.name] = reason
    return SurrogateSet(study.space, models, {r.name: r.unit for r in study.responses},
                        {r.name: r.goal for r in study.responses}, list(ok["run_id"]), settings["target_q2"],
                        study.name, reasons)


def _two_fidelity(fidelity: str, low_results) -> bool:
    """Whether to fit two fidelities (``[fit] fidelity``: auto, single or two)."""
    if fidelity not in ("auto", "single", "two"):
        raise SurrogateError(f"fidelity={fidelity!r} is not one of auto, single, two")
    if fidelity == "two" and (low_results is None or len(low_results.ok) == 0):
        raise SurrogateError("a two-fidelity fit needs cheap runs: add a [low_fidelity] table to the study "
                             "(or give them with --low-results)")
    return fidelity != "single" and low_results is not None and len(low_results.ok) > 0


def _settings(study, options) -> dict:
    fit = getattr(study, "fit", None)
    base = {"kernel": "auto", "trend": "auto", "noise": "auto", "restarts": 3, "nugget": DEFAULT_NUGGET,
            "selection": "loo", "target_q2": 0.9, "exact_sources": ("builtin", "command"),
            "length_scale_prior": DEFAULT_LENGTH_SCALE_PRIOR, "fidelity": "auto"}
    if fit is not None:
        base.update({k: getattr(fit, k) for k in base})
    unknown = set(options) - set(base)
    if unknown:
        raise SurrogateError(f"unknown surrogate option(s) {sorted(unknown)}; known: {', '.join(base)}")
    base.update(options)
    return base


def prediction_frame(sset: SurrogateSet, points):
    """Predictions as a table: ``run_id`` (if given), the parameters, ``<response>_mean``, ``<response>_std``.

    Parameters
    ----------
    sset : SurrogateSet
    points : DataFrame
        Parameter columns in study units, ``run_id`` optional.

    Returns
    -------
    DataFrame
        Means and standard deviations in each response's unit; the standard
        deviation is the surrogate's own uncertainty (no observation noise).
    """
    import pandas as pd

    names = sset.space.names
    out = pd.DataFrame(points[[c for c in ["run_id", *names] if c in points.columns]]).reset_index(drop=True)
    for name, (mean, std) in sset.predict(points[names].to_numpy(dtype=float)).items():
        out[f"{name}_mean"] = mean
        out[f"{name}_std"] = std
    return out
