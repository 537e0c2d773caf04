"""Two-fidelity Gaussian-process surrogates: many cheap runs of a low-order model, few expensive ones.

Model
-----
The autoregressive model of Kennedy & O'Hagan (2000) in the recursive form
of Le Gratiet & Garnier (2014)::

    y_high(x) = rho * y_low(x) + delta(x)

``y_low`` is a Gaussian process fitted to the cheap runs (a
:class:`~doe.surrogate.gp.ResponseSurrogate`); ``delta``, the discrepancy, is a
second Gaussian process, independent of the first, fitted to
``d_i = y_high_i - rho * y_low(x_i)`` at the expensive runs. ``y_low(x_i)`` is
the cheap model's own value at ``x_i`` when it was run there (a nested plan:
the usual case, since cheap runs are cheap), otherwise the low process's
mean, whose variance is then carried into the leave-one-out figures.

``rho`` maximises the marginal likelihood of the discrepancy data, as in
Kennedy & O'Hagan (2000), sec. 3 (with nested plans the likelihood of both
levels factorises, and the high level's part depends on ``rho`` only through
``d``): a grid over a range set by the two levels' spreads and the least-
squares ``rho`` of ``y_high ~ 1 + x + rho y_low``, generalised-least-squares
steps from the best (for fixed hyperparameters the likelihood's best ``rho``
is the GLS coefficient), then a bounded Brent search, each trial fitting one
kernel family; the discrepancy
is then refitted with the full kernel choice of :mod:`doe.surrogate.gp` at the
``rho`` found.

Prediction (Le Gratiet & Garnier 2014, recursive formulation)::

    mean(x) = rho * mean_low(x) + mean_delta(x)
    var(x)  = rho^2 * var_low(x) + var_delta(x)

Leave-one-out: with ``rho`` and the kernels' hyperparameters fixed, leaving
out expensive run ``i`` leaves ``y_low(x_i)`` known, so the residual of
``y_high`` there is the discrepancy's closed-form leave-one-out residual
(Rasmussen & Williams 2006, eq. 5.12); ``q2_loo`` is then computed over the
expensive runs exactly as for a single-fidelity surrogate, so the two can be
compared in ``fit.json``.

References
----------
.. [1] Kennedy, M. C. and O'Hagan, A. (2000). Predicting the output from a
   complex computer code when fast approximations are available.
   Biometrika 87(1), 1-13.
.. [2] Le Gratiet, L. and Garnier, J. (2014). Recursive co-kriging model for
   design of computer experiments with multiple levels of fidelity.
   International Journal for Uncertainty Quantification 4(5), 365-386.
.. [3] Forrester, A. I. J., Sobester, A. and Keane, A. J. (2007).
   Multi-fidelity optimization via surrogate modelling. Proc. R. Soc. A 463,
   3251-3269.
.. [4] Rasmussen, C. E. and Williams, C. K. I. (2006). Gaussian Processes for
   Machine Learning. MIT Press, sec. 5.4.2.
"""
from __future__ import annotations

import copy
import time

import numpy as np
from scipy.linalg import cho_solve
from scipy.optimize import minimize_scalar

from .. import defaults
from ..errors import NotFittedError, SurrogateError
from ..files import json_number
from ..seeds import child_seeds
from .gp import DUPLICATE_TOL, LooResult, ResponseSurrogate

__all__ = ["TwoFidelitySurrogate", "match_points", "RHO_GRID"]

#: Trial values of ``rho`` in the grid stage, in units of ``std(y_high) / std(y_low)``.
RHO_GRID = np.linspace(-1.0, 3.0, 9)
#: Family used while searching ``rho`` when the kernel is chosen automatically.
PROFILE_FAMILY = "matern52"
#: Extra optimiser starts per trial ``rho`` (with none, a straight-line discrepancy's peak is missed).
PROFILE_RESTARTS = 1


