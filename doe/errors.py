"""Exception types of `doe`.

Every error that bad input can cause is one of these. The command line prints
``str(error)`` as a single line and exits with code 2; a Python caller can catch
:class:`DoeError` to handle all of them at once.

Messages say *where* (file, line, key or column), *what* is wrong and, where it
helps, how to fix it.
"""
from __future__ import annotations

__all__ = [
    "DoeError",
    "StudyError",
    "PlanError",
    "ResultsError",
    "EvaluatorError",
    "SurrogateError",
    "NotFittedError",
    "StoreLockedError",
    "one_line_name",
    "SensitivityError",
    "AeroError",
    "CalibrationError",
    "where",
]


class DoeError(Exception):
    """Base class of every error caused by the user's input or data."""


class StudyError(DoeError):
    """The study file is unreadable or breaks a rule (unknown key, bad bound, ...)."""


class PlanError(DoeError):
    """A plan cannot be made or read as asked (too few runs, infeasible constraints, ...)."""


class ResultsError(DoeError):
    """A plan or results table is malformed (missing column, non-numeric cell, ...)."""


class EvaluatorError(DoeError):
    """An evaluator is misconfigured (unknown option, missing program, ...)."""


class SurrogateError(DoeError):
    """A surrogate cannot be fitted, loaded or used as asked."""


class NotFittedError(SurrogateError):
    """A surrogate or estimator was used before ``fit`` was called."""


class StoreLockedError(DoeError):
    """Another process is writing to the same results store."""


class SensitivityError(DoeError):
    """A sensitivity analysis cannot be run as asked (bad distribution, failed runs, ...)."""


class AeroError(DoeError):
    """The built-in aerodynamic model cannot be set up as asked (bad section file, clashing geometry, ...)."""


class CalibrationError(DoeError):
    """A calibration cannot be run or read as asked (unknown coefficient, too few runs, bad file, ...)."""


def where(path, line=None, key=None, column=None) -> str:
    """Format a location prefix such as ``study.toml:12: [plan] runs``.

    Parameters
    ----------
    path : str or os.PathLike or None
        File the problem is in.
    line : int, optional
        1-based line number.
    key : str, optional
        Dotted key or table name in a study file.
    column : str, optional
        Column name in a CSV file.

    Returns
    -------
    str
        The prefix, ending without a colon; join it to the message with ``": "``.
    """
    parts = [str(path) if path is not None else "<input>"]
    if line is not None:
        parts[0] += f":{line}"
    if key is not None:
        parts.append(one_line_name(key))
    if column is not None:
        parts.append(f"column '{one_line_name(column)}'")
    return ": ".join(parts)


def one_line_name(name) -> str:
    """A name read from a file as it can be shown in a one-line message (line breaks written as ``\\n``)."""
    return str(name).replace("\r", "\\r").replace("\n", "\\n")
