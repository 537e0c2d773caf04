"""The cheap runs of a two-fidelity study: plan them, run them, read them back.

A study with a ``[low_fidelity]`` table has a cheap model of its responses
(the built-in model, or the user's own quick command). Its runs are planned
as a nested plan: one at every expensive run (id ``at_<run id>``), so that the
discrepancy is measured exactly there, plus a space-filling spread over the
whole space (ids ``c<n>_<k>``: ``n`` the size of the spread, so a changed
size adds runs instead of clashing with stored ones). They go into their own
results file, with the same columns, resume and failure handling as any
results file; every ok run in that file is used by the fit.
"""
from __future__ import annotations

from pathlib import Path

import pandas as pd

from ..design.nested import expected_savings, is_two_fidelity
from ..design.plans import augment_plan, make_plan
from ..errors import DoeError
from ..runs.evaluators import make_evaluator
from ..runs.execution import evaluate_plan
from ..runs.results import read_results
from .fit import fit_surrogates

__all__ = ["cheap_plan", "run_cheap", "cheap_study", "study_surrogates", "wants_two_fidelity", "default_cheap_path",
           "is_two_fidelity", "nested_runs", "NESTED_PREFIX", "CHEAP_Q2", "CHEAP_EXTRA_PER_PARAMETER"]

#: Prefix of the cheap run made at an expensive run's point.
NESTED_PREFIX = "at_"


def default_cheap_path(results_path, output_folder=None) -> Path:
    """Where the cheap runs of a results file go by default: ``<results stem>.low.csv``.

    In ``output_folder`` (a study's output folder, so that a recorded data set's
    folder is left as it was committed), else beside the results. Named after the
    results file, so that two results files of one study keep their own cheap runs.
    """
    p = Path(results_path)
    return (Path(output_folder) if output_folder is not None else p.parent) / (p.stem + ".low.csv")


def cheap_plan(study, expensive: pd.DataFrame, spread: int | None = None) -> pd.DataFrame:
    """The nested plan of cheap runs.

    Parameters
    ----------
    study : Study
        With a ``[low_fidelity]`` table.
    expensive : DataFrame
        ``run_id`` and parameter columns (study units) of the expensive runs
        (done or proposed); a cheap run is planned at each.
    spread : int, optional
        Space-filling cheap runs; default ``[low_fidelity] runs``.

    Returns
    -------
    DataFrame
        ``run_id`` then the parameter columns, study units.
    """
    low = _settings(study)
    names = study.space.names
    n = low.runs_for(study.space.dim) if spread is None else int(spread)
    parts = []
    if n > 0:
        plan = make_plan(study.space, n, low.seed, "lhs").frame
        plan["run_id"] = [f"c{n}_{k + 1:04d}" for k in range(len(plan))]
        parts.append(plan)
    if len(expensive):
        nested = expensive[["run_id", *names]].copy()
        nested["run_id"] = [NESTED_PREFIX + str(r) for r in nested["run_id"]]
        parts.append(nested)
    if not parts:
        return pd.DataFrame(columns=["run_id", *names])
    return pd.concat(parts, ignore_index=True)


def run_cheap(study, expensive: pd.DataFrame, path, jobs: int = 1, progress: bool = True, workspace=None):
    """Run the cheap model on its nested plan (what is stored already is not rerun) and read the results.

    Parameters
    ----------
    study : Study
    expensive : DataFrame
        ``run_id`` and parameter columns of the expensive runs.
    path : str or Path
        The cheap runs' results file (created or resumed).
    jobs : int
        Local worker processes.
    progress : bool
    workspace : str or Path, optional
        Case folders of a ``command`` cheap model.

    Returns
    -------
    summary : EvaluationSummary
    results : ResultsTable
        Every run in the file (the ok ones are fitted).
    """
    path = Path(path)
    workspace = workspace if workspace is not None else path.parent / "cheap_cases"
    evaluator = make_evaluator(cheap_study(study), workspace=workspace)
    plan = cheap_plan(study, expensive)
    summary = evaluate_plan(plan, evaluator, path, study.space.names, jobs=jobs, progress=progress)
    results = read_results(path, study, accept_outside=True)
    if len(results.ok) < 3:
        raise DoeError(f"{path}: only {len(results.ok)} cheap runs worked; the cheap model needs at least 3 "
                       "(see the message column)")
    return summary, results


def cheap_study(study):
    """The study with its ``[low_fidelity]`` model as the evaluator (to build or check that evaluator)."""
    return study.with_evaluator(_settings(study).evaluator)


