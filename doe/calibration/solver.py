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

import json
import math
import time
from dataclasses import asdict, dataclass, field, fields, replace
from pathlib import Path

import numpy as np
from scipy import optimize, stats

from ..aero.model import COEFFICIENT_RANGES, OUTPUTS, Coefficients, ModelSettings, RearPackageModel
from ..errors import CalibrationError, DoeError, where

__all__ = ["Calibration", "CoefficientEstimate", "Discrepancy", "calibrate", "calibrate_study",
           "builtin_settings_for", "load_calibration", "read_calibrated_coefficients", "FITTABLE", "SWITCHES",
           "FORMAT", "parse_names", "parse_noise", "synthetic_results"]

#: Value of the JSON key ``format`` of a saved calibration.
FORMAT = "doe-calibration-1"
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


@dataclass(frozen=True)
class CoefficientEstimate:
    """One fitted coefficient (unit-less, like every model coefficient except ``critical_slant``).

    Attributes
    ----------
    name : str
    before, value : float
        Value before and after calibration.
    std_error : float
        Laplace (linearised) posterior standard deviation; ``inf`` when not determined at all.
    interval : tuple of float
        95 % interval ``(low, high)``, not clipped to the range.
    range : tuple of float
        The plausible range searched (:data:`doe.aero.COEFFICIENT_RANGES`).
    determined : bool
        False when the data do not pin it down (see ``note``).
    note : str
        Plain statement of why it is not determined ("" when it is).
    """

    name: str
    before: float
    value: float
    std_error: float
    interval: tuple
    range: tuple
    determined: bool
    note: str = ""


@dataclass(frozen=True)
class Discrepancy:
    """What is left between recorded and model values of one response (recorded minus model).

    Attributes
    ----------
    bias : float
        Mean residual, the response's unit.
    rms : float
        Root-mean-square residual, the response's unit.
    max_abs : float
        Largest absolute residual, the response's unit.
    r2 : float or None
        ``1 - SS_res / SS_tot`` of the recorded values (None when they do not vary).
    """

    bias: float
    rms: float
    max_abs: float
    r2: float | None

    @classmethod
    def of(cls, observed: np.ndarray, predicted: np.ndarray) -> "Discrepancy":
        """From recorded and model values of the same runs."""
        e = observed - predicted
        ss_tot = float(np.sum((observed - observed.mean()) ** 2))
        r2 = 1.0 - float(np.sum(e ** 2)) / ss_tot if ss_tot > 0 else None
        return cls(float(e.mean()), float(np.sqrt(np.mean(e ** 2))), float(np.max(np.abs(e))), r2)


