"""Bad study, plan and results files: each ends with exit code 2 and one line naming the place."""
from __future__ import annotations

import pytest

from doe.cli import main

from conftest import BASE_STUDY, write_study

# (what is wrong, text replaced, replacement, words the message must contain)
BAD_STUDIES = [
    ("unknown key", 'tolerance = 0.2', 'tolerance = 0.2\ntolerence = 1', ["tolerence", "unknown key", "study.toml:11:"]),
    ("unknown table", '[plan]', '[plane]', ["plane", "unknown"]),
    ("low >= high", 'low = 20.0', 'low = 200.0', ["high", "greater than low"]),
    ("negative tolerance", 'tolerance = 0.2', 'tolerance = -0.2', ["tolerance", ">= 0"]),
    ("unknown goal", 'goal = "minimize"', 'goal = "smallest"', ["goal", "smallest"]),
    ("bad type", 'low = 0.0', 'low = "zero"', ["low", "must be a number"]),
    ("boolean as number", 'high = 10.0', 'high = true', ["high", "must be a number"]),
    ("missing unit", 'unit = "mm"\n', '', ["missing key 'unit'"]),
    ("empty unit", 'unit = "mm"', 'unit = " "', ["unit", "empty"]),
    ("duplicate parameter", 'name = "x2"', 'name = "x1"', ["x1", "used twice"]),
    ("reserved name", 'name = "y"', 'name = "status"', ["status", "reserved"]),
    ("bad name", 'name = "x2"', 'name = "x 2"', ["letters, digits"]),
    ("parameter is response", 'name = "y"', 'name = "x1"', ["both a parameter and a response"]),
    ("runs too small", 'runs = 8', 'runs = 1', ["runs", "at least 2"]),
    ("unknown evaluator", 'kind = "command"', 'kind = "oracle"', ["kind", "oracle"]),
    ("unknown placeholder", '"{case_dir}"]', '"{case_folder}"]', ["placeholder", "case_folder"]),
    ("not TOML", '[plan]', '[plan', ["not valid TOML"]),
    ("tolerance wider than range", 'tolerance = 0.2', 'tolerance = 50.0', ["tolerance", "wider"]),
    ("constraint on unknown parameter", '[[responses]]',
     '[[constraints]]\nname = "c"\nterms = { x9 = 1.0 }\nmax = 3.0\n\n[[responses]]', ["x9", "not a parameter"]),
    ("constraint without bound", '[[responses]]',
     '[[constraints]]\nname = "c"\nterms = { x1 = 1.0 }\n\n[[responses]]', ["max", "min"]),
    ("unsafe study name", 'name = "t-study"', 'name = "../outside"', ["folder name"]),
    ("timeout not positive", 'timeout_s = 20', 'timeout_s = 0', ["timeout_s", "> 0"]),
    # choice and stepped knobs
    ("choice with one level", 'low = 0.0\nhigh = 10.0\ntolerance = 0.2', 'levels = ["on"]', ["levels", "at least two"]),
    ("choice level twice", 'low = 0.0\nhigh = 10.0\ntolerance = 0.2', 'levels = ["on", "on"]', ["'on'", "twice"]),
    ("choice level not a name", 'low = 0.0\nhigh = 10.0\ntolerance = 0.2', 'levels = ["on", "o,ff"]',
     ["study.toml:8:", "levels", "'o,ff'"]),
    ("choice level not text", 'low = 0.0\nhigh = 10.0\ntolerance = 0.2', 'levels = ["on", 2]', ["levels", "2"]),
    ("choice with a range", 'low = 0.0\nhigh = 10.0\ntolerance = 0.2', 'low = 0.0\nlevels = ["a", "b"]',
     ["low", "only levels"]),
    ("choice with tolerance", 'low = 0.0\nhigh = 10.0\ntolerance = 0.2', 'tolerance = 0.2\nlevels = ["a", "b"]',
     ["tolerance", "not scattered"]),
    ("step not dividing range", 'tolerance = 0.2', 'tolerance = 0.2\nstep = 3.0', ["study.toml:11:", "step",
                                                                                 "whole number of steps"]),
    ("step not positive", 'tolerance = 0.2', 'tolerance = 0.2\nstep = 0.0', ["step", "> 0"]),
    ("values and range", 'tolerance = 0.2', 'tolerance = 0.2\nvalues = [0, 5, 10]', ["low", "not both"]),
    ("values too few", 'low = 0.0\nhigh = 10.0', 'values = [5]', ["values", "at least two"]),
    ("values repeat", 'low = 0.0\nhigh = 10.0', 'values = [0, 5, 5]', ["values", "twice"]),
    ("values not numbers", 'low = 0.0\nhigh = 10.0', 'values = [0, "5"]', ["values", "finite numbers"]),
    ("stepped tolerance too wide", 'low = 0.0\nhigh = 10.0\ntolerance = 0.2', 'values = [0, 2]\ntolerance = 3.0',
     ["tolerance", "wider"]),
]


