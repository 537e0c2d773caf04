"""Sobol sensitivity indices with honest uncertainty: on a surrogate, or straight from a cheap model.

Which knobs change a response, and which can be left alone? For independent
inputs ``X_i`` the response's variance splits into shares (Sobol' 1993):

* first-order index ``S1_i = Var(E[Y | X_i]) / Var(Y)``: the share input ``i``
  explains on its own;
* total index ``ST_i = E[Var(Y | X_~i)] / Var(Y)``: the share in which input
  ``i`` takes part at all, alone or through interactions. ``ST_i - S1_i`` is
  the part through interactions; ``ST_i`` near 0 means the knob can be left
  alone;
* second-order index ``S2_ij`` (on request): the share of the pure interaction.

Estimation (SALib)
------------------
Saltelli sampling on a scrambled Sobol' sequence: ``N`` base rows, ``N (d + 2)``
model evaluations (``N (2 d + 2)`` with second order). ``S1`` by the estimator
of Saltelli et al. (2010), ``ST`` by Jansen's (1999, as recommended by
Saltelli et al. 2010), ``S2`` by Saltelli (2002), as SALib implements them.
SALib's analysis depends on the sampler's row order, so it is only ever given
outputs of its own sample, complete and in order.

Base sample size
----------------
Unless fixed by the caller, ``N`` starts at 1024 (256 for the direct route)
and grows in powers of two, reusing every evaluation (the first rows of a
scrambled Sobol' sequence with a given seed do not change when it is
extended), until the estimator's own 95 % half-width (bootstrap) meets its
target for every first-order and total index of every response: the larger
of ``target_conf`` (0.01 by default) and a quarter of the surrogate's
half-width for that index, so that the estimator adds at most 3 % to the
combined interval. The half-width falls as ``1 / sqrt(N)``, so each step jumps
to the ``N`` this predicts. ``max_base_samples`` (2^15) or ``max_evaluations``
stop the growth; the result says whether the target was reached. The
bootstrap treats the scrambled Sobol' rows as independent and so overstates
their error (measured on the Ishigami function at ``N = 2^15``: largest error
0.0008 against half-widths of 0.005 to 0.017), so the estimator part of the
interval is conservative.

Uncertainty, from both sources
------------------------------
1. *Monte-Carlo estimator*: bootstrap over the ``N`` base rows (SALib,
   ``n_resamples`` resamples with a seed); variance ``var_mc``.
2. *Surrogate*: a Gaussian process is uncertain between its runs. Indices are
   computed on joint sample paths of the GP posterior (Marrel et al. 2009; Le
   Gratiet, Cannamela & Iooss 2014): their spread over paths is the part of
   the uncertainty that more runs would remove. To keep the joint draw cheap,
   paths are drawn on a separate, smaller Saltelli sample of ``N_p`` base rows
   with ``N_p (d + 2) <= max_path_points`` (1500 by default, e.g. ``N_p =
   256`` for ``d = 3``, 128 for ``d = 8``), costing one dense
   ``(N_p (d + 2))^2`` posterior covariance and its Cholesky factor in the
   surrogate, about 1500^3 / 3 = 1.1e9 flops, whatever ``N``. On so small a
   sample the estimator's own error would swamp the surrogate's, so each
   path's index is taken relative to the index of the posterior mean *on the
   same points* (a control variate): ``delta_p = S(path_p) - S(mean)``. The
   Monte-Carlo errors of the two largely cancel, and ``var_gp = Var_p(delta_p)``
   (after Le Gratiet et al. 2014, who split the variance of the index into a
   metamodel part and a Monte-Carlo part). What little estimator noise is left
   in ``delta_p`` is kept, not subtracted: SALib's bootstrap overstates the
   error of a scrambled Sobol' sample several times, so subtracting it would
   make intervals too narrow; the surrogate part errs on the wide side.

The reported index is the mean of the index over the paths (Marrel et al.
2009), estimated as the index of the posterior mean on the large sample plus
the mean of ``delta_p`` (the same control variate): the index of the mean
function alone is biased, because the mean is smoother than any plausible
response. The reported half-width is ``1.96 sqrt(var_mc + var_gp)`` around
it (the direct route has ``var_gp = 0`` and no shift). The ranking of two
inputs is *not resolved* when the interval of the difference of their total
indices, computed the same way on paired replicates, contains 0.

Limits: the surrogate part is only as honest as the GP's posterior. With few
runs a GP whose hyperparameters are fitted by likelihood is often
overconfident, and the intervals then cover the truth less often than 95 %
(``make bench`` measures the coverage against the number of runs). Inputs
must be independent: linear constraints of the space are ignored.

References
----------
Sobol', I. M. (1993). Sensitivity estimates for nonlinear mathematical models.
Math. Modeling Comput. Experiment 1, 407-414.
Jansen, M. J. W. (1999). Analysis of variance designs for model output.
Comput. Phys. Commun. 117, 35-43.
Saltelli, A. (2002). Making best use of model evaluations to compute
sensitivity indices. Comput. Phys. Commun. 145, 280-297.
Saltelli, A., Annoni, P., Azzini, I., Campolongo, F., Ratto, M. and Tarantola,
S. (2010). Variance based sensitivity analysis of model output. Design and
estimator for the total sensitivity index. Comput. Phys. Commun. 181, 259-270.
Marrel, A., Iooss, B., Laurent, B. and Roustant, O. (2009). Calculations of
Sobol indices for the Gaussian process metamodel. Reliab. Eng. Syst. Saf. 94,
742-751.
Le Gratiet, L., Cannamela, C. and Iooss, B. (2014). A Bayesian approach for
global sensitivity analysis of (multifidelity) computer codes. SIAM/ASA J.
Uncertain. Quantif. 2, 336-363.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
from SALib.analyze import sobol as _sobol_analyze
from SALib.sample import sobol as _sobol_sample

from ..checks import is_whole
from .inputs import InputDistribution
from ..errors import SensitivityError
from ..seeds import seed_value

__all__ = ["sobol_indices", "SobolResult", "ResponseIndices", "Z95", "NEGLIGIBLE"]

#: Two-sided 95 % standard normal quantile.
Z95 = 1.959963984540054
#: Total index below which an input is called negligible (common practice, no source).
NEGLIGIBLE = 0.01
_CHUNK = 16384  # points per model call: bounds the memory of a GP prediction


# ---------------------------------------------------------------------------
@dataclass
class ResponseIndices:
    """Sobol indices of one response, with their 95 % half-widths.

    All arrays have one entry per study parameter, in study order; a parameter
    held fixed by the input distribution has zeros.

    Attributes
    ----------
    response : str
    parameters : tuple of str
    S1, ST : ndarray
        First-order and total indices (shares of the variance, 0..1): in the
        surrogate route the mean of the index over the posterior's sample
        paths (Marrel et al. 2009), in the direct route that of the model.
    S1_pm95_mc, ST_pm95_mc : ndarray
        Half-widths from the Monte-Carlo estimator (bootstrap).
    S1_pm95_surrogate, ST_pm95_surrogate : ndarray
        Half-widths from the surrogate's own uncertainty (zero in the direct route).
    fixed : ndarray of bool
        Parameters that do not vary under the input distribution.
    mean, std : float
        Mean and standard deviation of the response under the input
        distribution, in the response's unit.
    S2, S2_pm95 : ndarray (d, d) or None
        Second-order indices and combined half-widths (upper triangle; NaN elsewhere).
    unresolved : list of (str, str)
        Pairs whose order by total index the data do not settle.
    too_few_runs : bool
        Surrogate route: the 95 % intervals of the two largest total indices
        overlap, so the runs are too few to rank the knobs.
    notes : list of str
        Plain warnings (S1 > ST, negative index, constant response).
    """

    response: str
    parameters: tuple
    S1: np.ndarray
    ST: np.ndarray
    S1_pm95_mc: np.ndarray
    ST_pm95_mc: np.ndarray
    S1_pm95_surrogate: np.ndarray
    ST_pm95_surrogate: np.ndarray
    fixed: np.ndarray
    mean: float
    std: float
    S2: np.ndarray | None = None
    S2_pm95: np.ndarray | None = None
    unresolved: list = field(default_factory=list)
    notes: list = field(default_factory=list)
    too_few_runs: bool = False

    @property
    def S1_pm95(self) -> np.ndarray:
        """Combined 95 % half-width of ``S1``: ``hypot(mc, surrogate)``."""
        return np.hypot(self.S1_pm95_mc, self.S1_pm95_surrogate)

    @property
    def ST_pm95(self) -> np.ndarray:
        """Combined 95 % half-width of ``ST``."""
        return np.hypot(self.ST_pm95_mc, self.ST_pm95_surrogate)

    def ranking(self) -> list[str]:
        """Varying parameters, most influential first (by total index)."""
        order = np.argsort(-self.ST, kind="stable")
        return [self.parameters[i] for i in order if not self.fixed[i]]

    def index_of(self, name: str) -> int:
        """Column of parameter ``name``."""
        try:
            return self.parameters.index(name)
        except ValueError:
            raise SensitivityError(f"no parameter '{name}' in the sensitivity of '{self.response}'") from None


@dataclass
class SobolResult:
    """Sobol indices of every response, and how they were obtained.

    Attributes
    ----------
    responses : dict of str to ResponseIndices
    inputs : InputDistribution
    route : {"surrogate", "direct"}
    base_samples : int
        ``N`` of the mean (or direct) route.
    evaluations : int
        Model evaluations of that route, ``N (d + 2)`` or ``N (2 d + 2)``.
    target_conf : float
        Aimed-for estimator half-width.
    reached : bool
        Whether every estimator half-width came under ``target_conf``.
    second_order : bool
    seed : int
    path_base_samples, n_paths : int or None
        Size of the posterior-path sample (surrogate route).
    dropped_rows : int
        Base rows left out because the model failed at one of their points.
    """

    responses: dict
    inputs: InputDistribution
    route: str
    base_samples: int
    evaluations: int
    target_conf: float
    reached: bool
    second_order: bool
    seed: int
    path_base_samples: int | None = None
    n_paths: int | None = None
    dropped_rows: int = 0

    def __getitem__(self, response: str) -> ResponseIndices:
        try:
            return self.responses[response]
        except KeyError:
            raise SensitivityError(f"no response '{response}' in this sensitivity result "
                                   f"(responses: {', '.join(self.responses)})") from None


# ---------------------------------------------------------------------------
@dataclass
class _Estimate:
    """Indices of one response on one Saltelli sample (varying parameters only)."""

    S1: np.ndarray
    ST: np.ndarray
    S1_boot: np.ndarray  # (n_resamples, k)
    ST_boot: np.ndarray
    S2: np.ndarray | None
    S2_var: np.ndarray | None
    mean: float
    std: float


def _estimate(problem: dict, y: np.ndarray, second_order: bool, n_resamples: int, boot_seed: int) -> _Estimate:
    k = problem["num_vars"]
    scale = max(1.0, float(np.max(np.abs(y))))
    if np.ptp(y) <= 1e-12 * scale:  # SALib would divide by a zero standard deviation
        zeros = np.zeros(k)
        z2 = np.zeros((k, k)) if second_order else None
        return _Estimate(zeros, zeros.copy(), np.zeros((n_resamples, k)), np.zeros((n_resamples, k)),
                         z2, z2, float(np.mean(y)), 0.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        si = _sobol_analyze.analyze(problem, y, calc_second_order=second_order, num_resamples=n_resamples,
                                    conf_level=0.95, keep_resamples=True, seed=boot_seed)
    s2 = s2_var = None
    if second_order:
        s2 = np.asarray(si["S2"], dtype=float)
        s2_var = (np.asarray(si["S2_conf"], dtype=float) / Z95) ** 2
    return _Estimate(np.asarray(si["S1"], dtype=float), np.asarray(si["ST"], dtype=float),
                     np.asarray(si["S1_conf_all"], dtype=float), np.asarray(si["ST_conf_all"], dtype=float),
                     s2, s2_var, float(np.mean(y)), float(np.std(y)))


def output_names(value, responses=None) -> list:
    """Names of a model's outputs: ``responses``, a dict's keys, else ``y`` or ``y0, y1, ...``."""
    if responses is not None:
        return list(responses)
    if isinstance(value, dict):
        return list(value)
    arr = np.asarray(value)
    return ["y"] if arr.ndim == 1 else [f"y{i}" for i in range(arr.shape[1])]


def _as_dict(value, responses: list, n: int, allow_nan: bool = False) -> dict:
    """Model output as ``{response: (n,) array}``, checked (NaN marks a failed point when allowed)."""
    if isinstance(value, dict):
        missing = [r for r in responses if r not in value]
        if missing:
            raise SensitivityError(f"the model gave no values for response '{missing[0]}'")
        out = {r: np.asarray(value[r], dtype=float).reshape(-1) for r in responses}
    else:
        arr = np.asarray(value, dtype=float)
        arr = arr.reshape(-1, 1) if arr.ndim == 1 else arr
        if arr.ndim != 2 or arr.shape[1] != len(responses):
            raise SensitivityError(f"the model returned shape {np.shape(value)}; expected ({n},) or ({n}, "
                                   f"{len(responses)}) for responses {responses}")
        out = {r: arr[:, j] for j, r in enumerate(responses)}
    for r, y in out.items():
        if y.shape != (n,):
            raise SensitivityError(f"the model returned {y.size} values of '{r}' for {n} points")
        bad = np.isinf(y) if allow_nan else ~np.isfinite(y)
        if bad.any():
            raise SensitivityError(f"the model returned {int(bad.sum())} non-finite value(s) of '{r}' out of {n}; "
                                   "Sobol estimation needs every point of its sample (failed runs cannot be dropped)")
    return out


def evaluate_model(model, X: np.ndarray, responses: list, allow_nan: bool = False) -> dict:
    """``{response: (n,) array}`` of ``model`` at ``X``, in chunks of 16384 points, checked finite.

    With ``allow_nan``, NaN is accepted as the mark of a failed point (infinity never is).
    """
    parts = [_as_dict(model(X[s:s + _CHUNK]), responses, len(X[s:s + _CHUNK]), allow_nan)
             for s in range(0, len(X), _CHUNK)]
    return {r: np.concatenate([p[r] for p in parts]) for r in responses}


def _as_paths(value, responses: list, n_paths: int, n: int) -> dict:
    """Posterior draws as ``{response: (n_paths, n) array}``, checked."""
    if not isinstance(value, dict):
        if len(responses) != 1:
            raise SensitivityError("the path sampler must return a dict of responses when there are several")
        value = {responses[0]: value}
    out = {}
    for r in responses:
        if r not in value:
            raise SensitivityError(f"the path sampler gave no draws for response '{r}'")
        z = np.asarray(value[r], dtype=float)
        if z.shape != (n_paths, n) or not np.all(np.isfinite(z)):
            raise SensitivityError(f"the path sampler returned shape {z.shape} for '{r}' (expected "
                                   f"({n_paths}, {n}), all finite)")
        out[r] = z
    return out


def _power_of_two(n, what: str) -> int:
    if not is_whole(n) or n < 8 or (n & (n - 1)):
        raise SensitivityError(f"{what} must be a power of two of at least 8 (Sobol' balance), got {n!r}")
    return int(n)


# ---------------------------------------------------------------------------
@dataclass(frozen=True)
class _Settings:
    second_order: bool
    n_resamples: int
    boot_seed: int
    sample_seed: int
    path_sample_seed: int
    path_seed: int

    def step(self, k: int) -> int:
        """Saltelli points per base row."""
        return 2 * k + 2 if self.second_order else k + 2

    def sample(self, inputs: InputDistribution, n_base: int, seed: int) -> np.ndarray:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)  # SALib nags about sizes we already checked
            Xv = _sobol_sample.sample(inputs.problem(), n_base, calc_second_order=self.second_order, seed=seed)
        return inputs.full(Xv)

    def estimate(self, inputs: InputDistribution, y: np.ndarray) -> _Estimate:
        return _estimate(inputs.problem(), y, self.second_order, self.n_resamples, self.boot_seed)


def _worst_ratio(estimates: dict, targets: dict) -> float:
    """Largest estimator half-width over its target, across responses and indices."""
    worst = 0.0
    for r, e in estimates.items():
        for boot, target in zip((e.S1_boot, e.ST_boot), targets[r]):
            worst = max(worst, float(np.max(Z95 * np.std(boot, axis=0, ddof=1) / target, initial=0.0)))
    return worst


def _complete_rows(Y: dict, step: int, max_failed: float) -> np.ndarray:
    """Base rows whose every point has a value; raise when more than ``max_failed`` of them lack one."""
    rows = np.all([np.all(np.isfinite(y.reshape(-1, step)), axis=1) for y in Y.values()], axis=0)
    dropped = int((~rows).sum())
    if dropped > max_failed * len(rows):
        raise SensitivityError(f"the model failed (NaN) at points of {dropped} of {len(rows)} Saltelli base rows; "
                               f"at most {max_failed:.1%} may be dropped, since Sobol estimation needs complete "
                               "rows of its sample")
    return rows


def _mean_route(model, inputs, responses, cfg: _Settings, n_start: int, fixed_n: bool, targets: dict,
                max_base: int, max_evals: int | None, max_failed: float):
    """Indices of ``model``; the base sample grows until every estimator half-width meets its target.

    The half-width falls as ``1 / sqrt(N)``, so the next ``N`` is the power of
    two that this predicts to be enough (at least twice the current one). A
    base row with a failed point is dropped whole (its ``d + 2`` points), which
    keeps the row structure SALib relies on.
    """
    n_base, Y, done = n_start, None, 0
    step = cfg.step(len(inputs.varying))
    while True:
        X = cfg.sample(inputs, n_base, cfg.sample_seed)
        new = evaluate_model(model, X[done:], responses, max_failed > 0)  # earlier rows are unchanged: reuse them
        Y = new if Y is None else {r: np.concatenate([Y[r], new[r]]) for r in responses}
        done = len(X)
        rows = _complete_rows(Y, step, max_failed)
        estimates = {r: cfg.estimate(inputs, Y[r].reshape(-1, step)[rows].ravel()) for r in responses}
        dropped = int((~rows).sum())
        ratio = _worst_ratio(estimates, targets)
        if fixed_n or ratio <= 1.0:
            return estimates, n_base, done, ratio <= 1.0, dropped
        wanted = max(2 * n_base, 2 ** math.ceil(math.log2(n_base * ratio**2)))
        limit = max_base if max_evals is None else min(max_base, 2 ** int(math.log2(max(max_evals // step, 1))))
        if n_base >= limit:
            return estimates, n_base, done, False, dropped
        n_base = min(wanted, limit)


@dataclass
class _Spread:
    """Surrogate part of the variance of the indices, and the paths' mean shift (varying parameters only)."""

    S1_var: np.ndarray
    ST_var: np.ndarray
    ST_diff_var: np.ndarray  # (k, k): variance of ST_i - ST_j
    S2_var: np.ndarray | None
    S1_shift: np.ndarray | float = 0.0   # mean over paths of delta_p: index of the paths minus that of the mean
    ST_shift: np.ndarray | float = 0.0
    S2_shift: np.ndarray | float = 0.0


