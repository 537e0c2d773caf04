"""Checks of doe.vehicle against published formulas and hand-worked cases."""
import math

import numpy as np
import pytest
from scipy.optimize import brentq

from doe.errors import DoeError
from doe.vehicle import (G, Aero, Segment, Track, Vehicle, aero_forces, axle_loads, compare_figures,
                         corner_speed, lap_time, top_speed, vehicle_figures)

RHO = 1.225  # ISO 2533:1975 sea level (REFERENCES.md)


def car(**kw):
    base = dict(mass_kg=1200.0, tyre_mu=1.2, power_kw=150.0, wheelbase_m=2.5, cg_to_front_axle_m=1.0,
                rolling_resistance=0.0, drive="all", air_density_kg_m3=RHO)
    base.update(kw)
    return Vehicle(**base)


def test_aero_load_definition():
    # F = 1/2 rho V^2 CLA, negative CLA = downforce (definition, REFERENCES.md "aero load")
    down, drag = aero_forces(car(), Aero.from_total(-0.8, 0.7), 40.0)
    assert down == pytest.approx(0.5 * RHO * 40.0**2 * 0.8, rel=1e-14)  # same arithmetic, rounding only
    assert drag == pytest.approx(0.5 * RHO * 40.0**2 * 0.7, rel=1e-14)


def test_axle_loads_sum_and_static_share():
    v = car()
    front, rear, share = axle_loads(v, Aero.from_total(-1.0, 0.7, front_share=0.3), np.array([0.0, 50.0]))
    down = 0.5 * RHO * 50.0**2 * 1.0
    # statics: axle loads carry weight plus aero load (equilibrium of vertical forces)
    assert front + rear == pytest.approx([v.weight_n, v.weight_n + down], rel=1e-13)
    # at rest the front share is the lever rule b/L (statics); at speed the aero share pulls it towards 0.3
    assert share[0] == pytest.approx(1.5 / 2.5, rel=1e-13)
    assert front[1] == pytest.approx(v.weight_n * 0.6 + 0.3 * down, rel=1e-13)


def test_axle_loads_when_one_axle_lifts():
    # a hatch body lifting at the front while the wing presses the rear: the total is near zero, yet the
    # axles carry W b/L - q CLA_f and W a/L - q CLA_r (statics with F = 1/2 rho V^2 CLA per axle)
    v = car()
    a = Aero(0.12, -0.12, 0.7)
    assert a.cla_m2 == 0.0 and a.front_share is None
    q = 0.5 * RHO * 45.0**2
    front, rear, _ = axle_loads(v, a, 45.0)
    assert front == pytest.approx(v.weight_n * 0.6 - q * 0.12, rel=1e-13)
    assert rear == pytest.approx(v.weight_n * 0.4 + q * 0.12, rel=1e-13)
    assert corner_speed(v, a, 50.0) == pytest.approx(math.sqrt(1.2 * G * 50.0), rel=1e-12)  # no net load


def test_corner_speed_worked_example():
    # Milliken & Milliken 1995, Race Car Vehicle Dynamics; Katz 2006, Annu. Rev. Fluid Mech. 38:27:
    # m V^2/R = mu (m g + 1/2 rho V^2 S C_L) => V = sqrt(mu g R / (1 - mu rho S C_L R / (2 m))).
    # Worked case of REFERENCES.md: 24.257 m/s without downforce, 24.637 m/s with S C_L = 1.0 m^2 (computed).
    v = car()
    v0 = corner_speed(v, Aero.from_total(0.0, 0.7), 50.0)
    v1 = corner_speed(v, Aero.from_total(-1.0, 0.7), 50.0)
    assert v0 == pytest.approx(math.sqrt(1.2 * G * 50.0), rel=1e-12)  # closed form, rounding only
    assert v0 == pytest.approx(24.257, abs=5e-4)  # the table gives 3 decimals
    assert v1 == pytest.approx(24.637, abs=5e-4)
    # the speed satisfies the force balance it comes from
    lateral = v.mass_kg * v1**2 / 50.0
    assert lateral == pytest.approx(1.2 * (v.mass_kg * G + 0.5 * RHO * v1**2 * 1.0), rel=1e-12)


