"""Calibration of the built-in model's empirical coefficients to recorded results.

The low-order model of :mod:`doe.aero` carries a handful of empirical
coefficients (:class:`doe.aero.Coefficients`, with plausible ranges in
:data:`doe.aero.COEFFICIENT_RANGES`). Given results recorded elsewhere (CFD, a
tunnel), this module finds the coefficients that bring the model closest to
them, says how well the data pin each one down, and how much discrepancy is
left per response.

How
---
1. The model is evaluated at the recorded runs' parameters. Each response's
   residual (recorded minus model) is divided by a scale: the stated noise of
   that response when given, else first its spread over the runs and then, in a
   second pass from the first optimum, the residual standard deviation the
   first pass left (two-stage weighted least squares), so that responses in
   different units and of different accuracy weigh fairly.
2. Bounded nonlinear least squares (:func:`scipy.optimize.least_squares`,
   trust-region reflective, bounds = the plausible ranges) in unit coordinates
   (each coefficient mapped to [0, 1] over its range), from the current values
   and, optionally, seeded random starts.
3. The Bayesian view by the Laplace approximation at the optimum with a flat
   prior inside the ranges: the posterior is approximately normal with
   covariance ``sigma^2 (J^T J)^-1`` (J the Jacobian of the scaled residuals,
   ``sigma^2`` the residual variance per degree of freedom when the noise is
   estimated, 1 when it is stated). Intervals are the linearised 95 %
   intervals (Student t with N - p degrees of freedom when sigma is
   estimated). A coefficient is reported as *not determined* when it has no
   effect, sits at a bound of its range, has an interval wider than its range,
   or is strongly correlated with another (only a combination is determined).

Limits: the residuals are treated as independent noise; the model's form
error is not modelled as a separate discrepancy function as Kennedy & O'Hagan
do [1]_, so it is absorbed into the coefficients (calibrated values are
*effective* values, not physical truths) and into sigma. The linearised
intervals are only as good as the model's linearity over them [2]_.

References
----------
.. [1] Kennedy, M. C., O'Hagan, A. (2001). Bayesian calibration of computer
   models. Journal of the Royal Statistical Society B 63(3), 425-464.
.. [2] Bates, D. M., Watts, D. G. (1988). Nonlinear Regression Analysis and Its
   Applications. Wiley, New York.
.. [3] Tierney, L., Kadane, J. B. (1986). Accurate approximations for posterior
   moments and marginal densities. Journal of the American Statistical
   Association 81(393), 82-86.
.. [4] Branch, M. A., Coleman, T. F., Li, Y. (1999). A subspace, interior, and
   conjugate gradient method for large-scale bound-constrained minimization
   problems. SIAM Journal on Scientific Computing 21(1), 1-23.
"""
from __future__ import annotations

import math
import time
from dataclasses import asdict, dataclass, field, fields, replace

import numpy as np
from scipy import optimize, stats

from ..checks import is_whole
from ..aero.choices import ChoiceModel
from ..aero.model import COEFFICIENT_RANGES, OUTPUTS, Coefficients, ModelSettings, RearPackageModel
from ..errors import CalibrationError
from ..runs.evaluators.builtin import level_index, same_output_unit
from .result import Calibration, CoefficientEstimate, Discrepancy

__all__ = ["calibrate", "FITTABLE", "SWITCHES", "CORRELATION_LIMIT", "EFFECT_MIN"]

#: Coefficients that act as switches (a threshold, zero slope elsewhere): least squares cannot fit them.
SWITCHES = {"critical_slant": "a threshold that switches the separation line (zero slope elsewhere)"}
#: Coefficients a calibration may fit.
FITTABLE = tuple(f.name for f in fields(Coefficients) if f.name not in SWITCHES)
#: Screening: a coefficient whose whole range moves no response by this share of its scale has no effect.
EFFECT_MIN = 1e-3
#: Correlation above which two coefficients are reported as not separately determined (common practice, no source).
CORRELATION_LIMIT = 0.95
#: Distance from a bound, in unit coordinates, that counts as "at the bound".
BOUND_TOL = 1e-3
#: Finite-difference step of the Jacobian, unit coordinates.
FD_STEP = 1e-4
#: Trust-region iterations allowed per start.
MAX_ITERATIONS = 60