def _path_variance(delta: np.ndarray) -> np.ndarray:
    """Variance over paths (first axis) of the control-variate differences ``delta_p``."""
    return np.var(delta, axis=0, ddof=1)


def _pair_diffs(a: np.ndarray) -> np.ndarray:
    """``a[..., i] - a[..., j]`` for every pair, shape ``(..., k, k)``."""
    return a[..., :, None] - a[..., None, :]


def _path_route(model, paths, inputs, responses, cfg: _Settings, n_base: int, n_paths: int) -> dict:
    X = cfg.sample(inputs, n_base, cfg.path_sample_seed)
    mean = evaluate_model(model, X, responses)
    draws = _as_paths(paths(X, n_paths, cfg.path_seed), responses, n_paths, len(X))
    out = {}
    for r in responses:
        ref = cfg.estimate(inputs, mean[r])
        per = [cfg.estimate(inputs, z) for z in draws[r]]
        dS1 = np.array([e.S1 - ref.S1 for e in per])
        dST = np.array([e.ST - ref.ST for e in per])
        s2_var, s2_shift = None, 0.0
        if cfg.second_order:
            dS2 = np.array([np.nan_to_num(e.S2 - ref.S2) for e in per])
            s2_var, s2_shift = _path_variance(dS2), dS2.mean(axis=0)
        out[r] = _Spread(_path_variance(dS1), _path_variance(dST), _path_variance(_pair_diffs(dST)), s2_var,
                         dS1.mean(axis=0), dST.mean(axis=0), s2_shift)
    return out