def test_corner_speed_unbounded_when_aero_outgrows_need():
    # denominator 1 - mu rho S C_L R/(2m) <= 0: grip grows faster than need (same formula)
    assert corner_speed(car(), Aero.from_total(-5.0, 0.7), 500.0) == math.inf


def test_top_speed_worked_example():
    # Milliken & Milliken 1995: P = 1/2 rho CDA V^3 + C_rr (m g + 1/2 rho V^2 S C_L) V.
    # REFERENCES.md worked case: 150 kW at the wheels, CDA 0.693 m^2, no rolling loss: 70.70 m/s (computed).
    vt = top_speed(car(), Aero.from_total(0.0, 0.693))
    assert vt == pytest.approx((2 * 150e3 / (RHO * 0.693)) ** (1 / 3), rel=1e-10)  # root-finder tolerance
    assert vt == pytest.approx(70.70, abs=5e-3)  # the table gives 2 decimals


def test_top_speed_with_rolling_resistance_meets_power_balance():
    # same equation with rolling loss and downforce (Milliken & Milliken 1995)
    v = car(rolling_resistance=0.015)
    a = Aero.from_total(-0.9, 0.72)
    vt = top_speed(v, a)
    need = 0.5 * RHO * 0.72 * vt**3 + 0.015 * (v.weight_n + 0.5 * RHO * vt**2 * 0.9) * vt
    assert need == pytest.approx(150e3, rel=1e-9)  # brentq xtol 1e-12 on speed


def oval(straight_m=200.0, radius_m=50.0, arc_m=100.0):
    return Track((Segment("straight", straight_m), Segment("corner", arc_m, radius_m)))


def grip_limited_hand_case():
    """(L, R, arc, V_c, V_p, lap time) of the hand case below; SI units."""
    # Hand-computed: no aero, no rolling loss, power never limiting, drive on all wheels, so the car
    # accelerates and brakes at mu g (Newton, constant acceleration). Corner at V_c = sqrt(mu g R)
    # (Milliken & Milliken 1995); the straight peaks half-way: V_p^2 = V_c^2 + mu g L;
    # t = 2 (V_p - V_c)/(mu g) + arc / V_c.
    mu_g, L, R, arc = 1.2 * G, 200.0, 50.0, 100.0
    vc = math.sqrt(mu_g * R)
    vp = math.sqrt(vc**2 + mu_g * L)
    return L, R, arc, vc, vp, 2 * (vp - vc) / mu_g + arc / vc


def test_lap_time_hand_case_grip_limited():
    v = car(power_kw=1e9)
    L, R, arc, vc, vp, expected = grip_limited_hand_case()
    lap = lap_time(v, Aero.from_total(0.0, 0.0), oval(L, R, arc), step_m=0.5)
    # exact per cell at constant acceleration; the only error is the cell where the two curves meet
    assert lap.time_s == pytest.approx(expected, rel=1e-4)
    assert lap.max_speed_m_s == pytest.approx(vp, rel=1e-4)
    assert lap.segment_times_s[1] == pytest.approx(arc / vc, rel=1e-12)


def test_lap_time_hand_case_power_limited():
    # Hand-computed: power-limited acceleration with no drag, P = m v dv/dt, so
    # s = m (V1^3 - V0^3)/(3P) and t = m (V1^2 - V0^2)/(2P) (work-energy theorem);
    # braking at mu g: s = (V1^2 - V0^2)/(2 mu g), t = (V1 - V0)/(mu g). V1 from s_acc + s_brk = L.
    m, P, mu_g, L, R, arc = 1200.0, 50e3, 1.2 * G, 300.0, 50.0, 80.0
    v = car(power_kw=P / 1e3)
    v0 = math.sqrt(mu_g * R)
    assert P / v0 < 1.2 * m * G  # the car is power-limited from the corner exit on
    v1 = brentq(lambda x: m * (x**3 - v0**3) / (3 * P) + (x**2 - v0**2) / (2 * mu_g) - L, v0, 200.0)
    expected = m * (v1**2 - v0**2) / (2 * P) + (v1 - v0) / mu_g + arc / v0
    lap = lap_time(v, Aero.from_total(0.0, 0.0), oval(L, R, arc), step_m=0.25)
    # RK4 in v^2 is near exact on the power curve; the meeting cell dominates the error
    assert lap.time_s == pytest.approx(expected, rel=2e-4)


