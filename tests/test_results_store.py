"""Reading recorded results and the append-safe store."""
from __future__ import annotations

import math

import numpy as np
import pytest

from doe.errors import ResultsError, StoreLockedError
from doe.runs.evaluators.base import Outcome
from doe.runs.results import ResultsStore, read_results
from doe.study.reader import load_study


@pytest.fixture
def study(study_file):
    return load_study(study_file)


def test_reads_bom_crlf_and_semicolon_decimal_comma(study, tmp_path):
    p = tmp_path / "r.csv"
    p.write_bytes("\ufeffrun_id;x1;x2;y;source\r\nr1;1,5;30;0,25;cfd\r\nr2;2;40;;cfd\r\n".encode("utf-8"))
    table = read_results(p, study)
    assert list(table.frame["run_id"]) == ["r1", "r2"]
    assert table.frame["x1"].iloc[0] == 1.5 and table.frame["y"].iloc[0] == 0.25
    # An empty response is a failed run: kept, reported, never in X()/y().
    assert list(table.frame["status"]) == ["ok", "failed"]
    assert table.X().shape == (1, 2) and table.y("y").tolist() == [0.25]
    assert "1 failed" in table.summary()


def test_status_column_and_extra_columns_kept(study, tmp_path):
    p = tmp_path / "r.csv"
    p.write_text("run_id,x1,x2,y,status,mesh\nr1,1,30,0.1,ok,fine\nr2,2,40,0.2,failed,coarse\n")
    table = read_results(p, study)
    assert list(table.frame["status"]) == ["ok", "failed"]
    assert list(table.frame["mesh"]) == ["fine", "coarse"]


def test_outside_bounds_error_or_flag(study, tmp_path):
    p = tmp_path / "r.csv"
    p.write_text("run_id,x1,x2,y\nr1,1,30,0.1\nr2,12,40,0.2\n")
    with pytest.raises(ResultsError, match=r"r\.csv:3: column 'x1': 12 deg is outside \[0, 10\]"):
        read_results(p, study)
    with pytest.warns(UserWarning, match="outside"):
        table = read_results(p, study, accept_outside=True)
    assert list(table.frame["outside"]) == [False, True]


def test_bad_status_value(study, tmp_path):
    p = tmp_path / "r.csv"
    p.write_text("run_id,x1,x2,y,status\nr1,1,30,0.1,done\n")
    with pytest.raises(ResultsError, match=":2: column 'status'"):
        read_results(p, study)


def _store(tmp_path):
    return ResultsStore(tmp_path / "res.csv", ["x1", "x2"], ["y"])


def test_store_appends_and_reads_back(tmp_path):
    with _store(tmp_path) as s:
        s.append("r1", {"x1": 1.0, "x2": 30.0}, Outcome({"y": 0.1}, source="command"))
        s.append("r2", {"x1": 2.0, "x2": 40.0}, Outcome({"y": math.nan}, "failed", "exit code 3\nline two"))
    with _store(tmp_path) as s:
        rows = s.rows()
        assert list(rows["run_id"]) == ["r1", "r2"]
        assert rows["y"].iloc[0] == 0.1 and np.isnan(rows["y"].iloc[1])
        assert rows["message"].iloc[1] == "exit code 3 | line two"
        assert s.done() == {"r1", "r2"} and s.done(include_failed=False) == {"r1"}
        assert s.drop_failed() == 1
        assert s.done() == {"r1"}


def test_store_cuts_a_torn_last_line(tmp_path):
    with _store(tmp_path) as s:
        s.append("r1", {"x1": 1.0, "x2": 30.0}, Outcome({"y": 0.1}))
    with open(tmp_path / "res.csv", "a") as fh:
        fh.write("r2,2.0,40")  # a write cut short by a kill
    with _store(tmp_path) as s:
        assert s.done() == {"r1"}
        s.append("r3", {"x1": 3.0, "x2": 50.0}, Outcome({"y": 0.3}))
    text = (tmp_path / "res.csv").read_text().splitlines()
    assert len(text) == 3 and text[2].startswith("r3,")


def test_store_rejects_other_columns(tmp_path):
    (tmp_path / "res.csv").write_text("run_id,a,b\n")
    with pytest.raises(ResultsError, match="other columns"):
        _store(tmp_path).open()


def test_second_writer_is_refused(tmp_path):
    with _store(tmp_path):
        with pytest.raises(StoreLockedError, match="another 'doe evaluate'"):
            _store(tmp_path).open()