# ---------------------------------------------------------------------------
def _combine(response: str, inputs: InputDistribution, est: _Estimate, spread: _Spread | None,
             second_order: bool) -> ResponseIndices:
    d, idx = inputs.space.dim, inputs.varying
    k = len(idx)
    spread_given = spread is not None
    spread = spread or _Spread(np.zeros(k), np.zeros(k), np.zeros((k, k)), np.zeros((k, k)) if second_order else None)

    def full(v):
        out = np.zeros(d)
        out[idx] = v
        return out

    conf = lambda var: Z95 * np.sqrt(var)  # noqa: E731 - a one-line helper
    s1, st = est.S1 + spread.S1_shift, est.ST + spread.ST_shift       # centred on the mean index over paths
    res = ResponseIndices(
        response, tuple(inputs.space.names), full(s1), full(st),
        full(conf(np.var(est.S1_boot, axis=0, ddof=1))), full(conf(np.var(est.ST_boot, axis=0, ddof=1))),
        full(conf(spread.S1_var)), full(conf(spread.ST_var)),
        np.array([i not in idx for i in range(d)]), est.mean, est.std)
    if second_order:
        res.S2, res.S2_pm95 = np.full((d, d), np.nan), np.full((d, d), np.nan)
        sub = np.ix_(idx, idx)
        res.S2[sub] = est.S2 + spread.S2_shift
        res.S2_pm95[sub] = conf(np.nan_to_num(est.S2_var) + spread.S2_var)
        res.S2_pm95[np.isnan(res.S2)] = np.nan
    diff_var = np.var(_pair_diffs(est.ST_boot), axis=0, ddof=1) + spread.ST_diff_var
    res.unresolved = _unresolved(res, idx, st, conf(diff_var))
    res.notes = _notes(res, est, spread_given)
    res.too_few_runs = spread_given and _top_overlap(res, idx)
    return res


