"""OpenFOAM plumbing of the rear-package case: dictionaries, patch types, tools, logs.

Nothing here needs OpenFOAM to be importable; only :func:`run_tool` starts its programs.
Facts this relies on (measured on Debian's ``openfoam`` package, v1912): the
solvers need ``WM_PROJECT_DIR=/usr/share/openfoam`` and nothing else (Debian's
``etc/bashrc`` is broken, do not source it); ``gmshToFoam`` makes every patch
of type ``patch``; a floating-point exception ends a solver with exit code 136
(128 + SIGFPE) and a stack trace that names ``sigFpe``.
"""
from __future__ import annotations

import os
import re
import signal
import subprocess
import time
from pathlib import Path

__all__ = ["TEMPLATES", "FOAM_DIR", "foam_env", "fill_template", "write_dictionaries", "set_patch_types",
           "PATCH_TYPES", "run_tool", "ToolResult", "check_mesh_report", "solver_failure", "foam_version",
           "CaseFailure"]

TEMPLATES = Path(__file__).resolve().parent / "templates"
FOAM_DIR = "/usr/share/openfoam"
_PLACEHOLDER = re.compile(r"\$\{([A-Za-z_][A-Za-z0-9_]*)\}")

#: OpenFOAM patch type of each gmsh physical group.
PATCH_TYPES = {"front": "empty", "back": "empty", "body": "wall", "wing": "wall", "ground": "wall",
               "inlet": "patch", "outlet": "patch", "top": "patch"}


class CaseFailure(Exception):
    """A run that cannot give forces; its message is the one-line reason reported to the study."""


def foam_env(base: dict | None = None) -> dict:
    """The environment OpenFOAM's programs need (``WM_PROJECT_DIR``, unless already set)."""
    env = dict(os.environ if base is None else base)
    env.setdefault("WM_PROJECT_DIR", FOAM_DIR)
    return env


def fill_template(text: str, values: dict) -> str:
    """Replace every ``${name}`` in ``text``; a name without a value is an error (``$name`` is left alone).

    Raises
    ------
    KeyError
        Naming the first placeholder without a value.
    """
    def one(m):
        key = m.group(1)
        if key not in values:
            raise KeyError(f"template placeholder ${{{key}}} has no value")
        v = values[key]
        return f"{v:.10g}" if isinstance(v, float) else str(v)

    return _PLACEHOLDER.sub(one, text)


def write_dictionaries(case: Path, values: dict, templates: Path = TEMPLATES) -> list:
    """Copy the template tree (``0``, ``constant``, ``system``) into ``case``, placeholders filled.

    Returns
    -------
    list of Path
        The files written.
    """
    written = []
    for src in sorted(templates.rglob("*")):
        if src.is_dir():
            continue
        dst = case / src.relative_to(templates)
        dst.parent.mkdir(parents=True, exist_ok=True)
        dst.write_text(fill_template(src.read_text(), values))
        written.append(dst)
    return written


def set_patch_types(boundary_text: str, types: dict = PATCH_TYPES) -> str:
    """``constant/polyMesh/boundary`` with each named patch given its type.

    ``gmshToFoam`` writes every patch as ``type patch;`` (and a ``physicalType``
    line); empty and wall patches must be declared, and an ``empty`` patch may
    not carry ``inGroups`` of another kind.

    Raises
    ------
    CaseFailure
        When a patch of ``types`` is missing from the file (the mesh lost a wall).
    """
    out = boundary_text
    for name, kind in types.items():
        block = re.compile(r"(\n\s*" + re.escape(name) + r"\s*\n\s*\{)(.*?)(\})", re.S)
        m = block.search(out)
        if m is None:
            if name == "wing" and "wing" not in _patch_names(boundary_text):
                continue                       # a case without a wing
            raise CaseFailure(f"mesh has no patch '{name}' (patches: {', '.join(_patch_names(boundary_text))})")
        body = re.sub(r"\n\s*(physicalType|inGroups)\s+[^;]*;", "", m.group(2))
        body = re.sub(r"type\s+\w+;", f"type            {kind};", body, count=1)
        if kind == "wall":
            body = body.rstrip() + "\n        inGroups        List<word> 1(wall);\n    "
        out = out[:m.start()] + m.group(1) + body + m.group(3) + out[m.end():]
    return out


def _patch_names(text: str) -> list:
    return re.findall(r"\n\s*([A-Za-z_][A-Za-z0-9_]*)\s*\n\s*\{", text)


class ToolResult:
    """How one OpenFOAM program ended: exit code, wall time, whether the time limit stopped it."""

    def __init__(self, code: int, seconds: float, timed_out: bool, log: Path):
        self.code, self.seconds, self.timed_out, self.log = code, seconds, timed_out, log
        self.stopped = False

    def text(self) -> str:
        """The program's log."""
        try:
            return self.log.read_text(errors="replace")
        except OSError:
            return ""


