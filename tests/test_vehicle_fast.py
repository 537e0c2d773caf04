"""The vectorised vehicle figures (doe.vehicle.lap_times, VehicleObjective, balance) against published
formulas, closed-form laps, hand computation and the step-by-step lap model."""
import math

import numpy as np
import pytest
from scipy.optimize import brentq, minimize_scalar

from doe.errors import DoeError
from doe.vehicle import (G, Aero, Segment, Track, Vehicle, VehicleLimit, VehicleObjective, balance_change,
                         balance_shift, corner_speed, corner_speeds, fastest_corner_kph, front_load_share, lap_time,
                         lap_times, normal_moments, top_speed, top_speeds)

from test_vehicle import RHO, car, corner_heavy, grip_limited_hand_case  # the same test car, tracks, hand case


# --- worked values of REFERENCES.md, vectorised --------------------------------------------------
def test_corner_speeds_worked_example():
    # Milliken & Milliken 1995; Katz 2006, Annu. Rev. Fluid Mech. 38:27: V = sqrt(mu g R / (1 - mu rho S C_L R/(2m)));
    # REFERENCES.md worked corner: 24.257 m/s without downforce, 24.637 m/s with S C_L = 1.0 m^2 (computed)
    v = corner_speeds(car(), np.array([0.0, -0.5]), np.array([0.0, -0.5]), 50.0)
    assert v[0] == pytest.approx(24.257, abs=5e-4)  # the table gives 3 decimals
    assert v[1] == pytest.approx(24.637, abs=5e-4)
    assert corner_speeds(car(), -2.5, -2.5, 500.0) == np.inf  # aero outgrows the need (same formula)


def test_top_speeds_worked_example_and_scalar_model():
    # Milliken & Milliken 1995: P = 1/2 rho CDA V^3 (no rolling loss); REFERENCES.md: 150 kW, CDA 0.693 m^2
    # gives 70.70 m/s (computed)
    vt = top_speeds(car(), 0.0, 0.0, 0.693)
    assert vt == pytest.approx(70.70, abs=5e-3)  # the table gives 2 decimals
    # with rolling loss, downforce and front drive, equal to the one-at-a-time root (bisection to 2^-60 of the
    # bracket against brentq at xtol 1e-12)
    v = car(rolling_resistance=0.013, drive="front", power_kw=160.0)
    cf, cr, cd = np.array([0.45, -0.3, 0.2]), np.array([-0.2, -0.5, 0.1]), np.array([0.68, 0.8, 0.6])
    fast = top_speeds(v, cf, cr, cd)
    for i in range(3):
        assert fast[i] == pytest.approx(top_speed(v, Aero(cf[i], cr[i], cd[i])), abs=1e-9)


# --- the fast lap equals the step-by-step one -----------------------------------------------------
@pytest.mark.parametrize("kw,aero", [
    (dict(rolling_resistance=0.012, drive="front", brake_limit_g=1.3), (0.3, 0.1, 0.7)),       # lift on both axles
    (dict(rolling_resistance=0.015, drive="rear"), (0.12, -0.12, 0.7)),                      # no net lift
    (dict(power_kw=400.0, drive="all", brake_limit_g=1.0), (-0.6, -0.9, 0.9)),             # brakes cap, downforce
])
def test_fast_lap_equals_step_model(kw, aero):
    # numerical check: the two solve the same quasi-steady model (Milliken & Milliken 1995, ch. 2) in different
    # ways. The step model at 0.25 m differs from its 0.125 m limit by about 1e-5 s (meeting cells); the fast
    # path's tables add a few 1e-6 s; 5e-5 s on a 38 s lap bounds both with a margin.
    v = car(**kw)
    fast = lap_times(v, corner_heavy(), *aero)
    slow = lap_time(v, Aero(*aero), corner_heavy(), step_m=0.25).time_s
    assert fast == pytest.approx(slow, abs=5e-5)