# ---------------------------------------------------------------------------
@dataclass
class _Data:
    """Recorded values at the runs a calibration uses, the model's inputs there (model units) and, per choice
    knob, the level index of each run."""

    run_ids: list
    inputs: dict
    observed: dict
    levels: dict = field(default_factory=dict)

    def subset(self, keep: np.ndarray) -> "_Data":
        return _Data([r for r, k in zip(self.run_ids, keep) if k], {n: v[keep] for n, v in self.inputs.items()},
                     {n: v[keep] for n, v in self.observed.items()}, {n: v[keep] for n, v in self.levels.items()})


class _Problem:
    """Scaled residuals of the model against the data, as a function of the fitted coefficients in [0, 1]."""

    def __init__(self, settings: ModelSettings, data: _Data, names: list, scales: dict, choices=None, folder="."):
        self.settings, self.data, self.names = settings, data, list(names)
        self.choices, self.folder = dict(choices or {}), folder
        self.low = np.array([COEFFICIENT_RANGES[n][0] for n in names])
        self.width = np.array([COEFFICIENT_RANGES[n][1] - COEFFICIENT_RANGES[n][0] for n in names])
        self.scales = dict(scales)
        self.evaluations = 0

    def narrowed(self, names: list) -> "_Problem":
        """The same problem fitting only ``names`` (the evaluation count carries over)."""
        out = _Problem(self.settings, self.data, names, self.scales, self.choices, self.folder)
        out.evaluations = self.evaluations
        return out

    def physical(self, u) -> dict:
        return dict(zip(self.names, self.low + np.clip(u, 0.0, 1.0) * self.width))

    def unit(self, values: dict) -> np.ndarray:
        return (np.array([values[n] for n in self.names]) - self.low) / self.width

    def predict(self, values: dict, why: bool = False):
        """Model values of every response at the data's runs, and which runs the model could evaluate.

        With ``why``, also the model's message per run (why it failed, "" when it did not).
        """
        co = replace(self.settings.coefficients, **{k: float(v) for k, v in values.items()})
        settings = replace(self.settings, coefficients=co)
        if self.choices:   # the levels change the solved geometry run by run (doe.aero.choices)
            result = ChoiceModel(settings, self.choices, self.folder).evaluate(self.data.inputs, self.data.levels)
        else:
            result = RearPackageModel(settings).evaluate(self.data.inputs)
        self.evaluations += 1
        out = {r: result.values[r] for r in self.data.observed}
        ok = result.ok & np.all([np.isfinite(v) for v in out.values()], axis=0)
        return (out, ok, result.messages) if why else (out, ok)

    def residuals(self, u) -> np.ndarray:
        predicted, ok = self.predict(self.physical(u))
        parts = [(self.data.observed[r] - predicted[r]) / self.scales[r] for r in self.data.observed]
        r = np.concatenate(parts)
        if not ok.all():
            # rare: a run the model evaluated at the start has an undefined response here (e.g. a balance
            # with no net vertical load); a large residual steers the search away from such coefficients
            r = np.where(np.isfinite(r), r, 1e3)
        return r

    def jacobian(self, u, r0=None, central=False) -> np.ndarray:
        """Finite-difference Jacobian of :meth:`residuals` in unit coordinates (one-sided away from a bound)."""
        u = np.asarray(u, dtype=float)
        J = np.empty((self.n_residuals, len(u)))
        for j in range(len(u)):
            step = np.zeros_like(u)
            step[j] = FD_STEP if u[j] + FD_STEP <= 1.0 else -FD_STEP
            if central and 0.0 <= u[j] - step[j] <= 1.0:
                J[:, j] = (self.residuals(u + step) - self.residuals(u - step)) / (2 * step[j])
            else:
                r0 = self.residuals(u) if r0 is None else r0
                J[:, j] = (self.residuals(u + step) - r0) / step[j]
        return J

    @property
    def n_residuals(self) -> int:
        return len(self.data.run_ids) * len(self.data.observed)


