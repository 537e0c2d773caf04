"""Checked reading of TOML tables: every key known, every value of the right type.

A :class:`Table` wraps one table of a study file. Callers ask for each key they
understand with :meth:`Table.take`; :meth:`Table.finish` then rejects whatever is
left, so a misspelt key is an error, never silently ignored. Messages name the
file, the line and the key.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from pathlib import Path

from ..checks import is_number, is_whole
from ..errors import StudyError, where

__all__ = ["Source", "Table", "REQUIRED", "NAME_PATTERN"]

#: Names of parameters and responses: letters, digits and underscores, not starting with a digit.
NAME_PATTERN = re.compile(r"^[A-Za-z_][A-Za-z0-9_]{0,63}$")


class _Required:
    def __repr__(self):
        return "REQUIRED"


REQUIRED = _Required()

_TYPE_WORDS = {float: "a number", int: "a whole number", str: "a string", bool: "true or false",
               list: "a list", dict: "a table"}


@dataclass
class Source:
    """The text of a study file, kept to point messages at the right line."""

    path: Path | None
    text: str = ""
    _lines: list = field(default_factory=list, repr=False)

    def __post_init__(self):
        self._lines = self.text.splitlines()

    def line_of(self, table: str | None, key: str | None = None, index: int | None = None) -> int | None:
        """Best-effort 1-based line of ``key`` in ``[table]`` (or the ``index``-th ``[[table]]``)."""
        start = 0
        if table:
            header = re.compile(r"^\s*\[\[?\s*" + re.escape(table) + r"\s*\]\]?\s*(#.*)?$")
            hits = [i for i, s in enumerate(self._lines) if header.match(s)]
            if hits:
                start = hits[min(index or 0, len(hits) - 1)]
            elif key is None:
                return None
        if key is None:
            return start + 1 if table else None
        pat = re.compile(r"^\s*[\"']?" + re.escape(key) + r"[\"']?\s*=")
        for i in range(start + (1 if table else 0), len(self._lines)):
            s = self._lines[i]
            if table and i > start and re.match(r"^\s*\[", s):
                break
            if pat.match(s):
                return i + 1
        return start + 1 if table else None


class Table:
    """One TOML table whose keys are taken one by one and checked.

    Parameters
    ----------
    data : dict
        The parsed table.
    source : Source
        File text, for line numbers in messages.
    name : str
        Table name as written in the file (``"plan"``, ``"parameters"``).
    index : int, optional
        Position in an array of tables (``[[parameters]]``), 0-based.
    """

    def __init__(self, data, source: Source, name: str, index: int | None = None):
        if not isinstance(data, dict):
            raise StudyError(f"{where(source.path, source.line_of(name))}: [{name}] must be a table")
        self.data = dict(data)
        self.source = source
        self.name = name
        self.index = index
        self._taken: set[str] = set()

    @property
    def label(self) -> str:
        """``[plan]`` or ``[[parameters]] #2``, as shown in messages."""
        if self.index is None:
            return f"[{self.name}]"
        return f"[[{self.name}]] #{self.index + 1}"

    def error(self, key: str | None, problem: str) -> StudyError:
        """A :class:`StudyError` located at ``key`` of this table."""
        line = self.source.line_of(self.name, key, self.index)
        what = self.label + (f" {key}" if key else "")
        return StudyError(f"{where(self.source.path, line, what)}: {problem}")

    def has(self, key: str) -> bool:
        """Whether the table sets ``key``."""
        return key in self.data

    def take(self, key: str, kind=float, default=REQUIRED, choices=None, check=None, why: str = ""):
        """Return the value of ``key``, checked.

        Parameters
        ----------
        key : str
        kind : type
            ``float``, ``int``, ``str``, ``bool``, ``list`` or ``dict``. Integers are
            accepted where a float is asked; booleans never pass as numbers.
        default : object
            Value when the key is absent; :data:`REQUIRED` makes it mandatory.
        choices : iterable, optional
            Allowed values.
        check : callable, optional
            ``check(value) -> bool``; on False the error says ``why``.
        why : str
            What ``check`` demands, e.g. ``"must be > 0"``.
        """
        self._taken.add(key)
        if key not in self.data:
            if default is REQUIRED:
                raise self.error(None, f"missing key '{key}' ({_TYPE_WORDS.get(kind, kind)})")
            return default
        value = self.data[key]
        value = self._convert(key, value, kind)
        if choices is not None and value not in choices:
            opts = ", ".join(repr(c) for c in choices)
            raise self.error(key, f"{value!r} is not one of {opts}")
        if check is not None and not check(value):
            raise self.error(key, f"{value!r} {why or 'is not allowed'}")
        return value

    def _convert(self, key, value, kind):
        if kind is float:
            if not is_number(value):
                raise self.error(key, f"must be a number, got {_show(value)}")
            value = float(value)
            if not math.isfinite(value):
                raise self.error(key, f"must be a finite number, got {value}")
            return value
        if kind is int:
            if not is_whole(value):
                raise self.error(key, f"must be a whole number, got {_show(value)}")
            return value
        if kind is bool:
            if not isinstance(value, bool):
                raise self.error(key, f"must be true or false, got {_show(value)}")
            return value
        if kind in (str, list, dict):
            if not isinstance(value, kind):
                raise self.error(key, f"must be {_TYPE_WORDS[kind]}, got {_show(value)}")
            return value
        raise TypeError(f"unsupported kind {kind!r}")

    def take_name(self, key: str = "name") -> str:
        """A required column-safe name (letters, digits, underscores)."""
        value = self.take(key, str)
        if not NAME_PATTERN.match(value):
            raise self.error(key, f"{value!r} must be letters, digits and underscores, starting with a letter (at most 64)")
        return value

    def sub(self, key: str) -> "Table | None":
        """The nested table ``key`` as a :class:`Table`, or None when absent."""
        self._taken.add(key)
        if key not in self.data:
            return None
        value = self.data[key]
        if not isinstance(value, dict):
            raise self.error(key, f"must be a table, got {_show(value)}")
        return Table(value, self.source, f"{self.name}.{key}", self.index)

    def rest(self) -> dict:
        """Keys not taken yet, as a plain dict (they are then considered taken)."""
        out = {k: v for k, v in self.data.items() if k not in self._taken}
        self._taken.update(out)
        return out

    def finish(self) -> None:
        """Raise on any key that no caller took."""
        unknown = [k for k in self.data if k not in self._taken]
        if unknown:
            known = ", ".join(sorted(self._taken)) or "none"
            raise self.error(unknown[0], f"unknown key '{unknown[0]}' (known keys here: {known})")


def _show(value) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."
