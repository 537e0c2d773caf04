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

import numbers

__all__ = ["is_whole", "is_number"]


def is_whole(value) -> bool:
    """Whether ``value`` is a whole number (an int or numpy integer, not a bool)."""
    return isinstance(value, numbers.Integral) and not isinstance(value, bool)


def is_number(value) -> bool:
    """Whether ``value`` is a real number (int, float or a numpy scalar of either, not a bool)."""
    return isinstance(value, numbers.Real) and not isinstance(value, bool)
