"""The one small protocol every evaluator follows: a point in, responses and a status out."""
from __future__ import annotations

from abc import ABC, abstractmethod

from ..outcome import Outcome, failed, one_line

__all__ = ["Outcome", "Evaluator", "failed", "one_line"]

class Evaluator(ABC):
    """Base of every evaluator.

    An evaluator turns a point (parameter name to value, in the study's units)
    into an :class:`Outcome`. It must be picklable, so that it can be sent to a
    worker process or a cluster, and must not keep state between runs.

    Subclasses set :attr:`kind` and implement :meth:`evaluate`; they may
    override :meth:`evaluate_many` when a batch is cheaper than a loop.
    """

    kind: str = "base"
    #: Runs handed to :meth:`evaluate_many` at once in serial mode. Keep 1 for slow
    #: evaluators (each run is stored as soon as it is done); a fast vectorised
    #: evaluator may raise it.
    batch_size: int = 1

    def __init__(self, responses):
        self.responses = list(responses)

    @abstractmethod
    def evaluate(self, run_id: str, point: dict) -> Outcome:
        """Evaluate one run.

        Parameters
        ----------
        run_id : str
            The run's identifier (safe as a folder name).
        point : dict of str to float
            Parameter values in the study's units.

        Returns
        -------
        Outcome
            Never raises for a failing case: a failure is an outcome.
        """

    def evaluate_many(self, run_ids, points) -> list:
        """Evaluate several runs; by default one after the other."""
        return [self.evaluate(r, p) for r, p in zip(run_ids, points)]

    def close(self) -> None:
        """Release whatever the evaluator holds (nothing by default)."""