def test_fast_lap_on_an_awkward_track():
    # corners back to back, straights back to back, a 5 m straight, a corner taken flat out (300 m radius with
    # heavy downforce: corner speed above the 54.6 m/s top speed) and long straights ending near the top speed;
    # same model, same tolerance argument as above (the step model at 0.25 m is within 4e-6 s of 0.1 m here)
    v = Vehicle(mass_kg=1100.0, tyre_mu=1.3, power_kw=120.0, rolling_resistance=0.012, drive="rear",
                brake_limit_g=1.1)
    track = Track((Segment.corner(15, angle_deg=180), Segment.corner(120, angle_deg=40), Segment("straight", 30),
                   Segment("straight", 400), Segment.corner(300, angle_deg=20), Segment.corner(20, angle_deg=90),
                   Segment("straight", 5), Segment.corner(60, angle_deg=70), Segment("straight", 700)))
    aero = (-1.0, -1.5, 1.1)
    assert corner_speed(v, Aero(*aero), 300.0) > top_speed(v, Aero(*aero))
    slow = lap_time(v, Aero(*aero), track, step_m=0.25).time_s
    assert lap_times(v, track, *aero) == pytest.approx(slow, abs=5e-5)


def test_fast_lap_shapes_and_hand_case():
    # the hand case of tests/test_vehicle.py (constant acceleration and braking at mu g, Newton).
    # 1 MW keeps the drive traction-limited up to 70.8 m/s, above the 54.2 m/s peak; CDA 1e-8 m^2 gives a top
    # speed (55 km/s) while its drag (2e-5 N at the peak) moves the lap by about 1e-9 s.
    v = car(power_kw=1000.0)
    L, R, arc, _, _, expected = grip_limited_hand_case()
    track = Track((Segment("straight", L), Segment("corner", arc, R)))
    t = lap_times(v, track, np.zeros((2, 3)), 0.0, 1e-8)
    assert t.shape == (2, 3)
    assert t == pytest.approx(np.full((2, 3), expected), abs=1e-7)  # quadrature of a constant, rounding only


def test_fast_lap_input_errors():
    with pytest.raises(DoeError):
        lap_times(car(), corner_heavy(), 0.1, 0.1, -0.2)
    with pytest.raises(DoeError):
        lap_times(car(), corner_heavy(), np.nan, 0.1, 0.7)
    with pytest.raises(DoeError):
        lap_times(car(), corner_heavy(), 0.1, 0.1, 0.0)   # nothing resists: no top speed


# --- an interior optimum of the drag-downforce trade, known in closed form ---------------------------
RHO_T, M_T, MU_T, R_T, ARC_T, STRAIGHT_T = 1.225, 1000.0, 1.2, 30.0, 60.0, 1000.0


def trade(theta):
    """Downforce area S = theta (m^2) and CDA = 0.5 + 2 theta^2 (m^2): a wing polar (drag grows with lift^2)."""
    return theta, 0.5 + 2.0 * theta**2


def closed_form_lap(theta):
    """Lap of a test car with all-wheel drive, unlimited power, no rolling loss, on one straight and one corner.

    Then a = A + B_a v^2 and b = A + B_b v^2 with A = mu g, B_a = rho (mu S - CDA)/(2m),
    B_b = rho (mu S + CDA)/(2m) (Newton's second law with aero load on the tyres and quadratic drag), and
    D(v) = int v dv/(A + B v^2) = ln(1 + B v^2/A)/(2B), T_a(v) = artanh(v sqrt(-B_a/A))/sqrt(-A B_a) (B_a < 0),
    T_b(v) = arctan(v sqrt(B_b/A))/sqrt(A B_b) (standard integrals). The corner speed is Milliken & Milliken's
    (1995) V = sqrt(mu g R/(1 - mu rho S R/(2m))); the straight peaks where D_a(v_p) - D_a(V) + D_b(v_p) - D_b(V)
    equals its length.
    """
    s, cda = trade(theta)
    a0 = MU_T * G
    ba, bb = RHO_T * (MU_T * s - cda) / (2 * M_T), RHO_T * (MU_T * s + cda) / (2 * M_T)
    vc = math.sqrt(MU_T * G * R_T / (1 - MU_T * RHO_T * s * R_T / (2 * M_T)))

    def dist(v, b):
        return math.log1p(b / a0 * v * v) / (2 * b)

    def t_acc(v):
        return math.atanh(v * math.sqrt(-ba / a0)) / math.sqrt(-a0 * ba)

    def t_brk(v):
        return math.atan(v * math.sqrt(bb / a0)) / math.sqrt(a0 * bb)

    v_top = math.sqrt(-a0 / ba)
    vp = brentq(lambda v: dist(v, ba) - dist(vc, ba) + dist(v, bb) - dist(vc, bb) - STRAIGHT_T, vc,
                v_top * (1 - 1e-15), xtol=1e-13)
    return ARC_T / vc + t_acc(vp) - t_acc(vc) + t_brk(vp) - t_brk(vc)


