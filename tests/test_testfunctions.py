"""Test functions against their published optima and analytic moments."""
import math

import numpy as np
import pytest

from doe.testing import functions as tf


def test_branin_minima():
    # Branin & Hoo 1972; Dixon & Szego 1978: minimum 5/(4 pi) = 0.397887 at three points
    pts = np.array([[-math.pi, 12.275], [math.pi, 2.275], [9.42478, 2.475]])
    # 1e-5: the published coordinates are rounded to ~5-6 digits
    np.testing.assert_allclose(tf.branin(pts), 5 / (4 * math.pi), atol=1e-5)


def test_hartmann_minima():
    # Dixon & Szego 1978: Hartmann 3-D minimum -3.86278, 6-D minimum -3.32237
    f3 = tf.get("hartmann3")
    f6 = tf.get("hartmann6")
    # 1e-5: minimum value and location are published to 5-6 digits
    assert f3(np.array([f3.argmin]))[0] == pytest.approx(-3.86278, abs=1e-5)
    assert f6(np.array([f6.argmin]))[0] == pytest.approx(-3.32237, abs=1e-5)
    rng = np.random.default_rng(0)
    assert f3.on_unit(rng.random((2000, 3))).min() > -3.86278 - 1e-6
    assert f6.on_unit(rng.random((2000, 6))).min() > -3.32237 - 1e-6


def test_borehole_range():
    # Harper & Gupta 1983 via Surjanovic & Bingham: flow rate is about 78 m^3/yr at the domain centre
    # (computed from the formula by hand here, to 4 digits)
    f = tf.get("borehole")
    centre = (np.array(f.lower) + np.array(f.upper)) / 2
    rw, r, tu, hu, tl, hl, L, kw = centre
    lr = math.log(r / rw)
    expected = 2 * math.pi * tu * (hu - hl) / (lr * (1 + 2 * L * tu / (lr * rw**2 * kw) + tu / tl))
    assert f(centre[None])[0] == pytest.approx(expected, rel=1e-12)
    assert 60 < expected < 100  # order of magnitude published in the VLSE page (memory)


def test_ishigami_moments_match_analytic():
    # Ishigami & Homma 1990; Sobol' & Levitan 1999: mean a/2 = 3.5, variance 13.8446 for a=7, b=0.1
    ref = tf.ishigami_indices()
    assert ref["variance"] == pytest.approx(13.8446, abs=1e-4)
    np.testing.assert_allclose(ref["S1"], [0.3139, 0.4424, 0.0], atol=1e-4)
    np.testing.assert_allclose(ref["ST"], [0.5576, 0.4424, 0.2437], atol=1e-4)
    rng = np.random.default_rng(1)
    y = tf.get("ishigami").on_unit(rng.random((200_000, 3)))
    # Monte Carlo with 2e5 points: standard error of the mean ~ 3.7/447 = 0.008; 5 sigma
    assert y.mean() == pytest.approx(3.5, abs=0.045)
    assert y.var() == pytest.approx(13.8446, rel=0.03)


def test_g_function_indices():
    # Saltelli & Sobol' 1995 (REFERENCES.md, computed): a = (0, 1, 4.5, 9, 99 x4)
    ref = tf.g_function_indices()
    np.testing.assert_allclose(ref["S1"][:4], [0.7162, 0.1791, 0.0237, 0.0072], atol=1e-4)
    np.testing.assert_allclose(ref["ST"][:4], [0.7871, 0.2422, 0.0343, 0.0105], atol=1e-4)
    rng = np.random.default_rng(2)
    y = tf.g_function(rng.random((200_000, 8)))
    # mean 1 exactly; the variance estimate from 2e5 points is good to ~1 %
    assert y.mean() == pytest.approx(1.0, abs=0.01)
    assert y.var() == pytest.approx(ref["variance"], rel=0.03)


def test_space_and_shape_errors():
    f = tf.get("borehole")
    s = f.space()
    assert s.names == list(f.names) and s.dim == 8
    with pytest.raises(tf.DoeError):
        tf.branin(np.zeros((3, 3)))
    with pytest.raises(tf.DoeError):
        tf.get("nope")
