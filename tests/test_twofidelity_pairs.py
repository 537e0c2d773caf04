"""The published two-fidelity test pairs: values against the literature and against
independent re-implementations of the published formulas.

Formulas: Forrester, Sobester & Keane (2007), Proc. R. Soc. A 463, 3251-3269
(one-variable example); Xiong, Qian & Wu (2013), Technometrics 55(1), 37-46, for the
low-fidelity Currin, Park and borehole forms, as restated (with code) in Surjanovic &
Bingham's Virtual Library of Simulation Experiments (pages curretal88exp, park91a,
borehole and their "lc" lower-fidelity codes).

The "independent re-implementation" helpers below are written from those formulas in
scalar Python (math module, one point at a time, the published algebraic form) so that
they share no code with doe/testing/functions.py.
"""
import math

import numpy as np
import pytest
from scipy.optimize import minimize_scalar

from doe.testing import functions as tf
from doe.errors import DoeError
from doe.design.plans import maximin_lhs
from doe.surrogate.gp import ResponseSurrogate
from doe.surrogate.twofidelity import TwoFidelitySurrogate

RNG_POINTS = np.random.default_rng(20130101).random((25, 8))  # interior points of the unit cube


# --- independent re-implementations of the published formulas ----------------------------
def _forrester_ref(x):
    return (6 * x - 2) ** 2 * math.sin(12 * x - 4)


def _currin_ref(x1, x2):
    fact1 = 1 - math.exp(-1 / (2 * x2)) if x2 > 0 else 1.0
    return fact1 * (2300 * x1**3 + 1900 * x1**2 + 2092 * x1 + 60) / (100 * x1**3 + 500 * x1**2 + 4 * x1 + 20)


def _currin_low_ref(x1, x2):
    m = max(0.0, x2 - 1 / 20)
    return (_currin_ref(x1 + 1 / 20, x2 + 1 / 20) + _currin_ref(x1 + 1 / 20, m)
            + _currin_ref(x1 - 1 / 20, x2 + 1 / 20) + _currin_ref(x1 - 1 / 20, m)) / 4


def _park_ref(x1, x2, x3, x4):
    # the published form, with x1 in the denominator (valid for x1 > 0)
    return x1 / 2 * (math.sqrt(1 + (x2 + x3**2) * x4 / x1**2) - 1) + (x1 + 3 * x4) * math.exp(1 + math.sin(x3))


def _park_low_ref(x1, x2, x3, x4):
    return (1 + math.sin(x1) / 10) * _park_ref(x1, x2, x3, x4) - 2 * x1 + x2**2 + x3**2 + 0.5


def _borehole_low_ref(rw, r, tu, hu, tl, hl, L, kw):
    lr = math.log(r / rw)
    return 5 * tu * (hu - hl) / (lr * (1.5 + 2 * L * tu / (lr * rw**2 * kw) + tu / tl))


# --- Forrester -----------------------------------------------------------------------------
def test_forrester_minimum():
    # Minimum -6.02074 at x = 0.757249 on [0, 1]: as quoted for the Forrester function on public
    # test-function pages (Forrester, Sobester & Keane 2008, Engineering Design via Surrogate
    # Modelling, Wiley, plot of the example; the digits are (memory)/secondary, not from the 2007 paper).
    f = tf.get("forrester")
    res = minimize_scalar(lambda x: f(np.array([[x]]))[0], bounds=(0.6, 0.9), method="bounded",
                          options={"xatol": 1e-10})
    # 1e-5 on the value and 1e-5 on x: the quoted numbers have 6 significant digits
    assert res.fun == pytest.approx(-6.02074, abs=1e-5)
    assert res.x == pytest.approx(0.757249, abs=1e-5)
    assert f(np.array([f.argmin]))[0] == pytest.approx(f.minimum, abs=1e-5)
    # no lower value anywhere on a fine grid of [0, 1]
    assert f(np.linspace(0, 1, 20001)[:, None]).min() >= -6.02074 - 1e-5


