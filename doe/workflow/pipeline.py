"""The whole chain of a study, step by step, reusing what is already on disk.

``doe run`` (plan, evaluate, then the analyses and the report) and ``doe
report`` (the analyses and the report from given results) both come here. Each
step writes one file (or folder) under the study's output folder, and is
skipped when its file is already there and newer than what it was made from,
so an interrupted study resumes and a finished one is not recomputed:

==================  =========================  ==================================
step                file                       made from
==================  =========================  ==================================
plan                ``plan.csv`` (+ quality)   the study file
evaluate            ``results.csv``            the plan (resumes run by run)
fit                 ``surrogate/fit.json``     the results (and, with two fidelities,
                                               ``cheap_results.csv``: the cheap runs)
sensitivity         ``sensitivity.json``       the surrogates
robust, trade-off   ``robust.json``,           the surrogates
                    ``tradeoff.csv``
next runs           ``next.csv`` (+ why, and   the surrogates
                    ``next.cheap.csv`` with
                    two fidelities)
report              ``report/index.html``      all of the above
==================  =========================  ==================================
"""
from __future__ import annotations

import json
import sys
from dataclasses import dataclass
from pathlib import Path

import pandas as pd
from threadpoolctl import threadpool_limits

from .. import defaults
from ..design.adaptive import accuracy_status
from ..errors import DoeError
from ..report import ReportInputs, build_report
from ..runs.evaluators.recorded import RecordedSettings
from ..runs.results import read_plan, read_results
from ..surrogate.set import load_surrogates
from .cheap import wants_two_fidelity
from .steps import evaluate_step, fit_step, fit_verdicts, next_step, plan_step, robust_step, sensitivity_step

__all__ = ["StudyFiles", "run_study", "analyse_and_report", "NEXT_RUNS_DEFAULT"]

#: Runs proposed for the next round when the surrogates are not yet accurate enough.
NEXT_RUNS_DEFAULT = defaults.NEXT_RUNS


@dataclass(frozen=True)
class StudyFiles:
    """Where a study's outputs live (all under ``root``)."""

    root: Path

    @property
    def plan(self) -> Path:
        return self.root / "plan.csv"

    @property
    def plan_quality(self) -> Path:
        return self.root / "plan.quality.json"

    @property
    def results(self) -> Path:
        return self.root / "results.csv"

    @property
    def cheap_results(self) -> Path:
        return self.root / "cheap_results.csv"

    @property
    def cases(self) -> Path:
        return self.root / "cases"

    @property
    def surrogate(self) -> Path:
        return self.root / "surrogate"

    @property
    def fit(self) -> Path:
        return self.surrogate / "fit.json"

    @property
    def sensitivity(self) -> Path:
        return self.root / "sensitivity.json"

    @property
    def robust(self) -> Path:
        return self.root / "robust.json"

    @property
    def tradeoff(self) -> Path:
        return self.root / "tradeoff.csv"

    @property
    def next(self) -> Path:
        return self.root / "next.csv"

    @property
    def next_why(self) -> Path:
        return self.root / "next.why.json"

    @property
    def next_cheap(self) -> Path:
        return self.root / "next.cheap.csv"

    @property
    def report(self) -> Path:
        return self.root / "report"


def _fresh(target: Path, *sources: Path) -> bool:
    """Whether ``target`` exists and is newer than every existing source."""
    if not target.exists():
        return False
    t = target.stat().st_mtime
    return all(not s.exists() or s.stat().st_mtime <= t for s in sources)


def _say(text: str) -> None:
    print(text, file=sys.stderr, flush=True)


class _Steps:
    """Numbered progress lines: ``[3/7] fit: ...``."""

    def __init__(self, total: int):
        self.total, self.done = total, 0

    def __call__(self, name: str, text: str) -> None:
        self.done += 1
        _say(f"[{self.done}/{self.total}] {name}: {text}")


