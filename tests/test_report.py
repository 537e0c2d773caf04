"""The report: built from its files, numbers equal to theirs, every figure labelled with units and captioned,
and readable in a real browser at phone and desktop widths."""
from __future__ import annotations

import json
import re
import shutil
import subprocess
from html import unescape
from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
import pytest

from doe.cli import main
from doe.errors import DoeError
from doe.report import figures as F
from doe.report.build import CAUTIONS, fmt, settable
from doe.report.style import new_figure, save

from conftest import study_text

STUDY = study_text("rep-test", [("x1", "deg", 0.0, 10.0, {"tolerance": 0.2}), ("x2", "mm", 20.0, 120.0, {"tolerance": 2.0})],
                   [("y", "m^2", "minimize"), ("z", "m^2", "minimize")],
                   description="A small analytic study for the report tests", extra="""
    [plan]
    seed = 2

    [sensitivity]
    base_samples = 2048      # the report's tests read the indices, not their last digit: test speed

    [robust]
    samples = 32
    limits = [ { response = "z", max = 0.9 } ]
    """)


def _results(path: Path) -> None:
    # An invented smooth pair of responses on a 5 x 5 grid (test data only).
    rows = []
    k = 0
    for i in range(5):
        for j in range(5):
            k += 1
            x1, x2 = 10 * i / 4, 20 + 100 * j / 4
            y = -0.2 * (x1 / 10) ** 2 + 0.1 * (x2 / 120) + 0.05 * (x1 / 10) * (x2 / 120)
            z = 0.6 + 0.02 * x1 / 10 + 0.1 * (x2 / 120) ** 2
            rows.append((f"r{k:03d}", x1, x2, y, z, "ok", "cfd"))
    rows.append(("r026", 5.0, 70.0, "", "", "failed", "cfd"))
    pd.DataFrame(rows, columns=["run_id", "x1", "x2", "y", "z", "status", "source"]).to_csv(path, index=False)


MARKERS_OUTSIDE = {}      # figure file -> markers that cross their axes, recorded as each figure is saved


@pytest.fixture(scope="module")
def watch_markers():
    """Every figure the report saves is checked for markers outside its axes (F.markers_outside)."""
    def checked_save(fig, path, *args, **kwargs):
        MARKERS_OUTSIDE[Path(path).name] = F.markers_outside(fig)
        return save(fig, path, *args, **kwargs)

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(F, "save", checked_save)
        yield MARKERS_OUTSIDE


@pytest.fixture(scope="module")
def built(tmp_path_factory, watch_markers):
    folder = tmp_path_factory.mktemp("report")
    (folder / "study.toml").write_text(STUDY)
    _results(folder / "results.csv")
    code = main(["run", str(folder / "study.toml"), "--out", str(folder / "out"), "--no-progress"])
    assert code == 0
    return folder / "out"


def _text(html: str) -> str:
    return unescape(re.sub(r"<[^>]+>", " ", html))


def test_report_folder_is_self_contained(built):
    index = built / "report" / "index.html"
    html = index.read_text()
    for src in re.findall(r'<img src="([^"]+)"', html):
        assert (index.parent / src).exists() and not src.startswith(("http", "/"))
    assert "http://" not in html and "https://" not in html  # readable offline
    for name in ("results.csv", "fit.json", "sensitivity.json", "robust.json"):
        assert (built / "report" / "data" / name).exists()


def test_report_numbers_equal_the_files_it_was_built_from(built):
    text = _text((built / "report" / "index.html").read_text())
    fit = json.loads((built / "surrogate" / "fit.json").read_text())
    for name, rec in fit.items():
        assert fmt(rec["q2_loo"]) in text and f"{fmt(rec['rmse_loo'])} {rec['unit']}" in text
    sens = json.loads((built / "sensitivity.json").read_text())
    for r in ("y", "z"):
        for p in ("x1", "x2"):
            cell = sens[r][p]
            assert f"{fmt(cell['S1'])} ± {fmt(cell['S1_pm95'])}" in text
            assert f"{fmt(cell['ST'])} ± {fmt(cell['ST_pm95'])}" in text
        assert sens["_meta"]["responses"][r]["statement"] in text
    rob = json.loads((built / "robust.json").read_text())
    for key in ("nominal", "robust"):
        for p in ("x1", "x2"):
            assert fmt(rob[key]["point"][p]) in text
        assert F.format_with_interval(rob[key]["mean"], rob[key]["std"]) in text