def _top_overlap(res: ResponseIndices, idx: list) -> bool:
    """Whether the 95 % intervals of the two largest total indices overlap (one of them not negligible)."""
    if len(idx) < 2 or res.std == 0.0:
        return False
    order = sorted(idx, key=lambda i: -res.ST[i])
    a, b = order[0], order[1]
    return bool(res.ST[a] - res.ST_pm95[a] <= res.ST[b] + res.ST_pm95[b] and res.ST[a] + res.ST_pm95[a] >= NEGLIGIBLE)


def _unresolved(res: ResponseIndices, idx: list, st: np.ndarray, diff_conf: np.ndarray) -> list:
    """Pairs whose total-index difference is within its interval (both-negligible pairs left out)."""
    high = st + res.ST_pm95[idx]
    pairs = []
    order = np.argsort(-st, kind="stable")
    for a in range(len(order)):
        for b in range(a + 1, len(order)):
            i, j = order[a], order[b]
            if high[i] < NEGLIGIBLE and high[j] < NEGLIGIBLE:
                continue
            if abs(st[i] - st[j]) <= diff_conf[i, j]:
                pairs.append((res.parameters[idx[i]], res.parameters[idx[j]]))
    return pairs


def _notes(res: ResponseIndices, est: _Estimate, surrogate: bool) -> list:
    if est.std == 0.0:
        return [f"'{res.response}' does not vary under this input distribution; every index is set to 0"]
    notes = []
    s1c, stc = res.S1_pm95, res.ST_pm95
    for i, name in enumerate(res.parameters):
        if res.fixed[i]:
            continue
        if res.S1[i] - s1c[i] > res.ST[i] + stc[i]:
            notes.append(f"{name}: first-order index above the total one beyond their intervals (not resolved)")
        if res.S1[i] + s1c[i] < 0 or res.ST[i] + stc[i] < 0:
            notes.append(f"{name}: negative index beyond its interval (not resolved)")
        if surrogate and res.ST[i] < NEGLIGIBLE and res.ST_pm95_surrogate[i] < 1e-4:
            notes.append(f"{name}: the surrogate shows no effect at all (its posterior does not vary along "
                         f"{name}), so its interval cannot include one; with few runs this can be an artefact of "
                         "the fit (a length scale at its bound): check before dropping the parameter")
    return notes


