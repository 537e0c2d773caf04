"""A Gaussian process over mixed inputs: continuous knobs and choices (named levels).

Inputs are rows whose continuous columns lie in the unit cube and whose choice
columns hold level indices ``0 .. L-1`` (what :meth:`doe.space.Space.to_unit`
gives). The kernel multiplies the usual stationary kernel of the continuous
columns by an exchangeable correlation per choice::

    k(x, x') = s^2 K_family(z, z'; l_1..l_p) * prod_j rho_j^[c_j != c'_j] + c

with ``z = u - 1/2`` the centred continuous inputs, ``rho_j = exp(-theta_j)``
in ``(0, 1)`` the correlation between any two different levels of choice
``j`` (the same for every pair: exchangeable, or compound symmetry) and ``c``
a constant trend. It is the one-hot encoding of a choice under a squared-
exponential kernel with one length scale shared by its indicator columns
(``rho = exp(-1 / l^2)``), written so that each choice has one parameter.
A small ``rho`` makes the levels independent surrogates that share only the
length scales and the variance; ``rho`` near 1 pools the levels into one
surface: the fit learns how much the levels share.

:class:`SeparateSurrogates` is the baseline it is compared with: one
:class:`~doe.surrogate.gp.ResponseSurrogate` per level combination, each
fitted on that combination's runs alone.

References
----------
.. [1] Qian, P. Z. G., Wu, H. and Wu, C. F. J. (2008). Gaussian process models
   for computer experiments with qualitative and quantitative factors.
   Technometrics 50(3), 383-396 (exchangeable and multiplicative correlations).
.. [2] Zhou, Q., Qian, P. Z. G. and Zhou, S. (2011). A simple approach to
   emulation for computer models with qualitative and quantitative factors.
   Technometrics 53(3), 266-273.
.. [3] Roustant, O., Padonou, E., Deville, Y., Clement, A., Perrin, G.,
   Giorla, J. and Wynn, H. (2020). Group kernels for Gaussian process
   metamodels with categorical inputs. SIAM/ASA J. Uncertainty Quantification
   8(2), 775-806 (compound symmetry).
.. [4] Rasmussen, C. E. and Williams, C. K. I. (2006). Gaussian Processes for
   Machine Learning. MIT Press, eqs. 5.8 and 5.12.
"""
from __future__ import annotations

import warnings

import numpy as np
from scipy.linalg import cho_solve, solve_triangular
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import RBF, ConstantKernel, Hyperparameter, Kernel, Matern
from threadpoolctl import threadpool_limits

from .. import defaults
from ..checks import is_whole
from ..errors import NotFittedError, SurrogateError
from ..seeds import child_seeds
from .gp import LooResult, ResponseSurrogate
from .levelbands import BandWidening, band_widening
from .kernels import AMPLITUDE_BOUNDS, FAMILIES, LENGTH_SCALE_BOUNDS, NU, TREND_BOUNDS

__all__ = ["LevelKernel", "UnrestrictedLevelKernel", "hypersphere_correlation", "MixedSurrogate", "SeparateSurrogates", "best_level_surrogate", "LEVEL_SCALE_BOUNDS",
           "LEVEL_ANGLE_BOUNDS"]

#: Bounds of ``theta = -ln(rho)``: level correlations from 0.999 (pooled) to 5e-5 (independent levels).
LEVEL_SCALE_BOUNDS = (1e-3, 10.0)


def _level_counts(levels) -> tuple:
    out = tuple(int(v) for v in levels)
    if any(v == 1 or v < 0 for v in out) or not any(v == 0 for v in out):
        raise SurrogateError(f"levels {list(levels)} must give 0 for each continuous column and the level count "
                             "(at least 2) for each choice column, with at least one continuous column")
    return out


def _hyperparameter(name, value, bounds) -> Hyperparameter:
    """A numeric hyperparameter with one element per entry of ``value`` (a scalar counts as one)."""
    n = np.size(value)
    return Hyperparameter(name, "numeric", bounds, n if n > 1 else 1)


class _LevelBase(Kernel):
    """The continuous part shared by the level kernels: a stationary kernel on the continuous columns."""

    @property
    def _cont(self):
        return [j for j, v in enumerate(self.levels) if v == 0]

    @property
    def _cat(self):
        return [j for j, v in enumerate(self.levels) if v > 0]

    @property
    def hyperparameter_length_scale(self):
        return _hyperparameter("length_scale", self.length_scale, self.length_scale_bounds)

    def _base(self):
        if self.family == "sqexp":
            return RBF(self.length_scale, self.length_scale_bounds)
        return Matern(self.length_scale, self.length_scale_bounds, nu=NU[self.family])

    def _continuous(self, X, Y, eval_gradient):
        """Rows of X and of Y (X when None), the continuous kernel between them and its gradient (or None)."""
        X = np.atleast_2d(X)
        if eval_gradient and Y is not None:
            raise ValueError("gradient can only be evaluated when Y is None")
        B = X if Y is None else np.atleast_2d(Y)
        if eval_gradient:
            Kc, dKc = self._base()(X[:, self._cont], None, eval_gradient=True)
            return X, B, Kc, dKc
        return X, B, self._base()(X[:, self._cont], B[:, self._cont]), None

    def diag(self, X):
        return np.ones(np.atleast_2d(X).shape[0])

    def is_stationary(self):
        return True


