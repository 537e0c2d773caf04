"""Stall of the built-in model's sections: measured c_l,max and stall angles, and panel convergence."""
from __future__ import annotations

import numpy as np
import pytest

from doe.aero.drag import StallLimit
from doe.aero.section_analysis import section_lift_curve
from doe.aero.sections import naca4

ALPHAS = np.arange(6.0, 22.01, 0.25)

# Abbott & von Doenhoff 1959, Theory of Wing Sections, App. IV, smooth sections near Re 3e6
# (memory: c_l,max and the angle where it is reached, read from the plotted lift curves)
MEASURED = {"0012": (1.50, 16.0), "2412": (1.60, 16.0), "4412": (1.60, 14.0), "6412": (1.70, 14.0)}


def _peak(code, panels=60, alphas=ALPHAS):
    m, p = int(code[0]) / 100, int(code[1]) / 10
    cl, margin = section_lift_curve(naca4(m, p, 0.12, panels), alphas)
    i = int(np.argmax(cl))
    return cl[i], alphas[i], cl, margin


@pytest.mark.parametrize("code", sorted(MEASURED))
def test_clmax_and_stall_angle_near_measured(code):
    # the tolerance: c_l,max within 10 %, stall angle within 2 deg of the measured values
    clmax, angle, cl, margin = _peak(code)
    ref_cl, ref_angle = MEASURED[code]
    assert clmax == pytest.approx(ref_cl, rel=0.10)
    assert angle == pytest.approx(ref_angle, abs=2.0)
    assert cl[-1] < clmax - 0.03                       # lift falls past the maximum: the section stalls
    assert margin[0] < 0.8 and margin[-1] > 1.0        # attached at 6 deg, past the criterion at 22 deg


@pytest.mark.parametrize("code", ["0012", "4412"])
def test_stall_converges_with_panels(code):
    # 60 -> 120 -> 240 panels: c_l,max and the stall margin move by under 2 % (the check)
    results = [_peak(code, n, np.arange(8.0, 20.01, 0.5)) for n in (60, 120, 240)]
    for coarse, fine in zip(results, results[1:]):
        assert fine[0] == pytest.approx(coarse[0], rel=0.02)
        np.testing.assert_allclose(fine[3], coarse[3], rtol=0.02)


def test_stall_limit_keeps_lift_smooth():
    # no step: the limited lift changes by under 0.05 per quarter degree through stall
    cl = _peak("4412")[2]
    assert np.max(np.abs(np.diff(cl))) < 0.05
    factor, _, stalled = StallLimit(23.0, 0.15, 0.05, 1.4).apply(np.linspace(0, 40, 801))
    assert np.all(np.diff(factor) <= 0) and stalled[-1] and not stalled[0]


def test_ground_effect_has_a_viscous_limit():
    # Zerihan & Zhang 2000, J. Aircraft 37:1058 (memory): an inverted single-element wing's downforce rises as
    # it nears the ground until the boundary layer separates; the peak lies near a gap of 0.1 chord and the
    # downforce falls below it. Inverted NACA 2412 at 2 deg, gap = the section's lowest point above the road
    gaps = np.array([0.03, 0.05, 0.07, 0.1, 0.13, 0.2, 0.3, 0.5, 1.0])
    cl = np.array([section_lift_curve(naca4(0.02, 0.4, 0.12), [2.0], ground_gap=g, inverted=True)[0][0]
                   for g in gaps])
    peak = int(np.argmin(cl))                           # most downforce (cl most negative)
    assert 0.07 <= gaps[peak] <= 0.13
    assert cl[0] > cl[peak] + 0.2                       # falls below the peak
    assert np.all(np.diff(cl[peak:]) > 0)               # and rises steadily above it
    # magnitude: peak sectional downforce of order 1.5 (Zerihan & Zhang's measured maximum about 1.7; memory)
    assert 1.2 < -cl[peak] < 2.0


def test_section_analysis_reports_the_limited_lift():
    # `doe section` (analyse_section) gives the same viscous, stall-limited lift as the model's lift curve
    from doe.aero.section_analysis import analyse_section

    sec = naca4(0.04, 0.4, 0.12, 60)
    for alpha in (4.0, 16.0):
        res = analyse_section(sec, alpha)
        cl, margin = section_lift_curve(sec, [alpha])
        assert res.cl_viscous == pytest.approx(cl[0], rel=1e-9)
        assert res.stall_margin == pytest.approx(margin[0], rel=1e-9)
