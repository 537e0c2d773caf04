"""How much wider the band of a surrogate over choice knobs must be than its fitted (plug-in) band.

A Gaussian process whose kernel settings (variance, length scales, the
correlation between levels) are fitted by likelihood treats them as known.
With 10 to 60 runs they are not, and its bands are too narrow: on the
built-in model of ``studies/demo_choices.toml`` (40 runs) the plug-in 2-sigma
band of the mixed GP held 84-85 % of held-out errors on average over plans,
66 % at worst (``benchmarks/bench_mixed.py``).

Two measured widening factors, the larger of which is kept (never below 1):

* **sampled settings**: the kernel settings' posterior is sampled by slice
  sampling (:func:`doe.surrogate.hyperposterior.slice_sample`, Neal 2003)
  under weakly informative priors (:data:`PRIORS`); at check points the
  mixture of the draws' posteriors has a second moment about the fitted
  mean (its variance plus its squared shift from the fitted mean); the
  factor is the square root of its average over the fitted variance's
  average (law of total variance; Rasmussen & Williams 2006, sec. 5.2);
* **leave-one-out**: the root mean square of the standardised leave-one-out
  errors, the cross-validation estimate of the variance's scale (Bachoc 2013),
  which catches a fit whose band is too narrow at its own runs.

The fitted mean is kept, and so is the cost of a prediction: the band and
the sample paths are widened about it (variance inflation, as the
``"widened"`` mode of :mod:`doe.surrogate.hyperposterior`). Why not the full
mixture: a robust search over four level combinations predicts some 10^5
times, and the mixture costs one prediction per draw.

References
----------
.. [1] Neal, R. M. (2003). Slice sampling. Annals of Statistics 31(3), 705-767.
.. [2] Rasmussen, C. E. and Williams, C. K. I. (2006). Gaussian Processes for
   Machine Learning. MIT Press, sec. 5.2 and eq. 5.12.
.. [3] Bachoc, F. (2013). Cross validation and maximum likelihood estimations
   of hyper-parameters of Gaussian processes with model misspecification.
   Computational Statistics & Data Analysis 66, 55-69 (the cross-validation
   estimate of the variance).
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
from scipy.linalg import cho_solve, cholesky, solve_triangular
from threadpoolctl import threadpool_limits

from ..errors import SurrogateError
from .hyperposterior import slice_sample

__all__ = ["BandWidening", "PRIORS", "BURN", "DRAWS", "THIN", "sampled_band_ratio", "loo_band_ratio",
           "band_widening", "theta_setter", "log_marginal_likelihood"]

#: Prior (mean, sd) of each log hyperparameter, by the ending of its scikit-learn name (normalised output,
#: continuous inputs in fractions of their range). Amplitude, length scales and trend as in
#: :mod:`doe.surrogate.hyperposterior` (its fixed-mean variant; the length scales' mean gets ln(d) / 4 added);
#: ``level_scale`` is ``theta = -ln(rho)``: its prior puts rho = exp(-theta) between 0.03 and 0.95 at +-1 sd
#: (levels from nearly independent to nearly pooled); ``level_angle`` are the hypersphere angles (common
#: practice, no source; checked by the coverage of held-out bands in benchmarks/bench_mixed.py).
PRIORS = {"k1__k1__constant_value": (0.0, 1.5), "length_scale": (math.log(0.35), 1.0),
          "level_scale": (math.log(0.5), 1.5), "level_angle": (math.log(1.2), 1.0),
          "k2__constant_value": (math.log(0.1), 2.0)}
#: Sweeps of the slice sampler dropped, draws kept, sweeps between kept draws (the chain starts at the fitted
#: settings, the posterior mode's neighbourhood, so a short burn-in suffices; common practice, no source).
BURN, DRAWS, THIN = 20, 16, 2
#: Initial slice width per log hyperparameter (Neal 2003, sec. 4: about the posterior's scale).
WIDTH = 1.5


@dataclass(frozen=True)
class BandWidening:
    """The factor a surrogate's standard deviation is multiplied by, and where it comes from.

    Attributes
    ----------
    factor : float
        ``max(1, sampled, loo)``, -.
    sampled : float
        Square root of the mixture's mean second moment about the fitted mean over the fitted mean
        variance at the check points, -.
    loo : float
        Root mean square of the standardised leave-one-out errors, -.
    draws : int
        Kernel settings drawn (0 when the ratio was not sampled).
    evaluations : int
        Likelihood evaluations of the sampler.
    """

    factor: float
    sampled: float
    loo: float
    draws: int
    evaluations: int

    def to_dict(self) -> dict:
        return {"factor": float(self.factor), "sampled": float(self.sampled), "loo": float(self.loo),
                "draws": int(self.draws), "evaluations": int(self.evaluations)}

    @classmethod
    def from_dict(cls, record: dict) -> "BandWidening":
        try:
            return cls(float(record["factor"]), float(record["sampled"]), float(record["loo"]),
                       int(record["draws"]), int(record["evaluations"]))
        except (KeyError, TypeError, ValueError) as exc:
            raise SurrogateError(f"the saved band widening is incomplete or malformed ({exc!r})") from exc

    def words(self) -> str:
        """One sentence: the factor and why."""
        if self.factor <= 1.0:
            return ("the fitted band is kept: neither the sampled kernel settings nor the leave-one-out errors "
                    "ask for a wider one")
        which = "the sampled kernel settings" if self.sampled >= self.loo else "the leave-one-out errors"
        return (f"band widened about the fitted mean by {self.factor:.2f} ({which}: {self.draws} sampled kernel "
                f"settings, level correlations included, give {self.sampled:.2f}; the standardised leave-one-out "
                f"errors {self.loo:.2f})")


def _priors(kernel, n_cont: int) -> tuple:
    """Prior means and sds of ``kernel.theta``, by hyperparameter name."""
    mu, sd = [], []
    for h in kernel.hyperparameters:
        if h.fixed:
            continue
        key = next((k for k in PRIORS if h.name.endswith(k)), None)
        if key is None:
            raise SurrogateError(f"no prior for the kernel setting '{h.name}'")
        m, s = PRIORS[key]
        if key == "length_scale":
            m += math.log(max(n_cont, 1)) / 4
        mu += [m] * h.n_elements
        sd += [s] * h.n_elements
    return np.array(mu), np.array(sd)


def _moments(kernel, X, y, alpha: float, Z) -> tuple:
    """Posterior mean and variance at ``Z`` of a GP with ``kernel`` (normalised units; eqs. 2.25-2.26)."""
    K = kernel(X)
    K[np.diag_indices_from(K)] += alpha
    L = cholesky(K, lower=True, check_finite=False)
    Ks = kernel(Z, X)
    mean = Ks @ cho_solve((L, True), y, check_finite=False)
    v = solve_triangular(L, Ks.T, lower=True, check_finite=False)
    return mean, np.clip(kernel.diag(Z) - np.einsum("ij,ij->j", v, v), 0.0, None)


def theta_setter(kernel):
    """A function that sets ``kernel``'s free hyperparameters from ``theta`` (log values), in place.

    The same as ``kernel.theta = theta`` (scikit-learn's order: ``kernel.hyperparameters``), without
    rebuilding the hyperparameter list on every call (most of a likelihood evaluation's time for small n).
    """
    slots, start = [], 0
    for h in kernel.hyperparameters:
        if h.fixed:
            continue
        *path, attr = h.name.split("__")
        owner = kernel
        for part in path:
            owner = getattr(owner, part)
        slots.append((owner, attr, start, start + h.n_elements, np.ndim(getattr(owner, attr)) == 0))
        start += h.n_elements

    def set_theta(theta):
        values = np.exp(np.asarray(theta, dtype=float))
        for owner, attr, a, b, scalar in slots:
            setattr(owner, attr, float(values[a]) if scalar else values[a:b].copy())

    return set_theta


def log_marginal_likelihood(kernel, X, y, alpha) -> float:
    """``log p(y | X, kernel)`` of a zero-mean GP with diagonal term ``alpha`` (Rasmussen & Williams 2006,
    eq. 2.30); ``-inf`` when the kernel matrix cannot be factorised."""
    K = kernel(X)
    K[np.diag_indices_from(K)] += alpha
    try:
        L = cholesky(K, lower=True, check_finite=False)
    except np.linalg.LinAlgError:
        return -np.inf
    a = cho_solve((L, True), y, check_finite=False)
    return float(-0.5 * y @ a - np.sum(np.log(np.diag(L))) - 0.5 * len(y) * math.log(2 * math.pi))


def sampled_band_ratio(gp, Z, n_cont: int, seed=0, draws: int = DRAWS, burn: int = BURN, thin: int = THIN) -> tuple:
    """How much wider the band is when the kernel settings are sampled than when they are fitted.

    Parameters
    ----------
    gp : sklearn.gaussian_process.GaussianProcessRegressor
        Fitted (``kernel_`` holds the fitted settings; normalised output); left as it is.
    Z : ndarray, shape (m, d)
        Check points, in the inputs ``gp`` was fitted on.
    n_cont : int
        Continuous inputs (for the length scales' prior).
    seed : int or numpy.random.Generator
    draws, burn, thin : int
        Draws kept, sweeps dropped first, sweeps between kept draws.

    Returns
    -------
    ratio : float
        ``sqrt(mean_Z E_theta[(m_theta - m_hat)^2 + v_theta] / mean_Z v_hat)``, -.
    evaluations : int
        Likelihood evaluations.
    """
    kernel = gp.kernel_.clone_with_theta(gp.kernel_.theta)
    mu, sd = _priors(kernel, n_cont)
    bounds = kernel.bounds
    set_theta = theta_setter(kernel)
    X, y = gp.X_train_, np.asarray(gp.y_train_, dtype=float).ravel()

    def logp(theta):
        if np.any(theta < bounds[:, 0]) or np.any(theta > bounds[:, 1]):
            return -np.inf
        set_theta(theta)
        return log_marginal_likelihood(kernel, X, y, gp.alpha) - 0.5 * float(np.sum(((theta - mu) / sd) ** 2))

    rng = np.random.default_rng(seed)
    with threadpool_limits(limits=1, user_api="blas"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        states, _, evaluations = slice_sample(logp, gp.kernel_.theta.copy(), burn + draws * thin, rng, width=WIDTH)
        fitted_mean, fitted_var = _moments(gp.kernel_, X, y, gp.alpha, Z)
        second = np.zeros(len(Z))
        for theta in states[burn + thin - 1::thin][:draws]:
            set_theta(theta)
            m, v = _moments(kernel, X, y, gp.alpha, Z)
            second += (v + (m - fitted_mean) ** 2) / draws
    base = float(np.mean(fitted_var))
    ratio = math.sqrt(float(np.mean(second)) / base) if base > 0 else 1.0
    return ratio, int(evaluations)


def loo_band_ratio(loo) -> float:
    """Root mean square of the standardised leave-one-out errors (Bachoc 2013), -; 1 without spread."""
    ok = np.asarray(loo.std) > 0          # LooResult.standardised, without dividing by a zero spread
    return float(np.sqrt(np.mean((loo.residual[ok] / loo.std[ok]) ** 2))) if np.any(ok) else 1.0


def band_widening(gp, Z, n_cont: int, loo, seed=0) -> BandWidening:
    """:class:`BandWidening` of a fitted GP: the larger of :func:`sampled_band_ratio` and :func:`loo_band_ratio`."""
    sampled, evaluations = sampled_band_ratio(gp, Z, n_cont, seed)
    by_loo = loo_band_ratio(loo)
    return BandWidening(max(1.0, sampled, by_loo), sampled, by_loo, DRAWS, evaluations)