@dataclass
class Calibration:
    """A calibration: fitted coefficients, their uncertainty, and the discrepancy left.

    Attributes
    ----------
    study : str
        Name of the study whose results were used.
    before : dict of str to float
        Every coefficient before calibration.
    estimates : list of CoefficientEstimate
        The fitted coefficients.
    correlation : ndarray
        Posterior correlation of the fitted coefficients (NaN where not determined).
    not_fitted : dict of str to str
        Coefficients left at their values, and why.
    units : dict of str to str
        Response -> unit.
    scales : dict of str to float
        Response -> residual scale of the final fit, its unit.
    noise : str
        ``"stated"`` or ``"estimated"``.
    discrepancy_before, discrepancy_after : dict of str to Discrepancy
    runs : list of str
        Run ids used.
    excluded : dict of str to str
        Run id -> why the run was left out.
    sigma2 : float
        Residual variance factor of the covariance (1 with stated noise).
    chi2_dof : float
        Weighted residual sum of squares per degree of freedom at the optimum.
    dof : int
        Residuals minus fitted coefficients.
    evaluations : int
        Model evaluations of all runs.
    starts : int
    seed : int
    elapsed_s : float
    notes : list of str
    """

    study: str
    before: dict
    estimates: list
    correlation: np.ndarray
    not_fitted: dict
    units: dict
    scales: dict
    noise: str
    discrepancy_before: dict
    discrepancy_after: dict
    runs: list
    excluded: dict = field(default_factory=dict)
    sigma2: float = 1.0
    chi2_dof: float = float("nan")
    dof: int = 0
    evaluations: int = 0
    starts: int = 1
    seed: int | None = 0
    elapsed_s: float = 0.0
    notes: list = field(default_factory=list)

    def coefficients(self) -> Coefficients:
        """Every coefficient after calibration (the fitted ones changed, the rest as before)."""
        values = dict(self.before)
        values.update({e.name: e.value for e in self.estimates})
        return Coefficients(**values)

    def settings(self, base: ModelSettings) -> ModelSettings:
        """``base`` with the calibrated coefficients."""
        return replace(base, coefficients=self.coefficients())

    def evaluator(self, study):
        """A :class:`~doe.runs.evaluators.builtin.BuiltinEvaluator` of ``study``'s builtin settings, calibrated.

        The study's builtin settings come from :func:`builtin_settings_for`;
        every coefficient is replaced by the calibrated set.
        """
        from ..runs.evaluators.builtin import BuiltinEvaluator

        settings, conversion = builtin_settings_for(study)
        return BuiltinEvaluator(self.settings(settings), conversion, study.response_names)

    def to_json(self) -> dict:
        """The saved form (keys documented in docs/calibration.md); ``null`` stands for not determined."""
        names = [e.name for e in self.estimates]
        return {
            "format": FORMAT,
            "study": self.study,
            "coefficients": _finite_dict(asdict(self.coefficients())),
            "coefficients_before": _finite_dict(self.before),
            "fitted": {e.name: {"before": e.before, "value": e.value, "std_error": _finite(e.std_error),
                                "interval_95": [_finite(v) for v in e.interval], "range": list(e.range),
                                "determined": e.determined, "note": e.note} for e in self.estimates},
            "correlation": {"names": names, "matrix": [[_finite(v) for v in row] for row in self.correlation]},
            "not_fitted": dict(self.not_fitted),
            "responses": {r: {"unit": self.units[r], "scale": self.scales[r],
                              "before": asdict(self.discrepancy_before[r]),
                              "after": asdict(self.discrepancy_after[r])} for r in self.units},
            "noise": self.noise,
            "runs": list(self.runs),
            "excluded_runs": dict(self.excluded),
            "fit": {"sigma2": self.sigma2, "chi2_dof": _finite(self.chi2_dof), "dof": self.dof,
                    "evaluations": self.evaluations, "starts": self.starts, "seed": self.seed,
                    "elapsed_s": self.elapsed_s},
            "notes": list(self.notes),
        }

    def save(self, path) -> Path:
        """Write :meth:`to_json` atomically to ``path``; returns the path."""
        from ..runs.results import write_json

        path = Path(path)
        write_json(self.to_json(), path)
        return path

    def table(self) -> list[str]:
        """Plain text lines: coefficients before and after with their 95 % half-widths, and the discrepancy."""
        lines = [f"{'coefficient':<22}{'before':>10}{'after':>11}{'+/- 95 %':>11}  note"]
        for e in self.estimates:
            half = (e.interval[1] - e.interval[0]) / 2
            lines.append(f"{e.name:<22}{e.before:>10.4g}{e.value:>11.4g}{_show(half):>11}  "
                         f"{e.note if not e.determined else ''}".rstrip())
        for name, why in self.not_fitted.items():
            lines.append(f"{name:<22}{self.before[name]:>10.4g}{'-':>11}{'-':>11}  not fitted: {why}")
        lines.append(f"{'response':<22}{'':>10}{'bias':>11}{'rms':>11}{'max|e|':>11}{'R^2':>9}")
        for r in self.units:
            for label, d in (("before", self.discrepancy_before[r]), ("after", self.discrepancy_after[r])):
                r2 = "-" if d.r2 is None else f"{d.r2:.3f}"
                lines.append(f"{r + ' [' + self.units[r] + ']':<22}{label:>10}{d.bias:>11.3g}{d.rms:>11.3g}"
                             f"{d.max_abs:>11.3g}{r2:>9}")
        return lines