def run_study(study, out=None, jobs: int = 1, scheduler: str | None = None, progress: bool = True,
              next_runs: int = NEXT_RUNS_DEFAULT) -> Path:
    """Plan, evaluate, analyse and report a study; returns the report's ``index.html``.

    Parameters
    ----------
    study : Study
    out : str or Path, optional
        Output folder; default ``reports/<study name>``.
    jobs : int
        Local worker processes for the evaluations.
    scheduler : str, optional
        Dask scheduler address for the evaluations.
    progress : bool
        Progress bars on standard error.
    next_runs : int
        Runs to propose for the next round (0: none).
    """
    files = StudyFiles(Path(out) if out is not None else study.default_output)
    steps = _Steps(7)
    if study.evaluator.kind == "recorded":
        recorded = study.resolve(RecordedSettings.read(study).file)
        steps("plan", "none needed: the study's results are recorded")
        steps("evaluate", f"reading recorded results from {recorded}")
        return analyse_and_report(study, recorded, files, steps, next_runs=next_runs)
    if files.plan.exists():
        plan = read_plan(files.plan, study)
        steps("plan", f"reusing {files.plan} ({len(plan)} runs)")
    else:
        made = plan_step(study, files.plan)
        plan = made.frame
        steps("plan", f"{made.quality.summary()} -> {files.plan}")
    summary = evaluate_step(study, plan, files.results, jobs=jobs, scheduler=scheduler, progress=progress)
    steps("evaluate", summary.line(files.results))
    return analyse_and_report(study, files.results, files, steps, next_runs=next_runs)


def analyse_and_report(study, results_path, files: StudyFiles, steps=None, next_runs: int = NEXT_RUNS_DEFAULT,
                       accept_outside: bool = False, fidelity: str | None = None, cheap_path=None) -> Path:
    """Fit, sensitivity, robust settings, next runs and the report from a results CSV.

    Steps whose file is newer than its inputs are reused. Returns the report's ``index.html``.
    ``fidelity`` overrides ``[fit] fidelity``; ``cheap_path`` is the cheap
    runs' results file of a two-fidelity fit (default ``cheap_results.csv``
    in the output folder).
    """
    steps = steps or _Steps(5)  # fit, sensitivity, robust, next runs, report
    # every analysis works on matrices of tens to a few thousand rows: BLAS threads only contend for the
    # cores (on the 2-core machine of reports/benchmarks.md the robust search ran 4 times slower with them)
    with threadpool_limits(limits=1, user_api="blas"):
        return _analyse_and_report(study, results_path, files, steps, next_runs, accept_outside, fidelity,
                                   cheap_path)


def _analyse_and_report(study, results_path, files: StudyFiles, steps, next_runs, accept_outside, fidelity,
                        cheap_path) -> Path:
    results_path = Path(results_path)
    results = read_results(results_path, study, accept_outside=accept_outside)
    if len(results.ok) < 3:
        raise DoeError(f"{results_path}: only {len(results.ok)} runs worked; a surrogate needs at least 3")
    sset = _fit_step(study, results, results_path, files, steps, fidelity, cheap_path)
    sensitivity = _sensitivity_step(study, sset, files, steps)
    robust, tradeoff = _robust_step(study, sset, results, files, steps)
    next_plan, reasons, next_note = _next_step(study, sset, results, files, next_runs, steps)
    quality = json.loads(files.plan_quality.read_text()) if files.plan_quality.exists() else None
    descriptions = {
        "study.toml": (study.path, "the study file"),
        "plan.csv": (files.plan, "the plan: run_id and one column per parameter (study units)"),
        "plan.quality.json": (files.plan_quality, "space-filling figures of the plan (unit cube)"),
        "results.csv": (results_path, "every run: parameters, responses (their units), status, source, message"),
        "cheap_results.csv": (files.cheap_results, "runs of the cheap [low_fidelity] model (same columns), when "
                                                   "the fit uses two fidelities"),
        "fit.json": (files.fit, "surrogate accuracy per response: q2_loo (-), rmse_loo (response unit), verdict"),
        "sensitivity.json": (files.sensitivity, "Sobol indices per response and parameter, 95 % half-widths"),
        "robust.json": (files.robust, "nominal and robust settings, spreads, limit probabilities, fragility"),
        "tradeoff.csv": (files.tradeoff, "non-dominated settings: parameters, response means and stds"),
        "next.csv": (files.next, "proposed next runs: run_id and parameters (study units)"),
        "next.why.json": (files.next_why, "why each proposed run was picked (and, with two fidelities, the "
                                          "expensive runs the cheap model is expected to save)"),
        "next.cheap.csv": (files.next_cheap, "cheap-model runs at the proposed points (a nested plan)"),
    }
    inputs = ReportInputs(study=study, results=results, plan_quality=quality, surrogates=sset,
                          fit=json.loads(files.fit.read_text()), sensitivity=sensitivity, robust=robust,
                          tradeoff=tradeoff, next_plan=next_plan, next_reasons=reasons, next_note=next_note,
                          files=descriptions)
    index = build_report(inputs, files.report)
    steps("report", f"{index}")
    return index


