"""Plans and results on disk: careful readers and the append-safe results store.

Plan CSV
    ``run_id`` then one column per parameter, in the study's units; a choice
    knob's column holds level names, a stepped knob's column one of its values.
Results CSV
    ``run_id``, the parameter columns, one column per response (in its unit),
    then ``status`` (``ok`` or ``failed``), ``source`` (``builtin``, ``command``,
    ``cfd``, ``tunnel``, ``track``, ...), ``message`` (why a run failed) and
    ``elapsed_s`` (wall time of the run, s). Only ``run_id``, the parameters and
    the responses are required in a file recorded elsewhere; extra columns are
    kept and ignored.
Extras file
    ``<results CSV>.extra.jsonl`` beside it: one JSON object a line, ``run_id``
    and the plain values a run reported besides its responses (a command's
    ``result.json`` extras: iterations, convergence flags, spreads). Written by
    the store when a run has any; :func:`read_results` adds them as extra
    columns (the last line of a run wins; a torn line is skipped).

Readers accept UTF-8 with or without a byte-order mark, Windows line endings,
and semicolon-separated files with decimal commas. Any problem is a
:class:`~doe.errors.ResultsError` naming the file, the line and the column.
"""
from __future__ import annotations

import csv
import fcntl
import io
import json
import math
import os
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import ResultsError, StoreLockedError, one_line_name, where
from .outcome import Outcome, safe_run_id

__all__ = ["read_plan", "read_points", "read_results", "write_plan", "write_json", "ResultsTable", "ResultsStore",
           "STATUS_VALUES", "META_COLUMNS", "extras_path"]

STATUS_VALUES = ("ok", "failed")
#: Columns the store writes after the responses.
META_COLUMNS = ("status", "source", "message", "elapsed_s")
#: Largest file a reader accepts, in bytes.
MAX_FILE_BYTES = 512 * 1024 * 1024
#: Longest accepted line, in characters.
MAX_LINE_CHARS = 100_000
#: Suffix of the file beside a results CSV that keeps the runs' extras.
EXTRAS_SUFFIX = ".extra.jsonl"
#: A recorded value of a stepped knob counts as on its step when it is within this share of the knob's range.
STEP_RTOL = 1e-6


# ---------------------------------------------------------------------------
# low-level CSV reading with line numbers
@dataclass
class _Rows:
    path: Path
    header: list
    rows: list        # list of (line number, list of cells)
    decimal_comma: bool


def _read_rows(path: Path) -> _Rows:
    try:
        size = path.stat().st_size
    except OSError as exc:
        raise ResultsError(f"{path}: cannot read ({exc.strerror or exc})") from exc
    if size > MAX_FILE_BYTES:
        raise ResultsError(f"{path}: the file is {size / 2**20:.0f} MiB; the limit is {MAX_FILE_BYTES / 2**20:.0f} MiB")
    raw = path.read_bytes()
    encoding = "utf-16" if raw[:2] in (b"\xff\xfe", b"\xfe\xff") else "utf-8-sig"
    try:
        text = raw.decode(encoding)
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise ResultsError(f"{where(path, line)}: not UTF-8 text (save the file as UTF-8 CSV)") from None
    if "\x00" in text:
        raise ResultsError(f"{where(path, text[: text.index(chr(0))].count(chr(10)) + 1)}: holds NUL bytes; "
                           "is it a text CSV file?")
    lines = text.splitlines()
    if not lines or not lines[0].strip():
        raise ResultsError(f"{path}: empty file, or the first line (the header) is blank")
    for i, s in enumerate(lines):
        if len(s) > MAX_LINE_CHARS:
            raise ResultsError(f"{where(path, i + 1)}: line is {len(s)} characters long (limit {MAX_LINE_CHARS})")
    head = lines[0]
    delimiter = ";" if head.count(";") > head.count(",") else ","
    if delimiter == "," and head.count("\t") > 0 and head.count(",") == 0:
        delimiter = "\t"
    reader = csv.reader(io.StringIO("\n".join(lines)), delimiter=delimiter, strict=True)
    rows = []
    try:
        header = [h.strip() for h in next(reader)]
        for cells in reader:
            line = reader.line_num
            if not cells or all(not c.strip() for c in cells):
                continue
            rows.append((line, [c.strip() for c in cells]))
    except csv.Error as exc:
        raise ResultsError(f"{where(path, reader.line_num)}: not valid CSV ({exc})") from exc
    seen = set()
    for h in header:
        if not h:
            raise ResultsError(f"{where(path, 1)}: a header cell is empty")
        if h in seen:
            raise ResultsError(f"{where(path, 1, column=h)}: the header names this column twice")
        seen.add(h)
    for line, cells in rows:
        if len(cells) != len(header):
            raise ResultsError(f"{where(path, line)}: {len(cells)} cells, but the header has {len(header)}")
    return _Rows(path, header, rows, delimiter == ";")


