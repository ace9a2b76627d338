"""Control blocks of the emulated controller: PI anti-windup, ramp rates, the firing-angle
linearisations and the discontinuous-conduction boundary."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from host.controller import firing
from host.controller.blocks import PI, Ramp, interp, lowpass_factor

DT = 1.0 / 300.0


# ---- PI ----------------------------------------------------------------------------------------
def test_pi_unsaturated_matches_the_pi_law():
    # u = kp*(e + (1/ti) * integral e dt) with a constant error: linear growth, the PI law
    pi = PI(kp=2.0, ti_s=0.5)
    e = 1.5
    for k in range(1, 31):
        u = pi.step(e, DT, -1e9, 1e9)
        assert u == pytest.approx(2.0 * (e + e * k * DT / 0.5), rel=1e-12)


def test_pi_feedforward_and_gain_change_are_bumpless():
    pi = PI(kp=1.0, ti_s=0.1)
    for _ in range(20):
        pi.step(1.0, DT, -100, 100)
    before = pi.step(0.0, DT, -100, 100)
    after = pi.step(0.0, DT, -100, 100, gain=5.0)  # zero error: a gain change must not jump
    assert after == pytest.approx(before)
    assert pi.step(0.0, DT, -100, 100, ff=7.0) == pytest.approx(before + 7.0)


def test_pi_anti_windup_leaves_the_limit_on_the_first_reversed_error():
    pi = PI(kp=0.5, ti_s=0.05)
    for _ in range(3000):  # 10 s pinned against the upper limit
        u = pi.step(10.0, DT, -5.0, 5.0)
    assert u == 5.0 and pi.saturated == 1
    assert pi.integral <= 5.0  # no windup stored beyond the limit
    u = pi.step(-0.1, DT, -5.0, 5.0)
    assert u < 5.0 and pi.saturated == 0


def test_pi_without_anti_windup_would_have_stuck():
    # the same run on a naive PI (integral free, output clipped) stays at the limit for long:
    # shows that the test above can fail
    integ, kp, ti = 0.0, 0.5, 0.05
    for _ in range(3000):
        integ += kp * 10.0 * DT / ti
    u = min(5.0, kp * -0.1 + integ)
    assert u == 5.0


def test_pi_moving_limit_does_not_store_windup():
    pi = PI(kp=1.0, ti_s=0.01)
    for _ in range(100):
        pi.step(1.0, DT, 0.0, 10.0)
    pi.step(0.0, DT, 0.0, 2.0)  # the limit moves down under it
    assert pi.integral <= 2.0


def test_pi_hold_freezes_the_integral():
    pi = PI(kp=1.0, ti_s=0.1)
    pi.step(1.0, DT, -10, 10)
    i0 = pi.integral
    pi.step(1.0, DT, -10, 10, hold=True)
    assert pi.integral == i0


# ---- ramp --------------------------------------------------------------------------------------
def test_ramp_rates_accel_and_decel():
    r = Ramp()
    accel, decel = 200.0, 50.0
    n = 0
    while r.out < 500.0:
        r.step(500.0, DT, accel, decel)
        n += 1
    assert n == math.ceil(500.0 / (accel * DT) - 1e-9)  # 2.5 s at 200 rpm/s
    n = 0
    while r.out > 0.0:
        r.step(0.0, DT, accel, decel)
        n += 1
    assert n == math.ceil(500.0 / (decel * DT) - 1e-9)  # 10 s at 50 rpm/s


@pytest.mark.parametrize("accel, rounding_s", [(150.0, 0.4), (500.0, 0.2), (50.0, 1.0)])
def test_rounded_ramp_is_an_s_curve(accel, rounding_s):
    """A jerk-limited ramp (hand calculation, no source needed): the rate rises at
    j = accel / rounding_s to accel, runs there and falls at j to land on the target with zero
    rate, so a ramp of height H takes H / accel + rounding_s; during the rise the output is
    j t^2 / 2. Never above the target, rate never above accel."""
    r = Ramp()
    H = 500.0
    j = accel / rounding_s
    out, rate = [], []
    for _ in range(int((H / accel + 2 * rounding_s) / DT)):
        out.append(r.step(H, DT, accel, accel, rounding_s))
        rate.append(r.rate)
    out, rate = np.array(out), np.array(rate)
    assert np.all(out <= H) and np.all(np.diff(out) >= 0.0)
    assert np.max(rate) == pytest.approx(accel, rel=1e-9)
    n_land = int(np.argmax(out >= H)) + 1
    # within four frames: the discrete rate leads by a frame at the start (it is j DT in the
    # first frame), the braking curve is evaluated at the frame start, the last frame snaps
    assert n_land * DT == pytest.approx(H / accel + rounding_s, abs=4 * DT)
    # the start: j t^2 / 2 (the discrete rate rises j DT per frame: within one frame's rise)
    k = int(0.5 * rounding_s / DT)
    t = (k + 1) * DT
    assert out[k] == pytest.approx(j * t * t / 2.0, rel=0.05)
    # jerk j while the rate builds up and on the run-in, up to 1.25 j in the last frames (the
    # braking curve sqrt(2 j distance) is sampled once a frame), not counting the final snap
    dj = np.abs(np.diff(rate[:n_land - 1])) / DT
    assert np.all(dj[: n_land // 2] <= j * (1 + 1e-9))
    assert np.max(dj) <= 1.3 * j
    assert rate[n_land - 2] <= 2.5 * j * DT * 2
    assert r.rate == 0.0


def test_rounded_ramp_lands_on_zero_for_a_stop_and_follows_a_new_target():
    r = Ramp()
    r.reset(300.0)
    for _ in range(int(3.0 / DT)):
        r.step(0.0, DT, 150.0, 150.0, 0.4)
    assert r.out == 0.0 and r.rate == 0.0
    # a target changed in mid-ramp: the output turns smoothly and never passes the new target
    r.reset(0.0)
    outs = [r.step(500.0, DT, 150.0, 150.0, 0.4) for _ in range(int(1.0 / DT))]
    outs += [r.step(200.0, DT, 150.0, 150.0, 0.4) for _ in range(int(4.0 / DT))]
    assert max(outs) < 200.0 + 1e-9 or outs[-1] == 200.0
    assert outs[-1] == 200.0


def test_ramp_reversal_decelerates_to_zero_first():
    r = Ramp()
    r.reset(100.0)
    outs = []
    for _ in range(600):
        outs.append(r.step(-100.0, DT, 300.0, 30.0))
    # from +100 down to 0 at the decel rate (3.33 s = 1000 frames would be needed): still > 0
    assert outs[-1] > 0.0
    slope = (outs[0] - outs[299]) / (299 * DT)
    assert slope == pytest.approx(30.0, rel=1e-6)
    r.reset(0.25)  # 0.1 rpm per frame at 30 rpm/s: zero after 3 frames, clipped there
    for _ in range(3):
        r.step(-100.0, DT, 300.0, 30.0)
    assert r.out <= 0.0
    y0 = r.out
    r.step(-100.0, DT, 300.0, 30.0)
    assert y0 - r.out == pytest.approx(300.0 * DT)  # below zero it accelerates at the accel rate


def test_lowpass_factor_is_the_exact_step_response():
    k = lowpass_factor(DT, 0.01)
    y = 0.0
    for _ in range(30):
        y += k * (1.0 - y)
    assert y == pytest.approx(1.0 - math.exp(-30 * DT / 0.01), rel=1e-12)


def test_interp_holds_outside_and_is_linear_inside():
    xs, ys = (0.0, 1.0, 2.0), (0.0, 1.0, 1.5)
    assert interp(0.5, xs, ys) == 0.5
    assert interp(1.5, xs, ys) == 1.25
    assert interp(9.0, xs, ys) == 1.5
    assert interp(-1.0, xs, ys) == 0.0
    assert interp(0.7, xs, ys) == pytest.approx(np.interp(0.7, xs, ys))  # numpy as reference


# ---- firing-angle linearisation ----------------------------------------------------------------
def test_vdo_is_three_root_two_over_pi_times_vll():
    # Mohan, Undeland, Robbins, Power Electronics: Vdo = 3*sqrt(2)/pi * V_LL = 1.35 V_LL
    assert firing.vdo(415.0) == pytest.approx(1.3505 * 415.0, rel=1e-4)
    assert firing.vdo(415.0) == pytest.approx(560.45, abs=0.01)


@pytest.mark.parametrize("alpha", [0.0, 15.0, 30.0, 45.0, 60.0, 89.0, 90.0, 120.0, 150.0])
def test_arccos_linearisation_inverts_vd_equals_vdo_cos_alpha(alpha):
    # Vd = Vdo cos(alpha) (Mohan, Undeland, Robbins, Power Electronics, 6-pulse bridge)
    v_do = firing.vdo(415.0)
    vd = v_do * math.cos(math.radians(alpha))
    assert firing.bridge_alpha_deg(vd, v_do, 0.0, 180.0) == pytest.approx(alpha, abs=1e-9)


def test_arccos_linearisation_clamps_to_the_limits():
    v_do = firing.vdo(415.0)
    assert firing.bridge_alpha_deg(2 * v_do, v_do, 15.0, 150.0) == 15.0
    assert firing.bridge_alpha_deg(-2 * v_do, v_do, 15.0, 150.0) == 150.0
    assert firing.bridge_alpha_deg(0.0, v_do, 15.0, 150.0) == pytest.approx(90.0)


def test_switched_bridge_mean_voltage_matches_vdo_cos_alpha():
    # independent numerical check: mean of the bridge output waveform over one pulse
    v_ll = 415.0
    for alpha in (0.0, 30.0, 75.0, 120.0):
        a = math.radians(alpha)
        phi = np.linspace(-math.pi / 6, math.pi / 6, 20001)
        v = math.sqrt(2) * v_ll * np.cos(phi + a)
        mean = np.trapezoid(v, phi) / (math.pi / 3)
        assert mean == pytest.approx(firing.vdo(v_ll) * math.cos(a), abs=1e-3)


@pytest.mark.parametrize("alpha", [0.0, 30.0, 90.0, 135.0])
def test_half_controlled_bridge_formula(alpha):
    # Vd = 0.45 Vac (1 + cos alpha): single-phase half-controlled bridge (Mohan, Undeland,
    # Robbins, from memory); checked against the mean of the rectified sine, numerically
    vac = 415.0
    th = np.linspace(math.radians(alpha), math.pi, 20001)
    mean = np.trapezoid(math.sqrt(2) * vac * np.sin(th), th) / math.pi
    assert firing.half_bridge_voltage(alpha, vac) == pytest.approx(mean, rel=1e-6)
    assert firing.half_bridge_voltage(alpha, vac) == pytest.approx(
        0.45 * vac * (1 + math.cos(math.radians(alpha))), rel=2e-3)
    v = firing.half_bridge_voltage(alpha, vac)
    assert firing.half_bridge_alpha_deg(v, vac, 0.0, 180.0) == pytest.approx(alpha, abs=1e-6)


def test_critical_current_against_an_ode_solution():
    # solve L di/dt = v(t) - E for one pulse with scipy, E = Vdo cos(alpha), starting from the
    # current's minimum at zero: its mean must equal the boundary current of firing.py
    v_ll, f, l_h, alpha = 415.0, 50.0, 0.0008, 60.0
    a = math.radians(alpha)
    w = 2 * math.pi * f
    vm = math.sqrt(2) * v_ll
    e = firing.vdo(v_ll) * math.cos(a)

    def rhs(t, y):
        phi = -math.pi / 6 + w * t
        return [(vm * math.cos(phi + a) - e) / l_h]

    t_end = (math.pi / 3) / w
    t = np.linspace(0, t_end, 4001)
    sol = solve_ivp(rhs, (0, t_end), [0.0], t_eval=t, rtol=1e-10, atol=1e-10)
    i = sol.y[0] - sol.y[0].min()
    mean = np.trapezoid(i, t) / t_end
    assert firing.critical_current_A(alpha, v_ll, f, l_h, points=2000) == pytest.approx(mean, rel=2e-3)


def test_critical_current_scales_inverse_with_inductance_and_peaks_near_90_deg():
    i1 = firing.critical_current_A(90.0, 415.0, 50.0, 0.001)
    i2 = firing.critical_current_A(90.0, 415.0, 50.0, 0.002)
    assert i1 == pytest.approx(2 * i2, rel=1e-9)
    alphas, tab = firing.critical_current_table(415.0, 50.0, 0.0008)
    assert alphas[0] == 0.0 and alphas[-1] == 180.0
    k = max(range(len(tab)), key=tab.__getitem__)
    assert 75.0 <= alphas[k] <= 105.0
