"""A scikit-learn Gaussian process wrapped into the callables of :func:`doe.sensitivity.sobol.sobol_indices`.

Reference library for the surrogate route's tests (scikit-learn's
``GaussianProcessRegressor``, Rasmussen & Williams 2006, Alg. 2.1), independent
of :mod:`doe.surrogate.gp`. Joint posterior draws use a Cholesky factor of the
posterior covariance with a small relative jitter.
"""
import warnings

import numpy as np
from scipy.linalg import cholesky
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import RBF, ConstantKernel


def fit_reference_gp(space, X, y, seed=0, restarts=0):
    """Fit a GP on points ``X`` (study units); return ``(model, paths)`` callables in study units."""
    U = space.to_unit(X)
    kernel = ConstantKernel(1.0, (1e-3, 1e3)) * RBF([0.3] * space.dim, (1e-2, 1e2))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # optimiser chatter; the tests judge the fit by its indices
        gp = GaussianProcessRegressor(kernel, alpha=1e-8, normalize_y=True, n_restarts_optimizer=restarts,
                                      random_state=seed).fit(U, y)

    def model(Xq):
        return gp.predict(space.to_unit(Xq))

    def paths(Xq, n_paths, path_seed):
        mean, cov = gp.predict(space.to_unit(Xq), return_cov=True)
        jitter = 1e-10 * float(np.mean(np.diag(cov)))
        while True:  # grow the jitter until the nearly singular covariance factors
            try:
                L = cholesky(cov + jitter * np.eye(len(mean)), lower=True)
                break
            except np.linalg.LinAlgError:
                jitter *= 10
        z = np.random.default_rng(path_seed).standard_normal((len(mean), n_paths))
        return mean[None, :] + (L @ z).T

    return model, paths