def _run(argv, capsys):
    code = main(argv)
    err = capsys.readouterr().err.strip().splitlines()
    return code, err


@pytest.mark.parametrize("what,old,new,words", BAD_STUDIES, ids=[b[0] for b in BAD_STUDIES])
def test_bad_study_one_line_exit_2(tmp_path, capsys, what, old, new, words):
    assert old in BASE_STUDY, what
    path = write_study(tmp_path, BASE_STUDY.replace(old, new, 1))
    code, err = _run(["plan", str(path), "--out", str(tmp_path / "p.csv")], capsys)
    assert code == 2
    assert len(err) == 1, err
    assert "study.toml" in err[0]
    for w in words:
        assert w in err[0], (w, err[0])
    assert not (tmp_path / "p.csv").exists()


BAD_PLANS = [
    ("missing column", "run_id,x1\nr1,1\n", ["missing", "x2"]),
    ("non-numeric", "run_id,x1,x2\nr1,1,abc\n", [":2", "x2", "not a number"]),
    ("empty cell", "run_id,x1,x2\nr1,,30\n", [":2", "x1", "empty"]),
    ("duplicate run id", "run_id,x1,x2\nr1,1,30\nr1,2,40\n", [":3", "repeats"]),
    ("outside bounds", "run_id,x1,x2\nr1,1,30\nr2,11,40\n", [":3", "x1", "outside"]),
    ("escaping run id", "run_id,x1,x2\n../../etc,1,30\n", ["run id"]),
    ("ragged row", "run_id,x1,x2\nr1,1\n", [":2", "cells"]),
    ("duplicated header", "run_id,x1,x1,x2\nr1,1,1,30\n", ["twice"]),
    ("infinite value", "run_id,x1,x2\nr1,inf,30\n", ["finite"]),
    ("empty file", "", ["empty"]),
]


@pytest.mark.parametrize("what,text,words", BAD_PLANS, ids=[b[0] for b in BAD_PLANS])
def test_bad_plan_one_line_exit_2(study_file, tmp_path, capsys, what, text, words):
    plan = tmp_path / "plan.csv"
    plan.write_text(text)
    code, err = _run(["evaluate", str(study_file), "--plan", str(plan), "--out", str(tmp_path / "r.csv"),
                      "--no-progress"], capsys)
    assert code == 2
    assert len(err) == 1, err
    assert "plan.csv" in err[0]
    for w in words:
        assert w in err[0], (w, err[0])


def test_missing_study_file(tmp_path, capsys):
    code, err = _run(["plan", str(tmp_path / "nope.toml")], capsys)
    assert code == 2 and len(err) == 1 and "nope.toml" in err[0]


def test_usage_error_is_one_line(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["plan"])
    assert exc.value.code == 2
    assert len(capsys.readouterr().err.strip().splitlines()) == 1