def test_lap_time_optimum_of_the_trade_is_interior_and_known():
    test_car = Vehicle(mass_kg=M_T, tyre_mu=MU_T, power_kw=1e7, drive="all", air_density_kg_m3=RHO_T)
    track = Track((Segment("straight", STRAIGHT_T), Segment("corner", ARC_T, R_T)))
    objective = VehicleObjective(test_car, track)

    def fast(theta):
        s, cda = trade(np.asarray(theta, dtype=float))
        return objective.lap_time(-0.5 * s, -0.5 * s, cda)

    exact = minimize_scalar(closed_form_lap, bounds=(0.0, 1.0), method="bounded", options={"xatol": 1e-9})
    found = minimize_scalar(lambda t: float(fast(t)), bounds=(0.0, 1.0), method="bounded", options={"xatol": 1e-9})
    # interior: both ends of the trade are clearly slower than the optimum (0.32 s and 0.48 s here)
    assert 0.2 < exact.x < 0.9
    assert closed_form_lap(0.0) > exact.fun + 0.1 and closed_form_lap(1.0) > exact.fun + 0.1
    # lap times agree with the closed form across the trade (the tables give about 5e-7 s here)
    thetas = np.linspace(0.0, 1.0, 11)
    assert fast(thetas) == pytest.approx([closed_form_lap(t) for t in thetas], abs=5e-6)
    # the optimum: the curvature is about 4 s per unit theta^2, so 5e-6 s of error moves it by < 2e-3
    assert found.x == pytest.approx(exact.x, abs=2e-3)
    assert found.fun == pytest.approx(exact.fun, abs=5e-6)
    # the step-by-step model agrees at the optimum (same model, 0.25 m steps)
    s, cda = trade(exact.x)
    slow = lap_time(test_car, Aero(-0.5 * s, -0.5 * s, cda), track, step_m=0.25).time_s
    assert slow == pytest.approx(exact.fun, abs=1e-4)


# --- balance ---------------------------------------------------------------------------------------------
def test_front_load_share_finite_through_zero_net_lift():
    # Hand computation (statics, no load transfer): W = 1200 * 9.80665 = 11767.98 N, static front share
    # b/L = 1.5/2.5 = 0.6; at 40 m/s q = 0.5 * 1.225 * 1600 = 980 Pa; front = 0.6 W - q CLA_f, total = W - q CLA.
    v = car()
    w, q = 1200.0 * 9.80665, 980.0
    cla_front = 0.10
    cla_rear = np.linspace(0.20, -0.60, 81)            # net lift +0.30 to downforce -0.50, through 0 at -0.10
    share = front_load_share(v, cla_front, cla_rear, 40.0)
    assert np.all(np.isfinite(share))
    hand = (0.6 * w - q * cla_front) / (w - q * (cla_front + cla_rear))
    assert share == pytest.approx(hand, rel=1e-14)     # the same arithmetic, rounding only
    # at zero net lift exactly: (7060.788 - 98)/11767.98 = 0.591674 (hand), where CLA_f/CLA is infinite
    zero = front_load_share(v, 0.10, -0.10, 40.0)
    assert zero == pytest.approx((0.6 * w - 98.0) / w, rel=1e-14)
    assert zero == pytest.approx(0.591672, abs=5e-6)
    # balance shift is the share minus the static share, and zero when the aero load is split like the weight
    assert balance_shift(v, 0.10, -0.10, 40.0) == pytest.approx(zero - 0.6, abs=1e-15)
    assert balance_shift(v, -0.6, -0.4, 40.0) == pytest.approx(0.0, abs=1e-15)


