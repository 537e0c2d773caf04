"""The one small protocol every evaluator follows: a point in, responses and a status out."""
from __future__ import annotations

import math
from abc import ABC, abstractmethod
from dataclasses import dataclass, field

__all__ = ["Outcome", "Evaluator", "failed"]

#: Longest failure message kept in a results file, in characters.
MESSAGE_LIMIT = 400


@dataclass
class Outcome:
    """What one run gave.

    Attributes
    ----------
    values : dict of str to float
        One value per response, in the response's unit; NaN where there is none.
    status : {"ok", "failed"}
    message : str
        Why a run failed (with the tail of its log), or a note; one line.
    source : str
        Where the numbers come from (``builtin``, ``command``, ``cfd``, ``tunnel``, ...).
    elapsed_s : float
        Wall time of the run, in seconds.
    """

    values: dict
    status: str = "ok"
    message: str = ""
    source: str = ""
    elapsed_s: float = 0.0
    extra: dict = field(default_factory=dict)

    def __post_init__(self):
        self.message = one_line(self.message)


def one_line(text: str, limit: int = MESSAGE_LIMIT) -> str:
    """Fold ``text`` to one line of at most ``limit`` characters (keeping its end)."""
    text = " | ".join(s.strip() for s in str(text).splitlines() if s.strip())
    if len(text) > limit:
        text = "..." + text[-(limit - 3):]
    return text


def failed(responses, message: str, source: str = "", elapsed_s: float = 0.0) -> Outcome:
    """An :class:`Outcome` with status ``failed`` and NaN for every response."""
    return Outcome({r: math.nan for r in responses}, "failed", message, source, elapsed_s)


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