def _finite(v):
    return float(v) if v is not None and math.isfinite(v) else None


def _finite_dict(d: dict) -> dict:
    return {k: _finite(v) for k, v in d.items()}


def _show(v: float) -> str:
    return f"{v:.3g}" if math.isfinite(v) else "inf"


# ---------------------------------------------------------------------------
# where the model's settings come from
def builtin_settings_for(study) -> tuple[ModelSettings, dict]:
    """The builtin model settings a study calibrates: its ``[evaluator]`` or its ``[low_fidelity]`` table.

    Parameters
    ----------
    study : Study

    Returns
    -------
    settings : ModelSettings
    conversion : dict
        Study parameter -> factor from the study's unit to the model's.

    Raises
    ------
    CalibrationError
        When neither table is of kind ``builtin``.
    """
    from ..runs.evaluators.builtin import read_builtin_settings

    if study.evaluator.kind == "builtin":
        return read_builtin_settings(study)
    low = getattr(study, "low_fidelity", None)
    if low is not None and low.evaluator.kind == "builtin":
        return read_builtin_settings(study, low.evaluator)
    raise CalibrationError(f"{where(study.path)}: the evaluator is '{study.evaluator.kind}', so the builtin "
                           "model's settings must come from elsewhere: add a [low_fidelity] table with "
                           "kind = \"builtin\" and the builtin keys, or name a builtin study (--model-study)")


# ---------------------------------------------------------------------------
@dataclass
class _Data:
    """Recorded values at the runs a calibration uses, and the model's inputs there (model units)."""

    run_ids: list
    inputs: dict
    observed: dict

    def subset(self, keep: np.ndarray) -> "_Data":
        return _Data([r for r, k in zip(self.run_ids, keep) if k], {n: v[keep] for n, v in self.inputs.items()},
                     {n: v[keep] for n, v in self.observed.items()})


class _Problem:
    """Scaled residuals of the model against the data, as a function of the fitted coefficients in [0, 1]."""

    def __init__(self, settings: ModelSettings, data: _Data, names: list, scales: dict):
        self.settings, self.data, self.names = settings, data, list(names)
        self.low = np.array([COEFFICIENT_RANGES[n][0] for n in names])
        self.width = np.array([COEFFICIENT_RANGES[n][1] - COEFFICIENT_RANGES[n][0] for n in names])
        self.scales = dict(scales)
        self.evaluations = 0

    def narrowed(self, names: list) -> "_Problem":
        """The same problem fitting only ``names`` (the evaluation count carries over)."""
        out = _Problem(self.settings, self.data, names, self.scales)
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
        result = RearPackageModel(replace(self.settings, coefficients=co)).evaluate(self.data.inputs)
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
    from ..runs.evaluators.builtin import same_output_unit

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


def _data(results, conversion: dict, responses: list) -> _Data:
    ok = results.ok
    if len(ok) == 0:
        raise CalibrationError(f"{results.path or 'results'}: no ok runs to calibrate against")
    missing = [p for p in results.parameters if p not in conversion]
    if missing:
        raise CalibrationError(f"parameter '{missing[0]}' of the results is not a parameter of the model's study")
    inputs = {p: ok[p].to_numpy(float) * f for p, f in conversion.items() if p in results.parameters}
    unused = [p for p in conversion if p not in results.parameters]
    if unused:
        raise CalibrationError(f"the model's study varies '{unused[0]}', which the results do not record")
    return _Data(list(ok["run_id"]), inputs, {r: ok[r].to_numpy(float) for r in responses})


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
              study_name: str = "", progress=None) -> Calibration:
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
    if not isinstance(starts, int) or isinstance(starts, bool) or not 1 <= starts <= 50:
        raise CalibrationError(f"starts must be a whole number from 1 to 50, got {starts!r}")
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0):
        raise CalibrationError(f"seed must be a whole number >= 0 or None, got {seed!r}")
    units = dict(units or {})
    responses = _check_responses(responses, results, units)
    chosen = _check_names(coefficients) if coefficients is not None else list(FITTABLE)
    data = _data(results, conversion, responses)
    problem = _Problem(settings, data, chosen, {})
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