def test_balance_change_direction_and_sentence():
    # more rear downforce, front unchanged: the front's share of the load falls -> towards understeer
    # (centre of pressure moves rearwards of the weight distribution: Milliken & Milliken 1995 (memory);
    # common practice)
    v = car()
    before, after = Aero(0.10, -0.10, 0.70), Aero(0.10, -0.50, 0.72)
    ch = balance_change(v, before, after, speed_kph=144.0)      # 40 m/s
    w, q = 1200.0 * 9.80665, 980.0
    assert ch.front_share_before == pytest.approx((0.6 * w - 98.0) / w, rel=1e-13)
    assert ch.front_share_after == pytest.approx((0.6 * w - 98.0) / (w + q * 0.4), rel=1e-13)
    assert ch.change < 0 and ch.direction == "towards understeer" and "understeer" in ch.sentence
    back = balance_change(v, after, before, speed_kph=144.0)
    assert back.direction == "towards oversteer" and back.change == pytest.approx(-ch.change, rel=1e-12)
    same = balance_change(v, before, Aero(0.10, -0.101, 0.70), speed_kph=144.0)
    assert same.direction == "unchanged"


# --- the objective, limits and propagation ----------------------------------------------------------------
def test_objective_figures_match_scalar_functions():
    v = car(rolling_resistance=0.012, drive="front", brake_limit_g=1.3)
    obj = VehicleObjective(v, corner_heavy(), balance_speed_kph=144.0,
                           limits=[VehicleLimit("balance_shift", min=-0.03, max=0.0),
                                   VehicleLimit("corner_speed_50m_kph", min=80.0)])
    assert obj.figure_names == ("lap_time_s", "top_speed_kph", "front_load_share", "balance_shift",
                                "corner_speed_50m_kph")
    cf, cr, cd = np.array([[0.2, -0.1]]), np.array([[-0.3, -0.6]]), np.array([[0.7, 0.75]])
    f = obj.figures(cf, cr, cd)
    assert f["lap_time_s"].shape == (1, 2)
    for i in range(2):
        a = Aero(cf[0, i], cr[0, i], cd[0, i])
        assert f["top_speed_kph"][0, i] == pytest.approx(top_speed(v, a) * 3.6, abs=1e-8)
        assert f["front_load_share"][0, i] == pytest.approx(float(front_load_share(v, a.cla_front_m2,
                                                                                  a.cla_rear_m2, 40.0)), rel=1e-12)
        assert f["corner_speed_50m_kph"][0, i] == pytest.approx(
            3.6 * math.sqrt(1.2 * G * 50 / (1 - 1.2 * RHO * a.downforce_area_m2 * 50 / 2400)), rel=1e-12)
    lim = obj.limits[0]
    assert lim.violation([-0.05, -0.01, 0.02]) == pytest.approx([0.02, 0.0, 0.02])
    assert lim.probability(-0.015, 0.0) == 1.0 and lim.probability(0.0, 1e-9) == pytest.approx(0.5)


def test_normal_moments_exact_for_quadratics():
    # X ~ N(mu, s^2): E[X^2] = mu^2 + s^2, Var[X^2] = 4 mu^2 s^2 + 2 s^4 (moments of the normal distribution);
    # the unscented transform with kappa = 3 - d reproduces both for sums of one-input quadratics
    # (Julier & Uhlmann 2004, Proc. IEEE 92:401)
    mu, s = np.array([1.5, -0.2]), np.array([0.3, 0.05])

    def f(x, y, z):
        return {"sq": x**2, "lin": 2.0 * x - 3.0 * y + z}

    out = normal_moments(f, (mu, 0.0, 4.0), (s, 0.1, 0.2))
    assert out["sq"][0] == pytest.approx(mu**2 + s**2, rel=1e-13)
    assert out["sq"][1] == pytest.approx(np.sqrt(4 * mu**2 * s**2 + 2 * s**4), rel=1e-13)
    # linear: mean at the mean, variance sum c_i^2 s_i^2
    assert out["lin"][0] == pytest.approx(2 * mu + 4.0, rel=1e-13)
    assert out["lin"][1] == pytest.approx(np.sqrt(4 * s**2 + 9 * 0.01 + 0.04), rel=1e-13)