class LevelKernel(_LevelBase):
    """Continuous kernel times an exchangeable correlation per choice (see the module docstring).

    Parameters
    ----------
    levels : tuple of int
        Per input column: 0 for a continuous column, the number of levels of a choice column.
    family : {"sqexp", "matern52", "matern32"}
    length_scale : float or ndarray
        One per continuous column, in fractions of its range.
    length_scale_bounds : pair of float or "fixed"
    level_scale : float or ndarray
        ``theta_j = -ln(rho_j)``, one per choice column.
    level_scale_bounds : pair of float or "fixed"
    """

    def __init__(self, levels, family="matern52", length_scale=0.3, length_scale_bounds=LENGTH_SCALE_BOUNDS,
                 level_scale=1.0, level_scale_bounds=LEVEL_SCALE_BOUNDS):
        self.levels = levels
        self.family = family
        self.length_scale = length_scale
        self.length_scale_bounds = length_scale_bounds
        self.level_scale = level_scale
        self.level_scale_bounds = level_scale_bounds

    @property
    def hyperparameter_level_scale(self):
        return _hyperparameter("level_scale", self.level_scale, self.level_scale_bounds)

    def __call__(self, X, Y=None, eval_gradient=False):
        X, B, Kc, dKc = self._continuous(X, Y, eval_gradient)
        theta = np.atleast_1d(np.asarray(self.level_scale, dtype=float))
        # mismatch of each choice column between the rows of X and of Y: 1 where the levels differ
        M = np.stack([X[:, j][:, None] != B[:, j][None, :] for j in self._cat], axis=-1).astype(float)
        Kl = np.exp(-M @ theta)
        K = Kc * Kl
        if not eval_gradient:
            return K
        grads = [dKc * Kl[..., None]]                         # empty when the length scales are fixed
        if not self.hyperparameter_level_scale.fixed:
            grads.append(-M * theta * K[..., None])          # d K / d ln(theta_j)
        return K, np.concatenate(grads, axis=-1)

    def __repr__(self):
        return (f"{type(self).__name__}(family={self.family}, length_scale={np.round(self.length_scale, 4)}, "
                f"rho={np.round(np.exp(-np.atleast_1d(self.level_scale)), 4)})")


#: Bounds of the hypersphere angles, radians: correlations from +1 to -1 (just inside).
LEVEL_ANGLE_BOUNDS = (1e-3, np.pi - 1e-3)


def hypersphere_correlation(angles, n_levels: int):
    """Level correlation matrix ``T = L L^T`` from hypersphere angles, and its derivatives.

    Row ``r`` of the lower-triangular ``L`` is a unit vector given by ``r``
    angles ``a_1..a_r`` in ``(0, pi)``: ``L[r, k] = sin a_1 ... sin a_k cos a_(k+1)``
    for ``k < r`` and ``L[r, r] = sin a_1 ... sin a_r`` (Zhou, Qian & Zhou 2011,
    eqs. 7-8), so ``T`` is a valid correlation matrix for any angles and any
    correlation matrix is reached.

    Parameters
    ----------
    angles : array_like, shape (n_levels (n_levels - 1) / 2,)
        Row 1's angle, then row 2's two, ...
    n_levels : int

    Returns
    -------
    T : ndarray, shape (n_levels, n_levels)
    dT : ndarray, shape (n_levels, n_levels, n_angles)
        ``dT / d angle``.
    """
    a = np.atleast_1d(np.asarray(angles, dtype=float))
    L = np.zeros((n_levels, n_levels))
    dL = np.zeros((n_levels, n_levels, len(a)))
    L[0, 0] = 1.0
    q = 0
    for r in range(1, n_levels):
        ang = a[q:q + r]
        sines = np.concatenate([[1.0], np.cumprod(np.sin(ang))])        # prod_{m<k} sin a_m, k = 0..r
        L[r, :r] = sines[:r] * np.cos(ang)
        L[r, r] = sines[r]
        for i in range(r):                                              # d L[r, k] / d a_i
            dL[r, i + 1:r + 1, q + i] = L[r, i + 1:r + 1] / np.tan(ang[i])
            dL[r, i, q + i] = -sines[i] * np.sin(ang[i])
        q += r
    T = L @ L.T
    dT = np.einsum("rka,sk->rsa", dL, L)
    return T, dT + dT.transpose(1, 0, 2)