def run_tool(args: list, case: Path, log_name: str, time_limit_s: float, env: dict | None = None,
             poll=None, poll_s: float = 2.0) -> ToolResult:
    """Run one program in ``case`` (never through a shell), its output in ``log.<log_name>``.

    The program runs in its own process group; at the time limit the whole
    group is killed and :attr:`ToolResult.timed_out` is set. ``poll``, when
    given, is called every ``poll_s`` seconds while the program runs; when it
    returns True the program is stopped (SIGTERM, then SIGKILL) and
    :attr:`ToolResult.stopped` is set.
    """
    log = case / f"log.{log_name}"
    start = time.monotonic()
    timed_out = stopped = False
    with open(log, "wb") as fh:
        proc = subprocess.Popen(args, cwd=case, stdout=fh, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL,
                                env=env or foam_env(), start_new_session=True)
        try:
            while True:
                left = time_limit_s - (time.monotonic() - start)
                try:
                    code = proc.wait(timeout=max(0.01, min(poll_s, left)) if poll else max(0.01, left))
                    break
                except subprocess.TimeoutExpired:
                    if time.monotonic() - start >= time_limit_s:
                        timed_out = True
                        code = _stop(proc, hard=True)
                        break
                    if poll is not None and poll():
                        stopped = True
                        code = _stop(proc)
                        break
        except BaseException:
            _stop(proc, hard=True)
            raise
    result = ToolResult(code, time.monotonic() - start, timed_out, log)
    result.stopped = stopped
    return result


def _stop(proc, hard: bool = False) -> int:
    """End a program's process group: SIGTERM (SIGKILL when ``hard`` or after 10 s); its exit code."""
    try:
        os.killpg(proc.pid, signal.SIGKILL if hard else signal.SIGTERM)
        return proc.wait(timeout=10)
    except subprocess.TimeoutExpired:
        os.killpg(proc.pid, signal.SIGKILL)
        return proc.wait()
    except ProcessLookupError:
        return proc.wait()


#: checkMesh complaints that are recorded but do not fail a run: a few skewed faces, as
#: a quad layer's end makes, leave the solution usable; inverted or open cells do not.
_ADVISORY = re.compile(r"skew|non-orthogonal|aspect ratio", re.I)


def check_mesh_report(log_text: str) -> tuple[bool, str, dict]:
    """Read ``checkMesh``'s log: inverted, open or wrongly oriented cells fail; skewness only warns.

    Returns
    -------
    ok : bool
        ``Mesh OK.`` was printed.
    reason : str
        The failed checks (lines starting with ``***``), one line; "" when ok.
    stats : dict
        ``cells``, ``max_non_orthogonality`` (deg), ``max_skewness`` where found;
        ``warnings``: the advisory complaints.
    """
    stats = {}
    m = re.search(r"^\s*cells:\s+(\d+)", log_text, re.M)
    if m:
        stats["cells"] = int(m.group(1))
    m = re.search(r"Mesh non-orthogonality Max:\s*([-\d.eE+]+)", log_text)
    if m:
        stats["max_non_orthogonality"] = float(m.group(1))
    m = re.search(r"Max skewness = ([-\d.eE+]+)", log_text)
    if m:
        stats["max_skewness"] = float(m.group(1))
    failed = [s.strip().lstrip("*").strip() for s in log_text.splitlines() if s.strip().startswith("***")]
    stats["warnings"] = [f for f in failed if _ADVISORY.search(f)]
    fatal = [f for f in failed if not _ADVISORY.search(f)]
    if re.search(r"^\s*Mesh OK\.", log_text, re.M) or (failed and not fatal):
        return True, "", stats
    m = re.search(r"Failed (\d+) mesh checks", log_text)
    head = f"checkMesh failed {m.group(1)} mesh checks" if m else "checkMesh did not report 'Mesh OK.'"
    return False, head + (": " + "; ".join(fatal[:3]) if fatal else ""), stats


def solver_failure(code: int, log_text: str) -> str:
    """Why a solver run that exited with ``code`` failed, in one line ("" when it did not)."""
    last = _last_iteration(log_text)
    at = f" at iteration {last}" if last is not None else ""
    if code in (136, -8) or _FPE_TRACE.search(log_text):
        return f"solver diverged (floating-point exception){at}"
    if code == 0:
        return ""
    m = re.search(r"--> FOAM FATAL (?:IO )?ERROR:?\s*\n?\s*(.+)", log_text)
    why = f": {m.group(1).strip()}" if m else ""
    return f"solver stopped with exit code {code}{at}{why}"


#: The stack trace of a trapped floating-point exception (the header's "trapFpe: ... enabled" is not one).
_FPE_TRACE = re.compile(r"Foam::sigFpe::sigHandler|^\s*Floating point exception", re.M)


def _last_iteration(log_text: str):
    its = re.findall(r"^Time = (\d+)\s*$", log_text, re.M)
    return int(its[-1]) if its else None


def foam_version(log_text: str) -> str:
    """OpenFOAM's version from a log header (the ``Build :`` line, else ``Version:``), "" when absent."""
    m = re.search(r"^Build\s*:\s*(.+?)\s*$", log_text, re.M)
    if m:
        return m.group(1)
    m = re.search(r"Version:\s+([\w.+-]+)", log_text)
    return m.group(1) if m else ""
