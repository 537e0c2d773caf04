"""What one run gave (:class:`Outcome`), and which run ids are safe as case-folder names."""
from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

__all__ = ["Outcome", "failed", "one_line", "safe_run_id", "RUN_ID_PATTERN", "MESSAGE_LIMIT"]

#: A run id must be usable as one folder name: no separators, no dots-only names.
RUN_ID_PATTERN = re.compile(r"^[A-Za-z0-9_][A-Za-z0-9_.-]{0,63}$")


def safe_run_id(run_id: str) -> bool:
    """Whether ``run_id`` can be a case folder name that stays inside its parent."""
    return bool(RUN_ID_PATTERN.match(run_id)) and run_id not in (".", "..") and ".." not in run_id


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
    extra : dict of str to (float, int, bool or str)
        Further plain values the run reported besides its responses (e.g. a
        solver's iterations or convergence flag); stored beside the results.
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