def calibrate_study(study, results, model_study=None, **options) -> Calibration:
    """Calibrate the builtin model of ``model_study`` (default ``study``) to ``study``'s results.

    Parameters
    ----------
    study : Study
        The study the results belong to (its parameters and responses).
    results : ResultsTable
    model_study : Study, optional
        Where the builtin settings come from (:func:`builtin_settings_for`);
        its parameters must be the results' parameters, in the same units.
    **options
        Passed to :func:`calibrate` (``coefficients``, ``responses``, ``noise``,
        ``starts``, ``seed``, ``progress``).

    Returns
    -------
    Calibration
    """
    source = model_study if model_study is not None else study
    settings, conversion = builtin_settings_for(source)
    if model_study is not None:
        for p in study.space.parameters:
            other = {q.name: q for q in model_study.space.parameters}.get(p.name)
            if other is not None and other.unit != p.unit:
                raise CalibrationError(f"{where(model_study.path)}: parameter '{p.name}' is in '{other.unit}' "
                                       f"there but in '{p.unit}' in {where(study.path)}")
    options.setdefault("seed", study.plan.seed)
    return calibrate(settings, conversion, results, units={r.name: r.unit for r in study.responses},
                     study_name=study.name, **options)


# ---------------------------------------------------------------------------
def _read_json(path) -> dict:
    path = Path(path)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise CalibrationError(f"{path}: cannot read the calibration ({exc.strerror or exc})") from exc
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise CalibrationError(f"{path}: not a calibration JSON file ({exc})") from exc
    if not isinstance(data, dict) or data.get("format") != FORMAT:
        raise CalibrationError(f"{path}: not a calibration written by 'doe calibrate' (format {FORMAT!r} expected)")
    return data


def read_calibrated_coefficients(path) -> dict:
    """The calibrated coefficients saved in ``path`` (name -> value), checked against their ranges.

    Raises
    ------
    CalibrationError
        Missing or unreadable file, wrong format, an unknown coefficient or a value outside its range.
    """
    data = _read_json(path)
    values = data.get("coefficients")
    known = {f.name for f in fields(Coefficients)}
    if not isinstance(values, dict):
        raise CalibrationError(f"{path}: 'coefficients' must be a table of numbers")
    for k, v in values.items():
        if k not in known:
            raise CalibrationError(f"{path}: unknown coefficient '{k}' (coefficients: {', '.join(sorted(known))})")
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            raise CalibrationError(f"{path}: coefficient '{k}' must be a number, got {v!r}")
    try:
        Coefficients(**values)
    except DoeError as exc:
        raise CalibrationError(f"{path}: {exc}") from exc
    return {k: float(v) for k, v in values.items()}


