"""The seed rule: one ``seed`` argument, normalised once, children drawn from it.

Every random choice in ``doe`` takes a ``seed``: an int (the same int gives
the same result), ``None`` (fresh entropy) or a :class:`numpy.random.Generator`
(used as it is). :func:`make_rng` normalises it, :func:`child_seeds` derives
independent integer seeds for parts of a job (one per response, per restart,
...) from the :class:`numpy.random.SeedSequence` of an int seed, and
:func:`seed_value` is what a saved file records. No global random state is
touched anywhere.
"""
from __future__ import annotations

import numpy as np

from .checks import is_whole

__all__ = ["make_rng", "child_seeds", "seed_value"]

#: Child seeds are drawn below this bound (an int64 seed that any library accepts).
SEED_BOUND = 2**63 - 1


def make_rng(seed=None) -> np.random.Generator:
    """A generator from an int, None or a Generator (returned as it is).

    Examples
    --------
    >>> int(make_rng(3).integers(100)) == int(make_rng(3).integers(100))
    True
    """
    if isinstance(seed, np.random.Generator):
        return seed
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence(seed)))


def child_seeds(seed, n: int) -> list:
    """``n`` integer seeds for the parts of a job, drawn from ``seed``'s SeedSequence stream.

    For an int seed the stream is that of ``numpy.random.default_rng(seed)``
    (the same SeedSequence and bit generator), so results are reproducible
    and equal to those of the plain form.

    Examples
    --------
    >>> child_seeds(0, 2) == child_seeds(0, 2)
    True
    """
    return [int(s) for s in make_rng(seed).integers(SEED_BOUND, size=int(n))]


def seed_value(seed) -> int | None:
    """What a saved file records of ``seed``: the int, or None when it was None or a Generator.

    Examples
    --------
    >>> seed_value(7), seed_value(np.random.default_rng(7)), seed_value(None)
    (7, None, None)
    """
    if is_whole(seed):
        return int(seed)
    return None