def test_objective_normal_against_monte_carlo():
    # lap time is smooth in the aero inputs: the 6-point transform agrees with 4096 plain draws within
    # the Monte-Carlo error of the draws (std error of the mean ~ std/64, of the std ~ std/90)
    v = car(rolling_resistance=0.012, drive="front", brake_limit_g=1.3)
    obj = VehicleObjective(v, corner_heavy())
    mean, std = (0.1, -0.4, 0.72), (0.03, 0.05, 0.02)
    ut = obj.normal(mean, std, names=["lap_time_s"])["lap_time_s"]
    rng = np.random.default_rng(5)
    draws = [m + s * rng.standard_normal(4096) for m, s in zip(mean, std)]
    mc = obj.lap_time(*draws)
    assert float(ut[0]) == pytest.approx(mc.mean(), abs=4 * mc.std() / 64)
    assert float(ut[1]) == pytest.approx(mc.std(), rel=0.1)


def test_bad_limits():
    with pytest.raises(DoeError):
        VehicleLimit("lap_time", max=60.0)
    with pytest.raises(DoeError):
        VehicleLimit("balance_shift")
    with pytest.raises(DoeError):
        VehicleLimit("balance_shift", min=0.0, max=-0.01)
    with pytest.raises(DoeError):
        VehicleObjective(car(), None, limits=[VehicleLimit("lap_time_s", max=60.0)])


def test_linearised_spread_matches_every_draw():
    # setup scatter moves CLA and CDA by a few hundredths of a m^2: moving the figures linearly from the
    # centre (7 configurations) agrees with evaluating all 64 draws; the second-order terms are below
    # 1 % of the spread here (numerical check of the linearisation, no published value)
    v = car(rolling_resistance=0.012, drive="front", brake_limit_g=1.3)
    obj = VehicleObjective(v, corner_heavy())
    rng = np.random.default_rng(3)
    centre = np.array([[0.1, -0.4, 0.72], [0.3, -0.1, 0.68]])
    draws = centre[:, None, :] + rng.standard_normal((2, 64, 3)) * [0.02, 0.03, 0.01]
    lin = obj.spread(*np.moveaxis(draws, -1, 0), names=["lap_time_s", "top_speed_kph"])
    full = obj.spread(*np.moveaxis(draws, -1, 0), names=["lap_time_s", "top_speed_kph"], exact=True)
    for name in ("lap_time_s", "top_speed_kph"):
        assert lin[name][0] == pytest.approx(full[name][0], abs=0.01 * full[name][1].max())
        assert lin[name][1] == pytest.approx(full[name][1], rel=0.01)
    # slopes against one-sided finite differences of a single configuration: more downforce is faster here,
    # more drag slower (signs), and the central slope matches a 1e-3 m^2 forward step to 2 %
    value, slope = obj.linearised(0.1, -0.4, 0.72, names=["lap_time_s"])["lap_time_s"]
    forward = (obj.lap_time(0.1, -0.4, 0.721) - value) / 1e-3
    assert slope[2] > 0 and slope[1] > 0 and slope[2] == pytest.approx(float(forward), rel=0.02)


def test_draws_carry_the_surrogate_std_linearly():
    # with no scatter at all, the figure's std from the surrogate stds is the first-order (delta-method) one,
    # sqrt(sum (dF/dc_i)^2 s_i^2), which the unscented transform matches for small stds (Julier & Uhlmann 2004)
    v = car(rolling_resistance=0.012, drive="front", brake_limit_g=1.3)
    obj = VehicleObjective(v, corner_heavy())
    c = np.array([0.1, -0.4, 0.72])
    s = np.array([0.004, 0.006, 0.002])
    same = [np.full((1, 4), x) for x in c]
    out = obj.draws(*same, stds=[np.full((1, 4), x) for x in s], names=["lap_time_s"])["lap_time_s"]
    assert np.ptp(out[0]) == 0.0 and np.ptp(out[1]) == 0.0
    ut = obj.normal(c, s, names=["lap_time_s"])["lap_time_s"]
    assert out[1][0, 0] == pytest.approx(float(ut[1]), rel=0.02)
    with pytest.raises(DoeError):
        obj.spread(*[np.full((2, 1), x) for x in c])


def test_fastest_corner_speed():
    # the corner-heavy track's widest corner is 80 m; without aero load V = sqrt(mu g R) (Milliken & Milliken 1995)
    assert fastest_corner_kph(car(), Aero(0.0, 0.0, 0.7), corner_heavy()) == pytest.approx(
        3.6 * math.sqrt(1.2 * G * 80.0), rel=1e-12)
