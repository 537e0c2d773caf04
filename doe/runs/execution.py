"""Running a plan through an evaluator into the results store.

Runs go out through one small executor interface (:mod:`doe.runs.executors`: this
process, local processes, or a Dask cluster), and each result is stored by this
process as soon as it comes back, so a killed or interrupted evaluation keeps
every finished run and resumes where it stopped. At most a few tasks per worker
are in flight at once, so a plan of any size streams through.

What happens to a run that goes wrong
-------------------------------------
* The evaluator reports a failure (crash, time limit, bad output): stored as
  ``failed`` with the reason; the study goes on.
* The evaluator itself raises (a bug): stored as ``failed`` with the error.
* The worker process dies: the runs it held are tried again one at a time on a
  fresh worker; a run that kills its worker again is stored as ``failed``.
* Ctrl-C: nothing more is started, running cases are stopped, finished runs
  stay stored, and a line says how to resume.
"""
from __future__ import annotations

import signal
import sys
import threading
from contextlib import contextmanager
from dataclasses import dataclass

import numpy as np
from tqdm import tqdm

from ..errors import DoeError, ResultsError
from .evaluators.base import failed
from .executors import LocalProcesses, WorkerDied, make_executor
from .results import ResultsStore

__all__ = ["EvaluationSummary", "Interrupted", "evaluate_plan", "TASKS_PER_WORKER"]

#: Tasks kept in flight per worker: enough to keep workers busy, few enough to stream.
TASKS_PER_WORKER = 2


class _CtrlC:
    """Whether Ctrl-C was pressed while runs were evaluated (see :func:`_watch_ctrl_c`)."""

    pressed = False

    def handler(self, signum, frame):
        self.pressed = True
        raise KeyboardInterrupt


@contextmanager
def _watch_ctrl_c():
    """Note every Ctrl-C (SIGINT) while the block runs, besides raising KeyboardInterrupt as Python does.

    Python raises KeyboardInterrupt wherever the main thread happens to be;
    when that is a finaliser run by the garbage collector, the exception is
    printed as ignored and the evaluation would go on. The note lets the loop
    stop at the next stored run all the same. Outside the main thread, or when
    the caller installed its own handler, nothing is changed.
    """
    seen = _CtrlC()
    if threading.current_thread() is not threading.main_thread() or \
            signal.getsignal(signal.SIGINT) is not signal.default_int_handler:
        yield seen
        return
    signal.signal(signal.SIGINT, seen.handler)
    try:
        yield seen
    finally:
        signal.signal(signal.SIGINT, signal.default_int_handler)


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
    ran: int = 0
    failed: int = 0

    def line(self, path) -> str:
        return (f"{self.planned} planned runs: {self.already_done} already in {path}, {self.ran} evaluated now"
                f" ({self.failed} failed)")


def _check_same_points(plan, store: ResultsStore, parameters) -> None:
    stored = store.rows()
    if stored.empty:
        return
    merged = plan.merge(stored[["run_id", *parameters]], on="run_id", suffixes=("", "_stored"))
    for p in parameters:
        try:
            a, b = merged[p].to_numpy(float), merged[f"{p}_stored"].to_numpy(float)
            bad = ~np.isclose(a, b, rtol=1e-9, atol=1e-12)
        except ValueError:                  # a choice knob: level names, compared as they are written
            a, b = merged[p].astype(str).to_numpy(), merged[f"{p}_stored"].astype(str).to_numpy()
            bad = a != b
        if bad.any():
            rid = merged["run_id"].iloc[int(np.flatnonzero(bad)[0])]
            raise ResultsError(f"{store.path}: run '{rid}' is stored with {p} = {_shown(b[bad][0])} but the plan "
                               f"has {_shown(a[bad][0])}; this results file belongs to another plan (use another --out)")


def _shown(value) -> str:
    return f"{value:g}" if isinstance(value, (float, np.floating)) else str(value)


