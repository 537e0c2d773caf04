"""Shared fixtures: small studies written to a temporary folder."""
from __future__ import annotations

import sys
import textwrap
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

BASE_STUDY = """
[study]
name = "t-study"

[[parameters]]
name = "x1"
unit = "deg"
low = 0.0
high = 10.0
tolerance = 0.2

[[parameters]]
name = "x2"
unit = "mm"
low = 20.0
high = 120.0

[[responses]]
name = "y"
unit = "m^2"
goal = "minimize"

[evaluator]
kind = "command"
argv = ["{python}", "{study_dir}/case.py", "{case_dir}"]
timeout_s = 20

[plan]
runs = 8
seed = 3
"""

CASE_SCRIPT = """
import json, math, os, sys, time
from pathlib import Path
case = Path(sys.argv[1])
p = json.loads((case / "params.json").read_text())
mode = os.environ.get("CASE_MODE", "ok")
if p["run_id"] in os.environ.get("CASE_SLOW", "").split(","):
    time.sleep(float(os.environ.get("CASE_SLEEP", "0.5")))
if mode == "crash" or p["run_id"] in os.environ.get("CASE_CRASH", "").split(","):
    print("solver diverged at iteration 412", file=sys.stderr)
    sys.exit(3)
if p["run_id"] in os.environ.get("CASE_HANG", "").split(","):
    time.sleep(600)
if p["run_id"] in os.environ.get("CASE_BADJSON", "").split(","):
    (case / "result.json").write_text("{not json")
    sys.exit(0)
if p["run_id"] in os.environ.get("CASE_NAN", "").split(","):
    (case / "result.json").write_text('{"y": NaN}')
    sys.exit(0)
with open(os.environ["CASE_COUNTER"], "a") if "CASE_COUNTER" in os.environ else open(os.devnull, "w") as fh:
    fh.write(p["run_id"] + "\\n")
y = math.sin(math.radians(p["x1"]) * 5) + 0.01 * p["x2"]
(case / "result.json").write_text(json.dumps({"y": y}))
"""


RECORDED = 'kind = "recorded"\nfile = "results.csv"'


def study_text(name: str, parameters, responses, evaluator: str = RECORDED, extra: str = "",
               description: str | None = None) -> str:
    """The TOML of a small study, so tests do not each repeat the same tables.

    Parameters
    ----------
    name : str
    parameters : list of tuple
        ``(name, unit, low, high)`` or ``(name, unit, low, high, {key: value})`` for more keys
        (``tolerance``, ``description``).
    responses : list of tuple
        ``(name, unit)`` or ``(name, unit, goal)``.
    evaluator : str
        The body of ``[evaluator]`` (default: recorded results in ``results.csv``).
    extra : str
        More tables, as TOML text.
    """
    def value(v):
        return f'"{v}"' if isinstance(v, str) else repr(v)

    lines = ["[study]", f'name = "{name}"'] + ([f'description = "{description}"'] if description else [])
    for p in parameters:
        lines += ["", "[[parameters]]", f'name = "{p[0]}"', f'unit = "{p[1]}"', f"low = {float(p[2])!r}",
                  f"high = {float(p[3])!r}"] + [f"{k} = {value(v)}" for k, v in (p[4] if len(p) > 4 else {}).items()]
    for r in responses:
        lines += ["", "[[responses]]", f'name = "{r[0]}"', f'unit = "{r[1]}"'] + ([f'goal = "{r[2]}"'] if len(r) > 2 else [])
    lines += ["", "[evaluator]", evaluator.strip()]
    return "\n".join(lines) + "\n" + (textwrap.dedent(extra) if extra else "")


def write_study(folder: Path, text: str = BASE_STUDY, name: str = "study.toml") -> Path:
    """Write a study (and the case script it runs) into ``folder``."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "case.py").write_text(textwrap.dedent(CASE_SCRIPT))
    path = folder / name
    path.write_text(text.replace("{python}", sys.executable.replace("\\", "/")))
    return path


@pytest.fixture
def study_file(tmp_path) -> Path:
    return write_study(tmp_path)
