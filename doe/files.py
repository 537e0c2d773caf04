"""Writing files safely: every file ``doe`` writes goes through :func:`write_atomic`.

A file is written under a temporary name beside its final place and then
renamed over it (``os.replace``, atomic on one file system), so an
interrupted run leaves either the old file or the new one, never half of one.
JSON is written without NaN (:func:`json_number` turns NaN and infinity into
``null``).
"""
from __future__ import annotations

import json
import math
import os
from pathlib import Path

__all__ = ["write_atomic", "write_text", "write_json", "json_number"]


def write_atomic(path, write) -> Path:
    """Call ``write(tmp_path)`` for a temporary sibling of ``path``, then rename it to ``path``.

    Parameters
    ----------
    path : str or Path
        The final file; its folder is created when missing.
    write : callable
        ``write(tmp: Path) -> None`` writes the whole content to ``tmp``.

    Returns
    -------
    Path
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".tmp")
    write(tmp)
    os.replace(tmp, path)
    return path


def write_text(path, text: str) -> Path:
    """Write ``text`` and a final newline to ``path``, atomically."""
    return write_atomic(path, lambda tmp: tmp.write_text(text + "\n"))


def write_json(data, path, indent: int = 2) -> Path:
    """Write ``data`` as indented JSON, atomically; NaN is refused (use :func:`json_number`)."""
    return write_text(path, json.dumps(data, indent=indent, allow_nan=False))


def json_number(x) -> float | None:
    """A float for JSON, or None for NaN and infinity.

    Examples
    --------
    >>> json_number(0.5), json_number(float("nan")), json_number(float("inf"))
    (0.5, None, None)
    """
    x = float(x)
    return x if math.isfinite(x) else None