# ---------------------------------------------------------------------------
def _check_names(coefficients) -> list:
    names = list(coefficients)
    for n in names:
        if n in SWITCHES:
            raise CalibrationError(f"coefficient '{n}' is {SWITCHES[n]}: least squares cannot fit it; "
                                   "set it in [evaluator.coefficients] instead")
        if n not in FITTABLE:
            raise CalibrationError(f"unknown coefficient '{n}' (coefficients: {', '.join(FITTABLE)})")
    if len(set(names)) != len(names):
        raise CalibrationError(f"a coefficient is named twice in {', '.join(names)}")
    if not names:
        raise CalibrationError("no coefficient to calibrate")
    return names


def _check_responses(responses, results, units) -> list:
    names = list(responses) if responses is not None else list(results.responses)
    if not names:
        raise CalibrationError("no response to calibrate against")
    for r in names:
        if r not in OUTPUTS:
            raise CalibrationError(f"response '{r}' is not an output of the builtin model "
                                   f"(outputs: {', '.join(OUTPUTS)})")
        if r not in results.responses:
            raise CalibrationError(f"response '{r}' is not in the results {results.path or ''} "
                                   f"(responses there: {', '.join(results.responses)})")
        if not same_output_unit(units.get(r, OUTPUTS[r][0]), OUTPUTS[r][0]):
            raise CalibrationError(f"response '{r}' is recorded in '{units[r]}'; the model gives it in "
                                   f"'{OUTPUTS[r][0]}'")
    return names


def _data(results, conversion: dict, responses: list, choices: dict) -> _Data:
    ok = results.ok
    if len(ok) == 0:
        raise CalibrationError(f"{results.path or 'results'}: no ok runs to calibrate against")
    missing = [p for p in results.parameters if p not in conversion and p not in choices]
    if missing:
        raise CalibrationError(f"parameter '{missing[0]}' of the results is not a parameter of the model's study")
    inputs = {p: ok[p].to_numpy(float) * f for p, f in conversion.items() if p in results.parameters}
    unused = [p for p in conversion if p not in results.parameters]
    if unused:
        raise CalibrationError(f"the model's study varies '{unused[0]}', which the results do not record")
    try:
        levels = {k: np.array([level_index(v, k, names) for v in ok[k]], dtype=int) for k, names in choices.items()}
    except KeyError as exc:
        raise CalibrationError(f"the model's study has the choice {exc}, which the results do not record") from None
    except ValueError as exc:
        raise CalibrationError(f"{results.path or 'results'}: {exc}") from None
    return _Data(list(ok["run_id"]), inputs, {r: ok[r].to_numpy(float) for r in responses}, levels)


def _scales(data: _Data, noise: dict | None) -> dict:
    noise = dict(noise or {})
    for r, v in noise.items():
        if r not in data.observed:
            raise CalibrationError(f"noise is given for '{r}', which is not a calibrated response")
        if not (isinstance(v, (int, float)) and math.isfinite(v) and v > 0):
            raise CalibrationError(f"noise of '{r}' must be a positive number in its unit, got {v!r}")
    scales = {}
    for r, y in data.observed.items():
        spread = float(np.std(y, ddof=1)) if len(y) > 1 else 0.0
        scales[r] = float(noise.get(r, spread))
        if not scales[r] > 0:
            raise CalibrationError(f"response '{r}' has the same value in every run; state its noise level")
    return scales


def _screen(problem: _Problem, start: dict) -> dict:
    """Largest change of any scaled response over each coefficient's whole range, others at ``start``."""
    effects = {}
    for name in problem.names:
        lo, hi = COEFFICIENT_RANGES[name]
        ends = [problem.predict({**start, name: v})[0] for v in (lo, hi)]
        effects[name] = max(float(np.nanmax(np.abs(ends[1][r] - ends[0][r]))) / problem.scales[r]
                            for r in problem.data.observed)
    return effects