def test_forrester_end_values_match_formula():
    # f(0) = 4 sin(-4), f(1) = 16 sin(8): computed from the published formula
    # (one-variable example of Forrester et al. 2007)
    x = np.array([[0.0], [1.0], [0.3], [0.71]])
    expected = [_forrester_ref(v) for v in x[:, 0]]
    np.testing.assert_allclose(tf.forrester(x), expected, rtol=1e-14)  # same arithmetic: round-off only
    assert tf.forrester(x)[0] == pytest.approx(4 * math.sin(-4), rel=1e-14)
    assert tf.forrester(x)[1] == pytest.approx(16 * math.sin(8), rel=1e-14)


def test_forrester_low_relation_is_exact():
    # Forrester, Sobester & Keane 2007, one-variable example: f_low = A f_high + B (x - 0.5) + C, A = 0.5, B = 10, C = -5
    x = np.linspace(0, 1, 101)[:, None]
    np.testing.assert_allclose(tf.forrester_low(x), 0.5 * tf.forrester(x) + 10 * (x[:, 0] - 0.5) - 5,
                               rtol=0, atol=1e-12)  # the same three operations: round-off only
    # other constants are honoured (A = 1, B = C = 0 gives back the expensive function)
    np.testing.assert_allclose(tf.forrester_low(x, A=1.0, B=0.0, C=0.0), tf.forrester(x), rtol=0, atol=1e-15)


# --- Currin --------------------------------------------------------------------------------
def test_currin_matches_independent_implementation():
    # Currin et al. 1991 exponential function, as restated by Surjanovic & Bingham (VLSE, curretal88exp)
    U = RNG_POINTS[:, :2]
    np.testing.assert_allclose(tf.currin(U), [_currin_ref(*u) for u in U], rtol=1e-13)  # round-off only
    # at x2 = 0 the exponential factor is 1 and at x1 = 0 the ratio is 60/20, so f(0, 0) = 3 exactly
    assert tf.currin(np.array([[0.0, 0.0]]))[0] == 3.0
    # the exponential factor 1 - exp(-1/(2 x2)) at x2 = 1 is 1 - exp(-1/2) (computed)
    assert tf.currin(np.array([[0.0, 1.0]]))[0] == pytest.approx(3 * (1 - math.exp(-0.5)), rel=1e-14)


def test_currin_low_matches_independent_implementation():
    # Xiong, Qian & Wu 2013: the mean of the expensive function at (x1 +- 1/20, x2 + 1/20) and
    # (x1 +- 1/20, max(0, x2 - 1/20)); VLSE code curretal88explc. Includes points with x2 < 1/20.
    U = np.vstack([RNG_POINTS[:, :2], [[0.3, 0.0], [0.0, 0.02], [1.0, 1.0]]])
    np.testing.assert_allclose(tf.currin_low(U), [_currin_low_ref(*u) for u in U], rtol=1e-13)  # round-off only


# --- Park ----------------------------------------------------------------------------------
def test_park_matches_independent_implementation():
    # Park 1991 function 1 (VLSE park91a), published form with x1 in the denominator, interior points
    U = RNG_POINTS[:, :4]
    # 1e-12: our stable rewrite of the first term differs from the published form by round-off
    np.testing.assert_allclose(tf.park(U), [_park_ref(*u) for u in U], rtol=1e-12)
    # at x1 -> 0 the first term tends to sqrt((x2 + x3^2) x4) / 2: finite, and the rewrite gives it
    x = np.array([[0.0, 0.4, 0.5, 0.6]])
    expected = math.sqrt((0.4 + 0.25) * 0.6) / 2 + 3 * 0.6 * math.exp(1 + math.sin(0.5))
    assert tf.park(x)[0] == pytest.approx(expected, rel=1e-14)
    assert tf.park(np.array([[1e-9, 0.4, 0.5, 0.6]]))[0] == pytest.approx(expected, rel=1e-8)


