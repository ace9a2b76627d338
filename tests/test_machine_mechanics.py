"""Mechanics and load laws against closed-form solutions of J dw/dt = Te - T_friction - T_load.

Every run here has Te known: zero with the armature open (coast-downs), or the steady balance
Te = T_load (braking while lowering). Closed forms are elementary solutions of the first-order
ODE (any dynamics textbook, e.g. Meriam & Kraige, Engineering Mechanics: Dynamics; the friction
run-down as in Leonhard, Control of Electrical Drives, ch. 2 - from memory):
  constant passive load  w = w0 - T t / J until standstill, then rest (it never drives)
  proportional           w = w0 exp(-t T / (J w_r))
  quadratic (fan)        w = w0 / (1 + w0 T t / (J w_r^2))
  overhauling (gravity)  w = -T t / J from rest (drives the shaft downwards)
  viscous + coulomb      w = (w0 + Tc/B) exp(-B t / J) - Tc/B, stop at (J/B) ln(1 + B w0 / Tc)
Braking while lowering on a resistor, steady state: Te = T_load and 0 = E + (Ra + R) ia + Vb.
Power balance of a machine on a prime mover: electrical input = Te w + Ia^2 Ra + Vb |Ia|.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq

import reference_models as R
from host.config import load
from rtmodel import layout as L

RPM = R.RPM
W_RATED = 1450 * RPM
J = 0.5


def _plant(tmp_path, conn=R.SEPARATE, law="constant", over=(), duty="motor"):
    over = ("machine.thermal.frozen=true",) + tuple(over)
    stem = f"mech_{conn}_{law}_{abs(hash(over)) % 10**8}"
    path = R.write_machine(tmp_path, stem, R.machine_toml(conn, duty=duty, load=law))
    plant = R.load_plant(path, over)
    m = R.machine_from_config(load("machine", path, list(over)).values)
    return plant, m


def _coast(kernel, plant, m, w0, t_end, t_load, sample=1e-3, ish=0.0, extra=None):
    """Armature open (no torque); shaft coasts from w0 against friction and load."""
    inp = R.Inputs(contactor=False, load_torque_Nm=t_load, field_V=ish * m.rsh)
    segs = [(0.0, inp)] + (extra or [])
    x = R.kernel_state(plant, m, [0.0, ish, w0, 40.0])
    return R.run_kernel(kernel, plant, x, segs, t_end, sample)


def test_constant_passive_load_coast_down_and_stays_at_rest(kernel, tmp_path):
    plant, m = _plant(tmp_path, law="constant")
    t_load, w0 = 50.0, 150.0
    t, Y = _coast(kernel, plant, m, w0, 2.0, t_load)
    w = Y[:, L.Y_SPEED_RAD_S]
    t_stop = w0 * J / t_load
    sel = t < t_stop - 0.01
    err = np.max(np.abs(w[sel] - (w0 - t_load * t[sel] / J)))
    print(f"\nconstant load coast-down: max |error| {err:.2e} rad/s, speed at 2 s {w[-1]:.2e} rad/s")
    assert err < 1e-6 * w0
    assert np.all(np.abs(w[t > t_stop + 0.01]) <= m.w_smooth)  # rest; a passive load never drives
    assert np.all(w >= -m.w_smooth)
    # from rest it stays at rest
    t, Y = _coast(kernel, plant, m, 0.0, 0.5, t_load)
    assert np.all(Y[:, L.Y_SPEED_RAD_S] == 0.0)


@pytest.mark.parametrize("w0", [150.0, -150.0])
def test_proportional_load_coast_down(kernel, tmp_path, w0):
    plant, m = _plant(tmp_path, law="proportional")
    t_load = 50.0
    t, Y = _coast(kernel, plant, m, w0, 1.5, t_load)
    expect = w0 * np.exp(-t * t_load / (J * W_RATED))
    err = np.max(np.abs(Y[:, L.Y_SPEED_RAD_S] - expect))
    print(f"\nproportional load from {w0} rad/s: max |error| {err:.2e} rad/s")
    assert err < 1e-6 * abs(w0)


@pytest.mark.parametrize("w0", [150.0, -150.0])
def test_quadratic_load_coast_down(kernel, tmp_path, w0):
    plant, m = _plant(tmp_path, law="quadratic")
    t_load = 50.0
    t, Y = _coast(kernel, plant, m, w0, 1.5, t_load)
    expect = w0 / (1.0 + abs(w0) * t_load * t / (J * W_RATED**2))
    err = np.max(np.abs(Y[:, L.Y_SPEED_RAD_S] - expect))
    print(f"\nquadratic load from {w0} rad/s: max |error| {err:.2e} rad/s")
    assert err < 1e-6 * abs(w0)


def test_overhauling_load_drives_deenergised_series_motor_down(kernel, tmp_path):
    plant, m = _plant(tmp_path, conn=R.SERIES, law="overhauling")
    t_load = 40.0
    t, Y = _coast(kernel, plant, m, 0.0, 1.0, t_load)
    err = np.max(np.abs(Y[:, L.Y_SPEED_RAD_S] + t_load * t / J))
    print(f"\noverhauling, de-energised series motor: max |error| {err:.2e} rad/s, speed at 1 s "
          f"{Y[-1, L.Y_SPEED_RPM]:.0f} r/min")
    assert err < 1e-9 * t_load / J
    assert np.all(Y[1:, L.Y_LOAD_TORQUE_NM] == t_load)  # gravity torque keeps its sign
    assert np.all(Y[:, L.Y_IA_A] == 0.0)


def test_series_motor_brakes_while_lowering_on_resistor(kernel, tmp_path):
    """Overhauling load, series motor on a braking resistor (contactor open). Driven backwards,
    the residual EMF drives a current that aids the residual flux: it self-excites and brakes
    to a steady lowering speed where Te = T_load."""
    plant, m = _plant(tmp_path, conn=R.SERIES, law="overhauling")
    t_load, r_brake = 80.0, 2.0
    inp = R.Inputs(contactor=False, load_ohm=r_brake, load_torque_Nm=t_load)
    x = R.kernel_state(plant, m, [0.0, 0.0, 0.0, 40.0])
    t, Y = R.run_kernel(kernel, plant, x, [(0.0, inp)], 3.0, 1e-3)
    ra = R.copper_ohm(m.ra_ref, 40.0, m.t_ref)
    c = m.curve
    ia = brentq(lambda i: c.emf(i)[0] / c.w_c * i - t_load, 1.0, 200.0, xtol=1e-13)
    w_ss = -((ra + m.rse + r_brake) * ia + m.vb0) * c.w_c / c.emf(ia)[0]
    print(f"\nseries braking while lowering: model {Y[-1, L.Y_SPEED_RAD_S]:.4f} rad/s, {Y[-1, L.Y_IA_A]:.4f} A; "
          f"closed form {w_ss:.4f} rad/s, {ia:.4f} A")
    assert abs(Y[-1, L.Y_SPEED_RAD_S] - w_ss) < 1e-4 * abs(w_ss)
    assert abs(Y[-1, L.Y_IA_A] - ia) < 1e-4 * ia
    assert Y[-1, L.Y_TORQUE_NM] * Y[-1, L.Y_SPEED_RAD_S] < 0.0  # braking: torque opposes motion
    assert np.min(Y[:, L.Y_SPEED_RAD_S]) < w_ss  # it fell faster before it excited


def test_separately_excited_brakes_while_lowering(kernel, tmp_path):
    plant, m = _plant(tmp_path, law="overhauling")
    t_load, r_brake, i_f = 80.0, 5.0, 1.0
    k = 440.0 / (1500 * RPM)
    inp = R.Inputs(contactor=False, load_ohm=r_brake, load_torque_Nm=t_load, field_V=i_f * m.rsh)
    x = R.kernel_state(plant, m, [0.0, i_f, 0.0, 40.0])
    t, Y = R.run_kernel(kernel, plant, x, [(0.0, inp)], 4.0, 1e-3)
    ra = R.copper_ohm(m.ra_ref, 40.0, m.t_ref)
    ia = t_load / k
    w_ss = -((ra + r_brake) * ia + m.vb0) / k
    print(f"\nseparately excited braking while lowering: model {Y[-1, L.Y_SPEED_RAD_S]:.5f} rad/s, "
          f"closed form {w_ss:.5f} rad/s")
    assert abs(Y[-1, L.Y_SPEED_RAD_S] - w_ss) < 1e-4 * abs(w_ss)
    assert abs(Y[-1, L.Y_IA_A] - ia) < 1e-4 * ia
    assert Y[-1, L.Y_INPUT_POWER_W] < 0.0  # the resistor takes the lowering power


def test_prime_mover_imposes_speed_and_power_balances(kernel, tmp_path):
    plant, m = _plant(tmp_path, law="prime_mover", duty="generator",
                      over=("mechanics.viscous_Nm_per_rad_s=0.05", "machine.thermal.initial_C=75"))
    w, i_f = 1300 * RPM, 1.0
    inp = R.Inputs(contactor=False, load_ohm=8.0, field_V=i_f * m.rsh, prime_rad_s=w)
    x = R.kernel_state(plant, m, [0.0, i_f, 0.0, 75.0])  # the prime mover sets the speed at once
    t, Y = R.run_kernel(kernel, plant, x, [(0.0, inp)], 0.3, 1e-3)
    assert np.all(Y[1:, L.Y_SPEED_RAD_S] == w)
    y = Y[-1]
    ia, te = y[L.Y_IA_A], y[L.Y_TORQUE_NM]
    ra = R.copper_ohm(m.ra_ref, 75.0, m.t_ref)
    assert abs(ia) > m.knee
    p_el = te * w + ia * ia * ra + m.vb0 * abs(ia)  # brush loss Vb(ia) ia > 0 either way
    rel = abs(y[L.Y_INPUT_POWER_W] - p_el) / abs(p_el)
    # the prime mover supplies the load torque the shaft sees: electrical torque plus friction
    # (generating, Te < 0: the shaft torque is te - tf in the model's load-torque sign)
    print(f"\nprime mover: input power {y[L.Y_INPUT_POWER_W]:.2f} W vs Te w + Ia^2 Ra + Vb |Ia| {p_el:.2f} W "
          f"(rel. {rel:.1e}); load torque {y[L.Y_LOAD_TORQUE_NM]:.3f} N m")
    assert ia < 0.0 and rel < 1e-6
    assert abs(y[L.Y_LOAD_TORQUE_NM] - (te - 0.05 * w)) < 1e-9 * abs(te)


def test_viscous_and_coulomb_run_down(kernel, tmp_path):
    b, tc, w0 = 0.2, 5.0, 150.0
    plant, m = _plant(tmp_path, law="none", over=(f"mechanics.viscous_Nm_per_rad_s={b}", f"mechanics.coulomb_Nm={tc}"))
    t, Y = _coast(kernel, plant, m, w0, 6.0, 0.0)
    w = Y[:, L.Y_SPEED_RAD_S]
    t_stop = J / b * math.log(1.0 + b * w0 / tc)
    expect = (w0 + tc / b) * np.exp(-b * t / J) - tc / b
    sel = t < t_stop - 0.01
    err = np.max(np.abs(w[sel] - expect[sel]))
    t_stop_meas = t[np.argmax(w < m.w_smooth)]
    print(f"\nfriction run-down: max |error| {err:.2e} rad/s; stop at {t_stop_meas:.3f} s, closed form {t_stop:.3f} s")
    assert err < 1e-6 * w0
    assert abs(t_stop_meas - t_stop) < 0.005
    assert np.all(np.abs(w[t > t_stop + 0.05]) <= m.w_smooth)


def test_coupling_break_removes_load_and_load_inertia(kernel, tmp_path):
    b, jl, t_load, w0, t_break = 0.2, 1.5, 30.0, 150.0, 0.5
    plant, m = _plant(tmp_path, law="constant",
                      over=(f"mechanics.viscous_Nm_per_rad_s={b}", f"mechanics.load_inertia_kgm2={jl}"))
    inp = R.Inputs(contactor=False, load_torque_Nm=t_load)
    t, Y = _coast(kernel, plant, m, w0, 1.0, t_load, extra=[(t_break, inp.with_(coupling_ok=False))])
    jt = J + jl
    w1 = (w0 + t_load / b) * math.exp(-b * t_break / jt) - t_load / b
    expect = np.where(t <= t_break,
                      (w0 + t_load / b) * np.exp(-b * t / jt) - t_load / b,
                      w1 * np.exp(-b * (t - t_break) / J))
    err = np.max(np.abs(Y[:, L.Y_SPEED_RAD_S] - expect))
    print(f"\ncoupling break: max |error| {err:.2e} rad/s (speed at break {w1:.3f} rad/s)")
    assert err < 1e-6 * w0
    assert np.all(Y[t > t_break, L.Y_LOAD_TORQUE_NM] == 0.0)


def test_passive_constant_load_brings_light_shaft_to_rest(kernel, tmp_path):
    """A passive constant load on a light shaft (J = 0.01 kg m^2, 100 N m: the smoothing band's
    time constant J w_s / T = 5 us is below the 20 us step) must still stop the shaft: a
    passive torque can only take energy out. Closed form: at rest after w0 J / T = 10 us."""
    plant, m = _plant(tmp_path, law="constant", over=("mechanics.inertia_kgm2=0.01",))
    t, Y = _coast(kernel, plant, m, 0.1, 0.05, 100.0, sample=2e-5)
    w = Y[:, L.Y_SPEED_RAD_S]
    print(f"\nlight shaft, passive 100 N m from 0.1 rad/s: speed after 50 ms {w[-1]:.4f} rad/s "
          f"(smoothing band {m.w_smooth} rad/s)")
    assert np.all(np.abs(w[t > 1e-3]) <= m.w_smooth)
