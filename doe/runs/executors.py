"""Where evaluations run: one small interface over local processes and a Dask cluster.

An executor takes *tasks* (a chunk of runs for one evaluator) and gives back
their outcomes as each finishes, in whatever order. Two kinds:

``LocalProcesses(jobs)``
    ``concurrent.futures.ProcessPoolExecutor`` with ``jobs`` workers.
``DaskCluster(address)``
    A ``dask.distributed`` cluster: an existing scheduler at ``address``
    (``tcp://host:8786``), which reaches SLURM, PBS and other batch systems
    through the Dask job-queue companions (start the cluster there, give its
    address here), or ``"local"`` for a cluster of local processes. Needs the
    optional extra ``pip install 'doe[cluster]'``.

The caller (:mod:`doe.runs.execution`) keeps at most a few tasks per worker in
flight, so a plan of any size streams through without piling up in memory.
"""
from __future__ import annotations

import multiprocessing
from abc import ABC, abstractmethod
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool

from ..errors import DoeError

__all__ = ["Executor", "LocalProcesses", "DaskCluster", "WorkerDied", "make_executor", "run_task"]


class WorkerDied(Exception):
    """The worker process running a task died (crash, out of memory, killed)."""


def run_task(evaluator, run_ids, points):
    """What a worker does: evaluate a chunk of runs (module level, so it pickles)."""
    return evaluator.evaluate_many(run_ids, points)


class Executor(ABC):
    """Runs tasks somewhere and reports them as they finish."""

    #: Workers available (used to size the window of tasks in flight).
    workers: int = 1

    @abstractmethod
    def submit(self, evaluator, run_ids, points):
        """Start one task; returns a handle for :meth:`wait_any`."""

    @abstractmethod
    def wait_any(self, handles) -> list:
        """Block until at least one task is done; return ``[(handle, outcomes or exception)]``.

        A task whose worker died yields a :class:`WorkerDied` instance instead of outcomes.
        """

    @abstractmethod
    def close(self, cancel: bool = False) -> None:
        """Stop the workers (cancelling queued tasks when ``cancel``)."""

    def restart(self) -> None:
        """Make the executor usable again after a worker died (default: nothing to do)."""


class LocalProcesses(Executor):
    """A pool of local worker processes.

    Parameters
    ----------
    jobs : int
        Worker processes (at least 1).
    """

    def __init__(self, jobs: int):
        if jobs < 1:
            raise DoeError(f"--jobs must be at least 1, got {jobs}")
        self.workers = jobs
        self._pool = self._new_pool()

    def _new_pool(self) -> ProcessPoolExecutor:
        # "spawn": workers start clean and inherit no open files, in particular not the
        # results store's lock, which an orphaned forked worker would otherwise keep.
        return ProcessPoolExecutor(max_workers=self.workers, mp_context=multiprocessing.get_context("spawn"))

    def submit(self, evaluator, run_ids, points):
        try:
            return self._pool.submit(run_task, evaluator, run_ids, points)
        except BrokenProcessPool as exc:  # broke since the last wait: the task joins the suspects
            fut = Future()
            fut.set_exception(exc)
            return fut

    def wait_any(self, handles) -> list:
        done, _ = wait(handles, return_when=FIRST_COMPLETED)
        out = []
        for fut in done:
            try:
                out.append((fut, fut.result()))
            except BrokenProcessPool:
                out.append((fut, WorkerDied("the worker process died while running this case")))
            except Exception as exc:  # an evaluator bug: reported per run, the study goes on
                out.append((fut, exc))
        return out

    def restart(self) -> None:
        self._pool.shutdown(wait=False, cancel_futures=True)
        self._pool = self._new_pool()

    def close(self, cancel: bool = False) -> None:
        self._pool.shutdown(wait=not cancel, cancel_futures=cancel)


class DaskCluster(Executor):
    """Tasks on a ``dask.distributed`` cluster.

    Parameters
    ----------
    address : str
        Scheduler address (``tcp://host:8786``), or ``"local"`` to start a local
        cluster of ``workers`` processes on the loopback interface.
    workers : int
        Workers of a local cluster (ignored for an existing scheduler, whose
        size is read from it).
    """

    def __init__(self, address: str, workers: int = 2):
        try:
            from distributed import Client, LocalCluster
        except ImportError as exc:
            raise DoeError("running on a Dask cluster needs the optional extra: pip install 'doe[cluster]'") from exc
        self._cluster = None
        try:
            if address == "local":
                self._cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                             host="127.0.0.1", dashboard_address=None)
                self._client = Client(self._cluster)
            else:
                self._client = Client(address, timeout=30)
        except OSError as exc:
            raise DoeError(f"cannot reach the Dask scheduler at {address!r} ({exc})") from exc
        self.workers = max(1, len(self._client.scheduler_info().get("workers", {})) or workers)

    @property
    def client(self):
        """The ``distributed.Client`` in use."""
        return self._client

    def submit(self, evaluator, run_ids, points):
        # pure=False: two identical-looking tasks are still two runs.
        return self._client.submit(run_task, evaluator, run_ids, points, pure=False)

    def wait_any(self, handles) -> list:
        from distributed import wait as dwait

        done = dwait(list(handles), return_when="FIRST_COMPLETED").done
        out = []
        for fut in done:
            try:
                out.append((fut, fut.result()))
            except Exception as exc:
                name = type(exc).__name__
                out.append((fut, WorkerDied(f"the Dask worker running this case was lost ({name})")
                            if name == "KilledWorker" else exc))
        return out

    def close(self, cancel: bool = False) -> None:
        self._client.close()
        if self._cluster is not None:
            self._cluster.close()


def make_executor(jobs: int = 1, scheduler: str | None = None) -> Executor | None:
    """The executor for ``--jobs`` / ``--scheduler``; None means run in this process."""
    if scheduler:
        return DaskCluster(scheduler, workers=max(jobs, 2) if scheduler == "local" else jobs)
    if jobs > 1:
        return LocalProcesses(jobs)
    if jobs < 1:
        raise DoeError(f"--jobs must be at least 1, got {jobs}")
    return None