def test_park_low_matches_independent_implementation():
    # Xiong, Qian & Wu 2013 (VLSE park91alc): (1 + sin(x1)/10) f + (-2 x1 + x2^2 + x3^2) + 0.5
    U = RNG_POINTS[:, :4]
    np.testing.assert_allclose(tf.park_low(U), [_park_low_ref(*u) for u in U], rtol=1e-12)  # round-off
    # the relation itself, with the expensive function as computed by the package
    x1, x2, x3 = U[:, 0], U[:, 1], U[:, 2]
    np.testing.assert_allclose(tf.park_low(U) - (1 + np.sin(x1) / 10) * tf.park(U),
                               -2 * x1 + x2**2 + x3**2 + 0.5, atol=1e-12)


# --- borehole ------------------------------------------------------------------------------
def test_borehole_low_matches_independent_implementation():
    # Xiong, Qian & Wu 2013 (VLSE boreholelc): 5 Tu (Hu - Hl) / (ln(r/rw) [1.5 + 2 L Tu/(ln(r/rw) rw^2 Kw) + Tu/Tl])
    low = tf.get("borehole_low")
    X = low.from_unit(RNG_POINTS)
    np.testing.assert_allclose(low(X), [_borehole_low_ref(*x) for x in X], rtol=1e-13)  # round-off only
    # the cheap form keeps the domain and the input names of the expensive one
    high = tf.get("borehole")
    assert (low.names, low.lower, low.upper, low.units) == (high.names, high.lower, high.upper, high.units)
    # it under-predicts: 5 < 2 pi in the numerator and 1.5 > 1 in the denominator, so low < high everywhere
    assert np.all(low(X) < high(X))


# --- registry ------------------------------------------------------------------------------
def test_pairs_share_a_domain_and_unknown_names_fail():
    for name in tf.PAIRS:
        high, low = tf.get_pair(name)
        assert high.names == low.names and high.lower == low.lower and high.upper == low.upper
        U = RNG_POINTS[:5, :high.dim]
        assert np.all(np.isfinite(high.on_unit(U))) and np.all(np.isfinite(low.on_unit(U)))
    with pytest.raises(DoeError, match="no two-fidelity pair"):
        tf.get_pair("nope")
    with pytest.raises(DoeError, match="shape"):
        tf.currin_low(np.zeros((3, 3)))


# --- the two-fidelity surrogate on the published pairs ---------------------------------------
FAST = dict(kernel="sqexp", trend="constant", restarts=1)   # the same settings for both surrogates


def _rmse(model, U, y):
    return float(np.sqrt(np.mean((model.predict(U) - y) ** 2)))


@pytest.mark.parametrize("seed", [0, pytest.param(1, marks=pytest.mark.slow), pytest.param(2, marks=pytest.mark.slow)])
def test_forrester_published_design_recovers_rho_and_beats_high_only(seed):   # seeds 1-2 of the optimiser: make bench
    # Forrester, Sobester & Keane 2007, one-variable example: cheap runs at x = 0, 0.1, ..., 1 and
    # expensive ones at x = 0, 0.4, 0.6, 1 (design as remembered: (memory)). The cheap function is
    # exactly 0.5 f_high + 10 (x - 0.5) - 5, so high = 2 low - 20 (x - 0.5) + 10: rho = 2 exactly and the
    # discrepancy is linear.
    high, low = tf.get_pair("forrester")
    XL = np.linspace(0, 1, 11)[:, None]
    XH = np.array([[0.0], [0.4], [0.6], [1.0]])
    Ut = np.linspace(0, 1, 1001)[:, None]
    yt = high(Ut)
    two = TwoFidelitySurrogate(seed=seed, compare=False).fit(XL, low(XL), XH, high(XH))
    one = ResponseSurrogate(seed=seed).fit(XH, high(XH))
    assert two.nested_.all()                         # the expensive points were found among the cheap ones
    # measured (2026-12-02): rho = 1.9999 for seeds 0-2; 0.02: the likelihood peak is this narrow
    assert two.rho_ == pytest.approx(2.0, abs=0.02)
    # measured: RMSE 0.055 with the cheap runs against 5.56 without (std of f on [0, 1] is 4.4),
    # the same for seeds 0-2; asserted with ~5x headroom on each side
    assert _rmse(two, Ut, yt) < 0.3
    assert _rmse(two, Ut, yt) < 0.05 * _rmse(one, Ut, yt)