def test_markers_lie_inside_their_axes(built, watch_markers):
    assert len(watch_markers) >= 6 and "tradeoff_" in " ".join(watch_markers)
    assert {name: bad for name, bad in watch_markers.items() if bad} == {}


def test_one_collapsible_section_per_response_summary_first(built):
    html = (built / "report" / "index.html").read_text()
    for r in ("y", "z"):
        # the sensitivity and the maps of each response sit in their own <details>, the summary first
        assert len(re.findall(rf"<details[^>]*><summary><b>{r} \[m\^2\]</b>", html)) == 2
    assert re.search(r"<details open><summary><b>y ", html)        # the objective's sections are open


def test_report_carries_cautions_and_failed_runs(built):
    text = _text((built / "report" / "index.html").read_text())
    for c in CAUTIONS:
        assert c in text
    assert "r026" in text  # the failed run is listed


def test_every_figure_has_a_caption(built):
    html = (built / "report" / "index.html").read_text()
    figures = re.findall(r"<figure>(.*?)</figure>", html, re.S)
    assert len(figures) >= 6
    for f in figures:
        assert "<figcaption>" in f and len(_text(f).split()) > 8


def test_unlabelled_figure_is_refused(tmp_path):
    fig, ax = new_figure()
    ax.plot([0, 1], [0, 1])
    ax.set_xlabel("speed")  # no unit
    ax.set_ylabel("drag [N]")
    with pytest.raises(DoeError, match="unit"):
        save(fig, tmp_path / "f.png")
    plt.close("all")


def test_second_run_reuses_everything(built, capsys):
    folder = built.parent
    stamp = (built / "robust.json").stat().st_mtime
    assert main(["run", str(folder / "study.toml"), "--out", str(built), "--no-progress"]) == 0
    err = capsys.readouterr().err
    assert "reusing" in err and (built / "robust.json").stat().st_mtime == stamp


def _chromium():
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


CHECK_JS = """
<script>
window.addEventListener("load", function () {
  var imgs = Array.prototype.slice.call(document.images);
  var broken = imgs.filter(function (i) { return !(i.complete && i.naturalWidth > 0); }).map(function (i) { return i.src; });
  var w = document.documentElement.clientWidth;
  var wide = [];
  document.querySelectorAll("main *").forEach(function (e) {
    if (e.closest(".scroll")) { return; }  // wide tables scroll inside their own box
    var r = e.getBoundingClientRect();
    if (r.right > w + 1) { wide.push(e.tagName + ":" + Math.round(r.right)); }
  });
  var out = document.createElement("pre");
  out.id = "check";
  out.textContent = JSON.stringify({images: imgs.length, broken: broken, wide: wide, width: w,
                                    scroll: document.documentElement.scrollWidth});
  document.body.appendChild(out);
});
</script>
"""


@pytest.mark.parametrize("width", [390, 1280])
def test_report_in_a_real_browser(built, tmp_path, width):
    browser = _chromium()
    if browser is None:
        pytest.skip("no Chromium on this machine (.ci/run installs Debian's chromium when it can)")
    page = built / "report" / f"check_{width}.html"
    page.write_text((built / "report" / "index.html").read_text().replace("</body>", CHECK_JS + "</body>"))
    flags = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
             "--disable-background-networking", "--disable-component-update", "--disable-sync",
             f"--user-data-dir={tmp_path / 'profile'}", f"--window-size={width},900", "--hide-scrollbars",
             "--virtual-time-budget=10000"]
    dom = subprocess.run([browser, *flags, "--dump-dom", page.as_uri()], capture_output=True, text=True,
                         timeout=120).stdout
    found = re.search(r'<pre id="check">(.*?)</pre>', dom, re.S)
    assert found, "the check script did not run"
    check = json.loads(unescape(found.group(1)))
    assert check["images"] >= 6 and check["broken"] == []      # every figure loads
    assert check["wide"] == [] and check["scroll"] <= check["width"] + 1  # nothing overflows the page
    shot = tmp_path / f"shot_{width}.png"
    subprocess.run([browser, *flags, f"--screenshot={shot}", page.as_uri()], capture_output=True, timeout=120)
    assert shot.exists() and shot.stat().st_size > 10_000