def evaluate_plan(plan, evaluator, store_path, parameters, jobs: int = 1, retry_failed: bool = False,
                  progress: bool = True, scheduler: str | None = None, executor=None) -> EvaluationSummary:
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
    scheduler : str, optional
        Address of a Dask scheduler (``tcp://host:8786``) or ``"local"``.
    executor : Executor, optional
        An executor to use instead of the one ``jobs``/``scheduler`` name (it is
        not closed here).

    Returns
    -------
    EvaluationSummary

    Raises
    ------
    Interrupted
        On Ctrl-C, after the finished runs are stored.
    """
    with ResultsStore(store_path, parameters, evaluator.responses) as store, _watch_ctrl_c() as ctrl_c:
        _check_same_points(plan, store, parameters)
        if retry_failed:
            store.drop_failed()
        done = store.done()
        todo = plan[~plan["run_id"].isin(done)]
        summary = EvaluationSummary(len(plan), len(plan) - len(todo))
        ids = list(todo["run_id"])
        points = todo[parameters].to_dict("records")
        if not ids:
            return summary
        bar = tqdm(total=len(ids), desc="evaluating", unit="run", disable=not progress,
                   file=sys.stderr, dynamic_ncols=True)

        def keep(rid, point, outcome):
            store.append(rid, point, outcome)
            summary.ran += 1
            summary.failed += outcome.status != "ok"
            bar.update(1)
            bar.set_postfix(failed=summary.failed, refresh=False)
            if ctrl_c.pressed:  # a Ctrl-C whose KeyboardInterrupt was swallowed somewhere: stop here
                raise KeyboardInterrupt

        own = executor is None
        try:
            if own:
                executor = make_executor(jobs, scheduler)
            if executor is None:
                _run_here(evaluator, ids, points, keep)
            else:
                _run_on(executor, evaluator, ids, points, keep)
        except KeyboardInterrupt:
            bar.close()
            if own and executor is not None:
                executor.close(cancel=True)
                own = False
            raise Interrupted(f"stopped by the user: {summary.already_done + summary.ran} of {summary.planned} runs "
                              f"are stored in {store.path}; run the same command again to resume") from None
        finally:
            bar.close()
            if own and executor is not None:
                executor.close()
    return summary


def _chunks(evaluator, ids, points):
    step = max(1, int(getattr(evaluator, "batch_size", 1)))
    for s in range(0, len(ids), step):
        yield ids[s:s + step], points[s:s + step]


def _run_here(evaluator, ids, points, keep) -> None:
    for chunk_ids, chunk_pts in _chunks(evaluator, ids, points):
        for rid, pt, out in zip(chunk_ids, chunk_pts, evaluator.evaluate_many(chunk_ids, chunk_pts)):
            keep(rid, pt, out)


def _run_on(executor, evaluator, ids, points, keep) -> None:
    window = max(1, executor.workers * TASKS_PER_WORKER)
    queue = list(_chunks(evaluator, ids, points))[::-1]  # pop() from the end keeps plan order
    in_flight = {}
    suspects = []  # runs that were on a worker that died
    while queue or in_flight:
        while queue and len(in_flight) < window:
            chunk = queue.pop()
            in_flight[executor.submit(evaluator, *chunk)] = chunk
        died = False
        for handle, result in executor.wait_any(list(in_flight)):
            chunk_ids, chunk_pts = in_flight.pop(handle)
            if isinstance(result, WorkerDied) and isinstance(executor, LocalProcesses):
                suspects += zip(chunk_ids, chunk_pts)
                died = True
            elif isinstance(result, BaseException):
                for rid, pt in zip(chunk_ids, chunk_pts):
                    keep(rid, pt, _error_outcome(evaluator, result))
            else:
                for rid, pt, out in zip(chunk_ids, chunk_pts, result):
                    keep(rid, pt, out)
        if died:  # only a death in this wait breaks the pool; earlier suspects wait for the end
            # A dead worker breaks the whole local pool: the other runs in flight were lost too.
            for chunk_ids, chunk_pts in in_flight.values():
                suspects += zip(chunk_ids, chunk_pts)
            in_flight.clear()
            executor.restart()
    _run_suspects(evaluator, suspects, keep)


def _run_suspects(evaluator, suspects, keep) -> None:
    """Retry, one at a time on a single fresh worker, the runs whose worker died.

    The runs go through one worker process in turn, so a run that kills its worker
    again is known for certain; only then is the worker replaced (starting a
    process costs about a second of imports, which a run that lives need not pay).
    """
    solo = None
    try:
        for rid, pt in suspects:
            if solo is None:
                solo = LocalProcesses(1)
            handle = solo.submit(evaluator, [rid], [pt])
            (_, result), = solo.wait_any([handle])
            if isinstance(result, WorkerDied):
                solo.close(cancel=True)
                solo = None
            if isinstance(result, BaseException):
                keep(rid, pt, _error_outcome(evaluator, result, retried=True))
            else:
                keep(rid, pt, result[0])
    finally:
        if solo is not None:
            solo.close(cancel=True)


def _error_outcome(evaluator, exc: BaseException, retried: bool = False):
    """A failed outcome for a run whose task raised or whose worker died."""
    if isinstance(exc, WorkerDied):
        why = f"{exc}" + ("; it was tried again on a fresh worker and died again" if retried else "")
    else:
        why = f"the evaluator raised {type(exc).__name__}: {exc}"
    return failed(evaluator.responses, why, evaluator.kind)
