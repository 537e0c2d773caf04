"""The ``command`` evaluator: the user's own program, once per run.

Each run gets its own case folder ``<workspace>/<run_id>/``. The run's
parameters are written there as ``params.json`` first; then the program named by
``argv`` is started *directly* (never through a shell) with that folder as its
working directory; it must leave a JSON object with one number per response in
``output``. Its other keys with a plain value (a number, a string, true or
false: e.g. a solver's iterations, cells, convergence flag or the spread of a
force) are kept as the run's extras (:attr:`Outcome.extra`) and stored beside
the results (:class:`~doe.runs.results.ResultsStore`); nested values are left out. A run that exits non-zero, takes longer than ``timeout_s``, writes
no output, malformed JSON or a non-finite number is a failed run whose message
carries the reason and the tail of its log; the study goes on.

Study keys::

    [evaluator]
    kind = "command"
    argv = ["python3", "{study_dir}/my_case.py", "{case_dir}"]  # {case_dir}, {study_dir}, {run_id}, {<parameter>}
    output = "result.json"
    timeout_s = 3600
    env = { OMP_NUM_THREADS = "1" }                  # optional extra environment
"""
from __future__ import annotations

import json
import math
import os
import re
import signal
import subprocess
import time
from dataclasses import dataclass, field
from pathlib import Path

from ...checks import is_number
from ...errors import EvaluatorError
from ..outcome import one_line, safe_run_id
from .base import Evaluator, Outcome, failed

__all__ = ["CommandSettings", "CommandEvaluator"]

_PLACEHOLDER = re.compile(r"\{([A-Za-z_][A-Za-z0-9_]*)\}")
LOG_TAIL_CHARS = 300
#: Most extra keys kept from one output file (the first ones, in file order).
EXTRA_LIMIT = 64


@dataclass(frozen=True)
class CommandSettings:
    """Checked ``[evaluator]`` options of the ``command`` kind."""

    argv: tuple
    output: str = "result.json"
    timeout_s: float = 3600.0
    env: dict = field(default_factory=dict)

    @classmethod
    def read(cls, study) -> "CommandSettings":
        """Read and check the options of ``study``'s ``[evaluator]`` table."""
        t = study.evaluator.table()
        argv = t.take("argv", list)
        if not argv or not all(isinstance(a, str) and a for a in argv):
            raise t.error("argv", "must be a non-empty list of non-empty strings, e.g. [\"python3\", \"case.py\", \"{case_dir}\"]")
        allowed = {"case_dir", "study_dir", "run_id", *study.space.names}
        for arg in argv:
            for name in _PLACEHOLDER.findall(arg):
                if name not in allowed:
                    raise t.error("argv", f"unknown placeholder {{{name}}} (allowed: "
                                  + ", ".join("{" + a + "}" for a in sorted(allowed)) + ")")
        output = t.take("output", str, default="result.json",
                        check=lambda s: bool(s) and not Path(s).is_absolute() and ".." not in Path(s).parts,
                        why="must be a file name inside the case folder")
        timeout = t.take("timeout_s", float, default=3600.0, check=lambda v: v > 0, why="must be > 0 seconds")
        env = t.take("env", dict, default={})
        for k, v in env.items():
            if not isinstance(v, str):
                raise t.error("env", f"value of '{k}' must be a string")
        t.finish()
        return cls(tuple(argv), output, timeout, dict(env))