def _number(text: str, rows: _Rows, line: int, column: str, allow_empty: bool) -> float:
    if text == "":
        if allow_empty:
            return math.nan
        raise ResultsError(f"{where(rows.path, line, column=column)}: empty cell; a number is needed")
    t = text.replace(",", ".") if rows.decimal_comma else text
    try:
        value = float(t)
    except ValueError:
        raise ResultsError(f"{where(rows.path, line, column=column)}: {text[:40]!r} is not a number") from None
    if math.isinf(value) or (math.isnan(value) and not allow_empty):
        raise ResultsError(f"{where(rows.path, line, column=column)}: {text!r} is not a finite number")
    return value


def _setting(text: str, p, rows: _Rows, line: int) -> float:
    """One parameter cell: a level name of a choice knob (its index is returned), or a number (a step when stepped)."""
    if p.levels:
        if text not in p.levels:
            shown = ", ".join(p.levels[:8]) + (" ..." if len(p.levels) > 8 else "")
            raise ResultsError(f"{where(rows.path, line, column=p.name)}: {text[:40]!r} is not a level of "
                               f"{p.name} (levels: {shown})")
        return float(p.levels.index(text))
    value = _number(text, rows, line, p.name, allow_empty=False)
    if p.values and p.low <= value <= p.high:
        step = float(p.snap(value))
        if abs(value - step) > STEP_RTOL * p.span:
            shown = ", ".join(f"{v:g}" for v in p.values[:8]) + (" ..." if len(p.values) > 8 else "")
            raise ResultsError(f"{where(rows.path, line, column=p.name)}: {text!r} {p.unit} is not a step of "
                               f"{p.name} ({shown})")
        return step
    return value


def _settings(rows: _Rows, space) -> np.ndarray:
    """The parameter columns as numbers (study units; choice knobs as level indices), checked cell by cell."""
    idx = [rows.header.index(n) for n in space.names]
    X = np.empty((len(rows.rows), len(idx)))
    for i, (line, cells) in enumerate(rows.rows):
        for j, (k, p) in enumerate(zip(idx, space.parameters)):
            X[i, j] = _setting(cells[k], p, rows, line)
    return X


def _parameter_frame(space, X: np.ndarray, columns=None, data=None) -> pd.DataFrame:
    """A frame of parameter values (and any extra ``data`` columns) with level names in the choice columns."""
    frame = pd.DataFrame(X if data is None else np.column_stack([X, data]), columns=columns or space.names)
    for p in space.choices:
        frame[p.name] = [p.levels[int(i)] for i in X[:, space.names.index(p.name)]]
    return frame


def _require_columns(rows: _Rows, columns, what: str) -> None:
    missing = [c for c in columns if c not in rows.header]
    if missing:
        shown = ", ".join(one_line_name(h) for h in rows.header[:12])
        raise ResultsError(f"{rows.path}: missing {what} column '{missing[0]}' "
                           f"(the header has: {shown}{' ...' if len(rows.header) > 12 else ''})")


def _run_ids(rows: _Rows) -> list:
    col = rows.header.index("run_id")
    ids, seen = [], {}
    for line, cells in rows.rows:
        rid = cells[col]
        if not safe_run_id(rid):
            raise ResultsError(f"{where(rows.path, line, column='run_id')}: {rid[:40]!r} is not a valid run id "
                               "(letters, digits, '_', '-', '.', at most 64, no '..')")
        if rid in seen:
            raise ResultsError(f"{where(rows.path, line, column='run_id')}: run id '{rid}' repeats line {seen[rid]}")
        seen[rid] = line
        ids.append(rid)
    return ids


