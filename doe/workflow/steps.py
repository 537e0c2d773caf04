"""One function per step of a study, each writing its file(s); ``doe <verb>`` and ``doe run`` both call them.

==============================  ===========================================  ==============================
step                            writes                                       from
==============================  ===========================================  ==============================
:func:`plan_step`               plan CSV, ``<plan>.quality.json``             the study (or a plan to extend)
:func:`evaluate_step`           results CSV (resumes run by run)             a plan
:func:`fit_step`                surrogate folder (``fit.json`` inside)       results (and cheap runs)
:func:`sensitivity_step`        sensitivity JSON                             surrogates, or the evaluator
:func:`robust_step`             robust JSON, trade-off CSV                   surrogates
:func:`next_step`               next plan CSV, ``<next>.why.json``            surrogates
                                (and ``<next>.cheap.csv``)
==============================  ===========================================  ==============================

Each step returns what it made, so the caller (the CLI or the pipeline)
only prints; the words a step has for the user come back as ``notes`` or go
to ``say``.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from threadpoolctl import threadpool_limits

from ..design.adaptive import propose_runs
from ..design.level_proposals import propose_level_runs
from ..design.plans import augment_plan, make_plan
from ..errors import DoeError
from ..files import write_json
from ..robust.tradeoff import write_tradeoff
from ..runs.evaluators import make_evaluator
from ..runs.execution import evaluate_plan
from ..runs.results import read_plan, write_plan
from .cheap import cheap_study, is_two_fidelity, nested_runs, study_surrogates
from .robust import only_responses, study_responses, study_robust, study_tradeoff
from .sensitivity import study_sensitivity, study_sensitivity_json

__all__ = ["plan_step", "evaluate_step", "fit_step", "fit_lines", "fit_verdicts", "sensitivity_step", "robust_step",
           "next_step", "NextRuns", "quality_path", "why_path", "cheap_plan_path"]


def quality_path(plan_path) -> Path:
    """``plan.csv`` -> ``plan.quality.json`` (the plan's space-filling figures)."""
    return Path(plan_path).with_suffix(".quality.json")


def why_path(next_path) -> Path:
    """``next.csv`` -> ``next.why.json`` (why each proposed run was picked)."""
    return Path(next_path).with_suffix(".why.json")


def cheap_plan_path(next_path) -> Path:
    """``next.csv`` -> ``next.cheap.csv`` (the cheap runs at the proposed points)."""
    return Path(next_path).with_suffix(".cheap.csv")


def plan_step(study, out, runs: int | None = None, seed: int | None = None, method: str | None = None,
              add_to=None):
    """Make a plan (or extend the plan in ``add_to`` by ``runs``) and write it with its quality file.

    Defaults come from the study's ``[plan]``. Returns the :class:`~doe.design.plans.Plan`.
    """
    seed = study.plan.seed if seed is None else seed
    if add_to is not None:
        if runs is None:
            raise DoeError("--add-to needs --runs (how many runs to add)")
        plan = augment_plan(study.space, read_plan(add_to, study), runs, seed)
    else:
        plan = make_plan(study.space, study.plan.runs if runs is None else runs, seed, method or study.plan.method)
    write_plan(plan.frame, out)
    write_json(plan.to_dict(), quality_path(out))
    return plan


def evaluate_step(study, plan, out, jobs: int = 1, scheduler: str | None = None, retry_failed: bool = False,
                  progress: bool = True, cheap: bool = False):
    """Evaluate a plan (DataFrame) into the results CSV ``out``; case folders go beside it.

    ``cheap``: run the study's ``[low_fidelity]`` model instead (case folders in ``cheap_cases``).
    Returns the :class:`~doe.runs.execution.EvaluationSummary`.
    """
    out = Path(out)
    evaluator = make_evaluator(cheap_study(study) if cheap else study,
                               workspace=out.parent / ("cheap_cases" if cheap else "cases"))
    return evaluate_plan(plan, evaluator, out, study.space.names, jobs=jobs, retry_failed=retry_failed,
                         progress=progress, scheduler=scheduler)


def fit_step(study, results, folder, seed: int | None = None, fidelity: str | None = None, cheap_path=None,
             say=None):
    """Fit the study's surrogates (running its cheap model first with two fidelities) and save them in ``folder``."""
    seed = study.plan.seed if seed is None else seed
    sset = study_surrogates(study, results, seed=seed, fidelity=fidelity, cheap_path=cheap_path, say=say)
    sset.save(folder)
    return sset


def _q2(rep) -> str:
    return str(rep["q2_loo"] if rep["q2_loo"] is None else round(rep["q2_loo"], 3))


def fit_lines(report: dict) -> list:
    """Lines on each response's fit (``fit.json`` content): accuracy, kernel, noise, verdict and notes."""
    lines = []
    for name, rep in report.items():
        lines.append(f"{name}: q2_loo {_q2(rep)}, rmse_loo {rep['rmse_loo']:.3g} {rep['unit']}, {rep['kernel']}, "
                     f"noise {rep['noise']}: {rep['verdict']} ({rep['verdict_reason']})")
        lines += [f"  note: {note}" for note in rep["statements"]]
    return lines


def fit_verdicts(report: dict) -> str:
    """One line: each response's verdict and q2 (``fit.json`` content)."""
    return ", ".join(f"{n} {r['verdict']} (q2 {_q2(r)})" for n, r in report.items())


def sensitivity_step(study, out, **options):
    """Sobol indices of the study's responses written as the sensitivity JSON; returns its content.

    ``options`` go to :func:`~doe.workflow.sensitivity.study_sensitivity`.
    """
    with threadpool_limits(limits=1, user_api="blas"):  # many small surrogate predictions: threads only contend
        data = study_sensitivity_json(study, study_sensitivity(study, **options))
    write_json(data, out)
    return data


def robust_step(study, sset, results, out, tradeoff_out=None):
    """Nominal and robust settings (robust JSON) and, with two or more trade-off responses, the trade-off CSV.

    Returns ``(RobustResult, trade-off DataFrame or None)``; the trade-off goes to
    ``tradeoff_out`` (default ``tradeoff.csv`` beside ``out``).
    """
    if study.robust is None:
        raise DoeError("robust: the study has no [robust] settings")
    sset = only_responses(sset, study_responses(study))   # each prediction costs only the responses read
    result = study_robust(study, sset.predict, runs_X=results.X())
    write_json(result.to_dict(), out)
    table = None
    if len(study.robust.tradeoff) >= 2:
        picks = [[rec.point[n] for n in study.space.names] for rec in (result.nominal, result.robust)]
        table = study_tradeoff(study, sset.predict, include=picks)
        write_tradeoff(table, tradeoff_out or Path(out).with_name("tradeoff.csv"))
    return result, table


@dataclass
class NextRuns:
    """What :func:`next_step` made: the proposal, its record (``<next>.why.json``) and, with two fidelities,
    the cheap runs' plan and the savings estimate."""

    proposal: object
    record: dict
    cheap_path: Path | None = None
    savings: dict = field(default_factory=dict)


def next_step(study, sset, results, runs: int, out, seed: int | None = None, aim: str = "map",
              criterion: str | None = None, response: str | None = None, pending=None,
              progress: bool = True) -> NextRuns:
    """Propose ``runs`` runs (plan CSV ``out`` and ``<out>.why.json``; with two fidelities ``<out>.cheap.csv``).

    ``pending``: a plan (DataFrame) of runs planned but not yet evaluated. ``progress``: a progress bar on
    standard error when choosing the runs takes more than two seconds.
    """
    seed = study.plan.seed if seed is None else seed
    names = study.space.names
    taken = list(results.frame["run_id"]) + (list(pending["run_id"]) if pending is not None else [])
    if study.space.choices:   # runs shared over the level combinations first, then placed within each
        proposal = propose_level_runs(sset, runs, aim=aim, criterion=criterion, response=response, pending=pending,
                                      avoid=results.failed, taken_ids=taken, seed=seed)
    else:
        proposal = propose_runs(sset, runs, aim=aim, criterion=criterion, response=response,
                                pending=None if pending is None else pending[names].to_numpy(float),
                                avoid=results.failed[names].to_numpy(float), taken_ids=taken, seed=seed,
                                progress=progress)
    write_plan(proposal.frame, out)
    made = NextRuns(proposal, proposal.to_dict())
    if is_two_fidelity(sset):
        cheap, made.savings = nested_runs(study, sset, proposal, seed)
        made.cheap_path = cheap_plan_path(out)
        write_plan(cheap, made.cheap_path)
        made.record["two_fidelity"] = {**made.savings, "cheap_plan": str(made.cheap_path)}
    write_json(made.record, why_path(out))
    return made
