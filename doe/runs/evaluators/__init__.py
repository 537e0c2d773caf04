"""Evaluators: who turns a planned run into numbers.

========== ============================================================
kind       what it does
========== ============================================================
builtin    the low-order aerodynamic model of :mod:`doe.aero`
command    the user's own program, once per run, in its own case folder
recorded   looks runs up in a CSV of results from CFD, tunnel or track
========== ============================================================

All follow :class:`~doe.runs.evaluators.base.Evaluator`. Use :func:`make_evaluator`.
"""
from __future__ import annotations

from pathlib import Path

from ...errors import EvaluatorError
from .base import Evaluator, Outcome, failed
from .builtin import BuiltinEvaluator, check_builtin_settings
from .command import CommandEvaluator, CommandSettings
from .recorded import RecordedEvaluator, RecordedSettings

__all__ = ["Evaluator", "Outcome", "failed", "make_evaluator", "check_settings"]


def make_evaluator(study, workspace: str | Path | None = None) -> Evaluator:
    """Build the evaluator a study asks for.

    Parameters
    ----------
    study : Study
    workspace : str or Path, optional
        Folder for per-run case folders (the ``command`` kind); defaults to
        ``<study output>/cases``.

    Raises
    ------
    StudyError, EvaluatorError
        When the ``[evaluator]`` options are wrong.
    """
    kind = study.evaluator.kind
    workspace = Path(workspace) if workspace is not None else study.default_output / "cases"
    if kind == "command":
        return CommandEvaluator.from_study(study, workspace)
    if kind == "recorded":
        return RecordedEvaluator.from_study(study)
    if kind == "builtin":
        return BuiltinEvaluator.from_study(study)
    raise EvaluatorError(f"unknown evaluator kind '{kind}'")


def check_settings(study) -> None:
    """Validate the ``[evaluator]`` options without running anything.

    Options are read the same way :func:`make_evaluator` reads them, so a
    misspelt key is caught when the study is loaded.
    """
    kind = study.evaluator.kind
    if kind == "command":
        CommandSettings.read(study)
    elif kind == "recorded":
        RecordedSettings.read(study)
    elif kind == "builtin":
        check_builtin_settings(study)