def _least_squares(problem: _Problem, u0: np.ndarray, progress, label: str):
    state = {"k": 0}

    def jac(u):
        r0 = problem.residuals(u)
        state["k"] += 1
        if progress is not None:
            progress(f"calibrate: {label}iteration {state['k']}, cost {0.5 * float(r0 @ r0):.6g}")
        return problem.jacobian(u, r0)

    return optimize.least_squares(problem.residuals, u0, jac=jac, bounds=(0.0, 1.0), method="trf", xtol=1e-10,
                                  ftol=1e-6, gtol=1e-10, max_nfev=MAX_ITERATIONS)


def _fit(problem: _Problem, start: dict, starts: int, rng, progress) -> np.ndarray:
    u_first = np.clip(problem.unit(start), 0.0, 1.0)
    best = None
    for s in range(starts):
        u0 = u_first if s == 0 else rng.uniform(0.0, 1.0, len(problem.names))
        sol = _least_squares(problem, u0, progress, f"start {s + 1}/{starts}, " if starts > 1 else "")
        if best is None or sol.cost < best.cost:
            best = sol
    return best.x


def _reweight(problem: _Problem, u: np.ndarray) -> dict:
    """Per-response residual standard deviations at ``u`` (degrees of freedom shared out by count)."""
    r = problem.residuals(u)
    n, p, k = len(problem.data.run_ids), len(problem.names), len(problem.data.observed)
    dof_share = n * max(n * k - p, 1) / (n * k)
    out = {}
    for i, name in enumerate(problem.data.observed):
        part = r[i * n:(i + 1) * n] * problem.scales[name]
        floor = 1e-9 * problem.scales[name]
        out[name] = max(float(np.sqrt(np.sum(part ** 2) / dof_share)), floor)
    return out