def _check_bounds(space, X: np.ndarray, rows: _Rows, accept_outside: bool) -> np.ndarray:
    inside = space.in_bounds(X) if len(X) else np.zeros(0, dtype=bool)
    if not inside.all():
        i = int(np.flatnonzero(~inside)[0])
        line = rows.rows[i][0]
        bad = [p for j, p in enumerate(space.parameters) if not (p.low <= X[i, j] <= p.high)
               and not space.in_bounds(X[i:i + 1])[0]]
        p = bad[0] if bad else space.parameters[0]
        msg = (f"{where(rows.path, line, column=p.name)}: {X[i, space.names.index(p.name)]:g} {p.unit} is outside "
               f"[{p.low:g}, {p.high:g}]")
        count = int((~inside).sum())
        if not accept_outside:
            raise ResultsError(msg + f" ({count} row(s) outside; accept them with --accept-outside)")
        warnings.warn(msg + f"; {count} row(s) outside the bounds kept and flagged", stacklevel=3)
    return inside


# ---------------------------------------------------------------------------
def read_plan(path, study) -> pd.DataFrame:
    """Read a plan CSV.

    Parameters
    ----------
    path : str or Path
    study : Study

    Returns
    -------
    DataFrame
        ``run_id`` (str) and one float column per parameter, in the study's units.

    Raises
    ------
    ResultsError
        Missing column, non-numeric or empty cell, repeated run id, a point
        outside the bounds.
    """
    rows = _read_rows(Path(path))
    _require_columns(rows, ["run_id", *study.space.names], "plan")
    ids = _run_ids(rows)
    X = _settings(rows, study.space)
    _check_bounds(study.space, X, rows, accept_outside=False)
    frame = _parameter_frame(study.space, X)
    frame.insert(0, "run_id", ids)
    return frame


def read_points(path, study) -> pd.DataFrame:
    """Read points to predict at: the parameter columns, ``run_id`` optional.

    Points outside the bounds are kept with a warning (the surrogate then
    extrapolates). Returns a DataFrame with ``run_id`` (when given) and one
    float column per parameter, study units.
    """
    rows = _read_rows(Path(path))
    _require_columns(rows, study.space.names, "parameter")
    X = _settings(rows, study.space)
    _check_bounds(study.space, X, rows, accept_outside=True)
    frame = _parameter_frame(study.space, X)
    if "run_id" in rows.header:
        frame.insert(0, "run_id", _run_ids(rows))
    return frame


def _matrix(rows: _Rows, columns, allow_empty: bool) -> np.ndarray:
    idx = [rows.header.index(c) for c in columns]
    X = np.empty((len(rows.rows), len(idx)))
    for i, (line, cells) in enumerate(rows.rows):
        for j, (k, c) in enumerate(zip(idx, columns)):
            X[i, j] = _number(cells[k], rows, line, c, allow_empty)
    return X


