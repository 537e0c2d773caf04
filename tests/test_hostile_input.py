"""Hostile and malformed input: each file either works or is a one-line DoeError; nothing escapes."""
from __future__ import annotations

import warnings

import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from doe.cli import main
from doe.errors import DoeError
from doe.runs.results import read_plan, read_results
from doe.study.reader import load_study, read_study_text

from conftest import BASE_STUDY, write_study

GOOD_RESULTS = "run_id,x1,x2,y,status,source\nr001,1.5,30,0.25,ok,cfd\nr002,2,40,,failed,cfd\nr003,9.5,110,1e-3,ok,cfd\n"
FUZZ = settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])


def _mutate(text: str, edits) -> str:
    chars = list(text)
    for kind, pos, ch in edits:
        if not chars:
            chars = [ch]
            continue
        i = pos % len(chars)
        if kind == 0:
            chars[i] = ch
        elif kind == 1:
            chars.insert(i, ch)
        else:
            del chars[i]
    return "".join(chars)


EDITS = st.lists(st.tuples(st.integers(0, 2), st.integers(0, 10_000),
                           st.sampled_from(list(",;\n\r\"' .-e0123456789abcnaif\ufeff\t\x00é{}[]=#"))),
                 min_size=1, max_size=8)


@FUZZ
@given(edits=EDITS)
@example(edits=[(0, 0, '"'), (0, 194, '"')])   # a quoted header cell running over lines (found by the fuzzer)
def test_fuzz_results_reader(study_file, tmp_path, edits):
    study = load_study(study_file)
    p = tmp_path / "fuzz.csv"
    p.write_bytes(_mutate(GOOD_RESULTS, edits).encode("utf-8", "surrogatepass"))
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # rows outside the bounds are flagged with a warning
            table = read_results(p, study, accept_outside=True)
    except DoeError as exc:
        assert "\n" not in str(exc)
    else:  # what is read is well formed: every ok row has finite numbers
        ok = table.ok
        assert ok[["x1", "x2", "y"]].notna().all().all()


@FUZZ
@given(data=st.binary(max_size=300))
def test_fuzz_plan_reader_random_bytes(study_file, tmp_path, data):
    study = load_study(study_file)
    p = tmp_path / "fuzz.csv"
    p.write_bytes(data)
    try:
        read_plan(p, study)
    except DoeError as exc:
        assert "\n" not in str(exc)


@FUZZ
@given(edits=EDITS)
def test_fuzz_study_reader(edits):
    text = _mutate(BASE_STUDY.replace("{python}", "python3"), edits)
    try:
        read_study_text(text, "fuzz.toml")
    except DoeError as exc:
        assert "\n" not in str(exc)


@pytest.mark.parametrize("name,content,ok", [
    ("bom and crlf", "\ufeffrun_id,x1,x2\r\nr1,1,30\r\n".encode(), True),
    ("semicolons with decimal commas", "run_id;x1;x2\nr1;1,25;30,5\n".encode(), True),
    ("tiny number", b"run_id,x1,x2\nr1,1e-320,30\n", True),
    ("utf-16 with bom", "run_id,x1,x2\nr1,1,30\n".encode("utf-16"), True),
    ("huge number", b"run_id,x1,x2\nr1,1e308,30\n", False),
    ("nan", b"run_id,x1,x2\nr1,nan,30\n", False),
    ("latin-1 text", "run_id,x1,x2\nr\xe9,1,30\n".encode("latin-1"), False),
    ("nul bytes", b"run_id,x1,x2\nr1,1\x00,30\n", False),
    ("very long line", b"run_id,x1,x2\nr1,1," + b"3" * 200_000 + b"\n", False),
    ("unclosed quote", b'run_id,x1,x2\nr1,"1,30\n', False),
    ("duplicated header", b"run_id,x1,x2,x2\nr1,1,30,30\n", False),
    ("escaping run id", b"run_id,x1,x2\n..,1,30\n", False),
    ("run id with a slash", b"run_id,x1,x2\na/b,1,30\n", False),
    ("shell metacharacters in run id", b"run_id,x1,x2\n$(rm -rf ~),1,30\n", False),
])
def test_odd_plan_files(study_file, tmp_path, capsys, name, content, ok):
    p = tmp_path / "plan.csv"
    p.write_bytes(content)
    out = tmp_path / "res.csv"
    code = main(["evaluate", str(study_file), "--plan", str(p), "--out", str(out), "--no-progress"])
    err = capsys.readouterr().err.strip().splitlines()
    if ok:
        assert code == 0, err
    else:
        assert code == 2 and len(err) == 1 and "plan.csv" in err[0], err
        assert not out.exists()


@pytest.mark.parametrize("name,edit", [
    ("crlf line endings", lambda s: s.replace("\n", "\r\n")),
    ("byte-order mark", lambda s: "\ufeff" + s),
])
def test_study_file_encodings_that_work(tmp_path, name, edit):
    path = write_study(tmp_path, edit(BASE_STUDY))
    assert load_study(path).space.names == ["x1", "x2"]


@pytest.mark.parametrize("name,raw,words", [
    ("latin-1", BASE_STUDY.replace('"t-study"', '"t-\xe9"').encode("latin-1"), "not UTF-8"),
    ("huge number", BASE_STUDY.replace("high = 10.0", "high = 1e400").encode(), "finite"),
    ("output outside the case folder", BASE_STUDY.replace("timeout_s = 20", 'output = "../../x.json"').encode(),
     "inside the case folder"),
])
def test_study_files_that_fail_cleanly(tmp_path, capsys, name, raw, words):
    write_study(tmp_path)
    path = tmp_path / "study.toml"
    path.write_bytes(raw.replace(b"{python}", b"python3"))
    code = main(["plan", str(path), "--out", str(tmp_path / "p.csv")])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and words in err[0], err