# ---------------------------------------------------------------------------
def sobol_indices(model, inputs: InputDistribution, *, paths=None, responses=None, base_samples: int | None = None,
                  target_conf: float = 0.01, max_base_samples: int = 2**15, max_evaluations: int | None = None,
                  second_order: bool = False, n_paths: int = 64, path_base_samples: int | None = None,
                  max_path_points: int = 1500, n_resamples: int = 100, max_failed_share: float = 0.0,
                  seed=0) -> SobolResult:
    """First-order and total Sobol indices with 95 % intervals from the estimator and the surrogate.

    Parameters
    ----------
    model : callable
        ``model(X) -> y`` with ``X`` of shape ``(n, d)`` in the study's units
        (all parameters, in study order) and ``y`` of shape ``(n,)``, ``(n, k)``
        or a dict ``{response: (n,) array}``. The surrogate's posterior mean, or
        the cheap model itself (direct route). Called in chunks of at most
        16384 points.
    inputs : InputDistribution
        Distribution of the inputs (:mod:`doe.sensitivity.inputs`).
    paths : callable, optional
        ``paths(X, n_paths, seed) -> (n_paths, n)`` array (or a dict of them
        per response): joint draws of the surrogate's posterior at the points
        ``X``. Given, the intervals include the surrogate's uncertainty
        (``route = "surrogate"``); absent, only the estimator's (``"direct"``).
    responses : list of str, optional
        Names of the model's outputs; taken from its dict, else ``"y"``,
        ``"y0"``, ``"y1"``, ...
    base_samples : int, optional
        Fixed base sample ``N`` (a power of two); by default chosen by doubling
        (see the module docstring).
    target_conf : float
        Estimator 95 % half-width to reach when ``N`` is chosen, in index units.
    max_base_samples : int
        Largest ``N`` the doubling may reach.
    max_evaluations : int, optional
        Largest number of model evaluations the doubling may spend.
    second_order : bool
        Also estimate second-order indices (doubles the evaluations).
    n_paths : int
        Posterior sample paths (surrogate route), at least 8.
    path_base_samples : int, optional
        ``N_p`` of the path sample; by default the largest power of two with
        ``N_p (d + 2) <= max_path_points`` (at least 16).
    max_path_points : int
        Bound on the points of one joint posterior draw (1500: an exact
        Cholesky factor of that size takes well under a second).
    n_resamples : int
        Bootstrap resamples.
    max_failed_share : float
        Share of Saltelli base rows that may be dropped because the model
        returned NaN (a failed run) at one of their points; 0 by default (any
        failure is an error). A dropped row takes its ``d + 2`` points with it,
        so the indices are those of the inputs where the model runs.
    seed : int or numpy.random.Generator
        Seed of the samples, the bootstrap and the paths; same seed, same numbers.

    Returns
    -------
    SobolResult

    Raises
    ------
    SensitivityError
        Bad sizes, a model output that is not finite or of the wrong shape.

    References
    ----------
    See the module docstring: Saltelli et al. 2010; Jansen 1999; Saltelli
    2002; Marrel et al. 2009; Le Gratiet, Cannamela & Iooss 2014.

    Examples
    --------
    >>> import numpy as np
    >>> from doe.space import Parameter, Space
    >>> space = Space((Parameter("a", "-", 0, 1), Parameter("b", "-", 0, 1)))
    >>> res = sobol_indices(lambda X: X[:, 0] + 0.5 * X[:, 1], InputDistribution.uniform(space), seed=1)
    >>> bool(abs(res["y"].ST[0] - 0.8) < 0.01)
    True
    """
    rng = np.random.default_rng(seed)
    # SALib skips a bootstrap seed of 0 (``if seed:``), so every derived seed is >= 1
    s = [int(v) for v in rng.integers(1, 2**31 - 1, size=4)]
    cfg = _Settings(bool(second_order), _check_int(n_resamples, 20, "n_resamples"), *s)
    if not (isinstance(target_conf, (int, float)) and 0 < target_conf < 1):
        raise SensitivityError(f"target_conf must be between 0 and 1, got {target_conf!r}")
    max_base = _power_of_two(max_base_samples, "max_base_samples")
    fixed_n = base_samples is not None
    n_start = _power_of_two(base_samples, "base_samples") if fixed_n else min(
        1024 if paths is not None else 256, max_base)
    if max_evaluations is not None:
        step = cfg.step(len(inputs.varying))
        _check_int(max_evaluations, 8 * step, "max_evaluations")
        if not fixed_n:
            n_start = min(n_start, 2 ** int(math.log2(max_evaluations // step)))
    if responses is None:
        responses = output_names(model(cfg.sample(inputs, 8, cfg.sample_seed)[:1]), None)
    responses = list(responses)

    spreads, n_p = {}, None
    if paths is not None:
        n_paths = _check_int(n_paths, 8, "n_paths")
        step = cfg.step(len(inputs.varying))
        n_p = _power_of_two(path_base_samples, "path_base_samples") if path_base_samples is not None else max(
            16, 2 ** int(math.floor(math.log2(max(max_path_points // step, 1)))))
        spreads = _path_route(model, paths, inputs, responses, cfg, n_p, n_paths)
    targets = {r: _targets(target_conf, spreads.get(r), len(inputs.varying)) for r in responses}
    if not (isinstance(max_failed_share, (int, float)) and 0 <= max_failed_share < 0.5):
        raise SensitivityError(f"max_failed_share must be in [0, 0.5), got {max_failed_share!r}")
    estimates, n_base, n_evals, reached, dropped = _mean_route(model, inputs, responses, cfg, n_start, fixed_n,
                                                               targets, max_base, max_evaluations,
                                                               float(max_failed_share))
    out = {r: _combine(r, inputs, estimates[r], spreads.get(r), cfg.second_order) for r in responses}
    if dropped:
        for res in out.values():
            res.notes.append(f"{dropped} of {n_base} base rows were left out because the model failed at one of "
                             "their points: the indices describe the inputs where the model runs")
    return SobolResult(out, inputs, "surrogate" if paths is not None else "direct", n_base, n_evals,
                       float(target_conf), reached, cfg.second_order, seed_value(seed),
                       n_p, n_paths if paths is not None else None, dropped)


def _targets(target_conf: float, spread, k: int) -> tuple:
    """Estimator half-width aimed at per index: ``target_conf``, or a quarter of the surrogate's if larger.

    A quarter keeps the estimator's share of the combined half-width
    ``hypot(mc, surrogate)`` under 3 %.
    """
    if spread is None:
        return np.full(k, target_conf), np.full(k, target_conf)
    return (np.maximum(target_conf, 0.25 * Z95 * np.sqrt(spread.S1_var)),
            np.maximum(target_conf, 0.25 * Z95 * np.sqrt(spread.ST_var)))


def _check_int(value, least: int, what: str) -> int:
    if not is_whole(value) or value < least:
        raise SensitivityError(f"{what} must be a whole number of at least {least}, got {value!r}")
    return int(value)
