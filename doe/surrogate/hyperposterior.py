"""Gaussian-process predictions that account for not knowing the kernel's settings.

A Gaussian process fitted by maximum likelihood treats its length scales,
amplitude, trend and noise as known. With 10 to 60 runs they are not: many
settings explain the runs about equally well, and the single best one is
usually among the smoothest, so its bands are too narrow. Here the settings
get a posterior distribution, sampled by slice sampling, and every prediction
is the mixture over the draws (Rasmussen & Williams 2006, sec. 5.2; Neal 1997).

Model
-----
Inputs in the unit cube, centred (``z = u - 1/2``); outputs normalised to mean
0 and standard deviation 1. The covariance is

``k(z, z') = s^2 K_family(z, z'; l_1..l_d) [+ (a^2 / d) sum_k K_family(z_k, z'_k; m_k)]
+ c * trend(z, z') [+ sigma_n^2 delta(z, z')] + nugget``

with ``trend = 1 + z . z'`` (``"linear"``: a Bayesian linear regression on the
inputs) or ``1`` (``"constant"``). The bracketed sum (``structure =
"additive"``) adds one-input terms, each with its own length scale ``m_k``
(first-order terms of Duvenaud, Nickisch & Rasmussen 2011; Durrande,
Ginsbourger & Roustant 2012): a response that is mostly a sum of one-input
effects (Ishigami's ``7 sin^2 x2``) is then learned from far fewer runs, and the
joint term is left for the interactions. The hyperparameters, on the log scale
and in scikit-learn's order, are ``theta = (ln s^2, ln l_1 .. ln l_d, ln c
[, ln sigma_n^2] [, ln a^2, ln m_1 .. ln m_d], mu_l)``.

Kernel choice
-------------
``structure = "auto"`` (and ``family = "auto"``) fit the posterior mode of
every candidate and keep the one with the largest Laplace approximation of the
evidence ``p(y | structure)`` (MacKay 1992; Rasmussen & Williams 2006, sec.
5.2), stated in :attr:`HyperPosterior.reason_`. Measured on Ishigami from 100
maximin runs (seeds 0, 1, 4; ``benchmarks/bench_intervals.py`` settings):
held-out q2 0.89-0.91 and largest Sobol index error 0.084-0.117 with the joint
term alone, 0.996-0.997 and 0.004-0.012 with the one-input terms, which the
evidence chose by about 110 log units. Choosing the family too (squared
exponential won there) gave the same accuracy at three times the fitting cost,
and no better bands at 2 to 5 runs per parameter.

Priors (weakly informative, on the log scale, truncated to :data:`BOUNDS`),
scaled to the unit cube and to the normalised output:

* ``ln l_k ~ N(mu_l, 1)`` with a shared, sampled mean
  ``mu_l ~ N(ln 0.35 + ln(d) / 4, 0.75^2)`` (partial pooling over the inputs):
  the runs decide whether the response is smooth or wiggly overall, and each
  input may still differ. Prior median about a third of the range (a little
  more in many dimensions, where runs are further apart). With a fixed prior
  (median half the range) the bands held only 83 % of held-out errors on
  Ishigami with 6 runs; a fixed median of a quarter held 90 % but cut the
  held-out q2 of smooth functions at 2 runs per input (OTL circuit 0.87
  against 0.94 pooled);
* ``ln s^2 ~ N(0, 1.5^2)``: the signal's variance about that of the runs;
* ``ln c ~ N(ln 0.1, 2^2)``: a trend that may be absent or explain everything;
  ``ln a^2`` the same for the one-input terms, whose length scales share the
  pooled prior of the joint term's;
* ``ln sigma_n^2 ~ N(ln 1e-3, 3^2)`` when noise is learned.

These were chosen and checked by the coverage of held-out bands
(``benchmarks/bench_intervals.py``), not taken from a source.

Sampling
--------
1. The posterior mode (MAP) from several L-BFGS-B starts with the analytic
   gradient of the log marginal likelihood (Rasmussen & Williams 2006,
   eq. 5.9).
2. A Laplace approximation there (finite-difference Hessian of the analytic
   gradient) gives a whitening map ``theta = theta_map + W u``.
3. Univariate slice sampling with stepping out and shrinkage (Neal 2003,
   figs. 3 and 5) in the whitened coordinates ``u``, where the posterior is
   near a standard normal and one step width (:data:`SLICE_WIDTH`) suits every
   coordinate. ``burn`` sweeps are dropped, then every ``thin``-th sweep is kept.

Predictions
-----------
Each draw ``j`` gives a Gaussian posterior with mean ``m_j(x)`` and variance
``v_j(x)``; the mixture has mean ``mean_j m_j`` and variance
``mean_j (v_j + m_j^2) - mean^2`` (law of total variance). Sample paths are
spread over the draws, each drawn jointly from its draw's posterior
(:mod:`doe.surrogate.paths`), so that functions of the paths (Sobol indices) carry
the hyperparameter uncertainty too.

Leave-one-out
-------------
Per draw, the closed-form leave-one-out mean and variance (Rasmussen &
Williams 2006, eq. 5.12). The draws saw run ``i``, so they are reweighted by
``1 / p(y_i | y_-i, theta_j)`` (importance sampling, Gelfand, Dey & Chang
1992), weights truncated at ``sqrt(J)`` times their mean (Ionides 2008).

When the plug-in fit is enough
------------------------------
With ``mode = "auto"``: at least :data:`PLUGIN_RUNS_PER_PARAMETER` runs per
parameter, the posterior mode alone (measured in
``benchmarks/bench_intervals.py``: there the settings are well determined).
Below, a short chain (:data:`CHECK_DRAWS` draws) is compared with the mode at
:data:`CHECK_POINTS` points: the ratio of the RMS band widths and the RMS shift
of the mean (in band widths, Monte-Carlo scatter removed). Band ratio at most
:data:`BAND_RATIO_MAX` and shift at most :data:`MEAN_SHIFT_MAX`: the mode alone
(``"plugin"``); ratio up to :data:`WIDEN_RATIO_MAX`: the mode with its band,
paths and leave-one-out spreads widened by the ratio (``"widened"``, variance
inflation: the cost of one draw); otherwise the full chain and the mixture.
A Laplace approximation at the mode was tried first and understated the
spread (Ishigami with 15 and 30 runs: it kept the mode, whose Sobol intervals
then held 1 to 4 of 6 analytic indices; the chain's mixture held 5 and 6).
Kept mixtures are thinned to 4, 8 or 16 evenly spaced draws when those
reproduce all draws' mean and band within :data:`COMPRESS_TOL`
(:meth:`HyperPosterior._compress`). The reason is stated in
:attr:`HyperPosterior.reason_`.

References
----------
.. [1] Rasmussen, C. E. and Williams, C. K. I. (2006). Gaussian Processes for
   Machine Learning. MIT Press, sec. 4.2 (Matern kernels), 5.2 (Bayesian model
   selection), 5.4 (eqs. 5.8-5.12).
.. [2] Neal, R. M. (2003). Slice sampling. Annals of Statistics 31(3), 705-767.
.. [3] Neal, R. M. (1997). Monte Carlo implementation of Gaussian process models
   for Bayesian regression and classification. Tech. rep. 9702, Dept. of
   Statistics, University of Toronto.
.. [4] Gelfand, A. E., Dey, D. K. and Chang, H. (1992). Model determination
   using predictive distributions with implementation via sampling-based
   methods. Bayesian Statistics 4, 147-167.
.. [5] Ionides, E. L. (2008). Truncated importance sampling. J. Comput. Graph.
   Stat. 17(2), 295-311.
.. [6] Duvenaud, D., Nickisch, H. and Rasmussen, C. E. (2011). Additive
   Gaussian processes. Advances in Neural Information Processing Systems 24.
.. [7] Durrande, N., Ginsbourger, D. and Roustant, O. (2012). Additive
   covariance kernels for high-dimensional Gaussian process modeling. Annales
   de la Faculte des Sciences de Toulouse 21(3), 481-499.
.. [8] MacKay, D. J. C. (1992). Bayesian interpolation. Neural Computation
   4(3), 415-447.
"""
from __future__ import annotations

