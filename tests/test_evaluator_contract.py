"""The contract every evaluator meets (built-in model, command, recorded results).

One suite, run over each kind through :func:`doe.make_evaluator`: an ok run
gives a finite number for every response; the same point gives the same
numbers (every kind here is deterministic); a batch equals one run at a time
(to rounding);
the evaluator survives pickling (it goes to worker processes); a run it cannot
do is a failed :class:`~doe.runs.evaluators.Outcome` with a message, never an
exception. To add a kind, add a case to ``CASES``.
"""
from __future__ import annotations

import math
import pickle
from pathlib import Path

import numpy as np
import pytest

import doe
from conftest import write_study

ROOT = Path(__file__).resolve().parents[1]


def _builtin(tmp_path):
    study = doe.load_study(ROOT / "studies" / "demo_hatch.toml")
    bad = {p.name: p.high * 10 + 100 for p in study.space.parameters}    # far outside: a body the model refuses
    return study, bad


def _command(tmp_path):
    study = doe.load_study(write_study(tmp_path))
    return study, "crash"                                                # CASE_CRASH makes the case script fail


def _recorded(tmp_path):
    study = doe.load_study(ROOT / "studies" / "recorded_cfd.toml")
    far = {p.name: 0.5 * (p.low + p.high) + 1e-3 * (p.high - p.low) * math.pi for p in study.space.parameters}
    return study, far                                                    # a point that was never recorded


CASES = {"builtin": _builtin, "command": _command, "recorded": _recorded}


def _points(study, n=3):
    """Recorded points for the recorded kind, the middle and two more inside the bounds otherwise."""
    if study.evaluator.kind == "recorded":
        frame = doe.read_results(study.resolve(_recorded_file(study)), study)
        return [dict(zip(study.space.names, row)) for row in frame.X()[:n]]
    lo = np.array([p.low for p in study.space.parameters])
    hi = np.array([p.high for p in study.space.parameters])
    return [dict(zip(study.space.names, lo + f * (hi - lo))) for f in (0.5, 0.3, 0.7)][:n]


def _recorded_file(study):
    from doe.runs.evaluators.recorded import RecordedSettings

    return RecordedSettings.read(study).file


@pytest.fixture(params=sorted(CASES))
def case(request, tmp_path, monkeypatch):
    study, bad = CASES[request.param](tmp_path)
    if bad == "crash":
        monkeypatch.setenv("CASE_CRASH", "r_bad")
        bad = _points(study, 1)[0]
    ev = doe.make_evaluator(study, workspace=tmp_path / "cases")
    yield study, ev, bad
    ev.close()


def test_ok_runs_give_a_finite_number_per_response(case):
    study, ev, _ = case
    for i, point in enumerate(_points(study)):
        out = ev.evaluate(f"r{i + 1}", point)
        assert out.status == "ok", out.message
        assert set(out.values) >= set(study.response_names)
        assert all(math.isfinite(out.values[r]) for r in study.response_names), out.values


def test_same_point_same_numbers_and_batch_equals_single(case):
    study, ev, _ = case
    points = _points(study)
    ids = [f"r{i + 1}" for i in range(len(points))]
    one = [ev.evaluate(r, p) for r, p in zip(ids, points)]
    again = ev.evaluate_many(ids, points)
    for a, b in zip(one, again):
        assert a.status == b.status == "ok"
        # Deterministic kinds: equal up to the rounding of a vectorised batch (the builtin model
        # solves all points at once; sums in another order differ in the last bits, ~1e-15).
        assert [a.values[r] for r in study.response_names] == pytest.approx(
            [b.values[r] for r in study.response_names], rel=1e-12, abs=1e-15)


def test_survives_pickling(case):
    study, ev, _ = case
    point = _points(study, 1)[0]
    copy = pickle.loads(pickle.dumps(ev))
    assert copy.evaluate("r1", point).values == ev.evaluate("r1", point).values


def test_a_run_it_cannot_do_is_a_failed_outcome(case):
    study, ev, bad = case
    out = ev.evaluate("r_bad", bad)
    assert out.status == "failed" and out.message
    assert all(math.isnan(out.values[r]) for r in study.response_names)