def _fit_step(study, results, results_path: Path, files: StudyFiles, steps, fidelity=None, cheap_path=None):
    two = wants_two_fidelity(study, fidelity)
    cheap_path = Path(cheap_path) if cheap_path is not None else files.cheap_results
    if _fresh(files.fit, results_path, study.path or results_path, cheap_path) and (not two or cheap_path.exists()):
        sset = load_surrogates(files.surrogate, study)
        steps("fit", f"reusing {files.surrogate}")
        return sset
    sset = fit_step(study, results, files.surrogate, fidelity=fidelity, cheap_path=cheap_path, say=_say)
    steps("fit", fit_verdicts(sset.fit_report()))
    return sset


def _sensitivity_step(study, sset, files: StudyFiles, steps):
    if _fresh(files.sensitivity, files.fit):
        steps("sensitivity", f"reusing {files.sensitivity}")
        return json.loads(files.sensitivity.read_text())
    data = sensitivity_step(study, files.sensitivity, surrogates=sset)
    steps("sensitivity", f"Sobol indices of {len(data['_meta']['responses'])} responses -> {files.sensitivity}")
    return data


def _robust_step(study, sset, results, files: StudyFiles, steps):
    if study.robust is None:
        steps("robust", "skipped: no response has a goal and there is no [robust] table")
        return None, None
    two = len(study.robust.tradeoff) >= 2
    if _fresh(files.robust, files.fit) and (not two or _fresh(files.tradeoff, files.fit)):
        steps("robust", f"reusing {files.robust}")
    else:
        result, _ = robust_step(study, sset, results, files.robust, files.tradeoff)
        steps("robust", result.robust.summary("robust", result.objective, result.unit))
    return json.loads(files.robust.read_text()), pd.read_csv(files.tradeoff) if two else None


def _next_step(study, sset, results, files: StudyFiles, k: int, steps):
    met, sentence = accuracy_status(sset)
    if k <= 0 or met:
        steps("next runs", "none proposed: " + (sentence if met else "asked for none"))
        return None, None, sentence
    if _fresh(files.next, files.fit):
        steps("next runs", f"reusing {files.next}")
    else:
        made = next_step(study, sset, results, k, files.next)
        extra = (f"; cheap runs at the same points -> {made.cheap_path}; {made.savings['statement']}"
                 if made.cheap_path is not None else "")
        steps("next runs", f"{len(made.proposal.frame)} runs proposed ({sentence}) -> {files.next}{extra}")
    why = json.loads(files.next_why.read_text()) if files.next_why.exists() else {"runs": []}
    if "two_fidelity" in why:
        sentence += (f". Each proposed run also needs a cheap-model run at the same point (next.cheap.csv); "
                     f"{why['two_fidelity']['statement']}")
    return read_plan(files.next, study), {r["run_id"]: r["reason"] for r in why.get("runs", [])}, sentence