import math
import time

import numpy as np
from scipy.linalg import cho_solve, cholesky, solve_triangular
from scipy.optimize import minimize
from scipy.stats import qmc
from sklearn.gaussian_process.kernels import RBF, ConstantKernel, DotProduct, Matern
from threadpoolctl import threadpool_limits

from . import paths
from .kernels import unit_correlation
from ..errors import NotFittedError, SurrogateError

__all__ = ["HyperPosterior", "slice_sample", "q2_draws", "FAMILIES", "TRENDS", "MODES", "STRUCTURES", "BOUNDS",
           "PLUGIN_RUNS_PER_PARAMETER", "FORMAT"]

FAMILIES = ("matern52", "sqexp", "matern32")
TRENDS = ("linear", "constant")
MODES = ("auto", "mixture", "plugin")
#: ``"product"``: one joint term over all inputs; ``"additive"``: plus a sum of one-input terms, each with its own
#: length scale (Duvenaud, Nickisch & Rasmussen 2011; Durrande, Ginsbourger & Roustant 2012).
STRUCTURES = ("product", "additive")
#: Bounds (natural values, normalised units) of each hyperparameter kind.
BOUNDS = {"amplitude": (1e-3, 1e2), "length_scale": (1e-2, 1e2), "trend": (1e-5, 1e2), "noise": (1e-8, 1.0)}
#: Prior (mean, sd) of each log hyperparameter; the length scales' mean gets ln(d) / 4 added.
PRIORS = {"amplitude": (0.0, 1.5), "length_scale": (math.log(0.25), 1.0), "trend": (math.log(0.1), 2.0),
          "noise": (math.log(1e-3), 3.0)}
#: Length scales share a sampled prior mean (partial pooling over the inputs).
POOLED = True
BOUNDS["length_scale_mean"] = (0.02, 5.0)
PRIORS["length_scale_mean"] = (math.log(0.35), 0.75)
#: Variance of the one-input terms (``structure = "additive"``): like the trend, absent or explaining everything.
BOUNDS["additive_amplitude"] = (1e-5, 1e2)
PRIORS["additive_amplitude"] = (math.log(0.1), 2.0)
#: From this many runs per parameter on, ``mode = "auto"`` keeps the plug-in fit.
PLUGIN_RUNS_PER_PARAMETER = 20
#: Fixed diagonal term of a deterministic response, relative to the response's variance.
NUGGET = 1e-6
#: Step width of the slice sampler in whitened coordinates (Neal 2003, sec. 4: about the posterior's scale).
SLICE_WIDTH = 2.0
#: Query points up to which sample paths are drawn exactly (Cholesky per draw); above, by random features. With
#: one-input terms up to :data:`doe.surrogate.paths.EXACT_MAX`: their joint term often has long length scales and a
#: large variance, which random features reproduce poorly (paths' spread 10-20 % short, measured).
EXACT_PATH_POINTS = 500
#: The short chain and check points of the "auto" test of whether the settings are pinned down: sweeps dropped,
#: draws kept, sweeps between them, points.
CHECK_BURN = 10
CHECK_DRAWS = 16
CHECK_THIN = 2
CHECK_POINTS = 256
#: "auto" keeps the mode when plausible settings widen the RMS band by at most this factor (a 2-sigma band 1.1
#: times too narrow still holds 2 Phi(2 / 1.1) - 1 = 93 % of errors) ...
BAND_RATIO_MAX = 1.1
#: ... and move the mean by at most this many RMS band widths (a mean 0.3 standard deviations off, with the
#: band's width right, still holds Phi(2.3) - Phi(-1.7) = 94.5 % of errors in 2 sigma; both limits common
#: practice, no source; the coverage that results is measured in benchmarks/bench_intervals.py).
MEAN_SHIFT_MAX = 0.3
#: Up to this band ratio (mean shift still small), "auto" keeps the mode and widens its band and paths by the
#: ratio instead of averaging over draws: about the same band at the cost of one draw (variance inflation,
#: common practice, no source; measured in benchmarks/bench_intervals.py).
WIDEN_RATIO_MAX = 1.5
#: A mixture is kept with fewer draws when their mean and band move by at most this share of the band
#: (RMS over check points; common practice, no source).
COMPRESS_TOL = 0.05
#: Name and version of a saved record.
FORMAT = ("doe-hyperposterior", 1)
_NU = {"matern52": 2.5, "matern32": 1.5}
#: Largest number of elements of one stacked prediction array (draws x points x runs x parameters): 4e6
#: doubles, 32 MB.
STACK_ELEMENTS = 4_000_000


# ---------------------------------------------------------------------------
# slice sampling (Neal 2003)


def slice_sample(logp, x0, n_sweeps: int, rng, width=1.0, max_steps: int = 20):
    """Univariate slice sampling, one coordinate after another, with stepping out and shrinkage.

    Parameters
    ----------
    logp : callable
        ``logp(x) -> float``, the log density up to a constant (``-inf``
        outside its support).
    x0 : array_like, shape (p,)
        Start, with finite ``logp``.
    n_sweeps : int
        Sweeps over all coordinates; one state is returned per sweep.
    rng : numpy.random.Generator
    width : float or array_like, shape (p,)
        Initial interval width per coordinate.
    max_steps : int
        Largest number of stepping-out steps per side.

    Returns
    -------
    states : ndarray, shape (n_sweeps, p)
    logps : ndarray, shape (n_sweeps,)
    evaluations : int
        Calls of ``logp``.

    References
    ----------
    Neal, R. M. (2003). Slice sampling. Ann. Statist. 31(3), 705-767:
    stepping out (fig. 3) and shrinkage (fig. 5).
    """
    x = np.array(x0, dtype=float)
    p = len(x)
    w = np.broadcast_to(np.asarray(width, dtype=float), (p,))
    f = float(logp(x))
    if not np.isfinite(f):
        raise SurrogateError("the slice sampler's start has zero posterior density")
    states, logps, evals = np.empty((n_sweeps, p)), np.empty(n_sweeps), 1
    for s in range(n_sweeps):
        for i in range(p):
            level = f + math.log(rng.uniform())       # the slice: {x : logp(x) > level}
            lo = x[i] - w[i] * rng.uniform()          # fig. 3: a randomly placed interval, stepped out
            hi = lo + w[i]
            j = int(rng.integers(max_steps + 1))
            k = max_steps - j
            trial = x.copy()
            while j > 0:
                trial[i] = lo
                evals += 1
                if logp(trial) <= level:
                    break
                lo -= w[i]
                j -= 1
            while k > 0:
                trial[i] = hi
                evals += 1
                if logp(trial) <= level:
                    break
                hi += w[i]
                k -= 1
            while True:                                # fig. 5: shrink towards the current point
                trial[i] = lo + (hi - lo) * rng.uniform()
                evals += 1
                ft = logp(trial)
                if ft > level:
                    x, f = trial, float(ft)
                    break
                if trial[i] < x[i]:
                    lo = trial[i]
                else:
                    hi = trial[i]
                if hi - lo < 1e-12:                    # pragma: no cover - only with a broken density
                    break
        states[s], logps[s] = x, f
    return states, logps, evals


# ---------------------------------------------------------------------------
# the log posterior of the hyperparameters

