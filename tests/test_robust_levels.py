"""Robust search and trade-off over choice knobs, one level combination at a time, on functions whose optima
are known by hand."""
from __future__ import annotations

import numpy as np
import pytest

from doe.errors import DoeError
from doe.robust.levels import find_settings_per_level, tradeoff_per_level
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


def test_a_baseline_is_refused_with_choices():
    with pytest.raises(DoeError, match="baseline"):
        find_settings_per_level(_bowls, _space(), "f", "minimize", baseline=[0, 0.5, 0.5])
