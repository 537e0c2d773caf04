"""Robust search and trade-off over choice knobs, one level combination at a time, on functions whose optima
are known by hand."""
from __future__ import annotations

import numpy as np
import pytest

from doe.errors import DoeError
from doe.robust.levels import Z95, FigureMap, find_settings_per_level, tradeoff_per_level
from doe.space import Parameter, Space

SIGMA = 0.05   # setup scatter of x (one standard deviation)


def _space():
    return Space((Parameter.choice("c", ["a", "b"]), Parameter("x", "-", 0.0, 1.0, SIGMA),
                  Parameter.stepped("y", "-", [0.0, 0.5, 1.0])))


def _bowls(X):
    """Level a: (x - 0.3)^2 + (y - 0.5)^2; level b: 0.1 + (x - 0.7)^2 + (y - 1)^2 (no surrogate uncertainty)."""
    c, x, y = X[:, 0], X[:, 1], X[:, 2]
    f = np.where(c == 0, (x - 0.3) ** 2 + (y - 0.5) ** 2, 0.1 + (x - 0.7) ** 2 + (y - 1.0) ** 2)
    return {"f": (f, np.zeros(len(f)))}


def test_each_level_finds_its_own_optimum_and_the_better_level_wins():
    res = find_settings_per_level(_bowls, _space(), "f", "minimize", k=1.0, samples=256, seed=3, maxiter=40)
    rows = {tuple(r["levels"].values()): r for r in res.comparison()}
    # each bowl's minimum by hand: x at its centre, the stepped y on the step at the centre (exactly)
    assert rows[("a",)]["point"]["x"] == pytest.approx(0.3, abs=0.01) and rows[("a",)]["point"]["y"] == 0.5
    assert rows[("b",)]["point"]["x"] == pytest.approx(0.7, abs=0.01) and rows[("b",)]["point"]["y"] == 1.0
    # under normal scatter e of x: E[(x0 + e - x0)^2] = sigma^2, sd = sqrt(2) sigma^2 (the square of a normal
    # is sigma^2 times a chi-square with one degree of freedom, mean 1, variance 2; Johnson, Kotz &
    # Balakrishnan 1994, Continuous Univariate Distributions 1, ch. 18 (memory)); 256 quasi-random draws:
    # within 10 %
    a = rows[("a",)]
    assert a["mean"] == pytest.approx(SIGMA**2, rel=0.1) and a["std"] == pytest.approx(np.sqrt(2) * SIGMA**2,
                                                                                           rel=0.1)
    assert res.to_dict()["choices"]["best"] == {"c": "a"}
    # the two picks see the same scatter, so the level is worth exactly the offset 0.1 between the bowls
    assert rows[("b",)]["mean_minus_best"] == pytest.approx(0.1, abs=1e-3)
    assert rows[("b",)]["mean_minus_best_pm95"] == 0.0            # no surrogate uncertainty in this model
    assert res.robust.point["c"] == 0.0 and res.to_dict()["robust"]["levels"] == {"c": "a"}


def test_tradeoff_keeps_only_the_level_that_is_never_dominated():
    def lines(X):
        c, x = X[:, 0], X[:, 1]
        return {"f": (x + 0.5 * c, np.zeros(len(x))), "g": (1 - x + 0.5 * c, np.zeros(len(x)))}

    frame = tradeoff_per_level(lines, _space(), ["f", "g"], {"f": "minimize", "g": "minimize"}, samples=64)
    # level b adds 0.5 to both responses at every setting: every one of its points is dominated by level a's
    # point at the same x (Deb 2001, def. 2.5)
    assert set(frame["c"]) == {"a"} and len(frame) > 5
    np.testing.assert_allclose(frame["f"] + frame["g"], 1.0)


def test_a_baseline_names_its_levels_and_every_pick_is_compared_with_it():
    # the car as it runs now: level b at x = 0.5, y = 0.5, where bowl b is 0.1 + 0.2^2 + 0.5^2 = 0.39
    res = find_settings_per_level(_bowls, _space(), "f", "minimize", k=1.0, samples=256, seed=3, maxiter=40,
                                  baseline=[1, 0.5, 0.5])
    out = res.to_dict()
    assert out["baseline"]["levels"] == {"c": "b"} and out["baseline"]["point"] == {"c": 1.0, "x": 0.5, "y": 0.5}
    # under the same scatter draws both picks and the baseline gain sigma^2 (see above), so the differences
    # are the bowls' values by hand: a's pick 0 - 0.39, b's pick 0.1 - 0.39
    rows = {tuple(r["levels"].values()): r for r in out["level_comparison"]}
    assert rows[("a",)]["mean_minus_baseline"] == pytest.approx(-0.39, abs=2e-3)
    assert rows[("b",)]["mean_minus_baseline"] == pytest.approx(0.1 - 0.39, abs=2e-3)
    assert rows[("a",)]["responses"]["f"]["minus_baseline"] == pytest.approx(-0.39, abs=2e-3)
    assert rows[("b",)]["mean_minus_baseline_pm95"] == 0.0                 # no surrogate uncertainty
    # the baseline joined level b's search and did not pull it away from b's own optimum
    assert rows[("b",)]["point"]["x"] == pytest.approx(0.7, abs=0.01) and rows[("b",)]["point"]["y"] == 1.0