class UnrestrictedLevelKernel(_LevelBase):
    """Continuous kernel times a full level correlation matrix per choice (hypersphere form).

    Each pair of levels of a choice gets its own correlation, positive or
    negative (Zhou, Qian & Zhou 2011; the unrestricted correlation of Qian,
    Wu & Wu 2008): two similar wing sections can be close while a third
    stands apart. It costs ``L (L - 1) / 2`` parameters per choice of ``L``
    levels against one for :class:`LevelKernel`; for two levels the two are
    the same model (apart from the sign the angle allows).

    Parameters
    ----------
    levels, family, length_scale, length_scale_bounds
        As for :class:`LevelKernel`.
    level_angle : float or ndarray
        The hypersphere angles of every choice column in turn (see :func:`hypersphere_correlation`).
    level_angle_bounds : pair of float or "fixed"
    """

    def __init__(self, levels, family="matern52", length_scale=0.3, length_scale_bounds=LENGTH_SCALE_BOUNDS,
                 level_angle=1.2, level_angle_bounds=LEVEL_ANGLE_BOUNDS):
        self.levels = levels
        self.family = family
        self.length_scale = length_scale
        self.length_scale_bounds = length_scale_bounds
        self.level_angle = level_angle
        self.level_angle_bounds = level_angle_bounds

    @property
    def hyperparameter_level_angle(self):
        return _hyperparameter("level_angle", self.level_angle, self.level_angle_bounds)

    def correlations(self) -> list:
        """The level correlation matrix of each choice column, in column order."""
        return [T for T, _ in self._matrices()]

    def _matrices(self):
        angles = np.atleast_1d(np.asarray(self.level_angle, dtype=float))
        out, q = [], 0
        for j in self._cat:
            n = self.levels[j] * (self.levels[j] - 1) // 2
            out.append(hypersphere_correlation(angles[q:q + n], self.levels[j]))
            q += n
        return out

    def __call__(self, X, Y=None, eval_gradient=False):
        X, B, Kc, dKc = self._continuous(X, Y, eval_gradient)
        mats = self._matrices()
        parts = [T[np.ix_(X[:, j].astype(int), B[:, j].astype(int))] for j, (T, _) in zip(self._cat, mats)]
        Kl = np.prod(parts, axis=0)
        K = Kc * Kl
        if not eval_gradient:
            return K
        grads = [dKc * Kl[..., None]]
        if not self.hyperparameter_level_angle.fixed:
            angles, q = np.atleast_1d(np.asarray(self.level_angle, dtype=float)), 0
            for c, (j, (_, dT)) in enumerate(zip(self._cat, mats)):
                others = Kc * np.prod([p for i, p in enumerate(parts) if i != c], axis=0)
                ix = np.ix_(X[:, j].astype(int), X[:, j].astype(int))
                n = dT.shape[2]
                # d K / d ln(a) = a * dK / da
                grads.append(others[..., None] * dT[ix[0], ix[1], :] * angles[q:q + n])
                q += n
        return K, np.concatenate(grads, axis=-1)

    def __repr__(self):
        return f"{type(self).__name__}(family={self.family}, length_scale={np.round(self.length_scale, 4)})"


class _LevelSurrogate:
    """Options and input checks shared by :class:`MixedSurrogate` and :class:`SeparateSurrogates`."""

    def __init__(self, levels, kernel="matern52", restarts=defaults.RESTARTS, nugget=defaults.NUGGET, seed=0):
        self.levels = levels
        self.kernel = kernel
        self.restarts = restarts
        self.nugget = nugget
        self.seed = seed

    @staticmethod
    def _check_points(X, levels) -> np.ndarray:
        X = np.asarray(X, dtype=float)
        if X.ndim == 1:
            X = X.reshape(1, -1)
        if X.ndim != 2 or X.shape[1] != len(levels):
            raise SurrogateError(f"points must have shape (n, {len(levels)}); got {X.shape}")
        if not np.all(np.isfinite(X)):
            raise SurrogateError("points hold NaN or infinite values; drop failed runs first")
        for j, n in enumerate(levels):
            if n and (np.any(X[:, j] != np.rint(X[:, j])) or X[:, j].min() < 0 or X[:, j].max() > n - 1):
                raise SurrogateError(f"column {j} is a choice of {n} levels: it must hold indices 0 to {n - 1}")
        return X