def write_plan(frame: pd.DataFrame, path, float_format: str = "%.10g") -> None:
    """Write a plan (or any table) as CSV, atomically (write, then rename)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".tmp")
    frame.to_csv(tmp, index=False, float_format=float_format, lineterminator="\n")
    os.replace(tmp, path)


def write_json(data, path) -> None:
    """Write ``data`` as indented JSON, atomically (write, then rename); NaN is refused."""
    import json

    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(data, indent=2, allow_nan=False) + "\n")
    os.replace(tmp, path)


# ---------------------------------------------------------------------------
@dataclass
class ResultsTable:
    """Results of a study, ok and failed runs alike.

    Attributes
    ----------
    frame : DataFrame
        ``run_id``, parameters, responses, ``status``, ``source`` and any extra columns.
    parameters, responses : list of str
    path : Path or None
    levels : dict of str to tuple of str
        Level names of each choice knob; its column holds level names.
    """

    frame: pd.DataFrame
    parameters: list
    responses: list
    path: Path | None = None
    levels: dict = field(default_factory=dict)

    @property
    def ok(self) -> pd.DataFrame:
        """Rows with ``status == "ok"``: the only ones a fit may see."""
        return self.frame[self.frame["status"] == "ok"]

    @property
    def failed(self) -> pd.DataFrame:
        """Rows with ``status == "failed"``."""
        return self.frame[self.frame["status"] == "failed"]

    def X(self) -> np.ndarray:
        """Parameter values of the ok runs, shape ``(n_ok, d)``, study units (choice knobs as level indices)."""
        ok = self.ok[self.parameters].copy()
        for name, levels in self.levels.items():
            ok[name] = [levels.index(v) for v in ok[name]]
        return ok.to_numpy(dtype=float)

    def y(self, response: str) -> np.ndarray:
        """Values of one response over the ok runs, in its unit."""
        return self.ok[response].to_numpy(dtype=float)

    def summary(self) -> str:
        """One line: how many runs, ok and failed."""
        n, f = len(self.frame), len(self.failed)
        return f"{n} runs: {n - f} ok, {f} failed"


def read_results(path, study, accept_outside: bool = False, responses=None) -> ResultsTable:
    """Read a results CSV recorded by ``doe evaluate``, CFD, a tunnel or a track.

    Parameters
    ----------
    path : str or Path
    study : Study
    accept_outside : bool
        Keep rows outside the bounds (with a warning and ``outside = True``)
        instead of stopping.
    responses : list of str, optional
        Responses that must be present; all of the study's by default.

    Returns
    -------
    ResultsTable
        A row with ``status = failed`` or any empty response cell is a failed
        run: kept and reported, never given to a fit.
    """
    path = Path(path)
    rows = _read_rows(path)
    responses = list(responses or study.response_names)
    _require_columns(rows, ["run_id", *study.space.names], "parameter")
    _require_columns(rows, responses, "response")
    ids = _run_ids(rows)
    X = _settings(rows, study.space)
    Y = _matrix(rows, responses, allow_empty=True)
    inside = _check_bounds(study.space, X, rows, accept_outside)
    frame = _parameter_frame(study.space, X, [*study.space.names, *responses], Y)
    frame.insert(0, "run_id", ids)
    status = _status(rows, Y)
    frame["status"] = status
    for extra in rows.header:
        if extra not in frame.columns:
            k = rows.header.index(extra)
            frame[extra] = [cells[k] for _, cells in rows.rows]
    if "source" not in frame.columns:
        frame["source"] = "recorded"
    _add_extras(frame, extras_path(path))
    if not inside.all():
        frame["outside"] = ~inside
    return ResultsTable(frame, study.space.names, responses, path,
                        {p.name: p.levels for p in study.space.choices})


def extras_path(results_path) -> Path:
    """The extras file of a results CSV: ``<name>.extra.jsonl`` beside it."""
    p = Path(results_path)
    return p.with_name(p.name + EXTRAS_SUFFIX)


def _add_extras(frame: pd.DataFrame, path: Path) -> None:
    """Add the runs' extras from ``path`` (if it exists) as columns the frame does not have yet."""
    if not path.exists():
        return
    if path.stat().st_size > MAX_FILE_BYTES:
        raise ResultsError(f"{path}: larger than {MAX_FILE_BYTES // 2**20} MiB; is this the right file?")
    runs = {}
    for line in path.read_text(encoding="utf-8", errors="replace").splitlines():
        try:
            obj = json.loads(line)
        except ValueError:              # a line torn by a kill
            continue
        if isinstance(obj, dict) and isinstance(obj.get("run_id"), str):
            runs[obj["run_id"]] = obj
    keys = dict.fromkeys(k for obj in runs.values() for k in obj if k not in frame.columns)
    for key in keys:
        frame[key] = [runs.get(rid, {}).get(key) for rid in frame["run_id"]]


def _status(rows: _Rows, Y: np.ndarray) -> list:
    given = "status" in rows.header
    k = rows.header.index("status") if given else None
    out = []
    for i, (line, cells) in enumerate(rows.rows):
        s = cells[k].lower() if given else ""
        if given and s not in STATUS_VALUES and s != "":
            raise ResultsError(f"{where(rows.path, line, column='status')}: {cells[k]!r} is not 'ok' or 'failed'")
        if s == "failed" or np.isnan(Y[i]).any():
            out.append("failed")
        else:
            out.append("ok")
    return out