def _layout(d: int, learn_noise: bool, additive: bool) -> dict:
    """Where each hyperparameter sits in ``theta`` (see :class:`_Target`)."""
    ix = {"amp": 0, "ls": slice(1, 1 + d), "trend": 1 + d}
    nxt = 2 + d
    if learn_noise:
        ix["noise"], nxt = nxt, nxt + 1
    if additive:
        ix["add_amp"], ix["add_ls"] = nxt, slice(nxt + 1, nxt + 1 + d)
    return ix


def _correlation_and_factor(family: str, r2, amplitude, factor: bool = True) -> tuple:
    """``amplitude * K`` of a stationary family at squared scaled distances ``r2``, and (with ``factor``) the
    factor ``F`` with ``dK / dln l_k = F * D_k / l_k^2`` (Rasmussen & Williams 2006, eqs. 4.9, 4.17); ``None``
    in its place without."""
    if family == "sqexp":
        K = amplitude * np.exp(-0.5 * r2)
        return K, K
    r = np.sqrt(r2)
    c = math.sqrt(5) if family == "matern52" else math.sqrt(3)
    e = amplitude * np.exp(-c * r)
    if family == "matern52":
        K = (1 + c * r + 5 * r2 / 3) * e
        return K, ((5 / 3) * (1 + c * r) * e if factor else None)
    return (1 + c * r) * e, (3 * e if factor else None)


def _hessian(target, theta, h: float = 1e-4) -> np.ndarray:
    """Hessian of minus the log posterior: central differences of the analytic gradient, symmetrised."""
    p = target.p
    H = np.empty((p, p))
    for i in range(p):
        e = np.zeros(p)
        e[i] = h
        H[i] = (target.value_and_grad(theta + e)[1] - target.value_and_grad(theta - e)[1]) / (2 * h)
    return 0.5 * (H + H.T)


def _whitening(H) -> tuple:
    """Whitening map ``W`` (eigenvectors times posterior sds) and the sds along the eigen-directions.

    Posterior sd along each eigen-direction between 0.05 and 3 (log units): a flat direction (an inert
    input's length scale) is not given an endless step, a sharp one not a vanishing one.
    """
    w, V = np.linalg.eigh(H)
    sd = np.clip(1.0 / np.sqrt(np.clip(w, 1e-12, None)), 0.05, 3.0)
    return V * sd, sd



class _Target:
    """Log posterior of ``theta`` and its gradient, for fixed data (normalised units).

    ``theta = (ln s^2, ln l_1..l_d, ln c [, ln noise] [, ln a^2, ln m_1..m_d] [, mu_l])``; where each sits:
    :attr:`ix` (:func:`_layout`). ``additive``: with the one-input terms.
    """

    def __init__(self, Z, yn, family, trend, learn_noise, nugget, additive=False):
        self.Z, self.yn = Z, yn
        self.n, self.d = Z.shape
        self.family, self.trend, self.learn_noise, self.nugget = family, trend, learn_noise, nugget
        self.additive = bool(additive)
        self.D = (Z.T[:, :, None] - Z.T[:, None, :]) ** 2                   # (d, n, n) squared differences
        self.T = 1.0 + Z @ Z.T if trend == "linear" else np.ones((self.n, self.n))
        kinds = ["amplitude"] + ["length_scale"] * self.d + ["trend"] + (["noise"] if learn_noise else [])
        if self.additive:
            kinds += ["additive_amplitude"] + ["length_scale"] * self.d
        self.pooled = POOLED
        if self.pooled:
            kinds.append("length_scale_mean")
        self.kinds = kinds
        self.ix = _layout(self.d, learn_noise, self.additive)
        self.scales = np.array([k == "length_scale" for k in kinds])      # every length scale, both terms
        lo, hi = zip(*(BOUNDS[k] for k in kinds))
        self.lower, self.upper = np.log(lo), np.log(hi)
        mu, sd = (np.array(v, dtype=float) for v in zip(*(PRIORS[k] for k in kinds)))
        mu[self.scales] += math.log(self.d) / 4
        if self.pooled:
            mu[-1] += math.log(self.d) / 4
            mu[self.scales] = mu[-1]
        self.prior_mean, self.prior_sd = mu, sd

    def _centre(self, theta):
        """Prior means given ``theta``: the length scales' is the pooled mean ``theta[-1]`` when pooled."""
        if not self.pooled:
            return self.prior_mean
        centre = self.prior_mean.copy()
        centre[self.scales] = theta[-1]
        return centre

    @property
    def p(self) -> int:
        return len(self.kinds)

    def log_evidence(self, theta) -> float:
        """Laplace approximation of the log marginal likelihood of this kernel structure (MacKay 1992, eq. 4.6).

        ``ln p(y) ~ ln p(y, theta*) - 1/2 ln det H`` with the prior's normalising constants (``2 pi`` terms
        cancel against the Laplace integral's); ``H`` from :func:`_hessian`, its eigenvalues clipped as in
        :meth:`HyperPosterior._laplace`. Comparable between structures with different hyperparameters.
        """
        _, sd = _whitening(_hessian(self, theta))
        return self.logp(theta) - float(np.sum(np.log(self.prior_sd))) + float(np.sum(np.log(sd)))

    def _stationary(self, theta, factor=True):
        """(s^2 K, dK/dln l_k factors) of the joint term."""
        r2 = np.tensordot(np.exp(-2 * theta[self.ix["ls"]]), self.D, axes=1)
        return _correlation_and_factor(self.family, r2, math.exp(theta[0]), factor)

    def _additive_terms(self, theta, factor=True):
        """(a^2/d sum_k K_k, per-input factors (d, n, n) of dK/dln m_k) of the one-input terms."""
        r2 = self.D * np.exp(-2 * theta[self.ix["add_ls"]])[:, None, None]
        K, F = _correlation_and_factor(self.family, r2, math.exp(theta[self.ix["add_amp"]]) / self.d, factor)
        return np.sum(K, axis=0), F

    def covariance(self, theta, factor=True):
        """Training covariance ``K`` (with noise and nugget) and the joint term's pieces (factor: see
        :func:`_correlation_and_factor`)."""
        S, dfac = self._stationary(theta, factor)
        K = S + math.exp(theta[self.ix["trend"]]) * self.T
        if self.additive:
            K = K + self._additive_terms(theta, factor=False)[0]
        noise = math.exp(theta[self.ix["noise"]]) if self.learn_noise else 0.0
        K[np.diag_indices(self.n)] += noise + self.nugget
        return K, S, dfac

    def log_prior(self, theta):
        if np.any(theta < self.lower) or np.any(theta > self.upper):
            return -np.inf
        return float(-0.5 * np.sum(((theta - self._centre(theta)) / self.prior_sd) ** 2))

    def logp(self, theta) -> float:
        """Log posterior up to a constant (``-inf`` outside the bounds or when ``K`` is singular)."""
        lp = self.log_prior(theta)
        if not np.isfinite(lp):
            return -np.inf
        K = self.covariance(theta, factor=False)[0]
        try:
            L = cholesky(K, lower=True, check_finite=False)
        except np.linalg.LinAlgError:
            return -np.inf
        a = solve_triangular(L, self.yn, lower=True, check_finite=False)
        return lp - 0.5 * float(a @ a) - float(np.sum(np.log(np.diag(L))))   # Rasmussen & Williams eq. 5.8

    def value_and_grad(self, theta):
        """Minus the log posterior and its gradient (Rasmussen & Williams 2006, eq. 5.9)."""
        lp = self.log_prior(np.clip(theta, self.lower, self.upper))
        K, S, dfac = self.covariance(theta)
        try:
            L = cholesky(K, lower=True, check_finite=False)
        except np.linalg.LinAlgError:
            return 1e25, np.zeros(self.p)
        alpha = cho_solve((L, True), self.yn, check_finite=False)
        Kinv = cho_solve((L, True), np.eye(self.n), check_finite=False)
        value = lp - 0.5 * float(self.yn @ alpha) - float(np.sum(np.log(np.diag(L))))
        A = np.outer(alpha, alpha) - Kinv                       # d lml / d theta_j = 1/2 tr(A dK_j)
        grad = np.zeros(self.p)
        grad[0] = 0.5 * np.sum(A * S)
        ix = self.ix
        ls2 = np.exp(2 * theta[ix["ls"]])
        grad[ix["ls"]] = 0.5 * np.tensordot(self.D, A * dfac, axes=([1, 2], [0, 1])) / ls2
        grad[ix["trend"]] = 0.5 * math.exp(theta[ix["trend"]]) * np.sum(A * self.T)
        if self.learn_noise:
            grad[ix["noise"]] = 0.5 * math.exp(theta[ix["noise"]]) * np.trace(A)
        if self.additive:
            KA, F = self._additive_terms(theta)
            grad[ix["add_amp"]] = 0.5 * np.sum(A * KA)
            grad[ix["add_ls"]] = 0.5 * np.einsum("kij,ij->k", self.D * F, A) / np.exp(2 * theta[ix["add_ls"]])
        dev = (theta - self._centre(theta)) / self.prior_sd**2
        grad -= dev
        if self.pooled:
            grad[-1] += float(np.sum(dev[self.scales]))
        return -value, -grad


