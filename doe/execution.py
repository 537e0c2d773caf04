"""Running a plan through an evaluator into the results store.

Runs go out through one small executor interface (serial, local processes, or
later a cluster), and each result is stored by this process as soon as it
comes back, so a killed or interrupted evaluation keeps every finished run and
resumes where it stopped.
"""
from __future__ import annotations

import sys
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass

import numpy as np
from tqdm import tqdm

from .errors import DoeError, ResultsError
from .results import ResultsStore

__all__ = ["EvaluationSummary", "Interrupted", "evaluate_plan"]

class Interrupted(DoeError):
    """Evaluation stopped by the user (Ctrl-C); finished runs are on disk."""


@dataclass
class EvaluationSummary:
    """What one call of :func:`evaluate_plan` did.

    Attributes
    ----------
    planned : int
        Runs in the plan.
    already_done : int
        Runs found in the store and not recomputed.
    ran : int
        Runs evaluated now.
    failed : int
        Runs of this call that failed.
    """

    planned: int
    already_done: int
    ran: int
    failed: int

    def line(self, path) -> str:
        return (f"{self.planned} planned runs: {self.already_done} already in {path}, {self.ran} evaluated now"
                f" ({self.failed} failed)")


def _check_same_points(plan, store: ResultsStore, parameters) -> None:
    stored = store.rows()
    if stored.empty:
        return
    merged = plan.merge(stored[["run_id", *parameters]], on="run_id", suffixes=("", "_stored"))
    for p in parameters:
        a, b = merged[p].to_numpy(float), merged[f"{p}_stored"].to_numpy(float)
        bad = ~np.isclose(a, b, rtol=1e-9, atol=1e-12)
        if bad.any():
            rid = merged["run_id"].iloc[int(np.flatnonzero(bad)[0])]
            raise ResultsError(f"{store.path}: run '{rid}' is stored with {p} = {b[bad][0]:g} but the plan has "
                               f"{a[bad][0]:g}; this results file belongs to another plan (use another --out)")


def _evaluate_chunk(evaluator, run_ids, points):
    return evaluator.evaluate_many(run_ids, points)


def evaluate_plan(plan, evaluator, store_path, parameters, jobs: int = 1, retry_failed: bool = False,
                  progress: bool = True) -> EvaluationSummary:
    """Evaluate every run of ``plan`` not already in the results store.

    Parameters
    ----------
    plan : DataFrame
        ``run_id`` and parameter columns (study units).
    evaluator : Evaluator
    store_path : str or Path
        The results CSV (created when missing, appended to otherwise).
    parameters : list of str
    jobs : int
        1: in this process; more: that many local worker processes.
    retry_failed : bool
        Rerun the runs stored as failed (their old rows are removed first).
    progress : bool
        Show a progress bar on standard error.

    Returns
    -------
    EvaluationSummary

    Raises
    ------
    Interrupted
        On Ctrl-C, after the finished runs are stored.
    """
    if jobs < 1:
        raise DoeError(f"--jobs must be at least 1, got {jobs}")
    with ResultsStore(store_path, parameters, evaluator.responses) as store:
        _check_same_points(plan, store, parameters)
        if retry_failed:
            store.drop_failed()
        done = store.done()
        todo = plan[~plan["run_id"].isin(done)]
        summary = EvaluationSummary(len(plan), len(plan) - len(todo), 0, 0)
        ids = list(todo["run_id"])
        points = todo[parameters].to_dict("records")
        bar = tqdm(total=len(ids), desc="evaluating", unit="run", disable=not progress or not ids,
                   file=sys.stderr, dynamic_ncols=True)

        def keep(rid, point, outcome):
            store.append(rid, point, outcome)
            summary.ran += 1
            summary.failed += outcome.status != "ok"
            bar.update(1)
            bar.set_postfix(failed=summary.failed, refresh=False)

        try:
            if jobs == 1:
                step = max(1, int(getattr(evaluator, "batch_size", 1)))
                for s in range(0, len(ids), step):
                    chunk_ids, chunk_pts = ids[s:s + step], points[s:s + step]
                    for rid, pt, out in zip(chunk_ids, chunk_pts, evaluator.evaluate_many(chunk_ids, chunk_pts)):
                        keep(rid, pt, out)
            else:
                _run_pool(evaluator, ids, points, jobs, keep)
        except KeyboardInterrupt:
            bar.close()
            raise Interrupted(f"stopped by the user: {summary.already_done + summary.ran} of {summary.planned} runs "
                              f"are stored in {store.path}; run the same command again to resume") from None
        finally:
            bar.close()
    return summary


def _run_pool(evaluator, ids, points, jobs, keep) -> None:
    pool = ProcessPoolExecutor(max_workers=jobs)
    try:
        futures = {pool.submit(_evaluate_chunk, evaluator, [rid], [pt]): (rid, pt) for rid, pt in zip(ids, points)}
        for fut in as_completed(futures):
            rid, pt = futures[fut]
            keep(rid, pt, fut.result()[0])
    except BaseException:
        pool.shutdown(wait=False, cancel_futures=True)
        raise
    pool.shutdown(wait=True)