def _settings(study):
    if study.low_fidelity is None:
        raise DoeError(f"{study.path or 'the study'}: no [low_fidelity] table: a two-fidelity fit needs a cheap "
                       "model (kind = \"builtin\" or \"command\")")
    return study.low_fidelity


def wants_two_fidelity(study, fidelity: str | None = None) -> bool:
    """Whether a fit of this study uses two fidelities (``fidelity`` overrides ``[fit] fidelity``)."""
    choice = fidelity or study.fit.fidelity
    if choice not in ("auto", "single", "two"):
        raise DoeError(f"fidelity {choice!r} is not one of auto, single, two")
    if choice == "two":
        _settings(study)
    return choice == "two" or (choice == "auto" and study.low_fidelity is not None)


def study_surrogates(study, results, seed: int = 0, fidelity: str | None = None, cheap_path=None,
                     jobs: int = 1, progress: bool = True, say=None):
    """Fit a study's surrogates, running its cheap model first when the fit uses two fidelities.

    Parameters
    ----------
    study : Study
    results : ResultsTable
        The study's (expensive) runs.
    seed : int
    fidelity : {"auto", "single", "two"}, optional
        Overrides ``[fit] fidelity``.
    cheap_path : str or Path, optional
        The cheap runs' results file; default :func:`default_cheap_path` of
        the results file in the study's output folder (``reports/<study name>/``).
    jobs : int
        Local workers for the cheap runs.
    progress : bool
    say : callable, optional
        Receives one line about the cheap runs.

    Returns
    -------
    SurrogateSet
    """
    if not wants_two_fidelity(study, fidelity):
        return fit_surrogates(study, results, seed=seed, fidelity="single")
    if cheap_path is None:
        if results.path is None:
            raise DoeError("give a file for the cheap runs (the results have no path to put it beside)")
        cheap_path = default_cheap_path(results.path, study.default_output)
    ok = results.ok
    summary, cheap = run_cheap(study, ok[["run_id", *study.space.names]], cheap_path, jobs=jobs, progress=progress)
    if say is not None:
        say(f"cheap model ({study.low_fidelity.evaluator.kind}): {summary.line(cheap_path)}")
    return fit_surrogates(study, results, seed=seed, low_results=cheap, fidelity="two")


#: Leave-one-out q2 of the cheap runs' own fit below which more cheap runs are proposed ...
CHEAP_Q2 = 0.995
#: ... at least this many per parameter (or half as many again as there are).
CHEAP_EXTRA_PER_PARAMETER = 10


def nested_runs(study, sset, proposal, seed=0):
    """The cheap runs to go with proposed expensive runs, and the savings estimate.

    Parameters
    ----------
    study : Study
        With a ``[low_fidelity]`` table.
    sset : SurrogateSet
        Two-fidelity surrogates.
    proposal : Proposal
        From :func:`doe.design.adaptive.propose_runs`.
    seed : int

    Returns
    -------
    cheap : DataFrame
        ``run_id`` and parameter columns: one cheap run at every proposed
        expensive run (``at_<expensive run id>``) and, when the cheap runs'
        own fit is below :data:`CHEAP_Q2`, more cheap runs spread by greedy
        maximin where they are sparsest (``cx<n>_<k>``).
    savings : dict
        :func:`expected_savings`, plus ``cheap_fit``: a statement on the
        cheap level's own accuracy.
    """
    cheap = cheap_plan(study, proposal.frame, spread=0)
    savings = expected_savings(sset, seed)
    two = {n: m for n, m in sset.models.items() if getattr(m, "fidelity", "single") == "two"}
    worst = min((m.low_.loo_.q2, n) for n, m in two.items())
    text = f"the cheap runs' own fit reaches q2 {worst[0]:.3f} ({worst[1]})"
    if worst[0] < CHEAP_Q2:           # the cheap map limits the two-fidelity one: spread more cheap runs
        low = two[worst[1]].low_
        done = pd.DataFrame(sset.space.from_unit(low.X_unit_), columns=sset.space.names)
        done.insert(0, "run_id", [f"r{i + 1}" for i in range(len(done))])
        k = max(CHEAP_EXTRA_PER_PARAMETER * sset.space.dim, len(done) // 2)
        extra = augment_plan(sset.space, done, k, seed).frame.iloc[len(done):].copy()
        extra["run_id"] = [f"cx{len(done)}_{i + 1:04d}" for i in range(len(extra))]
        cheap = pd.concat([cheap, extra], ignore_index=True)
        text += (f", below {CHEAP_Q2:g}: {k} more cheap runs spread where the cheap runs are sparsest are in the "
                 "cheap plan (or raise [low_fidelity] runs)")
    else:
        text += "; enough"
    savings["cheap_fit"] = text
    return cheap, savings