# ---------------------------------------------------------------------------
# one draw: a Gaussian process with fixed hyperparameters


class _Draw:
    """The posterior of one hyperparameter draw; also the view :func:`doe.surrogate.paths.draw_paths` expects."""

    def __init__(self, target: _Target, theta):
        self.theta = np.asarray(theta, dtype=float)
        self.family, self.trend, self.d = target.family, target.trend, target.d
        self.learn_noise, self.ix = target.learn_noise, target.ix
        self.nugget_ = target.nugget
        self.Z_, self.yn_ = target.Z, target.yn
        K = target.covariance(self.theta)[0]
        self.L_ = cholesky(K, lower=True, check_finite=False)
        self.alpha_ = cho_solve((self.L_, True), self.yn_, check_finite=False)
        parts = self._parts()
        self.noise_var_n_ = parts["noise"]
        self._kernel = _sklearn_kernel(parts)

    def _parts(self) -> dict:
        p = np.exp(self.theta)
        ix = self.ix
        parts = {"family": self.family, "trend": self.trend, "nu": _NU.get(self.family),
                 "amplitude": float(p[0]), "length_scales": p[ix["ls"]], "trend_variance": float(p[ix["trend"]]),
                 "noise": float(p[ix["noise"]]) if self.learn_noise else 0.0}
        if "add_amp" in ix:
            parts.update(additive_amplitude=float(p[ix["add_amp"]]), additive_length_scales=p[ix["add_ls"]])
        return parts

    def _signal_kernel(self):
        return self._kernel

    def _posterior_normalised(self, Z, full_cov=False):
        Ks = self._kernel(Z, self.Z_)
        mean = Ks @ self.alpha_
        v = solve_triangular(self.L_, Ks.T, lower=True, check_finite=False)
        if full_cov:
            return mean, self._kernel(Z) - v.T @ v
        return mean, np.clip(self._kernel.diag(Z) - np.einsum("ij,ij->j", v, v), 0.0, None)

    def loo(self):
        """Leave-one-out means and variances, normalised units (Rasmussen & Williams 2006, eq. 5.12)."""
        dinv = np.diag(cho_solve((self.L_, True), np.eye(len(self.yn_)), check_finite=False))
        return self.yn_ - self.alpha_ / dinv, 1.0 / dinv


def _stack_draws(draws) -> dict:
    """Every draw's parameters, weights and inverse Cholesky factor stacked along a first axis."""
    parts = [d._parts() for d in draws]
    linv = np.array([solve_triangular(d.L_, np.eye(len(d.yn_)), lower=True, check_finite=False) for d in draws])
    return {"family": draws[0].family, "trend": draws[0].trend, "Z": draws[0].Z_,
            "amplitude": np.array([p["amplitude"] for p in parts]),
            "length_scales": np.array([np.broadcast_to(p["length_scales"], (draws[0].d,)) for p in parts]),
            "trend_variance": np.array([p["trend_variance"] for p in parts]),
            "additive_amplitude": np.array([p.get("additive_amplitude", 0.0) for p in parts]),
            "additive_length_scales": np.array([np.broadcast_to(p.get("additive_length_scales", 1.0), (draws[0].d,))
                                                for p in parts]),
            "alpha": np.array([d.alpha_ for d in draws]), "linv": linv}


def _stacked_posterior(st: dict, Z: np.ndarray):
    """Means and variances of all draws at ``Z`` at once; the same numbers as each draw's
    ``_posterior_normalised`` (the kernel of :func:`_sklearn_kernel`, written out with NumPy)."""
    ls = st["length_scales"]                                          # (J, d)
    diff = Z[None, :, None, :] - st["Z"][None, None, :, :]             # (1, m, n, d)
    r = np.sqrt(np.sum((diff / ls[:, None, None, :]) ** 2, axis=-1))  # (J, m, n)
    ks = st["amplitude"][:, None, None] * unit_correlation(st["family"], r)
    if st["trend"] == "linear":
        dot = Z @ st["Z"].T + 1.0
        ks = ks + st["trend_variance"][:, None, None] * dot[None]
        prior = st["amplitude"][:, None] + st["trend_variance"][:, None] * (np.sum(Z * Z, axis=1) + 1.0)[None]
    else:
        ks = ks + st["trend_variance"][:, None, None]
        prior = (st["amplitude"] + st["trend_variance"])[:, None] * np.ones(len(Z))[None]
    if np.any(st["additive_amplitude"] > 0):                           # the one-input terms
        scaled = np.abs(diff) / st["additive_length_scales"][:, None, None, :]        # (J, m, n, d)
        ks = ks + (st["additive_amplitude"] / Z.shape[1])[:, None, None] * np.sum(
            unit_correlation(st["family"], scaled), axis=-1)
        prior = prior + st["additive_amplitude"][:, None]
    mean = np.einsum("jmn,jn->jm", ks, st["alpha"])
    v = np.einsum("jkn,jmn->jmk", st["linv"], ks)                    # L^-1 k*, as each draw's triangular solve
    explained = np.einsum("jmk,jmk->jm", v, v)
    return mean, np.clip(prior - explained, 0.0, None)


