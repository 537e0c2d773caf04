"""Validation helpers shared by every module: what counts as a whole number and as a number.

``True`` and ``False`` are ints in Python but never a count or a value here;
numpy's integer and float scalars count like Python's.

Examples
--------
>>> is_whole(3), is_whole(True), is_whole(3.0)
(True, False, False)
>>> is_number(2.5), is_number(False), is_number("2")
(True, False, False)
"""
from __future__ import annotations

import math
import numbers

from .errors import DoeError

__all__ = ["is_whole", "is_number", "check_limit_bounds"]


def is_whole(value) -> bool:
    """Whether ``value`` is a whole number (an int or numpy integer, not a bool)."""
    return isinstance(value, numbers.Integral) and not isinstance(value, bool)


def is_number(value) -> bool:
    """Whether ``value`` is a real number (int, float or a numpy scalar of either, not a bool)."""
    return isinstance(value, numbers.Real) and not isinstance(value, bool)


def check_limit_bounds(where: str, name: str, low, high) -> None:
    """Check a limit's ``min``/``max``: finite numbers, at least one given, ``min < max``.

    Parameters
    ----------
    where : str
        What the limit belongs to, for the message (e.g. ``"robust"``, ``"vehicle"``).
    name : str
        The limited response or figure.
    low, high : float or None
        The bounds, in the limited quantity's unit.

    Raises
    ------
    DoeError
        One line naming the limit and what is wrong.
    """
    for bound in (low, high):
        if bound is not None and not (isinstance(bound, (int, float)) and math.isfinite(bound)):
            raise DoeError(f"{where}: the limit on '{name}' must be finite numbers, got {bound!r}")
    if low is None and high is None:
        raise DoeError(f"{where}: the limit on '{name}' needs 'min', 'max' or both")
    if low is not None and high is not None and not low < high:
        raise DoeError(f"{where}: the limit on '{name}' has min {low:g} >= max {high:g}")