def corner_heavy():
    segs = []
    for r in (25.0, 40.0, 60.0, 35.0, 80.0, 30.0):
        segs += [Segment("straight", 60.0), Segment.corner(r, angle_deg=120.0)]
    return Track(tuple(segs), "twisty (invented)")


def test_more_downforce_is_faster_on_a_corner_heavy_track():
    # Physics (Milliken & Milliken 1995): more aero load raises every corner speed; the small drag
    # cost on 60 m straights must not outweigh it on this corner-heavy track.
    v = car(rolling_resistance=0.012, drive="front", brake_limit_g=1.3)
    track = corner_heavy()
    slow = lap_time(v, Aero.from_total(-0.2, 0.70), track).time_s
    fast = lap_time(v, Aero.from_total(-0.8, 0.74), track).time_s
    assert fast < slow
    # more drag at the same downforce never helps
    assert lap_time(v, Aero.from_total(-0.8, 0.90), track).time_s > fast


def test_lap_grid_converges():
    # numerical check: halving the step changes the lap time by far less than any aero effect
    v = car(rolling_resistance=0.012, drive="front")
    t1 = lap_time(v, Aero.from_total(-0.5, 0.7), corner_heavy(), step_m=1.0).time_s
    t2 = lap_time(v, Aero.from_total(-0.5, 0.7), corner_heavy(), step_m=0.5).time_s
    assert abs(t1 - t2) < 1e-3 * t2


def test_figures_and_deltas():
    v = car(rolling_resistance=0.012, drive="front")
    base = vehicle_figures(v, Aero.from_total(-0.3, 0.70), corner_heavy(), speeds_kph=(100.0, 200.0), radii_m=(50.0,))
    new = vehicle_figures(v, Aero.from_total(-0.6, 0.72), corner_heavy(), speeds_kph=(100.0, 200.0), radii_m=(50.0,))
    d = compare_figures(base, new)
    assert d["downforce_n"][1] == pytest.approx(0.5 * RHO * (200 / 3.6) ** 2 * 0.3, rel=1e-12)
    assert d["lap_time_s"] < 0 and d["top_speed_kph"] < 0 and d["corner_speed_kph"][0] > 0
    assert base.to_dict()["speeds_kph"] == [100.0, 200.0]


@pytest.mark.parametrize("kw", [dict(mass_kg=-1.0), dict(tyre_mu=0.0), dict(drive="awd"),
                                dict(cg_to_front_axle_m=3.0), dict(brake_limit_g=0.0)])
def test_bad_vehicle_input(kw):
    with pytest.raises(DoeError):
        car(**kw)


def test_bad_track_input():
    with pytest.raises(DoeError):
        Track((Segment("straight", 100.0),))
    with pytest.raises(DoeError):
        Segment.corner(30.0)
    with pytest.raises(DoeError):
        Segment("corner", 50.0)


def test_figures_carry_a_finite_balance_at_zero_net_lift():
    # front lifting, rear pressed: no net lift, so the aero front share CLA_f/CLA has no value, while the front
    # axle's share of the whole load is (0.6 W - q 0.12)/W at each speed (statics, hand formula)
    v = car()
    f = vehicle_figures(v, Aero(0.12, -0.12, 0.7), speeds_kph=(144.0,), radii_m=(50.0,))
    q = 0.5 * RHO * 40.0**2
    assert f.aero_front_share is None
    assert f.static_front_share == pytest.approx(0.6, rel=1e-15)
    assert f.balance_shift[0] == pytest.approx(-q * 0.12 / v.weight_n, rel=1e-12)   # towards understeer
    assert f.to_dict()["balance_shift"] == [f.balance_shift[0]]