class CommandEvaluator(Evaluator):
    """Run an external program per case (see the module docstring).

    Parameters
    ----------
    settings : CommandSettings
    responses : list of str
    parameters : list of str
    workspace : Path
        Parent of the case folders.
    study_folder : Path
        Relative program paths in ``argv[0]`` are resolved against it.
    """

    kind = "command"

    def __init__(self, settings: CommandSettings, responses, parameters, workspace, study_folder):
        super().__init__(responses)
        self.settings = settings
        self.parameters = list(parameters)
        self.workspace = Path(workspace)
        self.study_folder = Path(study_folder)

    @classmethod
    def from_study(cls, study, workspace) -> "CommandEvaluator":
        """Build from a study's ``[evaluator]`` table."""
        return cls(CommandSettings.read(study), study.response_names, study.space.names,
                   workspace, study.folder)

    # ------------------------------------------------------------------
    def case_dir(self, run_id: str) -> Path:
        """The case folder of ``run_id``, checked to lie inside the workspace."""
        if not safe_run_id(run_id):
            raise EvaluatorError(f"run id {run_id!r} cannot be used as a case folder name")
        root = self.workspace.resolve()
        path = (root / run_id).resolve()
        if path.parent != root:
            raise EvaluatorError(f"run id {run_id!r} would leave the case folder {root}")
        return path

    def command_line(self, run_id: str, point: dict, case_dir: Path) -> list:
        """The argument vector of one run, placeholders filled in (no shell is involved)."""
        values = {"case_dir": str(case_dir), "study_dir": str(self.study_folder.resolve()), "run_id": run_id}
        values.update({k: v if isinstance(v, str) else repr(float(v)) for k, v in point.items()})  # str: a level
        argv = [_PLACEHOLDER.sub(lambda m: values[m.group(1)], a) for a in self.settings.argv]
        prog = argv[0]
        if os.sep in prog or prog.startswith("."):
            argv[0] = str((self.study_folder / prog).resolve()) if not Path(prog).is_absolute() else prog
        return argv

    def evaluate(self, run_id: str, point: dict) -> Outcome:
        start = time.monotonic()
        try:
            case = self.case_dir(run_id)
        except EvaluatorError as exc:
            return failed(self.responses, str(exc), self.kind)
        case.mkdir(parents=True, exist_ok=True)
        out_path = case / self.settings.output
        if out_path.exists():
            out_path.unlink()  # a stale output from an interrupted attempt must not count
        (case / "params.json").write_text(json.dumps({"run_id": run_id, **point}, indent=2) + "\n")
        argv = self.command_line(run_id, point, case)
        log_path = case / "log.txt"
        env = {**os.environ, **self.settings.env, "DOE_CASE_DIR": str(case), "DOE_RUN_ID": run_id}
        with open(log_path, "wb") as log:
            try:
                proc = subprocess.Popen(argv, cwd=case, stdout=log, stderr=subprocess.STDOUT,
                                        stdin=subprocess.DEVNULL, env=env, start_new_session=True)
            except OSError as exc:
                return failed(self.responses, f"cannot start {argv[0]!r}: {exc.strerror or exc}",
                              self.kind, time.monotonic() - start)
            try:
                code = proc.wait(timeout=self.settings.timeout_s)
            except subprocess.TimeoutExpired:
                _kill_group(proc)
                return failed(self.responses, f"stopped after the time limit of {self.settings.timeout_s:g} s; "
                              f"log: {_tail(log_path)}", self.kind, time.monotonic() - start)
            except BaseException:
                _kill_group(proc)
                raise
        elapsed = time.monotonic() - start
        if code != 0:
            return failed(self.responses, f"exit code {code}; log: {_tail(log_path)}", self.kind, elapsed)
        return self._read_output(out_path, log_path, elapsed)

    def _read_output(self, out_path: Path, log_path: Path, elapsed: float) -> Outcome:
        def fail(why):
            return failed(self.responses, f"{why}; log: {_tail(log_path)}", self.kind, elapsed)

        if not out_path.exists():
            return fail(f"wrote no {out_path.name}")
        try:
            data = json.loads(out_path.read_text(encoding="utf-8-sig"))
        except (UnicodeDecodeError, ValueError) as exc:
            return fail(f"{out_path.name} is not valid JSON ({exc})")
        if not isinstance(data, dict):
            return fail(f"{out_path.name} must hold a JSON object with one number per response")
        values = {}
        for r in self.responses:
            v = data.get(r)
            if v is None:
                return fail(f"{out_path.name} has no value for '{r}'")
            if not is_number(v):
                return fail(f"{out_path.name}: '{r}' is not a number ({v!r})")
            if not math.isfinite(v):
                return fail(f"{out_path.name}: '{r}' is {v}")
            values[r] = float(v)
        return Outcome(values, "ok", "", self.kind, elapsed, extra=plain_extras(data, self.responses))


def plain_extras(data: dict, responses) -> dict:
    """The keys of an output object besides the responses whose values are plain (number, string, bool).

    Strings are folded to one line; non-finite numbers and nested values are
    left out; at most :data:`EXTRA_LIMIT` keys are kept.
    """
    out = {}
    for key, v in data.items():
        if key in responses or not isinstance(key, str) or not key.strip() or len(out) >= EXTRA_LIMIT:
            continue
        if isinstance(v, bool) or (is_number(v) and math.isfinite(v)):
            out[key] = v
        elif isinstance(v, str):
            out[key] = one_line(v)
    return out


def _kill_group(proc: subprocess.Popen) -> None:
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        pass
    proc.wait()


def _tail(path: Path, chars: int = LOG_TAIL_CHARS) -> str:
    try:
        with open(path, "rb") as fh:
            fh.seek(0, os.SEEK_END)
            size = fh.tell()
            fh.seek(max(0, size - chars))
            text = fh.read().decode("utf-8", "replace").strip()
    except OSError:
        return "(no log)"
    return text or "(empty)"
