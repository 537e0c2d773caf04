"""Gaussian-process surrogate of one response: fitting, kernel choice, leave-one-out checks.

One :class:`ResponseSurrogate` per response (a scikit-learn
``GaussianProcessRegressor`` with kernels, bounds, restarts and seed set here,
never the library's defaults); :class:`doe.surrogate.set.SurrogateSet` holds
one per response of a study, predicts in the study's units and is saved to a
folder of JSON and NPZ files that loading never executes.

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
import time
import warnings
from dataclasses import dataclass

import numpy as np
from scipy.linalg import cho_solve, solve_triangular
from scipy.optimize import minimize
from sklearn.exceptions import ConvergenceWarning
from threadpoolctl import threadpool_limits
from sklearn.gaussian_process import GaussianProcessRegressor

from ..checks import is_whole
from .. import defaults
from . import paths as gppaths
from ..errors import NotFittedError, SurrogateError
from ..seeds import seed_value
from .diagnostics import hyperparameter_statements
from .kernels import FAMILIES, NU, TRENDS, build_kernel, kernel_label

__all__ = ["ResponseSurrogate", "LooResult", "NOISE_MODES", "SELECTIONS", "DUPLICATE_TOL", "CHUNK"]

NOISE_MODES = ("auto", "learn", "fixed")
SELECTIONS = ("loo", "likelihood")
#: Two points closer than this in every scaled coordinate are the same point.
DUPLICATE_TOL = 1e-9
#: Query points predicted at once (bounds memory at CHUNK x runs).
CHUNK = 20000


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

    def __init__(self, kernel=defaults.KERNEL, trend=defaults.TREND, noise=defaults.NOISE, restarts=defaults.RESTARTS,
                 nugget=defaults.NUGGET, selection=defaults.SELECTION, seed=0, names=None,
                 length_scale_prior=defaults.LENGTH_SCALE_PRIOR):
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
        if not is_whole(self.restarts) or self.restarts < 0:
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
        table = [{"kernel": kernel_label(f["family"], f["trend"]), "family": f["family"], "trend": f["trend"],
                  "rmse_loo": (float(np.sqrt(f["loo_mse"])) * self.y_std_ if f["gp"] is not None else None),
                  "log_marginal_likelihood": f["lml"] if f["gp"] is not None else None,
                  "chosen": f is best} for f in fits]
        return best, table

    def _fit_one(self, family, trend, learn, seed):
        """Fit one kernel by maximum likelihood; escalate the nugget if the matrix is singular."""
        alpha = float(self.nugget)
        notes, error = [], ""
        for _ in range(4):
            gp = GaussianProcessRegressor(build_kernel(family, trend, self.Z_.shape[1], learn), alpha=alpha,
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
        return {"family": self.family_, "trend": self.trend_, "nu": NU.get(self.family_),
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
        if not is_whole(n_paths) or n_paths < 1:
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
        kernel = build_kernel(self.family_, self.trend_, X.shape[1], self.learn_noise_)
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

    def refitted(self, X_unit, y) -> "ResponseSurrogate":
        """A copy conditioned on exactly these runs (unit cube, response unit), hyperparameters unchanged.

        Leave-one-out results are not recomputed for the copy.
        """
        self._check_fitted()
        other = copy.copy(self)
        other._refit_fixed(np.asarray(X_unit, dtype=float), np.asarray(y, dtype=float))
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

    def to_dict(self) -> dict:
        """Hyperparameters and scaling as plain JSON values (training data go to NPZ)."""
        self._check_fitted()
        return {"family": self.family_, "trend": self.trend_, "learn_noise": bool(self.learn_noise_),
                "nugget": self.nugget_, "theta": [float(t) for t in self.theta_],
                "y_mean": self.y_mean_, "y_std": self.y_std_, "constant": bool(self.constant_),
                "log_marginal_likelihood": self.log_marginal_likelihood_,
                "options": {"kernel": self.kernel, "trend": self.trend, "noise": self.noise,
                            "restarts": int(self.restarts), "nugget": float(self.nugget),
                            "selection": self.selection, "seed": seed_value(self.seed),
                            "length_scale_prior": float(self.length_scale_prior)},
                "statements": list(self.statements_), "candidates": self.candidates_,
                "groups": [[int(i) for i in g] for g in self.groups_], "fit_seconds": self.fit_seconds_}

    @classmethod
    def from_dict(cls, record: dict, X_unit, y, names=None) -> "ResponseSurrogate":
        """Rebuild a fitted surrogate from :meth:`to_dict` and its training data (no optimisation)."""
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