@pytest.mark.slow   # the published design (test above) checks the same peak in the fast set
def test_forrester_random_designs_find_the_likelihood_peak():
    # Same exact relation (rho = 2, Forrester et al. 2007), on 4-run Latin hypercubes. Before the rho
    # search took generalised-least-squares steps (main, 2026-12-02) it found rho 0.98, 0.84, 1.07, -0.36
    # for seeds 1-4 although the discrepancy's likelihood near 1.99 was higher each time (held-out q2
    # 0.68, 0.63, 0.65, -0.84); measured since: rho = 2.00 and q2 >= 0.9994 for every seed.
    high, low = tf.get_pair("forrester")
    Ut = np.linspace(0, 1, 1001)[:, None]
    yt = high(Ut)
    for seed in (1, 2, 3, 4):
        Uh = maximin_lhs(4, 1, seed=10_000 * seed + 4)
        XL = np.vstack([maximin_lhs(11, 1, seed=seed), Uh])
        two = TwoFidelitySurrogate(seed=seed, compare=False, **FAST).fit(XL, low(XL), Uh, high(Uh))
        assert two.rho_ == pytest.approx(2.0, abs=0.05)          # the likelihood peak is ~0.02 wide
        assert 1 - _rmse(two, Ut, yt) ** 2 / np.var(yt) > 0.99   # measured >= 0.9994


@pytest.mark.parametrize("name, n_low, n_high, worst_ratio, median_ratio", [
    # measured (2026-12-02, seeds 0-3, 1000 uniform test points): RMSE with / without the cheap runs
    # Currin 0.20, 0.07, 0.14, 0.09 (RMSE 0.15-0.21 against 1.0-2.1; std of f 2.57);
    # Park 0.36, 0.30, 0.37, 0.35 (RMSE 0.15-0.17 against 0.43-0.49; std of f 4.61).
    # Bounds: about 2x the worst measured ratio for each seed and 1.5-2x the median.
    # both in make bench: the published Forrester design (above) checks that cheap runs cut the error in the fast set
    pytest.param("currin", 40, 8, 0.4, 0.2, marks=pytest.mark.slow),
    pytest.param("park", 60, 10, 0.6, 0.45, marks=pytest.mark.slow),
])
def test_cheap_runs_cut_the_error_at_equal_expensive_runs(name, n_low, n_high, worst_ratio, median_ratio):
    # Pairs of Xiong, Qian & Wu 2013 (Technometrics 55:37), as given by Surjanovic & Bingham's VLSE.
    # Nested plan: the cheap model is also run at every expensive point (looked up by exact match).
    high, low = tf.get_pair(name)
    d = high.dim
    Ut = np.random.default_rng(99).random((1000, d))
    yt = high.on_unit(Ut)
    ratios = []
    for seed in range(4):
        Uh = maximin_lhs(n_high, d, seed=100 + seed)
        XL = np.vstack([maximin_lhs(n_low, d, seed=seed), Uh])
        two = TwoFidelitySurrogate(seed=seed, compare=False, **FAST).fit(XL, low.on_unit(XL), Uh, high.on_unit(Uh))
        one = ResponseSurrogate(seed=seed, **FAST).fit(Uh, high.on_unit(Uh))
        assert two.nested_.all()
        ratios.append(_rmse(two, Ut, yt) / _rmse(one, Ut, yt))
        # measured q2 with the cheap runs: >= 0.993 (Currin), >= 0.998 (Park)
        assert 1 - _rmse(two, Ut, yt) ** 2 / np.var(yt) > 0.98
    assert max(ratios) < worst_ratio
    assert np.median(ratios) < median_ratio
