"""Copper temperature law, thermal model and brush drop, checked through runs of the model.

Sources:
  * IEC 60034-1, temperature rise by resistance, copper (from memory):
        theta2 = (R2 / R1) (235 + theta1) - 235
  * First-order thermal network (any machines textbook on heating, e.g. Say, Performance and
    Design of AC Machines, heating chapter, from memory): C dtheta/dt = P_loss - theta / R_th,
    with R_th fixed by "rated current gives the rated rise". Copper loss grows with the copper
    resistance (IEC law above), which makes the heat run first order with the rated rise as its
    end value and the time constant R_th C / (1 - rise / (235 + T_amb + rise)).
  * Brush drop about 2 V total for carbon brushes: common practice, no source.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import reference_models as R
from host.config import load
from rtmodel import layout as L

I_F = 1.0  # A: a table point of the test machine's curve, 440 V at 1500 r/min
K_VS = 440.0 / (1500 * R.RPM)


def _sep_motor(tmp_path, temp_c, extra=()):
    over = ("machine.thermal.frozen=true", f"machine.thermal.initial_C={temp_c}") + tuple(extra)
    path = R.write_machine(tmp_path, f"sep_{temp_c:g}", R.machine_toml(R.SEPARATE))
    plant = R.load_plant(path, over)
    m = R.machine_from_config(load("machine", path, list(over)).values)
    return plant, m


def _steady_motor(kernel, plant, m, temp_c, v=440.0, t_load=80.0, t_end=0.8):
    inp = R.Inputs(vs_V=v, field_V=I_F * m.rsh, load_torque_Nm=t_load)
    x = R.kernel_state(plant, m, [t_load / K_VS, I_F, 0.9 * v / K_VS, temp_c])
    t, Y = R.run_kernel(kernel, plant, x, [(0.0, inp)], t_end, 1e-3)
    return Y


def test_iec_copper_law_through_speed_drop(kernel, tmp_path):
    """Same load torque (same Ia) at two frozen armature temperatures: the speed drop changes
    with Ra, and the IEC formula recovers the second temperature from the two resistances."""
    v, vb = 440.0, 2.0
    res = {}
    for temp in (20.0, 95.0):
        plant, m = _sep_motor(tmp_path, temp)
        Y = _steady_motor(kernel, plant, m, temp)
        w = Y[-1, L.Y_SPEED_RAD_S]
        ia = Y[-1, L.Y_IA_A]
        assert abs(Y[-1, L.Y_SPEED_RAD_S] - Y[-50, L.Y_SPEED_RAD_S]) < 1e-6 * w  # steady
        assert Y[-1, L.Y_TEMP_ARM_C] == temp  # frozen
        res[temp] = ((v - vb - K_VS * w) / ia, w, ia)
    r1, w1, i1 = res[20.0]
    r2, w2, i2 = res[95.0]
    theta2 = r2 / r1 * (235.0 + 20.0) - 235.0
    print(f"\nRa from the speed drop: {r1:.6f} ohm at 20 C, {r2:.6f} ohm at 95 C; IEC 60034-1 gives "
          f"theta2 = {theta2:.4f} C; speeds {w1 / R.RPM:.2f} / {w2 / R.RPM:.2f} r/min")
    assert abs(i1 - i2) < 1e-6 * i1  # same torque, same flux: same current
    assert abs(r1 - 0.5) < 1e-5  # the configured value at the reference temperature
    assert abs(theta2 - 95.0) < 0.05
    assert w2 < w1  # hotter armature, larger speed drop


def test_frozen_holds_temperature_at_heavy_current(kernel, tmp_path):
    plant, m = _sep_motor(tmp_path, 60.0)
    Y = _steady_motor(kernel, plant, m, 60.0, t_load=3.0 * 56.0 * K_VS, t_end=0.5)  # 3x rated
    assert np.all(Y[:, L.Y_TEMP_ARM_C] == 60.0)
    assert np.max(np.abs(Y[:, L.Y_IA_A])) > 2.5 * 56.0


def _current_source(tmp_path):
    path = tmp_path / "isrc.toml"
    path.write_text(
        '[converter]\nname = "test bay current source"\nkind = "current_source"\n'
        "[mains]\nvoltage_V = 400.0\ninductance_H = 0.0001\n"
        "[current_source]\nbandwidth_Hz = 500.0\n",
        encoding="utf-8",
    )
    return path


@pytest.mark.parametrize("i_pu", [1.0, 0.5])
def test_heat_run_first_order_to_rated_rise(kernel, tmp_path, i_pu):
    """Locked rotor, armature fed from a current source at constant current; tau shortened to
    2 s so the run lasts seconds. End value: rise x (I/I_rated)^2 corrected for the copper law;
    time course: the closed-form solution of the first-order heat balance."""
    tau = 2.0
    t_amb, rise = 40.0, 80.0
    over = ("machine.thermal.time_constant_s=2.0",)
    path = R.write_machine(tmp_path, "heat", R.machine_toml(R.SEPARATE))
    plant = R.load_plant(path, over, converter_path=_current_source(tmp_path))
    m = R.machine_from_config(load("machine", path, list(over)).values)
    i_a = i_pu * m.i_rated

    def hook(u, inp):
        u[L.U_IREF_A] = i_a

    x = R.kernel_state(plant, m, [i_a, I_F, 0.0, t_amb])
    inp = R.Inputs(field_V=I_F * m.rsh, locked=True)
    t, Y = R.run_kernel(kernel, plant, x, [(0.0, inp)], 8.0 * tau, 0.01, u_hook=hook)
    # heat balance: C dtheta/dt = a (235 + T_amb + theta) / (235 + T_amb + rise) * rise/R_th ...
    # written with x = (I/I_r)^2: dtheta/dt = (rise x (C0 + theta)/(C0 + rise) - theta) / tau
    c0 = 235.0 + t_amb
    a = rise * i_pu**2 / (c0 + rise)
    theta_end = a * c0 / (1.0 - a)
    tau_obs = tau / (1.0 - a)
    theta_cf = theta_end * (1.0 - np.exp(-t / tau_obs))
    theta = Y[:, L.Y_TEMP_ARM_C] - t_amb
    err = np.max(np.abs(theta[1:] - theta_cf[1:]))
    t63 = np.interp(0.632 * theta_end, theta, t)
    print(f"\nheat run at {i_pu} x rated: end rise {theta[-1]:.3f} K (closed form {theta_end:.3f} K), "
          f"max |error| {err:.3f} K, 63 % at {t63:.3f} s (closed form {tau_obs:.3f} s; "
          f"configured time constant {tau} s)")
    assert np.max(np.abs(Y[10:, L.Y_IA_A] - i_a)) < 1e-3 * i_a
    assert err < 0.01 * theta_end
    assert abs(t63 - tau_obs) < 0.02 * tau_obs
    if i_pu == 1.0:
        assert abs(theta_end - rise) < 1e-9  # the rated current gives exactly the rated rise
        assert abs(theta[-1] - rise) < 0.01 * rise


# ----------------------------------------------------------------------------------------------
# Brush drop
# ----------------------------------------------------------------------------------------------
@pytest.mark.parametrize("vb,t_load,visc,linear", [(2.0, 100.0, 0.0, False), (0.0, 100.0, 0.0, False),
                                                    (2.0, 0.0, 0.004, True)])
def test_brush_drop_motoring_steady_state(kernel, tmp_path, vb, t_load, visc, linear):
    """vt - E = Ia Ra + Vb in steady motoring (Ra from the IEC law at the frozen temperature).
    Below the knee current the drop is proportional to the current (model rule, continuous
    through zero): a nearly unloaded motor whose only load is a little viscous friction."""
    temp = 75.0
    extra = (f"machine.brush_drop_V={vb}", f"mechanics.viscous_Nm_per_rad_s={visc}")
    plant, m = _sep_motor(tmp_path, temp, extra)
    # nearly unloaded, the knee's slope resistance (Vb/knee) slows the speed settling to ~0.3 s
    Y = _steady_motor(kernel, plant, m, temp, t_load=t_load, t_end=3.0 if linear else 1.0)
    ra = R.copper_ohm(0.5, temp, 20.0)
    vt, e, ia = Y[-1, L.Y_VT_V], Y[-1, L.Y_EMF_V], Y[-1, L.Y_IA_A]
    vb_meas = vt - e - ia * ra
    vb_expect = vb * min(1.0, ia / m.knee)
    print(f"\nmotoring, Vb={vb}: Ia {ia:.4f} A, vt - E - Ia Ra = {vb_meas:.6f} V (expected {vb_expect:.6f} V)")
    assert ia > 0.0
    assert (ia < m.knee) == linear
    assert abs(vb_meas - vb_expect) < 1e-5  # what is left is La dia/dt of the settling


def test_brush_drop_generating(kernel, tmp_path):
    """Generating (Ia < 0 in motor convention): E - vt = |Ia| Ra + Vb."""
    temp = 75.0
    load_ohm = 10.0
    over = ("machine.thermal.frozen=true", f"machine.thermal.initial_C={temp}", 'mechanics.load="prime_mover"')
    path = R.write_machine(tmp_path, "sepgen", R.machine_toml(R.SEPARATE, duty="generator"))
    plant = R.load_plant(path, over)
    m = R.machine_from_config(load("machine", path, list(over)).values)
    w = 1500 * R.RPM
    inp = R.Inputs(contactor=False, load_ohm=load_ohm, field_V=I_F * m.rsh, prime_rad_s=w)
    x = R.kernel_state(plant, m, [0.0, I_F, w, temp])
    t, Y = R.run_kernel(kernel, plant, x, [(0.0, inp)], 0.3, 1e-3)
    ra = R.copper_ohm(0.5, temp, 20.0)
    vt, e, ia = Y[-1, L.Y_VT_V], Y[-1, L.Y_EMF_V], Y[-1, L.Y_IA_A]
    vb_meas = e - vt - abs(ia) * ra
    print(f"\ngenerating on {load_ohm} ohm: Ia {ia:.4f} A, E - vt - |Ia| Ra = {vb_meas:.6f} V")
    assert ia < -m.knee and e > 0.0
    assert abs(e - 440.0) < 1e-9 * 440.0  # E at the table point, curve speed
    assert abs(vb_meas - 2.0) < 1e-6
    assert abs(vt + load_ohm * Y[-1, L.Y_I_LINE_A]) < 1e-6 * abs(vt)  # vt = R_load * current out
