"""Figures that do not mislead: numbers rounded to their interval, bars from zero or as differences,
markers inside their axes, a trade-off line that contains the points it is asked to include."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import doe.report.figures as F
from doe.report.style import new_figure
from doe.space import Parameter, Space


@pytest.mark.parametrize("value,interval,digits,expected", [
    # JCGM 100:2008 (GUM) 7.2.6 (memory of the paragraph): uncertainty to one or two significant digits,
    # the estimate rounded to the same decimal place
    (0.6525, 0.02363, 1, "0.65 ± 0.02"),
    (-0.3073, 0.0065, 1, "-0.307 ± 0.007"),
    (62.2319, 0.0365, 1, "62.23 ± 0.04"),
    (62.2319, 0.0365, 2, "62.232 ± 0.037"),
    (0.6525, 0.0096, 1, "0.65 ± 0.01"),       # the interval rounds up into the next decade
    (1234.5, 56.0, 1, "1230 ± 60"),           # tens
    (0.125, 0.05, 1, "0.13 ± 0.05"),          # half away from zero on the written digits
    (-0.001, 0.02, 1, "0.00 ± 0.02"),         # no negative zero
    (0.6525, 0.0, 1, "0.6525"),               # no interval: 4 significant digits
    (None, 0.1, 1, "–"),
])
def test_format_with_interval(value, interval, digits, expected):
    assert F.format_with_interval(value, interval, digits) == expected


def test_non_dominated_2d_against_definition():
    # definition (Deb 2001, Multi-Objective Optimization using Evolutionary Algorithms, def. 2.5): j dominates i
    # when it is no worse in both and better in one; checked by brute force on random points with ties
    rng = np.random.default_rng(4)
    x, y = np.round(rng.random(300), 1), np.round(rng.random(300), 1)
    for senses in (("minimize", "minimize"), ("minimize", "maximize")):
        sx, sy = (1 if s == "minimize" else -1 for s in senses)
        fx, fy = sx * x, sy * y
        dominated = [np.any((fx <= fx[i]) & (fy <= fy[i]) & ((fx < fx[i]) | (fy < fy[i]))) for i in range(len(x))]
        assert np.array_equal(F.non_dominated_2d(x, y, senses), ~np.array(dominated))


@pytest.fixture
def captured(monkeypatch):
    """The figures the functions save, kept open for inspection (returns the list)."""
    figs = []

    def keep(fig, path):
        figs.append(fig)
        fig.savefig(path)

    monkeypatch.setattr(F, "save", keep)
    return figs


def test_markers_outside_sees_a_marker_on_the_edge():
    fig, ax = new_figure(4, 3)
    ax.scatter([0.0, 0.5], [0.5, 0.5], s=90)
    ax.set_xlim(0.0, 1.0)
    ax.set_ylim(0.0, 1.0)
    assert len(F.markers_outside(fig)) == 1       # the one at x = 0 is half outside
    ax.set_xlim(-0.1, 1.0)
    assert F.markers_outside(fig) == []


def test_response_map_keeps_a_pick_on_a_bound_inside(tmp_path, captured):
    space = Space((Parameter("a", "deg", 10.0, 45.0, 0.5), Parameter("b", "mm", 60.0, 200.0, 2.0)))

    def predict(X):
        y = np.sin(X[:, 0] / 10.0) + X[:, 1] / 100.0
        return {"y": (y, 0.01 + 0.0 * y)}

    runs = pd.DataFrame({"a": [12.0, 30.0, 44.0], "b": [70.0, 150.0, 190.0], "status": ["ok"] * 3})
    F.response_map("y", "m^2", predict, space, "a", "b", [45.0, 200.0], runs, tmp_path,
                   pick={"a": 45.0, "b": 200.0})          # the corner of the box
    assert F.markers_outside(captured[-1]) == []


def test_tradeoff_line_includes_extra_points_and_names_points_off_it(tmp_path, captured):
    frame = pd.DataFrame({"cla": [-0.26, -0.2, -0.1], "cda": [0.74, 0.71, 0.69]})
    pick = (-0.307, 0.75)                              # beyond the sampled front: more downforce, more drag
    inner = (-0.15, 0.73)                              # beaten by (-0.2, 0.71) in both
    fig = F.tradeoff_plot(frame, "cla", "m^2", "cda", "m^2", tmp_path,
                          points=[("robust", "green", pick), ("nominal", "purple", inner)], include=[pick])
    line = captured[-1].axes[0].lines[0]
    assert pick[0] in line.get_xdata() and len(line.get_xdata()) == 4
    assert "Off the line: nominal" in fig.caption and "robust" not in fig.caption.split("Off the line")[1]
    assert F.markers_outside(captured[-1]) == []


def test_bars_from_zero_and_as_differences(tmp_path, captured):
    F.vehicle_bars(["now", "nominal", "robust"], [62.59, 62.23, 62.23], "s", "lap time", "a.png", tmp_path, "c",
                   intervals=[0.03, 0.03, 0.02])
    ax = captured[-1].axes[0]
    assert ax.get_ylim()[0] <= 0.0                     # the bars start at zero
    texts = [t.get_text() for t in ax.texts]
    assert texts == ["62.59 ± 0.03", "62.23 ± 0.03", "62.23 ± 0.02"]
    F.difference_bars(["now", "nominal", "robust"], [62.59, 62.23, 62.25], "s", "lap time", "b.png", tmp_path,
                      "c", reference=0, intervals=[0.0, 0.03, 0.02])
    ax = captured[-1].axes[0]
    heights = [p.get_height() for p in ax.patches]
    assert heights == pytest.approx([62.23 - 62.59, 62.25 - 62.59])
    lo, hi = ax.get_ylim()
    assert lo < -0.36 and hi >= 0.0                    # the whole bar and zero are in view
    assert ax.get_ylabel() == "lap time minus now [s]"
    assert [t.get_text() for t in ax.texts] == ["-0.36 ± 0.03", "-0.34 ± 0.02"]


def test_balance_lines_caption_follows_the_shares(tmp_path, captured):
    # statics by hand: a front share of 0.587 against 0.616 at rest is 2.9 points below -> towards understeer
    fig = F.balance_lines(["now", "pick"], [100.0, 150.0, 200.0], [[0.606, 0.598, 0.587], [0.60, 0.58, 0.557]],
                          0.6157, tmp_path)
    assert "now 2.9 points below" in fig.caption and "pick 5.9 points below" in fig.caption
    ax = captured[-1].axes[0]
    assert ax.lines[1].get_ydata()[-1] == pytest.approx(58.7)
    assert F.markers_outside(captured[-1]) == []
