"""The ``recorded`` evaluator: runs looked up in results measured elsewhere.

For results from CFD, a tunnel or a track, kept in a results CSV (see
:mod:`doe.runs.results`). A planned run is answered by the recorded row with the same
``run_id`` whose parameters match, or else by the row at the same point; a run
with no recorded answer is a failed run that says so, so the engineer knows
which cases are still to be run.

Study keys::

    [evaluator]
    kind = "recorded"
    file = "cfd_results.csv"     # relative to the study file
    match = "point"              # "point" (default) or "run_id"
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..results import read_results
from .base import Evaluator, Outcome, failed

__all__ = ["RecordedSettings", "RecordedEvaluator"]

#: Relative tolerance (of each parameter's range) for matching a point to a recorded row.
MATCH_RTOL = 1e-6


@dataclass(frozen=True)
class RecordedSettings:
    """Checked ``[evaluator]`` options of the ``recorded`` kind."""

    file: str
    match: str = "point"

    @classmethod
    def read(cls, study) -> "RecordedSettings":
        t = study.evaluator.table()
        file = t.take("file", str)
        match = t.take("match", str, default="point", choices=("point", "run_id"))
        t.finish()
        return cls(file, match)


class RecordedEvaluator(Evaluator):
    """Answer runs from a table of recorded results.

    Parameters
    ----------
    table : ResultsTable
        Recorded results (failed rows are kept and answered as failed).
    match : {"point", "run_id"}
    space : Space
    """

    kind = "recorded"

    def __init__(self, table, match, space):
        super().__init__(table.responses)
        self.table = table
        self.match = match
        self.space = space
        frame = table.frame
        self._ids = {rid: i for i, rid in enumerate(frame["run_id"])}
        self._U = space.to_unit(frame[space.names].to_numpy(dtype=float))

    @classmethod
    def from_study(cls, study) -> "RecordedEvaluator":
        settings = RecordedSettings.read(study)
        table = read_results(study.resolve(settings.file), study)
        return cls(table, settings.match, study.space)

    def _row(self, run_id, point):
        u = self.space.to_unit([[point[n] for n in self.space.names]])[0]
        i = self._ids.get(run_id)
        if i is not None and (self.match == "run_id" or np.allclose(self._U[i], u, atol=MATCH_RTOL, rtol=0)):
            return i
        if self.match == "point":
            hits = np.flatnonzero(np.all(np.abs(self._U - u) <= MATCH_RTOL, axis=1))
            if len(hits):
                return int(hits[0])
        return None

    def evaluate(self, run_id: str, point: dict) -> Outcome:
        i = self._row(run_id, point)
        if i is None:
            return failed(self.responses, f"no recorded result for run '{run_id}' at this point "
                          f"in {self.table.path}", self.kind)
        row = self.table.frame.iloc[i]
        source = str(row.get("source", "recorded")) or "recorded"
        values = {r: float(row[r]) for r in self.responses}
        if row["status"] != "ok":
            return Outcome(values, "failed", str(row.get("message", "recorded as failed")) or "recorded as failed",
                           source)
        return Outcome(values, "ok", "", source)