def _laplace(J: np.ndarray, sigma2: float, width: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Standard errors (physical units), correlation, and which coefficients have any effect.

    Posterior covariance ``sigma^2 (J^T J)^-1`` in unit coordinates, scaled by
    each range (Laplace approximation with a flat prior, Tierney & Kadane 1986;
    the linearised covariance of nonlinear regression, Bates & Watts 1988).
    """
    A = J.T @ J
    d = np.diag(A)
    active = d > 1e-14 * max(float(d.max()), 1e-300)
    p = len(d)
    cov = np.full((p, p), np.nan)
    if active.any():
        sub = A[np.ix_(active, active)]
        ridge = 1e-12 * np.diag(np.diag(sub))            # keeps an exactly collinear pair finite (huge)
        cov[np.ix_(active, active)] = sigma2 * np.linalg.inv(sub + ridge)
    se_u = np.where(active, np.sqrt(np.abs(np.diag(cov))), np.inf)
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = cov / np.outer(se_u, se_u)
    np.fill_diagonal(corr, np.where(active, 1.0, np.nan))
    return se_u * width, corr, active


def _estimates(problem, u, before, se, corr, active, quantile) -> list:
    out = []
    for j, name in enumerate(problem.names):
        lo, hi = COEFFICIENT_RANGES[name]
        value = float(problem.low[j] + u[j] * problem.width[j])
        half = quantile * se[j]
        note = _not_determined(problem.names, j, u[j], half, hi - lo, corr, active[j])
        out.append(CoefficientEstimate(name, float(before[name]), value, float(se[j]),
                                       (value - half, value + half), (lo, hi), note == "", note))
    return out


def _not_determined(names, j, u, half, width, corr, active) -> str:
    """Why coefficient ``j`` is not determined by the data ("" when it is)."""
    if not active:
        return "not determined: it has no effect on the chosen responses"
    notes = []
    if u <= BOUND_TOL or u >= 1.0 - BOUND_TOL:
        notes.append(f"at the {'lower' if u <= BOUND_TOL else 'upper'} end of its plausible range: the data "
                     "push it further (model-form error, or a range too narrow)")
    if 2 * half > width:
        notes.append("its 95 % interval is wider than its plausible range")
    partners = [(names[k], corr[j, k]) for k in range(len(names))
                if k != j and np.isfinite(corr[j, k]) and abs(corr[j, k]) > CORRELATION_LIMIT]
    if partners:
        notes.append("strongly correlated with " + ", ".join(f"{n} (r = {c:+.3f})" for n, c in partners)
                     + ": only a combination is determined")
    return ("not determined: " + "; ".join(notes)) if notes else ""


def _drop_failing(problem: _Problem) -> dict:
    """Leave out runs the model cannot evaluate at its current coefficients; returns run id -> why."""
    _, keep, messages = problem.predict({}, why=True)
    excluded = {rid: (messages[i] or "a response is not defined there") for i, rid
                in enumerate(problem.data.run_ids) if not keep[i]}
    if not keep.any():
        raise CalibrationError(f"the model cannot evaluate any of the {len(keep)} ok run(s) "
                               f"(run {problem.data.run_ids[0]}: {next(iter(excluded.values()))})")
    problem.data = problem.data.subset(keep)
    return excluded


def _choose(problem: _Problem, screen: bool) -> tuple[_Problem, dict]:
    """The problem narrowed to the coefficients with an effect (when ``screen``), and those left out with why."""
    not_fitted = {}
    if screen:
        start = {n: getattr(problem.settings.coefficients, n) for n in problem.names}
        effects = _screen(problem, start)
        not_fitted = {n: f"no effect on the chosen responses (its whole range moves them by at most "
                         f"{e:.2g} of their scale)" for n, e in effects.items() if e < EFFECT_MIN}
        chosen = [n for n in problem.names if n not in not_fitted]
        if not chosen:
            raise CalibrationError("no coefficient has any effect on the chosen responses")
        problem = problem.narrowed(chosen)
    if problem.n_residuals <= len(problem.names):
        raise CalibrationError(f"{len(problem.data.run_ids)} usable run(s) x {len(problem.data.observed)} "
                               f"response(s) = {problem.n_residuals} values cannot determine "
                               f"{len(problem.names)} coefficient(s); record more runs")
    not_fitted.update(SWITCHES)
    return problem, not_fitted


@dataclass
class _Posterior:
    """The optimum and its Laplace approximation."""

    u: np.ndarray
    sigma2: float
    chi2_dof: float
    dof: int
    std_error: np.ndarray
    correlation: np.ndarray
    active: np.ndarray
    quantile: float


def _solve(problem: _Problem, starts: int, rng, stated: set, progress) -> _Posterior:
    """Fit (two-stage when some noise is estimated), then the Laplace approximation at the optimum."""
    start = {n: getattr(problem.settings.coefficients, n) for n in problem.names}
    u = _fit(problem, start, starts, rng, progress)
    known = stated == set(problem.data.observed)
    if not known:
        problem.scales.update({r: s for r, s in _reweight(problem, u).items() if r not in stated})
        u = _least_squares(problem, u, progress, "reweighted, ").x
    r = problem.residuals(u)
    dof = problem.n_residuals - len(problem.names)
    chi2_dof = float(r @ r) / dof
    sigma2 = 1.0 if known else chi2_dof
    se, corr, active = _laplace(problem.jacobian(u, central=True), sigma2, problem.width)
    quantile = float(stats.norm.ppf(0.975) if known else stats.t.ppf(0.975, dof))
    return _Posterior(u, sigma2, chi2_dof, dof, se, corr, active, quantile)


def _notes(post: _Posterior, known: bool, excluded: dict) -> list:
    notes = []
    if known and post.chi2_dof > 2.0:
        notes.append(f"the residuals are larger than the stated noise (chi^2 per degree of freedom "
                     f"{post.chi2_dof:.2g}): the intervals assume the stated noise and are too narrow; "
                     "model-form error or understated noise")
    if excluded:
        notes.append(f"{len(excluded)} run(s) left out: the model cannot evaluate them")
    notes.append("calibrated coefficients are effective values that also absorb the model's form error; "
                 "they are not physical measurements")
    return notes


# ---------------------------------------------------------------------------
def calibrate(settings: ModelSettings, conversion: dict, results, coefficients=None, responses=None,
              noise: dict | None = None, starts: int = 1, seed=0, units: dict | None = None,
              study_name: str = "", progress=None, choices: dict | None = None, folder=".") -> Calibration:
    """Fit the builtin model's coefficients to recorded results.

    Parameters
    ----------
    settings : ModelSettings
        The model to calibrate; its coefficients are the starting values.
    conversion : dict
        Results parameter -> factor from its unit to the model's (see
        :func:`builtin_settings_for`).
    results : ResultsTable
        Recorded results; only ok runs are used.
    coefficients : list of str, optional
        Coefficients to fit (:data:`FITTABLE`); default every one whose whole
        range moves a chosen response by at least :data:`EFFECT_MIN` of its scale.
    responses : list of str, optional
        Responses to match (model outputs); default the results' responses.
    noise : dict of str to float, optional
        Stated noise (one standard deviation) per response, its unit; the
        others are estimated from the residuals.
    starts : int
        Optimiser starts: the current values, then seeded random points.
    seed : int or None
        Seed of the extra starts (normalised with :func:`numpy.random.default_rng`); same seed, same result.
    units : dict of str to str, optional
        Response -> unit of the recorded values (checked against the model's).
    study_name : str
    progress : callable, optional
        Called with one line per optimiser iteration.
    choices : dict of str to sequence of str, optional
        Choice knobs of the model (:mod:`doe.aero.choices`) -> their level names; the
        results' columns hold the names (or level indices).
    folder : path
        Folder that section files named as levels are relative to.

    Returns
    -------
    Calibration

    Raises
    ------
    CalibrationError
        Unknown or unfittable coefficient, a response that is not a model
        output, no ok runs, fewer runs than coefficients, bad noise.

    References
    ----------
    .. [1] Kennedy, M. C., O'Hagan, A. (2001). Bayesian calibration of computer
       models. JRSS B 63(3), 425-464.
    .. [2] Bates, D. M., Watts, D. G. (1988). Nonlinear Regression Analysis and
       Its Applications. Wiley.
    .. [3] Tierney, L., Kadane, J. B. (1986). JASA 81(393), 82-86.
    """
    t0 = time.monotonic()
    if not is_whole(starts) or not 1 <= starts <= 50:
        raise CalibrationError(f"starts must be a whole number from 1 to 50, got {starts!r}")
    if seed is not None and (not is_whole(seed) or seed < 0):
        raise CalibrationError(f"seed must be a whole number >= 0 or None, got {seed!r}")
    units = dict(units or {})
    responses = _check_responses(responses, results, units)
    chosen = _check_names(coefficients) if coefficients is not None else list(FITTABLE)
    choices = {k: tuple(v) for k, v in (choices or {}).items()}
    data = _data(results, conversion, responses, choices)
    problem = _Problem(settings, data, chosen, {}, choices, folder)
    excluded = _drop_failing(problem)
    problem.scales = _scales(problem.data, noise)
    problem, not_fitted = _choose(problem, screen=coefficients is None)
    stated = set(noise or {})
    pred0, _ = problem.predict({})
    post = _solve(problem, starts, np.random.default_rng(seed), stated, progress)
    before = asdict(settings.coefficients)
    estimates = _estimates(problem, post.u, before, post.std_error, post.correlation, post.active, post.quantile)
    pred1, _ = problem.predict(problem.physical(post.u))
    obs, known = problem.data.observed, stated == set(responses)
    return Calibration(
        study=study_name, before=before, estimates=estimates, correlation=post.correlation, not_fitted=not_fitted,
        units={r: units.get(r, OUTPUTS[r][0]) for r in responses}, scales=dict(problem.scales),
        noise="stated" if known else "estimated",
        discrepancy_before={r: Discrepancy.of(obs[r], pred0[r]) for r in responses},
        discrepancy_after={r: Discrepancy.of(obs[r], pred1[r]) for r in responses},
        runs=list(problem.data.run_ids), excluded=excluded, sigma2=post.sigma2, chi2_dof=post.chi2_dof,
        dof=post.dof, evaluations=problem.evaluations, starts=starts, seed=None if seed is None else int(seed), elapsed_s=time.monotonic() - t0,
        notes=_notes(post, known, excluded))