def match_points(X_high, X_low, tol: float = DUPLICATE_TOL) -> np.ndarray:
    """Index of each high point among the low points (-1 where none coincides).

    Parameters
    ----------
    X_high, X_low : ndarray, shape (n, d), (m, d)
        Points in the unit cube.
    tol : float
        Largest difference per coordinate of coinciding points.

    Returns
    -------
    ndarray of int, shape (n,)
    """
    X_high = np.asarray(X_high, dtype=float)
    X_low = np.asarray(X_low, dtype=float)
    out = np.full(len(X_high), -1, dtype=int)
    if len(X_low) == 0:
        return out
    for i, x in enumerate(X_high):
        hit = np.flatnonzero(np.all(np.abs(X_low - x) <= tol, axis=1))
        if len(hit):
            out[i] = int(hit[0])
    return out


class TwoFidelitySurrogate:
    """A surrogate of an expensive response that leans on a cheap model of it.

    Parameters
    ----------
    kernel, trend, noise, restarts, nugget, selection, seed, names, length_scale_prior
        As for :class:`~doe.surrogate.gp.ResponseSurrogate`; they apply to the
        discrepancy. The cheap runs are fitted with the same kernel options,
        one extra optimiser start and a fixed nugget (a low-order model is
        deterministic) unless their replicates disagree.
    compare : bool
        Also fit the expensive runs alone, to state in :attr:`statements_`
        how much the cheap model helps (``single_q2_``).

    Attributes
    ----------
    low_ : ResponseSurrogate
        The cheap runs' process.
    delta_ : ResponseSurrogate
        The discrepancy's process.
    rho_ : float
        Scale factor of the cheap model, dimensionless.
    rho_profile_ : list of (float, float)
        ``(rho, log marginal likelihood)`` of every trial.
    X_unit_, y_ : ndarray
        Expensive training points (unit cube) and values (response unit),
        duplicates merged as in the discrepancy.
    y_low_high_ : ndarray
        Cheap model's value at each expensive point (response unit).
    nested_ : ndarray of bool
        Whether the cheap model was run at that point (else its mean is used).
    loo_ : LooResult
        Leave-one-out results over the expensive runs, response unit.
    single_q2_ : float or None
        Leave-one-out ``q2`` of the expensive runs fitted alone (``compare``).
    statements_ : list of str

    References
    ----------
    Kennedy & O'Hagan (2000); Le Gratiet & Garnier (2014). See the module docstring.
    """

    fidelity = "two"

    def __init__(self, kernel=defaults.KERNEL, trend=defaults.TREND, noise=defaults.NOISE, restarts=defaults.RESTARTS,
                 nugget=defaults.NUGGET, selection=defaults.SELECTION, seed=0, names=None,
                 length_scale_prior=defaults.LENGTH_SCALE_PRIOR, compare=True):
        self.kernel = kernel
        self.trend = trend
        self.noise = noise
        self.restarts = restarts
        self.nugget = nugget
        self.selection = selection
        self.seed = seed
        self.names = names
        self.length_scale_prior = length_scale_prior
        self.compare = compare

    # -- helpers -------------------------------------------------------------
    def options(self, **change) -> dict:
        """The estimator options (those of each level's ResponseSurrogate), with ``change`` applied."""
        base = dict(kernel=self.kernel, trend=self.trend, noise=self.noise, restarts=self.restarts,
                    nugget=self.nugget, selection=self.selection, seed=self.seed, names=self.names,
                    length_scale_prior=self.length_scale_prior)
        base.update(change)
        return base

    def _check_fitted(self):
        if not hasattr(self, "delta_"):
            raise NotFittedError("this two-fidelity surrogate is not fitted yet; call fit(...) first")

    @staticmethod
    def _data(X, y, what):
        X = np.asarray(X, dtype=float)
        y = np.asarray(y, dtype=float).ravel()
        if X.ndim != 2 or len(X) != len(y):
            raise SurrogateError(f"{what}: points must have shape (n, d) and values shape (n,); "
                                 f"got {X.shape} and {y.shape}")
        if not (np.all(np.isfinite(X)) and np.all(np.isfinite(y))):
            raise SurrogateError(f"{what}: NaN or infinite values; drop failed runs first")
        return X, y

    # -- fitting ---------------------------------------------------------------
    def fit(self, X_low_unit, y_low, X_high_unit, y_high, y_low_high=None) -> "TwoFidelitySurrogate":
        """Fit both levels and ``rho``.

        Parameters
        ----------
        X_low_unit : array_like, shape (m, d)
            Cheap runs, unit cube.
        y_low : array_like, shape (m,)
            Their values, response unit.
        X_high_unit : array_like, shape (n, d)
            Expensive runs, unit cube.
        y_high : array_like, shape (n,)
            Their values, response unit (the same unit as ``y_low``).
        y_low_high : array_like, shape (n,), optional
            The cheap model's values at the expensive points. When None they
            are taken from the cheap runs at the same points, and predicted by
            the cheap runs' process where there are none.

        Returns
        -------
        self

        Raises
        ------
        SurrogateError
            Bad shapes, NaN, fewer than 3 distinct expensive points, or a
            dimension that differs between the levels.
        """
        start = time.perf_counter()
        XL, yL = self._data(X_low_unit, y_low, "cheap runs")
        XH, yH = self._data(X_high_unit, y_high, "expensive runs")
        if XL.shape[1] != XH.shape[1]:
            raise SurrogateError(f"cheap runs have {XL.shape[1]} parameters, expensive runs {XH.shape[1]}")
        rng = np.random.default_rng(self.seed)
        seeds = [int(s) for s in rng.integers(2**31 - 1, size=4)]
        self.statements_ = []
        try:
            self.low_ = ResponseSurrogate(**self.options(noise="auto", restarts=min(int(self.restarts), 1),
                                                          seed=seeds[0])).fit(XL, yL)
        except SurrogateError as exc:
            raise SurrogateError(f"cheap runs: {exc}") from exc
        if y_low_high is None:
            idx = match_points(XH, XL)
            nested = idx >= 0
            ylh = np.where(nested, yL[np.maximum(idx, 0)], 0.0)
            var = np.zeros(len(XH))
            if not nested.all():
                mean, std = self.low_.predict(XH[~nested], return_std=True)
                ylh[~nested], var[~nested] = mean, std**2
        else:
            _, ylh = self._data(XH, y_low_high, "cheap values at the expensive runs")
            nested, var = np.ones(len(XH), bool), np.zeros(len(XH))
        self.rho_, self.rho_profile_ = self._find_rho(XH, yH, ylh, yL, seeds[1])
        try:
            self.delta_ = ResponseSurrogate(**self.options(seed=seeds[2])).fit(XH, yH - self.rho_ * ylh)
        except SurrogateError as exc:
            raise SurrogateError(f"expensive runs: {exc}") from exc
        groups = self.delta_.groups_
        self.groups_ = groups
        self.y_low_high_ = np.array([ylh[g].mean() for g in groups])
        self.var_low_high_ = np.array([var[g].mean() for g in groups])
        self.nested_ = np.array([bool(nested[g].all()) for g in groups])
        self._set_views()
        self.single_q2_ = None
        if self.compare:
            single = ResponseSurrogate(**self.options(seed=seeds[3])).fit(XH, yH)
            self.single_q2_ = float(single.loo_.q2)
        self._state_fit()
        self.fit_seconds_ = time.perf_counter() - start
        return self

    def _find_rho(self, XH, yH, ylh, yL, seed):
        """``rho`` maximising the discrepancy's marginal likelihood (Kennedy & O'Hagan 2000, sec. 3).

        Starts: a grid, the least-squares ``rho`` of ``y_high ~ 1 + x + rho y_low``, then from the
        best of those a few generalised-least-squares steps (for fixed hyperparameters the best
        ``rho`` is the GLS coefficient of ``y_low`` under the discrepancy's covariance), then a
        bounded Brent search around the best value found.
        """
        spread_low, spread_high = float(np.std(yL)), float(np.std(yH))
        if spread_low <= 1e-12 * max(1.0, float(np.max(np.abs(yL)))) or np.ptp(ylh) == 0:
            self.statements_.append("the cheap model gives the same value everywhere: it cannot help (rho = 0)")
            return 0.0, [(0.0, float("nan"))]
        scale = spread_high / spread_low if spread_high > 0 else 1.0
        family = self.kernel if self.kernel != "auto" else PROFILE_FAMILY
        trend = self.trend if self.trend != "auto" else "linear"
        profile, fitted = {}, {}

        def objective(rho):
            rho = float(rho)
            d = yH - rho * ylh
            sd = float(np.std(d))
            if sd <= 1e-12 * max(1.0, float(np.max(np.abs(yH)))):
                profile[rho] = float("inf")
                return -1e300
            try:
                m = ResponseSurrogate(**self.options(kernel=family, trend=trend, restarts=PROFILE_RESTARTS, seed=seed,
                                                      names=None)).fit(XH, d)
            except SurrogateError:
                return 1e300
            # marginal likelihood of d in its own unit: the normalised one minus n log(sd)
            lml = float(m.log_marginal_likelihood_) - len(m.y_) * np.log(sd)
            profile[rho], fitted[rho] = lml, m
            return -lml

        starts = list(RHO_GRID * scale) + [0.0]
        basis = np.column_stack([np.ones(len(yH)), XH, ylh])
        if len(yH) > basis.shape[1]:
            starts.append(float(np.linalg.lstsq(basis, yH, rcond=None)[0][-1]))
        grid = np.unique(np.array(starts))
        values = {float(r): objective(r) for r in grid}
        rho = min(values, key=values.get)
        hc, lc = yH - yH.mean(), ylh - ylh.mean()
        for _ in range(4):                          # GLS steps at the current hyperparameters
            m = fitted.get(rho)
            if m is None or len(m.y_) != len(yH):
                break
            w = cho_solve((m.L_, True), lc)
            new = float(w @ hc / (w @ lc)) if w @ lc > 0 else rho
            if not np.isfinite(new) or abs(new - rho) < 1e-4 * scale:
                break
            values[new] = objective(new)
            if values[new] >= values[rho]:
                break
            rho = new
        if np.isfinite(values[rho]) and values[rho] > -1e299:
            step = float(np.min(np.diff(RHO_GRID))) * scale / 2
            res = minimize_scalar(objective, bounds=(rho - step, rho + step), method="bounded",
                                  options={"xatol": 1e-4 * scale, "maxiter": 20})
            if res.fun < values[rho]:
                rho = float(res.x)
        return rho, sorted(profile.items())

    def _set_views(self):
        """The expensive runs' values and spread, from the discrepancy and the cheap values."""
        self.X_unit_ = self.delta_.X_unit_
        self.y_ = self.delta_.y_ + self.rho_ * self.y_low_high_
        self.y_mean_ = float(np.mean(self.y_))
        std = float(np.std(self.y_))
        self.constant_ = std <= 1e-12 * max(1.0, abs(self.y_mean_))
        self.y_std_ = std if not self.constant_ else 1.0
        self.loo_ = self._loo()

    def _loo(self) -> LooResult:
        loo = self.delta_.loo_
        resid = loo.residual
        std = np.sqrt(loo.std**2 + self.rho_**2 * self.var_low_high_)
        total = float(np.sum((self.y_ - self.y_.mean()) ** 2))
        q2 = 1.0 - float(np.sum(resid**2)) / total if total > 0 else float("nan")
        return LooResult(self.y_.copy(), self.y_ - resid, std, q2, float(np.sqrt(np.mean(resid**2))))

    def _state_fit(self):
        s = self.statements_
        s.append(f"two fidelities: {len(self.low_.y_)} cheap runs (their own leave-one-out q2 "
                 f"{self.low_.loo_.q2:.3f}) and {len(self.y_)} expensive points; rho = {self.rho_:.3g}")
        if self.single_q2_ is not None and np.isfinite(self.single_q2_):
            better = self.loo_.q2 >= self.single_q2_
            s.append(f"leave-one-out q2 {self.loo_.q2:.3f} with the cheap model, {self.single_q2_:.3f} from the "
                     "expensive runs alone" + ("" if better else ": the cheap model does not help this response; "
                                               "consider [fit] fidelity = \"single\""))
        if not self.nested_.all():
            s.append(f"{int((~self.nested_).sum())} expensive point(s) have no cheap run at the same point; "
                     "the cheap runs' mean is used there (run the cheap model there for a nested plan)")
        s += [f"discrepancy: {t}" for t in self.delta_.statements_]
        s += [f"cheap runs: {t}" for t in self.low_.statements_]

    # -- what fit.json and the analyses read: the discrepancy's kernel, noise and candidates ----------
    family_ = property(lambda self: self.delta_.family_, doc="Kernel family of the discrepancy.")
    trend_ = property(lambda self: self.delta_.trend_, doc="Trend of the discrepancy.")
    learn_noise_ = property(lambda self: self.delta_.learn_noise_, doc="Whether a noise level was learned.")
    length_scales_ = property(lambda self: self.delta_.length_scales_,
                              doc="Discrepancy length scales, fractions of each range.")
    noise_std_ = property(lambda self: self.delta_.noise_std_, doc="Noise (or nugget) std, response unit.")
    candidates_ = property(lambda self: self.delta_.candidates_, doc="Kernels tried for the discrepancy.")
    log_marginal_likelihood_ = property(lambda self: self.delta_.log_marginal_likelihood_,
                                        doc="Of the discrepancy, normalised data.")

    def _parts(self) -> dict:
        """The discrepancy's hyperparameters, its noise variance relative to the expensive runs' variance."""
        parts = dict(self.delta_._parts())
        parts["noise"] = parts["noise"] * self.delta_.y_std_**2 / self.y_std_**2
        return parts

    def two_fidelity_record(self) -> dict:
        """The ``two_fidelity`` entry of ``fit.json`` (keys in :mod:`doe.surrogate.diagnostics`)."""
        self._check_fitted()
        return {"rho": float(self.rho_), "cheap_runs": int(len(self.low_.y_)),
                "cheap_q2_loo": json_number(self.low_.loo_.q2),
                "cheap_kernel": f"{self.low_.family_}, {self.low_.trend_} trend",
                "single_fidelity_q2_loo": json_number(self.single_q2_) if self.single_q2_ is not None else None,
                "nested_points": int(self.nested_.sum()),
                "rho_profile": [{"rho": float(r), "log_marginal_likelihood": json_number(v)} for r, v in self.rho_profile_]}

    # -- prediction ------------------------------------------------------------
    def predict(self, X_unit, return_std=False):
        """Posterior mean (and standard deviation) of the expensive response.

        Parameters
        ----------
        X_unit : array_like, shape (m, d)
            Points scaled to the unit cube.
        return_std : bool
            Also return ``sqrt(rho^2 var_low + var_delta)``, the surrogate's own
            uncertainty (no observation noise).

        Returns
        -------
        mean : ndarray, shape (m,)
            Response unit.
        std : ndarray, shape (m,), only with ``return_std``
            Response unit.
        """
        self._check_fitted()
        if not return_std:
            return self.rho_ * self.low_.predict(X_unit) + self.delta_.predict(X_unit)
        ml, sl = self.low_.predict(X_unit, return_std=True)
        md, sd = self.delta_.predict(X_unit, return_std=True)
        return self.rho_ * ml + md, np.sqrt(self.rho_**2 * sl**2 + sd**2)

    def predict_cov(self, XA_unit, XB_unit=None) -> np.ndarray:
        """Posterior covariance between two point sets, response unit squared."""
        self._check_fitted()
        return self.rho_**2 * self.low_.predict_cov(XA_unit, XB_unit) + self.delta_.predict_cov(XA_unit, XB_unit)

    def sample_paths(self, X_unit, n_paths: int, seed=0, method: str = "auto") -> np.ndarray:
        """Joint posterior draws: ``rho`` times a draw of the cheap level plus a draw of the discrepancy.

        Returns
        -------
        ndarray, shape (n_paths, m)
            Response unit. Cost: twice that of
            :meth:`doe.surrogate.gp.ResponseSurrogate.sample_paths`.
        """
        self._check_fitted()
        a, b = child_seeds(seed, 2)
        return (self.rho_ * self.low_.sample_paths(X_unit, n_paths, int(a), method)
                + self.delta_.sample_paths(X_unit, n_paths, int(b), method))

    def conditioned(self, X_unit, y=None) -> "TwoFidelitySurrogate":
        """A copy conditioned on more expensive runs (each with a cheap run at the same point).

        Parameters
        ----------
        X_unit : array_like, shape (k, d)
        y : array_like, shape (k,), optional
            Expensive values there, response unit; by default the posterior
            mean (the kriging-believer fantasy of pending runs).
        """
        self._check_fitted()
        X = np.asarray(X_unit, dtype=float).reshape(-1, self.X_unit_.shape[1])
        low_mean = self.low_.predict(X)
        other = copy.copy(self)
        other.low_ = self.low_.conditioned(X)
        other.delta_ = self.delta_.conditioned(X, None if y is None else np.asarray(y, float).ravel() - self.rho_ * low_mean)
        other.y_low_high_ = np.concatenate([self.y_low_high_, low_mean])
        other.var_low_high_ = np.concatenate([self.var_low_high_, np.zeros(len(X))])
        other.X_unit_ = other.delta_.X_unit_
        other.y_ = other.delta_.y_ + self.rho_ * other.y_low_high_
        return other

    def capped(self, max_length_scale: float) -> "TwoFidelitySurrogate":
        """A copy whose two processes have length scales at most ``max_length_scale`` (fractions of the range)."""
        self._check_fitted()
        other = copy.copy(self)
        other.low_ = self.low_.capped(max_length_scale)
        other.delta_ = self.delta_.capped(max_length_scale)
        return other

    # -- records -----------------------------------------------------------------
    def to_dict(self) -> dict:
        """Plain JSON values: both levels' records, ``rho`` and the statements (data go to :meth:`to_arrays`)."""
        self._check_fitted()
        return {"fidelity": "two", "rho": float(self.rho_), "low": self.low_.to_dict(),
                "delta": self.delta_.to_dict(), "single_q2": self.single_q2_,
                "rho_profile": [[float(r), json_number(v)] for r, v in self.rho_profile_],
                "statements": list(self.statements_), "fit_seconds": float(self.fit_seconds_),
                "options": {**{k: v for k, v in self.options().items() if k != "names"}, "compare": self.compare}}

    def to_arrays(self) -> dict:
        """Training data for the NPZ file: ``X``, ``y`` (expensive, merged), ``XL``, ``yL``, ``yLH``, ``vLH``, ``nested``."""
        self._check_fitted()
        return {"X": self.X_unit_, "y": self.y_, "XL": self.low_.X_unit_, "yL": self.low_.y_,
                "yLH": self.y_low_high_, "vLH": self.var_low_high_, "nested": self.nested_}

    @classmethod
    def from_dict(cls, record: dict, arrays: dict, names=None) -> "TwoFidelitySurrogate":
        """Rebuild a fitted surrogate from :meth:`to_dict` and :meth:`to_arrays` (no optimisation)."""
        try:
            model = cls(names=names, **record["options"])
            model.rho_ = float(record["rho"])
            model.single_q2_ = None if record["single_q2"] is None else float(record["single_q2"])
            model.rho_profile_ = [(float(r), float("nan") if v is None else float(v)) for r, v in record["rho_profile"]]
            model.statements_ = [str(s) for s in record["statements"]]
            model.fit_seconds_ = float(record["fit_seconds"])
            X, y = np.asarray(arrays["X"], float), np.asarray(arrays["y"], float)
            model.y_low_high_ = np.asarray(arrays["yLH"], float)
            model.var_low_high_ = np.asarray(arrays["vLH"], float)
            model.nested_ = np.asarray(arrays["nested"], bool)
            model.low_ = ResponseSurrogate.from_dict(record["low"], arrays["XL"], arrays["yL"], names)
            model.delta_ = ResponseSurrogate.from_dict(record["delta"], X, y - model.rho_ * model.y_low_high_, names)
        except (KeyError, TypeError, ValueError) as exc:
            raise SurrogateError(f"the saved two-fidelity record is incomplete or malformed ({exc!r})") from exc
        model.groups_ = model.delta_.groups_
        model._set_views()
        return model