def test_a_baseline_outside_the_bounds_is_refused():
    with pytest.raises(DoeError, match="baseline"):
        find_settings_per_level(_bowls, _space(), "f", "minimize", baseline=[1, 1.5, 0.5], maxiter=5)


def _switched():
    return Space((Parameter.choice("wing", ["on", "off"]), Parameter.choice("wing_section", ["s1", "s2"]),
                  Parameter("wing_aoa", "deg", 0.0, 1.0, 0.0), Parameter("flap_angle", "deg", 0.0, 1.0, 0.0)))


def _wing(X):
    """Wing on: (aoa - 0.3)^2 + 0.1 * section + (flap - 0.5)^2; wing off: 0.5 + (flap - 0.5)^2, std 0.01."""
    on, sec, aoa, flap = X[:, 0] == 0, X[:, 1], X[:, 2], X[:, 3]
    f = np.where(on, (aoa - 0.3) ** 2 + 0.1 * sec, 0.5) + (flap - 0.5) ** 2
    return {"f": (f, np.full(len(f), 0.01))}


def test_a_switched_off_wing_is_one_combination_with_no_section():
    res = find_settings_per_level(_wing, _switched(), "f", "minimize", samples=16, seed=1, maxiter=20)
    out = res.to_dict()
    levels = [r["levels"] for r in out["level_comparison"]]
    # wing off: the section has nothing to act on, so (off, s1) and (off, s2) are one row (3 rows, not 4)
    assert levels == [{"wing": "on", "wing_section": "s1"}, {"wing": "on", "wing_section": "s2"},
                      {"wing": "off", "wing_section": "no wing"}]
    assert [r["not_applying"] for r in out["per_level"]] == [[], [], ["wing_aoa"]]
    off = out["level_comparison"][2]
    # the flap still acts without the wing: its optimum 0.5 by hand; the constant 0.5 of the bare car
    assert off["point"]["flap_angle"] == pytest.approx(0.5, abs=0.01) and off["mean"] == pytest.approx(0.5, abs=1e-3)
    # a difference of two independent estimates, each with std 0.01: 1.96 * sqrt(2) * 0.01
    assert off["mean_minus_best_pm95"] == pytest.approx(Z95 * np.sqrt(2) * 0.01, rel=1e-9)
    assert out["level_comparison"][0]["mean_minus_best_pm95"] == 0.0      # the best against itself
    frame = tradeoff_per_level(lambda X: {"f": _wing(X)["f"], "g": (X[:, 2], np.zeros(len(X)))}, _switched(),
                               ["f", "g"], {"f": "minimize", "g": "minimize"}, samples=32)
    assert set(frame["wing_section"][frame["wing"] == "off"]) <= {"s1"}     # searched once, at a valid level


def test_vehicle_figures_get_intervals_whatever_the_objective():
    # a linear figure of the response: the unscented transform carries the std through exactly (the law of
    # propagation of uncertainty for a linear function, JCGM 100:2008 (GUM), eq. 10): std 2 * 0.01
    figures = FigureMap(("f",), lambda f: {"lap_time_s": 60.0 + 2.0 * f})
    res = find_settings_per_level(_wing, _switched(), "f", "minimize", samples=16, seed=1, maxiter=20,
                                  figures=figures)
    rows = res.to_dict()["level_comparison"]
    lap = [r["figures"]["lap_time_s"] for r in rows]
    assert lap[0]["unit"] == "s" and lap[0]["pm95"] == pytest.approx(Z95 * 0.02, rel=1e-9)
    assert lap[2]["minus_best"] == pytest.approx(2.0 * rows[2]["responses"]["f"]["minus_best"], rel=1e-9)
    assert lap[2]["minus_best_pm95"] == pytest.approx(Z95 * np.hypot(0.02, 0.02), rel=1e-9)


def test_report_table_has_one_no_wing_row_with_its_idle_knob_dashed():
    from types import SimpleNamespace

    from doe.report.build import fmt
    from doe.report.levels import level_block

    res = find_settings_per_level(_wing, _switched(), "f", "minimize", samples=16, seed=1, maxiter=20)
    study = SimpleNamespace(space=_switched(), response=lambda name: SimpleNamespace(unit="-"))
    out = res.to_dict()
    table = level_block(study, out, None, fmt)["best"]
    aoa = [fmt(rec["robust"]["point"]["wing_aoa"]) for rec in out["per_level"]]
    assert [row[:3] for row in table["rows"]] == [["on", "s1", aoa[0]], ["on", "s2", aoa[1]], ["off", "no wing", "-"]]
