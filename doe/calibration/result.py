"""The result of a calibration and its file (``doe calibrate --out calibration.json``).

Keys of the file are documented in ``docs/calibration.md``; the builtin
evaluator reads its coefficients back through
:mod:`doe.runs.evaluators.calibration_file`.
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path

import numpy as np

from ..aero.model import Coefficients, ModelSettings
from ..errors import CalibrationError
from ..files import write_json
from ..runs.evaluators.builtin import BuiltinEvaluator
from ..runs.evaluators.calibration_file import FORMAT, read_calibration_json
from .settings import builtin_settings_for

__all__ = ["Calibration", "CoefficientEstimate", "Discrepancy", "load_calibration", "FORMAT"]


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
        settings, conversion = builtin_settings_for(study)
        return BuiltinEvaluator(self.settings(settings), conversion, study.response_names)

    def to_dict(self) -> dict:
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
        """Write :meth:`to_dict` atomically to ``path``; returns the path."""
        path = Path(path)
        write_json(self.to_dict(), path)
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


def load_calibration(path) -> Calibration:
    """Read a calibration saved by :meth:`Calibration.save`."""
    data = read_calibration_json(path)
    try:
        fitted = data["fitted"]
        estimates = [CoefficientEstimate(n, e["before"], e["value"], _inf_if_none(e["std_error"]),
                                         tuple(_inf_if_none(v) for v in e["interval_95"]), tuple(e["range"]),
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
            chi2_dof=_inf_if_none(fit["chi2_dof"]), dof=fit["dof"], evaluations=fit["evaluations"], starts=fit["starts"],
            seed=fit["seed"], elapsed_s=fit["elapsed_s"], notes=list(data["notes"]))
    except (KeyError, TypeError, ValueError) as exc:
        raise CalibrationError(f"{path}: the calibration file is incomplete or damaged ({exc!r})") from exc


def _inf_if_none(v) -> float:
    return float("inf") if v is None else float(v)
