"""OTL circuit, piston and wing weight against independent re-derivations of their published formulas."""
import math
from fractions import Fraction

import numpy as np
import pytest

from doe.testing import functions as tf


def _otl_exact(rb1, rb2, rf, rc1, rc2, beta):
    # Ben-Ari & Steinberg 2007 (Qual. Eng. 19:327), rearranged into one fraction over g + R_f with
    # g = beta (R_c2 + 9):  V_m = [g (V_b1 + 0.74 + 0.74 R_f / R_c1) + 11.35 R_f] / (g + R_f),
    # evaluated in exact rational arithmetic (an independent route to the same number)
    F = Fraction
    vb1 = F(12) * rb2 / (rb1 + rb2)
    g = beta * (rc2 + 9)
    return (g * (vb1 + F(74, 100) + F(74, 100) * rf / rc1) + F(1135, 100) * rf) / (g + rf)


def test_otl_circuit_matches_exact_rational_rederivation():
    rng = np.random.default_rng(3)
    f = tf.get("otl_circuit")
    for _ in range(20):
        # rational points inside the domain, so the reference is exact
        x = [Fraction(int(round(v * 1000)), 1000) for v in f.from_unit(rng.random((1, 6)))[0]]
        got = f(np.array([[float(v) for v in x]]))[0]
        # 1e-12 relative: double rounding of a dozen operations
        assert got == pytest.approx(float(_otl_exact(*x)), rel=1e-12)


def test_otl_circuit_large_gain_limit():
    # as beta grows the transistor terms vanish: V_m -> V_b1 + 0.74 + 0.74 R_f / R_c1 (same source, limit of
    # the formula); at beta = 1e12 the remainder is of order R_f / (beta (R_c2 + 9)) ~ 1e-13
    x = np.array([[100.0, 50.0, 2.0, 1.5, 0.5, 1e12]])
    vb1 = 12 * 50 / 150
    assert tf.otl_circuit(x)[0] == pytest.approx(vb1 + 0.74 + 0.74 * 2.0 / 1.5, rel=1e-10)


def test_piston_matches_gas_spring_rederivation():
    # Kenett & Zacks 1998; Ben-Ari & Steinberg 2007: V is the volume at which the piston is in static
    # equilibrium, the root of k V^2 + A S V - S^2 P_0 V_0 T_a / T_0 = 0, and the cycle time is the period
    # 2 pi sqrt(M / k_eff) of the spring plus the isothermal gas spring of stiffness S^2 P / V with
    # P = P_0 V_0 T_a / (T_0 V) (ideal gas). Re-derived here with a polynomial root finder.
    rng = np.random.default_rng(4)
    f = tf.get("piston")
    X = f.from_unit(rng.random((25, 7)))
    for x in X:
        m, s, v0, k, p0, ta, t0 = x
        a = p0 * s + 19.62 * m - k * v0 / s
        roots = np.roots([k, a * s, -s**2 * p0 * v0 * ta / t0])
        v = float(roots[roots > 0][0].real)           # one positive root: the product of the roots is < 0
        p = p0 * v0 * ta / (t0 * v)
        period = 2 * math.pi * math.sqrt(m / (k + s**2 * p / v))
        # 1e-9: np.roots works through an eigenvalue problem, accurate to ~1e-12 relative here
        assert f(x[None])[0] == pytest.approx(period, rel=1e-9)


def test_wing_weight_power_law_exponents():
    # Forrester, Sobester & Keane 2008, sec. 1.3: W - S_w W_p is a product of power laws, so its
    # logarithmic derivative in each input equals the published exponent (0 for the paint weight W_p)
    f = tf.get("wing_weight")
    x = f.from_unit(np.random.default_rng(5).random((1, 10)))[0]
    exponents = {0: 0.758, 1: 0.0035, 2: 0.6, 4: 0.006, 5: 0.04, 6: -0.3, 7: 0.49, 8: 0.49, 9: 0.0}

    def core(z):
        return f(z[None])[0] - z[0] * z[9]

    for i, e in exponents.items():
        h = 1e-5
        up, down = x.copy(), x.copy()
        up[i] *= math.exp(h)
        down[i] *= math.exp(-h)
        slope = (math.log(core(up)) - math.log(core(down))) / (2 * h)
        # central difference of an exact power law: error ~1e-10 from rounding
        assert slope == pytest.approx(e, abs=1e-7)


def test_wing_weight_symmetric_in_sweep():
    # the sweep enters only through cos(sweep) (same source): +L and -L weigh the same
    f = tf.get("wing_weight")
    x = f.from_unit(np.random.default_rng(6).random((5, 10)))
    mirrored = x.copy()
    mirrored[:, 3] = -x[:, 3]
    np.testing.assert_allclose(f(x), f(mirrored), rtol=1e-14)


@pytest.mark.parametrize("name, d", [("otl_circuit", 6), ("piston", 7), ("wing_weight", 10)])
def test_new_functions_registered_with_their_domains(name, d):
    f = tf.get(name)
    assert f.dim == d == len(f.lower) == len(f.upper) == len(f.units)
    assert all(lo < hi for lo, hi in zip(f.lower, f.upper))
    y = f.on_unit(np.random.default_rng(7).random((1000, d)))
    assert np.all(np.isfinite(y)) and np.all(y > 0)   # a voltage, a time, a weight: positive on the domain
    with pytest.raises(tf.DoeError):
        f(np.zeros((2, d + 1)))