# ---------------------------------------------------------------------------
class ResultsStore:
    """The append-safe results file of ``doe evaluate``.

    Every finished run is appended as one complete line and flushed to disk
    (``fsync``) before the next result is taken, so a killed evaluation loses at
    most the runs still in progress. On opening, a torn last line (a write cut
    by a kill) is cut off; runs already stored are never recomputed. A lock file
    keeps a second process from writing to the same store.

    Parameters
    ----------
    path : str or Path
        The results CSV.
    parameters, responses : list of str
        Column layout (the study's).
    """

    def __init__(self, path, parameters, responses):
        self.path = Path(path)
        self.parameters = list(parameters)
        self.responses = list(responses)
        self.columns = ["run_id", *self.parameters, *self.responses, *META_COLUMNS]
        self._lock = None
        self._fh = None
        self._extras = None

    # -- life cycle ------------------------------------------------------
    def __enter__(self):
        self.open()
        return self

    def __exit__(self, *exc):
        self.close()

    def open(self) -> "ResultsStore":
        """Take the lock, repair a torn last line, write the header if new."""
        self.path.parent.mkdir(parents=True, exist_ok=True)
        lock_path = self.path.with_name(self.path.name + ".lock")
        self._lock = open(lock_path, "a+")
        try:
            fcntl.flock(self._lock, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            self._lock.close()
            self._lock = None
            raise StoreLockedError(f"{self.path}: another 'doe evaluate' is writing to this results file; "
                                   "wait for it to finish or use another --out") from None
        if not self.path.exists() or self.path.stat().st_size == 0:
            tmp = self.path.with_name(self.path.name + ".tmp")
            tmp.write_text(",".join(self.columns) + "\n")
            os.replace(tmp, self.path)
        else:
            self._repair()
        self._fh = open(self.path, "a", newline="", encoding="utf-8")
        return self

    def close(self) -> None:
        """Release the file and the lock."""
        for fh in (self._fh, self._extras):
            if fh is not None:
                fh.close()
        self._fh = self._extras = None
        if self._lock is not None:
            fcntl.flock(self._lock, fcntl.LOCK_UN)
            self._lock.close()
            self._lock = None

    def _repair(self) -> None:
        with open(self.path, "rb+") as fh:
            data = fh.read()
            header = data.split(b"\n", 1)[0].decode("utf-8-sig").strip().split(",")
            if header != self.columns:
                raise ResultsError(f"{self.path}: this results file has other columns than the study "
                                   f"({', '.join(header[:8])} ...); use another --out")
            if not data.endswith(b"\n"):
                cut = data.rfind(b"\n") + 1
                fh.truncate(cut)

    # -- reading ---------------------------------------------------------
    def rows(self) -> pd.DataFrame:
        """Every stored row (the last one wins where a run id repeats)."""
        if not self.path.exists():
            return pd.DataFrame(columns=self.columns)
        frame = pd.read_csv(self.path, dtype={"run_id": str, "status": str, "source": str, "message": str},
                            keep_default_na=False, na_values={c: [""] for c in self.responses})
        return frame.drop_duplicates("run_id", keep="last").reset_index(drop=True)

    def done(self, include_failed: bool = True) -> set:
        """Run ids already stored (ok ones, and failed ones unless asked not to)."""
        frame = self.rows()
        if not include_failed:
            frame = frame[frame["status"] == "ok"]
        return set(frame["run_id"])

    # -- writing ---------------------------------------------------------
    def append(self, run_id: str, point: dict, outcome: Outcome) -> None:
        """Store one finished run: one line, flushed and synced before returning."""
        if self._fh is None:
            raise ResultsError(f"{self.path}: the store is not open")
        if outcome.extra:
            self._append_extras(run_id, outcome.extra)
        cells = [run_id, *(_fmt(point[p]) for p in self.parameters),
                 *(_fmt(outcome.values.get(r, math.nan)) for r in self.responses),
                 outcome.status, outcome.source, outcome.message, f"{outcome.elapsed_s:.3f}"]
        buf = io.StringIO()
        csv.writer(buf, lineterminator="\n").writerow(cells)
        self._fh.write(buf.getvalue())
        self._fh.flush()
        os.fsync(self._fh.fileno())

    def _append_extras(self, run_id: str, extra: dict) -> None:
        if self._extras is None:
            self._extras = open(extras_path(self.path), "a", encoding="utf-8")
        self._extras.write(json.dumps({**extra, "run_id": run_id}) + "\n")
        self._extras.flush()
        os.fsync(self._extras.fileno())

    def drop_failed(self) -> int:
        """Remove failed rows (before rerunning them); atomic rewrite. Returns how many."""
        frame = self.rows()
        keep = frame[frame["status"] != "failed"]
        removed = len(frame) - len(keep)
        if removed:
            was_open = self._fh is not None
            if was_open:
                self._fh.close()
            write_plan(keep[self.columns], self.path, float_format="%.17g")
            if was_open:
                self._fh = open(self.path, "a", newline="", encoding="utf-8")
        return removed


def _fmt(value) -> str:
    if isinstance(value, str):  # a level name of a choice knob
        return value
    value = float(value)
    return "" if math.isnan(value) else repr(value)