def load_calibration(path) -> Calibration:
    """Read a calibration saved by :meth:`Calibration.save`."""
    data = _read_json(path)
    try:
        fitted = data["fitted"]
        estimates = [CoefficientEstimate(n, e["before"], e["value"], _num(e["std_error"]),
                                         tuple(_num(v) for v in e["interval_95"]), tuple(e["range"]),
                                         bool(e["determined"]), e["note"]) for n, e in fitted.items()]
        responses = data["responses"]
        fit = data["fit"]
        return Calibration(
            study=data["study"], before=dict(data["coefficients_before"]), estimates=estimates,
            correlation=np.array([[np.nan if v is None else v for v in row] for row in data["correlation"]["matrix"]],
                                 dtype=float),
            not_fitted=dict(data["not_fitted"]), units={r: v["unit"] for r, v in responses.items()},
            scales={r: v["scale"] for r, v in responses.items()}, noise=data["noise"],
            discrepancy_before={r: Discrepancy(**v["before"]) for r, v in responses.items()},
            discrepancy_after={r: Discrepancy(**v["after"]) for r, v in responses.items()},
            runs=list(data["runs"]), excluded=dict(data["excluded_runs"]), sigma2=fit["sigma2"],
            chi2_dof=_num(fit["chi2_dof"]), dof=fit["dof"], evaluations=fit["evaluations"], starts=fit["starts"],
            seed=fit["seed"], elapsed_s=fit["elapsed_s"], notes=list(data["notes"]))
    except (KeyError, TypeError, ValueError) as exc:
        raise CalibrationError(f"{path}: the calibration file is incomplete or damaged ({exc!r})") from exc


def _num(v) -> float:
    return float("inf") if v is None else float(v)


# ---------------------------------------------------------------------------
# command-line values
def parse_names(text: str | None, option: str) -> list | None:
    """``"a,b"`` -> ``["a", "b"]`` (None stays None); an empty item is an error naming ``option``."""
    if text is None:
        return None
    names = [s.strip() for s in text.split(",")]
    if not all(names):
        raise CalibrationError(f"{option} {text!r}: give names separated by commas, e.g. body_3d_factor,base_pressure")
    return names


def parse_noise(text: str | None) -> dict | None:
    """``"cla_total=0.004,cda_total=0.002"`` -> ``{"cla_total": 0.004, ...}`` (one standard deviation, its unit)."""
    if text is None:
        return None
    out = {}
    for item in text.split(","):
        name, sep, value = item.partition("=")
        try:
            out[name.strip()] = float(value)
        except ValueError:
            sep = ""
        if not sep or not name.strip():
            raise CalibrationError(f"--noise {item.strip()!r}: write RESPONSE=STD, e.g. cla_total=0.004")
    return out


# ---------------------------------------------------------------------------
def synthetic_results(study, truth: dict, noise: dict | None = None, runs: int | None = None, seed=0):
    """Invented results of a study's builtin model with some coefficients changed, plus Gaussian noise.

    For checking, before anything is recorded, what a calibration with this
    plan and these responses can determine (and for tests). The rows are
    labelled ``source = "invented"``.

    Parameters
    ----------
    study : Study
        Its builtin settings (:func:`builtin_settings_for`), space and responses.
    truth : dict of str to float
        Coefficients to change (the invented truth).
    noise : dict of str to float, optional
        One standard deviation of Gaussian noise per response, its unit; none when omitted.
    runs : int, optional
        Runs of the maximin Latin hypercube (default: the study's plan size).
    seed : int
        Seed of the plan and of the noise.

    Returns
    -------
    ResultsTable
    """
    from ..design.plans import make_plan
    from ..runs.results import ResultsTable

    settings, conversion = builtin_settings_for(study)
    try:
        co = replace(settings.coefficients, **truth)
    except TypeError as exc:
        raise CalibrationError(f"truth names an unknown coefficient ({exc})") from exc
    plan = make_plan(study.space, runs if runs is not None else study.plan.runs, seed).frame
    out = RearPackageModel(replace(settings, coefficients=co)).evaluate(
        {p: plan[p].to_numpy(float) * f for p, f in conversion.items()})
    rng = np.random.default_rng(seed)
    frame = plan.copy()
    for r in study.response_names:
        sd = (noise or {}).get(r, 0.0)
        frame[r] = out.values[r] + (rng.normal(0.0, sd, len(frame)) if sd > 0 else 0.0)
    frame["status"] = np.where(out.ok, "ok", "failed")
    frame["source"] = "invented"
    return ResultsTable(frame, study.space.names, study.response_names)
