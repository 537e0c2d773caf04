"""Lifting line, endplates, skin friction, air properties and stall against their published forms."""
from __future__ import annotations

import numpy as np
import pytest

from doe.aero.atmosphere import ISA_DENSITY, viscosity
from doe.aero.drag import StallLimit, flat_plate_cf, form_factor
from doe.aero.lifting_line import endplate_aspect_ratio, glauert
from doe.errors import AeroError


@pytest.mark.parametrize("ar", [3.0, 6.0, 10.0])
def test_elliptic_wing_closed_form(ar):
    # Prandtl: elliptic loading, C_L_alpha = a0 / (1 + a0 / (pi AR)), C_Di = C_L^2 / (pi AR) (Anderson, Fundamentals, §5.3.1)
    a0 = 2 * np.pi
    ll = glauert(ar, a0, planform="elliptic")
    assert ll.lift_slope == pytest.approx(a0 / (1 + a0 / (np.pi * ar)), rel=1e-10)
    assert ll.delta == pytest.approx(0.0, abs=1e-12)
    assert ll.induced_drag(0.8) == pytest.approx(0.64 / (np.pi * ar), rel=1e-10)


def test_rectangular_wing_ar6():
    # REFERENCES.md (Glauert 1926, computed with many terms): AR 6, a0 = 2 pi: delta = 0.048, slope 4.530 /rad
    ll = glauert(6.0, 2 * np.pi)
    assert ll.lift_slope == pytest.approx(4.530, abs=0.002)
    assert ll.delta == pytest.approx(0.048, abs=0.001)
    # textbook chart value delta = 0.055 (Anderson, ex. 5.3), read from a figure: +-25 %
    assert ll.delta == pytest.approx(0.055, rel=0.25)


def test_series_is_converged():
    # more terms change the slope by less than 1e-4 (the default is enough for 4 figures)
    assert abs(glauert(6.0, terms=24).lift_slope - glauert(6.0, terms=64).lift_slope) < 1e-4


def test_endplate_correction():
    # Katz 1995, Race Car Aerodynamics (credited to Hoerner): AR_eff = AR (1 + 1.9 h / b)
    assert endplate_aspect_ratio(5.0, 0.13, 1.3) == pytest.approx(5.0 * 1.19)
    assert endplate_aspect_ratio(5.0, 0.0, 1.3) == pytest.approx(5.0)
    with pytest.raises(AeroError):
        endplate_aspect_ratio(5.0, -0.1, 1.3)


def test_iso_2533_air():
    # ISO 2533:1975 sea level: rho = 1.2250 kg/m^3, mu = 1.7894e-5 Pa s (Sutherland, beta 1.458e-6, S 110.4 K)
    assert ISA_DENSITY == 1.2250
    assert viscosity(288.15) == pytest.approx(1.7894e-5, rel=2e-4)   # the standard's 5 significant figures


def test_skin_friction_against_an_independent_line():
    # Prandtl-Schlichting (Schlichting, Boundary-Layer Theory, ch. 21) against the ITTC 1957 line
    # 0.075 / (log10 Re - 2)^2 (ITTC 1957, memory): two published fits agree within 5 % at 1e6-1e8
    for re in (1e6, 1e7, 1e8):
        assert flat_plate_cf(re) == pytest.approx(0.075 / (np.log10(re) - 2) ** 2, rel=0.05)
    # NACA 0012 at Re 6e6: fully turbulent 2 Cf FF = 0.0082, between the smooth (0.0058, partly laminar)
    # and rough (0.0095) measurements of Abbott & von Doenhoff 1959, App. IV (memory)
    assert 0.0058 < 2 * flat_plate_cf(6e6) * form_factor(0.12) < 0.0095


def test_stall_limit_is_smooth_and_flags():
    lim = StallLimit(10.0)
    dcp = np.linspace(0.0, 20.0, 401)
    factor, extra, stalled = lim.apply(dcp)
    assert np.all(np.diff(factor) <= 0) and np.all(np.isfinite(factor))
    assert np.max(np.abs(np.diff(factor))) < 0.01               # no step anywhere (steps of 0.05 in dCp)
    assert factor[0] == pytest.approx(1.0, abs=1e-6)            # no effect far below the criterion
    assert stalled[dcp >= 10.0].all() and not stalled[dcp < 10.0].any()
    # past stall the lift of a section whose suction peak grows as the square of its lift stays near its stall value
    cl = np.sqrt(dcp)
    assert np.max(cl * factor) < 1.05 * np.sqrt(10.0)