class MixedSurrogate(_LevelSurrogate):
    """A Gaussian-process surrogate of one response over continuous inputs and choices.

    Parameters
    ----------
    levels : sequence of int
        Per input column: 0 for a continuous column (unit cube), the number of
        levels of a choice column (level indices).
    kernel : {"sqexp", "matern52", "matern32"}
        Family of the continuous part.
    restarts : int
        Extra optimiser starts, drawn from ``seed``.
    nugget : float
        Fixed diagonal term, relative to the response's variance.
    seed : int
        Seed of the optimiser starts; same seed, same surrogate.
    correlation : {"exchangeable", "unrestricted"}
        One correlation for every pair of levels of a choice (:class:`LevelKernel`), or one per pair
        (:class:`UnrestrictedLevelKernel`; more parameters, for choices of three or more levels).

    Attributes
    ----------
    gp_ : GaussianProcessRegressor
    length_scales_ : ndarray
        One per continuous column, fractions of its range.
    level_correlations_ : ndarray
        ``rho_j`` per choice column: the correlation between two different levels (exchangeable; NaN
        for the unrestricted form).
    level_matrices_ : list of ndarray
        The correlation matrix between the levels of each choice column.
    loo_ : LooResult
        Closed-form leave-one-out results (Rasmussen & Williams 2006, eq. 5.12).
    log_marginal_likelihood_ : float
    statements_ : list of str
        Plain notes (optimiser trouble, a correlation at a bound).
    band_ : BandWidening or None
        The band's widening after :meth:`widen` (None: the plug-in band); ``band_factor_`` is its factor.

    References
    ----------
    Qian, Wu & Wu (2008); Zhou, Qian & Zhou (2011); Roustant et al. (2020). See the module docstring.
    """


    def _check_options(self):
        if self.correlation not in ("exchangeable", "unrestricted"):
            raise SurrogateError(f"surrogate option correlation={self.correlation!r} is not one of exchangeable, "
                                 "unrestricted")
        if self.kernel not in FAMILIES:
            raise SurrogateError(f"surrogate option kernel={self.kernel!r} is not one of {', '.join(FAMILIES)}")
        if not is_whole(self.restarts) or self.restarts < 0:
            raise SurrogateError(f"surrogate option restarts={self.restarts!r} must be a whole number >= 0")
        if not (isinstance(self.nugget, (int, float)) and 0 < self.nugget < 1):
            raise SurrogateError(f"surrogate option nugget={self.nugget!r} must be a number in (0, 1)")
        return _level_counts(self.levels)

    def _scaled(self, X) -> np.ndarray:
        Z = X.copy()
        cont = [j for j, n in enumerate(self.levels_) if n == 0]
        Z[:, cont] -= 0.5
        return Z

    def __init__(self, levels, kernel="matern52", restarts=defaults.RESTARTS, nugget=defaults.NUGGET, seed=0,
                 correlation="exchangeable"):
        super().__init__(levels, kernel, restarts, nugget, seed)
        self.correlation = correlation

    def _level_kernel(self):
        n_cont = sum(n == 0 for n in self.levels_)
        ls = np.full(n_cont, 0.3) if n_cont > 1 else 0.3
        if self.correlation == "exchangeable":
            n_cat = len(self.levels_) - n_cont
            return LevelKernel(self.levels_, self.kernel, ls, level_scale=np.full(n_cat, 1.0) if n_cat > 1 else 1.0)
        n_angles = sum(n * (n - 1) // 2 for n in self.levels_)
        return UnrestrictedLevelKernel(self.levels_, self.kernel, ls,
                                       level_angle=np.full(n_angles, 1.2) if n_angles > 1 else 1.2)

    def fit(self, X, y) -> "MixedSurrogate":
        """Fit by maximum marginal likelihood (Rasmussen & Williams 2006, eq. 5.8).

        Parameters
        ----------
        X : array_like, shape (n, d)
            Continuous columns in the unit cube, choice columns as level indices.
        y : array_like, shape (n,)
            Response values, in the response's unit.

        Returns
        -------
        self
        """
        self.levels_ = self._check_options()
        X = self._check_points(X, self.levels_)
        y = np.asarray(y, dtype=float).ravel()
        if len(y) != len(X) or not np.all(np.isfinite(y)):
            raise SurrogateError(f"y must hold {len(X)} finite values, one per row of X")
        if len(X) < 3:
            raise SurrogateError(f"only {len(X)} run(s): a surrogate needs at least 3")
        self.X_, self.y_ = X, y
        self.y_mean_, self.y_std_ = float(np.mean(y)), float(np.std(y)) or 1.0
        yn = (y - self.y_mean_) / self.y_std_
        kern = ConstantKernel(1.0, AMPLITUDE_BOUNDS) * self._level_kernel() + ConstantKernel(0.1, TREND_BOUNDS)
        self.statements_ = []
        alpha = float(self.nugget)
        for _ in range(4):
            gp = GaussianProcessRegressor(kern, alpha=alpha, n_restarts_optimizer=int(self.restarts),
                                          random_state=int(self.seed), normalize_y=False)
            with warnings.catch_warnings(record=True) as caught, threadpool_limits(limits=1, user_api="blas"):
                warnings.simplefilter("always")
                try:
                    gp.fit(self._scaled(X), yn)
                    break
                except (np.linalg.LinAlgError, ValueError):
                    alpha *= 100
        else:
            raise SurrogateError("the kernel matrix stays singular: the runs may be nearly duplicated; remove "
                                 "near-copies or set a larger nugget")
        if alpha > self.nugget:
            self.statements_.append(f"the kernel matrix was singular with the nugget {self.nugget:g}; {alpha:g} "
                                    "was used (points very close together?)")
        if any("converge" in str(w.message) for w in caught):
            self.statements_.append("the likelihood optimiser stopped before converging at some starts")
        self._adopt(gp, yn)
        return self

    def _adopt(self, gp, yn):
        self.gp_ = gp
        self._L_inv = solve_triangular(gp.L_, np.eye(len(gp.L_)), lower=True)
        lk = gp.kernel_.k1.k2
        self.length_scales_ = np.atleast_1d(np.asarray(lk.length_scale, dtype=float))
        counts = [n for n in self.levels_ if n]
        if self.correlation == "exchangeable":
            self.level_correlations_ = np.exp(-np.atleast_1d(np.asarray(lk.level_scale, dtype=float)))
            self.level_matrices_ = [(1 - r) * np.eye(n) + r for r, n in zip(self.level_correlations_, counts)]
        else:
            self.level_correlations_ = np.full(len(counts), np.nan)
            self.level_matrices_ = lk.correlations()
        self.log_marginal_likelihood_ = float(gp.log_marginal_likelihood_value_)
        self.statements_ += self._bound_statements()
        # Rasmussen & Williams 2006, eq. 5.12: residual = [K^-1 y]_i / [K^-1]_ii, var = 1 / [K^-1]_ii
        dinv = np.diag(cho_solve((gp.L_, True), np.eye(len(yn))))
        resid = gp.alpha_ / dinv * self.y_std_
        total = float(np.sum((self.y_ - self.y_.mean()) ** 2))
        q2 = 1.0 - float(np.sum(resid**2)) / total if total > 0 else float("nan")
        self.loo_ = LooResult(self.y_.copy(), self.y_ - resid, np.sqrt(1.0 / dinv) * self.y_std_, q2,
                              float(np.sqrt(np.mean(resid**2))))
        self.band_ = None

    @property
    def band_factor_(self) -> float:
        """What the fitted standard deviation is multiplied by (1 until :meth:`widen`)."""
        return 1.0 if self.band_ is None else self.band_.factor

    def widen(self, X_check, seed=0) -> "MixedSurrogate":
        """Widen the band by :func:`~doe.surrogate.levelbands.band_widening` at the check points ``X_check``.

        The kernel settings (level correlations included) are sampled; the band, the sample paths and the
        leave-one-out standard deviations are widened about the fitted mean.
        """
        if not hasattr(self, "gp_"):
            raise NotFittedError("this surrogate is not fitted yet; call fit(X, y) first")
        Z = self._scaled(self._check_points(X_check, self.levels_))
        loo = self.loo_ if self.band_ is None else self._plugin_loo
        band = band_widening(self.gp_, Z, sum(n == 0 for n in self.levels_), loo, seed)
        self._set_band(band)
        return self

    def _set_band(self, band) -> None:
        loo = self.loo_ if self.band_ is None else self._plugin_loo
        self._plugin_loo, self.band_ = loo, band
        self.loo_ = LooResult(loo.observed, loo.predicted, loo.std * band.factor, loo.q2, loo.rmse)

    def _bound_statements(self) -> list:
        """Plain notes on hyperparameters at their bounds (the optimiser's warnings say the same less plainly)."""
        notes = []
        cont = [j for j, n in enumerate(self.levels_) if n == 0]
        for j, ls in zip(cont, np.broadcast_to(self.length_scales_, (len(cont),))):
            if ls >= 0.99 * LENGTH_SCALE_BOUNDS[1]:
                notes.append(f"column {j}: its length scale is at the upper bound: the response hardly changes "
                             "along it over the runs")
        for j, rho in zip([j for j, n in enumerate(self.levels_) if n], self.level_correlations_):
            if rho > np.exp(-LEVEL_SCALE_BOUNDS[0]) - 1e-6:
                notes.append(f"choice column {j}: its levels behave as one surface (correlation {rho:.3f})")
            elif rho < 0.01:
                notes.append(f"choice column {j}: its levels share almost nothing (correlation {rho:.1e}); "
                             "separate surrogates per level may do better")
        return notes

    def predict(self, X, return_std=False):
        """Posterior mean (and standard deviation) of the response, in its unit.

        Parameters
        ----------
        X : array_like, shape (n, d)
            Continuous columns in the unit cube, choice columns as level indices.
        return_std : bool

        Returns
        -------
        mean : ndarray, shape (n,)
        std : ndarray, shape (n,), when ``return_std``
        """
        if not hasattr(self, "gp_"):
            raise NotFittedError("this surrogate is not fitted yet; call fit(X, y) first")
        X = self._check_points(X, self.levels_)
        # the posterior of Rasmussen & Williams 2006, eqs. 2.25-2.26, with L^-1 kept from the fit: small
        # matrix products only, no BLAS thread set-up per call (the robust search predicts thousands of times)
        Z = self._scaled(X)
        Ks = self.gp_.kernel_(Z, self.gp_.X_train_)
        mean = Ks @ self.gp_.alpha_
        if not return_std:
            return mean * self.y_std_ + self.y_mean_
        V = Ks @ self._L_inv.T
        var = np.clip(self.gp_.kernel_.diag(Z) - np.einsum("ij,ij->i", V, V), 0.0, None)
        return mean * self.y_std_ + self.y_mean_, np.sqrt(var) * (self.y_std_ * self.band_factor_)


    def to_dict(self) -> dict:
        """Options, hyperparameters and scaling as plain JSON values (the runs go to the NPZ file)."""
        if not hasattr(self, "gp_"):
            raise NotFittedError("this surrogate is not fitted yet; call fit(X, y) first")
        return {"kind": "mixed", "levels": list(self.levels_), "kernel": self.kernel, "correlation": self.correlation,
                "restarts": int(self.restarts), "nugget": float(self.nugget), "seed": int(self.seed),
                "alpha": float(self.gp_.alpha), "theta": [float(t) for t in self.gp_.kernel_.theta],
                "statements": list(self.statements_), "band": None if self.band_ is None else self.band_.to_dict()}

    @classmethod
    def from_dict(cls, record: dict, X, y) -> "MixedSurrogate":
        """Rebuild a fitted surrogate from :meth:`to_dict` and its runs, without optimising."""
        try:
            model = cls(record["levels"], record["kernel"], record["restarts"], record["nugget"], record["seed"],
                        record["correlation"])
            model.levels_ = model._check_options()
            theta, alpha = np.array(record["theta"], dtype=float), float(record["alpha"])
            statements = [str(v) for v in record["statements"]]
        except (KeyError, TypeError, ValueError) as exc:
            raise SurrogateError(f"the saved mixed surrogate record is incomplete or malformed ({exc!r})") from exc
        X = model._check_points(X, model.levels_)
        y = np.asarray(y, dtype=float).ravel()
        model.X_, model.y_ = X, y
        model.y_mean_, model.y_std_ = float(np.mean(y)), float(np.std(y)) or 1.0
        kern = ConstantKernel(1.0, AMPLITUDE_BOUNDS) * model._level_kernel() + ConstantKernel(0.1, TREND_BOUNDS)
        if len(theta) != len(kern.theta):
            raise SurrogateError(f"the saved hyperparameters ({len(theta)}) do not fit this kernel ({len(kern.theta)})")
        gp = GaussianProcessRegressor(kern.clone_with_theta(theta), alpha=alpha, optimizer=None, normalize_y=False)
        with threadpool_limits(limits=1, user_api="blas"):
            gp.fit(model._scaled(X), (y - model.y_mean_) / model.y_std_)
        model.statements_ = []
        model._adopt(gp, (y - model.y_mean_) / model.y_std_)
        model.statements_ = statements
        if record.get("band") is not None:
            model._set_band(BandWidening.from_dict(record["band"]))
        return model

    def sample_paths(self, X, n_paths: int, seed=0) -> np.ndarray:
        """Joint posterior draws of the response at the points ``X`` (Cholesky of the posterior covariance).

        Parameters
        ----------
        X : array_like, shape (m, d)
            As for :meth:`predict`; ``m`` up to a few thousand (cost ``O(m^3)``).
        n_paths : int
        seed : int or numpy.random.Generator

        Returns
        -------
        ndarray, shape (n_paths, m)
            Response unit.
        """
        if not hasattr(self, "gp_"):
            raise NotFittedError("this surrogate is not fitted yet; call fit(X, y) first")
        if not is_whole(n_paths) or n_paths < 1:
            raise SurrogateError(f"n_paths must be a whole number >= 1, got {n_paths!r}")
        X = self._check_points(X, self.levels_)
        with threadpool_limits(limits=1, user_api="blas"):
            mean, cov = self.gp_.predict(self._scaled(X), return_cov=True)
            jitter = 1e-10 * max(float(np.max(np.diag(cov))), 1e-12)
            for _ in range(6):                  # a posterior covariance is only positive semi-definite
                try:
                    L = np.linalg.cholesky(cov + jitter * np.eye(len(cov)))
                    break
                except np.linalg.LinAlgError:
                    jitter *= 100
            else:
                raise SurrogateError("the posterior covariance at these points cannot be factorised")
            z = np.random.default_rng(seed).standard_normal((len(cov), int(n_paths)))
            draws = mean[None, :] + self.band_factor_ * (L @ z).T      # widened about the mean
        return self.y_mean_ + self.y_std_ * draws


class SeparateSurrogates(_LevelSurrogate):
    """One :class:`ResponseSurrogate` per level combination (the baseline for :class:`MixedSurrogate`).

    Parameters
    ----------
    levels : sequence of int
        As for :class:`MixedSurrogate`.
    kernel, restarts, nugget, seed
        Passed to each :class:`ResponseSurrogate` (constant trend; the seed is
        the same for every combination).

    Attributes
    ----------
    models_ : dict of tuple to ResponseSurrogate
        Per level combination (level indices of the choice columns).
    bands_ : dict of tuple to BandWidening
        Per combination, the band's widening after :meth:`widen` (empty: plug-in bands).
    loo_ : LooResult
    """


    def _split(self, X):
        cont = [j for j, n in enumerate(self.levels_) if n == 0]
        cat = [j for j, n in enumerate(self.levels_) if n]
        return X[:, cont], [tuple(int(v) for v in row) for row in X[:, cat]]

    def fit(self, X, y) -> "SeparateSurrogates":
        """Fit one surrogate per level combination found in ``X`` (each needs at least 3 runs)."""
        self.levels_ = _level_counts(self.levels)
        X = self._check_points(X, self.levels_)
        y = np.asarray(y, dtype=float).ravel()
        self.X_, self.y_ = X, y
        Xc, keys = self._split(X)
        self.models_ = {}
        for key in sorted(set(keys)):
            rows = [i for i, k in enumerate(keys) if k == key]
            model = ResponseSurrogate(kernel=self.kernel, trend="constant", noise="fixed", restarts=self.restarts,
                                      nugget=self.nugget, seed=self.seed).fit(Xc[rows], y[rows])
            if len(model.y_) != len(rows):
                raise SurrogateError(f"level combination {key} has repeated runs: merge or drop them first")
            self.models_[key] = model
        self.bands_ = {}
        self._set_loo(keys, y)
        return self

    def factor(self, key) -> float:
        """What a level combination's fitted standard deviation is multiplied by (1 until :meth:`widen`)."""
        band = self.bands_.get(key)
        return 1.0 if band is None else band.factor

    def widen(self, X_check, seed=0) -> "SeparateSurrogates":
        """Widen each combination's band by :func:`~doe.surrogate.levelbands.band_widening` at its check points.

        Each combination's own kernel settings are sampled; its band, sample paths and leave-one-out
        standard deviations are widened about its fitted mean.
        """
        if not hasattr(self, "models_"):
            raise NotFittedError("these surrogates are not fitted yet; call fit(X, y) first")
        Xc, keys = self._split(self._check_points(X_check, self.levels_))
        for (key, model), s in zip(self.models_.items(), child_seeds(seed, len(self.models_))):
            rows = [i for i, k in enumerate(keys) if k == key]
            if model.constant_ or not rows:
                continue
            self.bands_[key] = band_widening(model.gp_, Xc[rows] - 0.5, Xc.shape[1], model.loo_, int(s))
        self._set_loo(self._split(self.X_)[1], self.y_)
        return self

    def _set_loo(self, keys, y) -> None:
        """Every run's leave-one-out result from its own combination's surrogate, in the runs' order."""
        predicted, std = np.empty(len(y)), np.empty(len(y))
        for key, model in self.models_.items():
            rows = [i for i, k in enumerate(keys) if k == key]
            predicted[rows], std[rows] = model.loo_.predicted, model.loo_.std * self.factor(key)
        total = float(np.sum((y - y.mean()) ** 2))
        resid = y - predicted
        self.loo_ = LooResult(y.copy(), predicted, std, 1.0 - float(np.sum(resid**2)) / total if total > 0
                              else float("nan"), float(np.sqrt(np.mean(resid**2))))

    def to_dict(self) -> dict:
        """Options and each level combination's surrogate record (see :meth:`ResponseSurrogate.to_dict`)."""
        if not hasattr(self, "models_"):
            raise NotFittedError("these surrogates are not fitted yet; call fit(X, y) first")
        return {"kind": "separate", "levels": list(self.levels_), "kernel": self.kernel,
                "restarts": int(self.restarts), "nugget": float(self.nugget), "seed": int(self.seed),
                "models": [{"levels": list(k), "record": m.to_dict(),
                            "band": None if k not in self.bands_ else self.bands_[k].to_dict()}
                           for k, m in self.models_.items()]}

    @classmethod
    def from_dict(cls, record: dict, X, y) -> "SeparateSurrogates":
        """Rebuild from :meth:`to_dict` and the runs, without optimising."""
        try:
            model = cls(record["levels"], record["kernel"], record["restarts"], record["nugget"], record["seed"])
            model.levels_ = _level_counts(model.levels)
            saved = {tuple(int(v) for v in m["levels"]): m["record"] for m in record["models"]}
            bands = {tuple(int(v) for v in m["levels"]): BandWidening.from_dict(m["band"])
                     for m in record["models"] if m.get("band") is not None}
        except (KeyError, TypeError, ValueError) as exc:
            raise SurrogateError(f"the saved per-level surrogates are incomplete or malformed ({exc!r})") from exc
        X = model._check_points(X, model.levels_)
        y = np.asarray(y, dtype=float).ravel()
        model.X_, model.y_ = X, y
        Xc, keys = model._split(X)
        if set(keys) != set(saved):
            raise SurrogateError("the runs' level combinations differ from the saved surrogates'")
        model.models_ = {}
        for key in sorted(saved):
            rows = [i for i, k in enumerate(keys) if k == key]
            model.models_[key] = ResponseSurrogate.from_dict(saved[key], Xc[rows], y[rows])
        model.bands_ = bands
        model._set_loo(keys, y)
        return model

    def predict(self, X, return_std=False):
        """Each row predicted by its level combination's surrogate (a combination never fitted is an error)."""
        if not hasattr(self, "models_"):
            raise NotFittedError("these surrogates are not fitted yet; call fit(X, y) first")
        X = self._check_points(X, self.levels_)
        Xc, keys = self._split(X)
        mean, std = np.empty(len(X)), np.empty(len(X))
        for key in set(keys):
            if key not in self.models_:
                raise SurrogateError(f"level combination {key} has no runs: no surrogate was fitted for it")
            rows = [i for i, k in enumerate(keys) if k == key]
            mean[rows], std[rows] = self.models_[key].predict(Xc[rows], return_std=True)
            std[rows] *= self.factor(key)
        return (mean, std) if return_std else mean

    def sample_paths(self, X, n_paths: int, seed=0, method: str = "auto") -> np.ndarray:
        """Joint posterior draws, shape ``(n_paths, n)``: independent between level combinations."""
        if not hasattr(self, "models_"):
            raise NotFittedError("these surrogates are not fitted yet; call fit(X, y) first")
        Xc, keys = self._split(self._check_points(X, self.levels_))
        out = np.empty((int(n_paths), len(Xc)))
        combos = sorted(set(keys))
        for key, s in zip(combos, child_seeds(seed, len(combos))):
            if key not in self.models_:
                raise SurrogateError(f"level combination {key} has no runs: no surrogate was fitted for it")
            rows = [i for i, k in enumerate(keys) if k == key]
            model = self.models_[key]
            draws = model.sample_paths(Xc[rows], n_paths, int(s), method)
            centre = model.predict(Xc[rows])
            out[:, rows] = centre + self.factor(key) * (draws - centre)       # widened about the mean
        return out


def best_level_surrogate(levels, X, y, **options):
    """Fit both :class:`MixedSurrogate` and :class:`SeparateSurrogates`; keep the smaller leave-one-out error.

    The mixed kernel wins when the levels share structure; when they share
    little, its one set of length scales and one variance for every level can
    lose to separate surrogates (``reports/benchmarks.md``, section "mixed").
    Leave-one-out picks between them from the runs alone.

    Parameters
    ----------
    levels : sequence of int
        As for :class:`MixedSurrogate`.
    X, y : array_like
        Runs, as for :meth:`MixedSurrogate.fit`.
    **options
        ``kernel``, ``restarts``, ``nugget``, ``seed`` for both.

    Returns
    -------
    model : MixedSurrogate or SeparateSurrogates
        The one kept (fitted).
    table : list of dict
        ``{"model", "rmse_loo", "q2_loo", "chosen"}`` for both (the separate
        one is left out, with its reason, when a level combination has under 3 runs).
    """
    mixed = MixedSurrogate(levels, **options).fit(X, y)
    table = [{"model": "mixed", "rmse_loo": mixed.loo_.rmse, "q2_loo": mixed.loo_.q2, "chosen": True}]
    try:
        separate = SeparateSurrogates(levels, **options).fit(X, y)
    except SurrogateError as exc:
        table.append({"model": "separate", "rmse_loo": None, "q2_loo": None, "chosen": False, "why": str(exc)})
        return mixed, table
    table.append({"model": "separate", "rmse_loo": separate.loo_.rmse, "q2_loo": separate.loo_.q2, "chosen": False})
    if separate.loo_.rmse < mixed.loo_.rmse:
        table[0]["chosen"], table[1]["chosen"] = False, True
        return separate, table
    return mixed, table