def _draws_posterior(draws, Z, stack=None):
    """Means and variances of every draw at ``Z`` (normalised units), each of shape ``(J, m)``.

    Several draws go through :func:`_stacked_posterior` in chunks of at most
    :data:`STACK_ELEMENTS` elements (``stack`` from :func:`_stack_draws`, built
    here when not given); a single draw through its own posterior.
    """
    if len(draws) == 1:
        m, v = draws[0]._posterior_normalised(Z)
        return m[None, :], v[None, :]
    st = _stack_draws(draws) if stack is None else stack
    step = max(1, STACK_ELEMENTS // (len(draws) * st["Z"].size))
    parts = [_stacked_posterior(st, Z[i:i + step]) for i in range(0, max(len(Z), 1), step)]
    return np.concatenate([m for m, _ in parts], axis=1), np.concatenate([v for _, v in parts], axis=1)


def _mixture_moments(means, variances):
    """Mean and variance (law of total variance, not clipped) of the equal-weight mixture of the draws."""
    mean = means.mean(axis=0)
    return mean, np.mean(variances + means**2, axis=0) - mean**2


def _structure_label(family: str, structure: str) -> str:
    """Plain name of a kernel's stationary part, e.g. ``"Matern 5/2 plus one-input terms"``."""
    names = {"sqexp": "squared-exponential", "matern52": "Matern 5/2", "matern32": "Matern 3/2"}
    return names[family] + (" plus one-input terms" if structure == "additive" else "")


def _sklearn_kernel(parts: dict):
    """The mean function's covariance as a scikit-learn kernel (same form as :mod:`doe.surrogate`), plus the
    one-input terms when there are any (:class:`_WithAdditive`)."""
    ls = parts["length_scales"]
    if parts["family"] == "sqexp":
        base = RBF(ls, "fixed")
    else:
        base = Matern(ls, "fixed", nu=parts["nu"])
    kernel = ConstantKernel(parts["amplitude"], "fixed") * base
    if parts["trend"] == "linear":
        kernel = kernel + ConstantKernel(parts["trend_variance"], "fixed") * DotProduct(1.0, "fixed")
    else:
        kernel = kernel + ConstantKernel(parts["trend_variance"], "fixed")
    if "additive_amplitude" in parts:
        return _WithAdditive(kernel, parts)
    return kernel


def _additive_cov(parts: dict, A, B) -> np.ndarray:
    """``a^2 / d sum_k K_family(|a_k - b_k| / m_k)``, the one-input terms' covariance between two point sets."""
    ls = parts["additive_length_scales"]
    out = np.zeros((len(A), len(B)))
    r = np.empty_like(out)
    for k in range(A.shape[1]):
        np.subtract.outer(A[:, k], B[:, k], out=r)
        np.abs(r, out=r)
        r *= 1.0 / ls[k]
        out += unit_correlation(parts["family"], r)
    out *= parts["additive_amplitude"] / A.shape[1]
    return out


class _WithAdditive:
    """A kernel plus the one-input terms; called like a scikit-learn kernel (``k(A)``, ``k(A, B)``, ``k.diag(A)``)."""

    def __init__(self, base, parts: dict):
        self.base, self.parts = base, parts

    def __call__(self, A, B=None):
        B = A if B is None else B
        return self.base(A, B) + _additive_cov(self.parts, A, B)

    def diag(self, A):
        return self.base.diag(A) + self.parts["additive_amplitude"]


# ---------------------------------------------------------------------------


def q2_draws(model, dim: int, n_points: int = 256, n_paths: int = 128, seed=0) -> np.ndarray:
    """Posterior draws of a map's q2: how well its mean would predict each sampled response.

    For each joint sample path ``f_p`` on scrambled Sobol' points of the unit
    cube, ``q2_p = 1 - mean((f_p - mean)^2) / var(f_p)``. Their lower quantiles
    say how sure the runs make us that the map meets a target.

    Parameters
    ----------
    model : HyperPosterior or ResponseSurrogate
        Fitted; anything with ``predict(U)`` and ``sample_paths(U, n_paths, seed)``
        on the unit cube.
    dim : int
        Parameters.
    n_points, n_paths : int
    seed : int

    Returns
    -------
    ndarray, shape (n_paths,)
    """
    U = qmc.Sobol(dim, scramble=True, seed=seed).random(n_points)
    draws = model.sample_paths(U, n_paths, seed=seed)
    mean = model.predict(U)
    var = np.var(draws, axis=1)
    return 1.0 - np.mean((draws - mean) ** 2, axis=1) / np.where(var > 0, var, np.inf)


class HyperPosterior:
    """A Gaussian process whose hyperparameters are sampled, on inputs in the unit cube.

    Parameters
    ----------
    family : {"matern52", "sqexp", "matern32", "auto"}
        Kernel family of the stationary part; ``"auto"``: chosen by evidence
        (module docstring, "Kernel choice").
    trend : {"linear", "constant"}
        Prior trend (its variance is sampled, so a linear trend that is not
        needed shrinks away).
    noise : {"fixed", "learn"}
        ``"fixed"``: a deterministic response, only :data:`NUGGET`;
        ``"learn"``: a white-noise variance is sampled too.
    mode : {"auto", "mixture", "plugin"}
        ``"mixture"``: predictions average over the draws; ``"plugin"``: the
        posterior mode alone; ``"auto"``: decided by runs per parameter and a
        short chain (module docstring: mixture, widened mode or mode).
    n_draws : int
        Draws kept.
    thin, burn : int
        Sweeps between kept draws, and sweeps dropped at the start.
    restarts : int
        Extra optimiser starts for the mode, drawn from the prior.
    seed : int
        Same seed, same draws.
    compress : bool
        Keep fewer draws (4, 8 or 16 of ``n_draws``) when their mixture matches
        that of all draws (see :meth:`_compress`): predictions cost one kernel
        evaluation per draw kept.
    structure : {"product", "additive", "auto"}
        One joint term over all inputs, or that plus one-input terms, or the
        more probable of the two given the runs (evidence).

    Attributes
    ----------
    thetas_ : ndarray, shape (J, p)
        Log hyperparameters of the draws kept (``J = 1`` for the plug-in).
    sampled_draws_ : int
        Draws before compression.
    spread_ : tuple of float or None
        ``(band ratio, mean shift)`` of the check of ``mode = "auto"`` (see
        :meth:`_check_spread`); None when it was not made.
    theta_map_ : ndarray, shape (p,)
    laplace_sd_ : ndarray, shape (p,)
        Posterior standard deviations of the log hyperparameters, Laplace approximation.
    method_ : {"mixture", "widened", "plugin"}
        ``widened``: the mode alone, its band and paths widened by
        ``band_scale_``.
    band_scale_ : float
        1 unless ``widened``: the short chain's band ratio.
    reason_ : str
        Why that method.
    evaluations_ : int
        Log-posterior evaluations of the sampler.
    fit_seconds_ : float
    family_, structure_ : str
        The kernel that predicts (chosen when an option is ``"auto"``).
    evidence_ : dict
        ``{"family/structure": log evidence}`` of the candidates compared
        (one entry, 0.0, when the options fixed the kernel).

    References
    ----------
    See the module docstring: Rasmussen & Williams 2006; Neal 2003; Neal 1997.

    Examples
    --------
    >>> import numpy as np
    >>> X = np.random.default_rng(0).random((12, 2))
    >>> hp = HyperPosterior(n_draws=8, thin=2, burn=10, seed=1).fit(X, np.sin(6 * X[:, 0]) + X[:, 1])
    >>> mean, std = hp.predict(X[:3], return_std=True)
    >>> bool(np.all(np.abs(mean - (np.sin(6 * X[:3, 0]) + X[:3, 1])) < 1e-2))
    True
    """

    def __init__(self, family="matern52", trend="linear", noise="fixed", mode="auto", n_draws=32, thin=3, burn=30,
                 restarts=3, seed=0, compress=True, structure="product"):
        self.family = family
        self.structure = structure
        self.trend = trend
        self.noise = noise
        self.mode = mode
        self.n_draws = n_draws
        self.thin = thin
        self.burn = burn
        self.restarts = restarts
        self.seed = seed
        self.compress = compress

    # -- checks ------------------------------------------------------------
    def _check_options(self):
        for key, value, allowed in (("family", self.family, FAMILIES + ("auto",)), ("trend", self.trend, TRENDS),
                                    ("structure", self.structure, STRUCTURES + ("auto",)),
                                    ("noise", self.noise, ("fixed", "learn")), ("mode", self.mode, MODES)):
            if value not in allowed:
                raise SurrogateError(f"hyperposterior option {key}={value!r} is not one of {', '.join(allowed)}")
        for key, least in (("n_draws", 1), ("thin", 1), ("burn", 0), ("restarts", 0)):
            value = getattr(self, key)
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < least:
                raise SurrogateError(f"hyperposterior option {key}={value!r} must be a whole number >= {least}")

    def _check_fitted(self):
        if not hasattr(self, "draws_"):
            raise NotFittedError("this hyperposterior is not fitted yet; call fit(X_unit, y) first")

    def _check_points(self, X_unit) -> np.ndarray:
        X = np.asarray(X_unit, dtype=float)
        X = X.reshape(1, -1) if X.ndim == 1 else X
        d = self.X_unit_.shape[1]
        if X.ndim != 2 or X.shape[1] != d or not np.all(np.isfinite(X)):
            raise SurrogateError(f"points must be finite, of shape (n, {d}); got {X.shape}")
        return X

    # -- fitting -----------------------------------------------------------
    def fit(self, X_unit, y) -> "HyperPosterior":
        """Sample the hyperparameters' posterior given runs ``(X_unit, y)``.

        Parameters
        ----------
        X_unit : array_like, shape (n, d)
            Runs scaled to the unit cube (distinct points).
        y : array_like, shape (n,)
            Response values, in the response's unit.

        Returns
        -------
        self

        Raises
        ------
        SurrogateError
            Bad options or data, or a posterior whose mode cannot be found.
        """
        start = time.perf_counter()
        self._check_options()
        X = np.asarray(X_unit, dtype=float)
        y = np.asarray(y, dtype=float).ravel()
        if X.ndim != 2 or len(X) != len(y) or len(y) < 3:
            raise SurrogateError(f"X_unit must have shape (n, d) and y shape (n,), n >= 3; got {X.shape}, {y.shape}")
        if not (np.all(np.isfinite(X)) and np.all(np.isfinite(y))):
            raise SurrogateError("training data hold NaN or infinite values; drop failed runs first")
        rng = np.random.default_rng(self.seed)
        self.X_unit_, self.y_ = X, y
        self.y_mean_ = float(np.mean(y))
        std = float(np.std(y))
        self.constant_ = std <= 1e-12 * max(1.0, abs(self.y_mean_))
        self.y_std_ = 1.0 if self.constant_ else std
        n, d = X.shape
        with threadpool_limits(limits=1, user_api="blas"):  # small matrices: threads only contend
            target, self.theta_map_ = self._choose_kernel(X - 0.5, (y - self.y_mean_) / self.y_std_, rng)
            self.target_ = target
            W, self.laplace_sd_ = self._laplace(target, self.theta_map_)
            self.spread_, self.check_evaluations_ = None, 0
            self.method_, self.reason_ = self._choose(n, d)
            if self.method_ == "mixture" and self.mode == "auto":
                self.spread_ = self._check_spread(target, W)
                self.method_, self.reason_ = self._choose_by_spread(n, d, *self.spread_)
            self.band_scale_ = self.spread_[0] if self.method_ == "widened" else 1.0
            if self.method_ in ("plugin", "widened"):
                self.thetas_, self.evaluations_ = self.theta_map_[None, :], self.check_evaluations_
            else:
                self.thetas_, evaluations = self._sample(target, W, rng)
                self.evaluations_ = evaluations + self.check_evaluations_
            self.draws_ = [_Draw(target, t) for t in self.thetas_]
            self.sampled_draws_ = len(self.draws_)
            if self.method_ == "mixture" and self.compress:
                keep = self._compress(target)
                self.thetas_, self.draws_ = self.thetas_[keep], [self.draws_[i] for i in keep]
        self.reason_ += self._kernel_words()
        self.fit_seconds_ = time.perf_counter() - start
        return self

    def _candidates(self) -> list:
        """(family, structure) pairs to compare: every one of an ``"auto"`` option."""
        fams = FAMILIES if self.family == "auto" else (self.family,)
        structs = STRUCTURES if self.structure == "auto" else (self.structure,)
        return [(f, s) for f in fams for s in structs]

    def _choose_kernel(self, Z, yn, rng) -> tuple:
        """The target and posterior mode of the kernel chosen by evidence among :meth:`_candidates`.

        Each candidate's posterior mode is found (:meth:`_mode`) and its log
        evidence approximated at the mode (:meth:`_Target.log_evidence`,
        Laplace); the largest wins (MacKay 1992; Rasmussen & Williams 2006,
        sec. 5.2). Sets ``family_``, ``structure_`` and ``evidence_``.
        """
        best, self.evidence_ = None, {}
        for family, structure in self._candidates():
            target = _Target(Z, yn, family, self.trend, self.noise == "learn", NUGGET, structure == "additive")
            theta = self._mode(target, rng)
            logz = target.log_evidence(theta) if len(self._candidates()) > 1 else 0.0
            self.evidence_[f"{family}/{structure}"] = float(logz)
            if best is None or logz > best[0]:
                best = (logz, target, theta, family, structure)
        _, target, theta, self.family_, self.structure_ = best
        return target, theta

    def _kernel_words(self) -> str:
        """How the kernel was chosen, for :attr:`reason_` (empty when the options fixed it)."""
        if len(self.evidence_) < 2:
            return ""
        ranked = sorted(self.evidence_.items(), key=lambda kv: -kv[1])
        gap = ranked[0][1] - ranked[1][1]
        return (f"; kernel {_structure_label(self.family_, self.structure_)}, the most probable of {len(ranked)} "
                f"given the runs (log evidence {gap:.1f} above the next, {_structure_label(*ranked[1][0].split('/'))})")

    def _choose(self, n: int, d: int) -> tuple:
        per = n / d
        if self.mode == "plugin":
            return "plugin", "the plug-in fit (posterior mode) was asked for"
        if self.mode == "mixture":
            return "mixture", "the mixture over hyperparameter draws was asked for"
        if per >= PLUGIN_RUNS_PER_PARAMETER:
            return "plugin", (f"{n} runs for {d} parameters ({per:.0f} per parameter, at least "
                              f"{PLUGIN_RUNS_PER_PARAMETER}): the kernel's settings are well determined, so the "
                              "most probable settings alone (plug-in) are used")
        return "mixture", (f"{n} runs for {d} parameters ({per:.1f} per parameter, fewer than "
                           f"{PLUGIN_RUNS_PER_PARAMETER}): the kernel's settings are uncertain, so predictions "
                           "average over draws of them")

    def _check_spread(self, target: _Target, W) -> tuple:
        """How much plausible settings move the band: (band ratio, mean shift) of a short chain's mixture.

        A short slice-sampling chain (:data:`CHECK_BURN` sweeps dropped, then
        :data:`CHECK_DRAWS` draws every :data:`CHECK_THIN` sweeps) and the mode
        predict at :data:`CHECK_POINTS` scrambled Sobol' points. ``band
        ratio``: RMS standard deviation of the draws' mixture (law of total
        variance) over that of the mode; ``mean shift``: RMS difference of the
        means over the mode's RMS standard deviation, less the Monte-Carlo
        scatter of a mean of :data:`CHECK_DRAWS` draws. Own stream
        (``[seed, 1]``), so the main chain's draws do not depend on it.
        """
        rng = np.random.default_rng([int(self.seed), 1])
        C = qmc.Sobol(target.d, scramble=True, seed=rng).random(CHECK_POINTS) - 0.5
        m0, v0 = _Draw(target, self.theta_map_)._posterior_normalised(C)
        thetas, self.check_evaluations_ = self._chain(target, W, rng, CHECK_BURN, CHECK_DRAWS, CHECK_THIN)
        ms, vs = _draws_posterior([_Draw(target, theta) for theta in thetas], C)
        mean, var = _mixture_moments(ms, vs)
        scale = max(float(np.mean(v0)), 1e-300)
        # the mean of K draws scatters by (between-draw variance) / K about the mixture's mean even when that
        # equals the mode's: subtract that part of the squared shift (Monte-Carlo error, not a real shift)
        shift2 = np.mean((mean - m0) ** 2) - np.mean(np.var(ms, axis=0, ddof=1)) / len(ms)
        return float(np.sqrt(np.mean(var) / scale)), float(np.sqrt(max(shift2, 0.0) / scale))

    def _compress(self, target: _Target) -> np.ndarray:
        """Indices of the fewest evenly spaced draws whose mixture matches that of all draws.

        Every prediction costs one kernel evaluation per draw, so a mixture
        whose draws agree is kept with fewer of them: 4, 8 or 16 evenly spaced
        along the chain, the first count whose mixture mean and standard
        deviation at :data:`CHECK_POINTS` scrambled Sobol' points are within
        :data:`COMPRESS_TOL` of all draws' (RMS over the points, in units of
        the RMS standard deviation).
        """
        J = len(self.draws_)
        rng = np.random.default_rng([int(self.seed), 2])
        C = qmc.Sobol(target.d, scramble=True, seed=rng).random(CHECK_POINTS) - 0.5
        ms, vs = _draws_posterior(self.draws_, C)

        def moments(rows):
            m, var = _mixture_moments(ms[rows], vs[rows])
            return m, np.sqrt(np.clip(var, 0.0, None))

        full_m, full_s = moments(np.arange(J))
        scale = max(float(np.sqrt(np.mean(full_s**2))), 1e-300)
        for k in (4, 8, 16):
            if k >= J:
                break
            rows = np.unique(np.linspace(0, J - 1, k).round().astype(int))
            m, sd = moments(rows)
            if (np.sqrt(np.mean((m - full_m) ** 2)) <= COMPRESS_TOL * scale
                    and np.sqrt(np.mean((sd - full_s) ** 2)) <= COMPRESS_TOL * scale):
                return rows
        return np.arange(J)

    @staticmethod
    def _choose_by_spread(n: int, d: int, band: float, shift: float) -> tuple:
        what = (f"plausible settings widen the band by {max(band - 1, 0):.0%} and move the mean by {shift:.2f} band "
                "widths")
        if band <= BAND_RATIO_MAX and shift <= MEAN_SHIFT_MAX:
            return "plugin", (f"{n} runs for {d} parameters pin the kernel's settings down ({what}), so the "
                              "most probable settings alone (plug-in) are used")
        if band <= WIDEN_RATIO_MAX and shift <= MEAN_SHIFT_MAX:
            return "widened", (f"{n} runs for {d} parameters leave some doubt about the kernel's settings ({what}): "
                               f"the most probable settings predict, with their band widened by {band - 1:.0%}")
        return "mixture", (f"{n} runs for {d} parameters leave the kernel's settings uncertain ({what}): "
                           "predictions average over draws of them")

    def _mode(self, target: _Target, rng) -> np.ndarray:
        """Posterior mode: L-BFGS-B from the prior median and ``restarts`` prior draws."""
        starts = [np.clip(target.prior_mean, target.lower, target.upper)]
        for _ in range(int(self.restarts)):
            starts.append(np.clip(target.prior_mean + target.prior_sd * rng.standard_normal(target.p),
                                  target.lower, target.upper))
        best = None
        bounds = list(zip(target.lower, target.upper))
        for x0 in starts:
            res = minimize(target.value_and_grad, x0, jac=True, bounds=bounds, method="L-BFGS-B")
            if np.isfinite(res.fun) and (best is None or res.fun < best.fun):
                best = res
        if best is None or best.fun >= 1e24:
            raise SurrogateError("no kernel setting gives a usable covariance; the runs may repeat points")
        return np.asarray(best.x, dtype=float)

    @staticmethod
    def _laplace(target: _Target, theta) -> tuple:
        """Whitening map ``W`` (Laplace covariance, eigenvalues kept sane) and the marginal sds."""
        W, _ = _whitening(_hessian(target, theta))
        return W, np.sqrt(np.sum(W**2, axis=1))

    def _sample(self, target: _Target, W, rng) -> tuple:
        """Slice sampling in whitened coordinates around the mode; returns kept draws and evaluations."""
        return self._chain(target, W, rng, int(self.burn), int(self.n_draws), int(self.thin))

    def _chain(self, target: _Target, W, rng, burn: int, n_draws: int, thin: int) -> tuple:
        """``n_draws`` draws, every ``thin``-th sweep after ``burn``, of a chain started at the mode."""
        theta0 = self.theta_map_

        def logp(u):
            return target.logp(theta0 + W @ u)

        states, _, evals = slice_sample(logp, np.zeros(target.p), burn + n_draws * thin, rng, SLICE_WIDTH)
        kept = states[burn + thin - 1::thin][:n_draws]
        return theta0[None, :] + kept @ W.T, evals

    # -- prediction --------------------------------------------------------
    def predict_draws(self, X_unit):
        """Mean and variance of every draw at ``X_unit``, normalised units, each of shape ``(J, m)``."""
        self._check_fitted()
        Z = self._check_points(X_unit) - 0.5
        return _draws_posterior(self.draws_, Z, self._stack() if len(self.draws_) > 1 else None)

    def _stack(self) -> dict:
        """The draws' kernels and solves as stacked arrays (built once per set of draws)."""
        cached = getattr(self, "_stack_cache", None)
        if cached is not None and cached[0] is self.draws_:
            return cached[1]
        stack = _stack_draws(self.draws_)
        self._stack_cache = (self.draws_, stack)
        return stack

    def predict(self, X_unit, return_std=False):
        """Mixture mean (and standard deviation) of the response over the draws.

        Parameters
        ----------
        X_unit : array_like, shape (m, d)
        return_std : bool
            Also return the mixture's standard deviation (law of total
            variance over draws; the mean function's uncertainty, without
            the noise of a new observation).

        Returns
        -------
        mean : ndarray, shape (m,)
            Response unit.
        std : ndarray, shape (m,), only with ``return_std``
            Response unit.
        """
        mean, var = _mixture_moments(*self.predict_draws(X_unit))
        out = self.y_mean_ + self.y_std_ * mean
        if not return_std:
            return out
        return out, self.band_scale_ * self.y_std_ * np.sqrt(np.clip(var, 0.0, None))

    def centre(self, X_unit) -> np.ndarray:
        """The posterior mode's mean (response unit): one draw, a cheap stand-in for the mean where only a
        control variate is needed (:func:`doe.sensitivity.sobol.sobol_indices`)."""
        self._check_fitted()
        Z = self._check_points(X_unit) - 0.5
        if not hasattr(self, "mode_draw_"):
            self.mode_draw_ = _Draw(self.target_, self.theta_map_)
        return self.y_mean_ + self.y_std_ * self.mode_draw_._posterior_normalised(Z)[0]

    def sample_paths(self, X_unit, n_paths: int, seed=0, method: str = "auto") -> np.ndarray:
        """Joint draws of the response at ``X_unit``, spread evenly over the hyperparameter draws.

        Parameters
        ----------
        X_unit : array_like, shape (m, d)
        n_paths : int
        seed : int or numpy.random.Generator
        method : {"auto", "exact", "features"}
            As in :func:`doe.surrogate.paths.draw_paths`; ``"auto"`` is exact up to
            :data:`EXACT_PATH_POINTS` points.

        Returns
        -------
        ndarray, shape (n_paths, m)
            Response unit. Path ``p`` comes from draw ``order[p]``, a seeded
            permutation that cycles through the draws.
        """
        self._check_fitted()
        Z = self._check_points(X_unit) - 0.5
        if isinstance(n_paths, bool) or not isinstance(n_paths, (int, np.integer)) or n_paths < 1:
            raise SurrogateError(f"n_paths must be a whole number >= 1, got {n_paths!r}")
        if method == "auto":
            limit = paths.EXACT_MAX if self.structure_ == "additive" else EXACT_PATH_POINTS
            method = "exact" if len(Z) <= limit else "features"
        rng = np.random.default_rng(seed)
        J = len(self.draws_)
        owner = rng.permutation(np.arange(int(n_paths)) % J)
        out = np.empty((int(n_paths), len(Z)))
        with threadpool_limits(limits=1, user_api="blas"):
            for j in np.unique(owner):
                rows = np.flatnonzero(owner == j)
                out[rows] = paths.draw_paths(self.draws_[j], Z, len(rows), rng, method)
            if self.band_scale_ != 1.0:                 # widened: deviations from the mean scaled like the band
                mean = self.draws_[0]._posterior_normalised(Z)[0]
                out = mean + self.band_scale_ * (out - mean)
        return self.y_mean_ + self.y_std_ * out

    # -- checks of the fit -------------------------------------------------
    def loo(self) -> dict:
        """Leave-one-out predictions of the mixture, importance-weighted per run.

        Returns
        -------
        dict
            ``observed``, ``predicted``, ``std`` (response unit, shape (n,)),
            ``q2`` and ``rmse`` (as in :class:`doe.surrogate.LooResult`), and
            ``ess`` (effective number of draws behind each run's weights).

        References
        ----------
        Gelfand, Dey & Chang 1992; Ionides 2008 (truncated weights at
        ``sqrt(J)`` times the mean).
        """
        self._check_fitted()
        parts = [d.loo() for d in self.draws_]
        mu = np.array([m for m, _ in parts])                     # (J, n)
        var = np.array([v for _, v in parts])
        yn = self.target_.yn
        logw = 0.5 * np.log(2 * np.pi * var) + 0.5 * (yn - mu) ** 2 / var   # -log p(y_i | y_-i, theta_j)
        w = np.exp(logw - logw.max(axis=0))
        w /= w.mean(axis=0)
        w = np.minimum(w, math.sqrt(len(mu)))                   # Ionides 2008
        w /= w.sum(axis=0)
        mean = np.sum(w * mu, axis=0)
        std = np.sqrt(np.clip(np.sum(w * (var + mu**2), axis=0) - mean**2, 1e-300, None))
        pred = self.y_mean_ + self.y_std_ * mean
        resid = self.y_ - pred
        total = float(np.sum((self.y_ - self.y_.mean()) ** 2))
        q2 = 1.0 - float(np.sum(resid**2)) / total if total > 0 else float("nan")
        return {"observed": self.y_.copy(), "predicted": pred, "std": self.band_scale_ * self.y_std_ * std, "q2": q2,
                "rmse": float(np.sqrt(np.mean(resid**2))), "ess": 1.0 / np.sum(w**2, axis=0)}

    def expected_q2(self, n_points: int = 1024, seed=0) -> float:
        """The posterior's own forecast of the map's q2 over the unit cube.

        ``1 - mean(var) / (var(mean) + mean(var))`` on scrambled Sobol' points:
        the expected share of the response's variance that the mixture mean
        misses, if the posterior is calibrated.
        """
        U = qmc.Sobol(self.X_unit_.shape[1], scramble=True, seed=seed).random(n_points)
        mean, std = self.predict(U, return_std=True)
        miss = float(np.mean(std**2))
        total = float(np.var(mean)) + miss
        return 1.0 - miss / total if total > 0 else float("nan")

    def q2_draws(self, n_points: int = 256, n_paths: int = 128, seed=0) -> np.ndarray:
        """Posterior draws of the map's q2 (see :func:`q2_draws`)."""
        self._check_fitted()
        return q2_draws(self, self.X_unit_.shape[1], n_points, n_paths, seed)

    def kernel_summary(self) -> dict:
        """What predicts, in plain values: kernel name, family, structure, trend and relative length scales.

        Returns
        -------
        dict
            ``label`` (e.g. ``"Matern 5/2 plus one-input terms, linear trend"``),
            ``family``, ``structure``, ``trend``, ``length_scales`` (joint term,
            fractions of each parameter's range) and, with one-input terms,
            ``one_input_length_scales``: the posterior mode's when it predicts
            alone (``plugin``, ``widened``), else the median over the kept
            draws; ``which`` says which.
        """
        self._check_fitted()
        ix = self.target_.ix
        mixture = self.method_ == "mixture" and len(self.thetas_) > 1
        theta = np.median(self.thetas_, axis=0) if mixture else self.theta_map_
        out = {"label": f"{_structure_label(self.family_, self.structure_)}, {self.trend} trend",
               "family": self.family_, "structure": self.structure_, "trend": self.trend,
               "which": "median over the draws" if mixture else "posterior mode",
               "length_scales": np.exp(theta[ix["ls"]])}
        if "add_ls" in ix:
            out["one_input_length_scales"] = np.exp(theta[ix["add_ls"]])
        return out

    # -- records -----------------------------------------------------------
    def to_record(self) -> dict:
        """Options, scaling and draws as plain JSON values (training data are stored beside, e.g. in NPZ)."""
        self._check_fitted()
        return {"format": FORMAT[0], "version": FORMAT[1],
                "options": {"family": self.family, "structure": self.structure, "trend": self.trend,
                            "noise": self.noise, "mode": self.mode,
                            "n_draws": int(self.n_draws), "thin": int(self.thin), "burn": int(self.burn),
                            "restarts": int(self.restarts), "seed": int(self.seed),
                            "compress": bool(self.compress)},
                "y_mean": self.y_mean_, "y_std": self.y_std_, "constant": bool(self.constant_),
                "method": self.method_, "reason": self.reason_, "sampled_draws": int(self.sampled_draws_),
                "band_scale": float(self.band_scale_),
                "family_chosen": self.family_, "structure_chosen": self.structure_,
                "evidence": {k: float(v) for k, v in self.evidence_.items()},
                "theta_map": [float(t) for t in self.theta_map_],
                "laplace_sd": [float(t) for t in self.laplace_sd_],
                "thetas": [[float(t) for t in row] for row in self.thetas_],
                "evaluations": int(self.evaluations_), "fit_seconds": float(self.fit_seconds_)}

    @classmethod
    def from_record(cls, record: dict, X_unit, y) -> "HyperPosterior":
        """Rebuild from :meth:`to_record` and the training data, without sampling again."""
        try:
            if (record["format"], record["version"]) != FORMAT:
                raise SurrogateError(f"not a '{FORMAT[0]}' version {FORMAT[1]} record")
            model = cls(**record["options"])
            model._check_options()
            X = np.asarray(X_unit, dtype=float)
            model.X_unit_, model.y_ = X, np.asarray(y, dtype=float).ravel()
            model.y_mean_, model.y_std_ = float(record["y_mean"]), float(record["y_std"])
            model.constant_ = bool(record["constant"])
            model.method_, model.reason_ = str(record["method"]), str(record["reason"])
            model.theta_map_ = np.array(record["theta_map"], dtype=float)
            model.laplace_sd_ = np.array(record["laplace_sd"], dtype=float)
            model.thetas_ = np.array(record["thetas"], dtype=float).reshape(-1, len(model.theta_map_))
            model.evaluations_, model.fit_seconds_ = int(record["evaluations"]), float(record["fit_seconds"])
            model.sampled_draws_ = int(record.get("sampled_draws", len(model.thetas_)))
            model.band_scale_ = float(record.get("band_scale", 1.0))
            model.family_ = str(record.get("family_chosen", model.family))
            model.structure_ = str(record.get("structure_chosen", model.structure))
            model.evidence_ = {str(k): float(v) for k, v in record.get("evidence", {}).items()}
            if model.family_ not in FAMILIES or model.structure_ not in STRUCTURES:
                raise SurrogateError(f"unknown kernel {model.family_!r} / {model.structure_!r}")
            model.spread_ = None
        except (KeyError, TypeError, ValueError) as exc:
            raise SurrogateError(f"the saved hyperposterior record is incomplete or malformed ({exc!r})") from exc
        target = _Target(X - 0.5, (model.y_ - model.y_mean_) / model.y_std_, model.family_, model.trend,
                         model.noise == "learn", NUGGET, model.structure_ == "additive")
        if target.p != len(model.theta_map_):
            raise SurrogateError(f"the saved hyperparameters do not fit {X.shape[1]} parameters")
        model.target_ = target
        model.draws_ = [_Draw(target, t) for t in model.thetas_]
        return model