# ---------------------------------------------------------------------------
# a report of a lap-time study: the robust file made from an invented analytic aero map (labelled
# invented, tests/test_robust_study.py), no surrogates needed for the vehicle part
@pytest.fixture(scope="module")
def lap_report(tmp_path_factory, watch_markers):
    from test_robust_study import HEAD, SNIPPET, invented_aero
    from doe.report.build import ReportInputs, build_report
    from doe.runs.results import ResultsTable
    from doe.study.reader import read_study_text
    from doe.workflow.robust import study_robust, study_tradeoff

    text = SNIPPET.replace('objective = "cla_total"', 'objective = "lap_time_s"').replace(
        '{ response = "balance_front", min = 0.30, max = 0.55 }', '{ figure = "balance_shift", min = -0.045 }').replace(
        "# baseline = { flap_angle = 4.0, wing_height = 120.0 }", "baseline = { flap_angle = 4.0, wing_height = 120.0 }")
    study = read_study_text(HEAD + text)
    rob = json.loads(json.dumps(study_robust(study, invented_aero, maxiter=8).to_dict()))
    picks = [[rob[k]["point"][n] for n in study.space.names] for k in ("nominal", "robust")]
    X = study.space.from_unit(np.linspace(0.05, 0.95, 12)[:, None] * np.ones((1, 2)))
    pred = invented_aero(X)
    frame = pd.DataFrame({"run_id": [f"r{i:02d}" for i in range(len(X))], "flap_angle": X[:, 0],
                          "wing_height": X[:, 1], **{n: m for n, (m, _) in pred.items()}, "status": "ok",
                          "source": "invented"})
    results = ResultsTable(frame, study.space.names, study.response_names)
    folder = tmp_path_factory.mktemp("lap_report")
    index = build_report(ReportInputs(study, results, robust=rob,
                                      tradeoff=study_tradeoff(study, invented_aero, samples=256, include=picks)),
                         folder)
    return rob, index


def test_lap_report_shows_lap_time_with_its_uncertainty_and_the_balance(lap_report):
    rob, index = lap_report
    html = index.read_text()
    text = _text(html)
    assert "front share of the aero load" not in text          # meaningless near zero net lift: gone
    assert "balance shift at 150 km/h" in text
    for key in ("baseline", "nominal", "robust"):
        lap = rob[key]["figures"]["lap_time_s"]
        assert F.format_with_interval(lap["mean"], lap["std"]) in text
    assert rob["balance_change"]["sentence"] in text
    glance = _text(re.search(r'<section class="glance".*?</section>', html, re.S).group(0))
    assert "How the balance moves" in glance and "What it is worth" in glance
    assert F.format_with_interval(rob["robust"]["figures"]["lap_time_s"]["mean"],
                                  rob["robust"]["figures"]["lap_time_s"]["std"], unit="s") in glance
    for f in ("lap_time.png", "balance.png"):
        assert (index.parent / f).exists() and f'src="{f}"' in html


def test_lap_report_figures_keep_markers_inside(lap_report, watch_markers):
    assert {"lap_time.png", "balance.png"} <= set(watch_markers)
    assert {name: bad for name, bad in watch_markers.items() if bad} == {}


def test_lap_report_speaks_plain_words_and_says_how_limits_are_judged(lap_report):
    rob, index = lap_report
    html = index.read_text()
    table = _text(re.search(r"The recommended setting.*?Which setting to measure", html, re.S).group(0))
    assert "lap time at the setting [s]" in table and "lap_time_s" not in table
    assert "only has to keep them at its exact setting" in table     # the nominal pick's limits, in one sentence
    glance = _text(re.search(r'<section class="glance".*?</section>', html, re.S).group(0))
    assert "lap time" in glance and "lap_time_s" not in glance
    # the knobs are given to the step their setup scatter allows (half the tolerance's decimal place)
    from test_robust_study import HEAD, SNIPPET
    from doe.study.reader import read_study_text

    tolerances = {p.name: p.tolerance for p in read_study_text(HEAD + SNIPPET).space.parameters}
    where = glance.split("What to set:")[1].split("(each to the step")[0]
    for name, value in rob["robust"]["point"].items():
        assert f"{name} {settable(value, tolerances[name])} " in where


@pytest.mark.parametrize("value,tolerance,shown", [(0.000514, 2.0, "0"), (27.598, 0.5, "27.6"), (6.657, 0.25, "6.7"),
                                                   (3.512, 0.0, "3.51"), (-0.04, 0.5, "0"), (118.6, 2.0, "119")])
def test_settable_rounds_to_half_the_tolerance(value, tolerance, shown):
    # our own display rule (common practice, no source): digits finer than half the setup scatter are noise
    assert settable(value, tolerance) == shown
