"""Operating points of every connection against hand calculations from the equivalent circuit.

Source of every equation written out below: the DC machine equivalent circuit of any machines
textbook, e.g. Chapman, Electric Machinery Fundamentals (E = K phi w, T = K phi Ia,
Vt = E + Ia Ra + Vb motoring, Vt = E - Ia Ra - Vb generating, IL = Ia + If for a shunt
machine; long shunt: the shunt field sees the terminal voltage; short shunt: it sees the
voltage inside the series field). The tiny machine below has a magnetization table that is
exactly straight up to 1.5 A (collinear points: the monotone cubic is then the straight line),
E = 2 V + 100 V/A * i at 1000 r/min, so every hand calculation stays in closed form.
"""

from __future__ import annotations

import math

import pytest

from host.config import load
from host.params import pack
from host import opoint

RPM = math.pi / 30.0
WC = 1000.0 * RPM  # curve speed, rad/s
E0, K = 2.0, 100.0  # residual EMF and straight-part slope at WC (shunt amperes)
VB = 2.0  # brush drop, V (knee 1 mA, so the full drop for any current used here)

BASE = """
[machine]
name = "tiny test machine"
connection = "{conn}"
compound = "{compound}"
duty = "{duty}"
rated_power_kW = 1.6
rated_voltage_V = 200.0
rated_current_A = 10.0
rated_speed_rpm = 1000.0
max_speed_rpm = 3000.0
rated_field_current_A = 1.0
ra_ohm = 1.0
la_H = 0.02
brush_drop_V = 2.0
brush_knee_A = 0.001
field_resistance_ohm = {rf}
field_rheostat_ohm = {rheo}
field_inductance_H = 2.0
series_resistance_ohm = 0.5
series_turns_ratio = 0.05
resistance_ref_C = 40.0
field_temp_C = 40.0

[machine.magnetization]
speed_rpm = 1000.0
field_current_A = {fi}
emf_V = [2.0, 52.0, 102.0, 152.0, 202.0, 235.0, 250.0, 258.0]

[machine.thermal]
ambient_C = 40.0
frozen = true

[mechanics]
inertia_kgm2 = 0.05
viscous_Nm_per_rad_s = {visc}
coulomb_Nm = 0.0
load = "constant"
"""
SHUNT_AMPS = "[0.0, 0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 3.5]"
SERIES_AMPS = "[0.0, 5.0, 10.0, 15.0, 20.0, 25.0, 30.0, 35.0]"  # series machine: 10 V/A


def tiny(tmp_path, conn="separate", compound="cumulative", duty="motor", rf=100.0, rheo=0.0, visc=0.0,
         extra="", overrides=()):
    fi = SERIES_AMPS if conn == "series" else SHUNT_AMPS
    text = BASE.format(conn=conn, compound=compound, duty=duty, rf=rf, rheo=rheo, visc=visc, fi=fi) + extra
    path = tmp_path / f"tiny_{conn}_{compound}_{duty}.toml"
    path.write_text(text)
    return pack(load("machine", path, list(overrides)))


def kphi_of(i_net, k=K):
    return (E0 + k * i_net) / WC


def near(a, b, rel=1e-9, abs_=1e-9):
    return a == pytest.approx(b, rel=rel, abs=abs_)


# ------------------------------------------------------------------------------- motoring


def test_separate_motor_given_load_torque(tmp_path):
    plant = tiny(tmp_path, "separate")
    op = opoint.solve_motor(plant, 200.0, load_torque_Nm=5.0, field_voltage_V=100.0)
    # hand calculation (Chapman): If = Vf / Rf, Ia = T / (K phi), E = Vt - Ia Ra - Vb, w = E / (K phi)
    i_f = 100.0 / 100.0
    kp = kphi_of(i_f)
    ia = 5.0 / kp
    e = 200.0 - ia * 1.0 - VB
    w = e / kp
    r = op.report()
    assert near(r["field_current_A"], i_f)
    assert near(r["armature_current_A"], ia)
    assert near(r["line_current_A"], ia)
    assert near(r["emf_V"], e)
    assert near(r["speed_rpm"], w / RPM, rel=1e-9)
    assert near(r["torque_Nm"], 5.0, rel=1e-9)
    # power balance: Vt Ia + Vf If = output + copper + brush losses
    assert near(r["input_power_W"], 200.0 * ia + 100.0 * i_f, rel=1e-9)
    assert near(r["output_power_W"], 5.0 * w, rel=1e-9)
    loss = r["losses_W"]
    assert near(loss["armature_copper_W"], ia * ia * 1.0)
    assert near(loss["brush_W"], VB * ia)
    assert near(loss["field_copper_W"], i_f * i_f * 100.0)
    assert near(r["input_power_W"] - r["output_power_W"], loss["total_W"], rel=1e-9)
    assert near(r["efficiency"], r["output_power_W"] / r["input_power_W"])


def test_separate_motor_viscous_friction_and_speed_given(tmp_path):
    plant = tiny(tmp_path, "separate", visc=0.01)
    # given speed 1500 r/min: Ia = (Vt - E - Vb) / Ra, T_shaft = K phi Ia - b w
    op = opoint.solve_motor(plant, 200.0, speed_rpm=1500.0, field_voltage_V=100.0)
    kp = kphi_of(1.0)
    w = 1500.0 * RPM
    ia = (200.0 - kp * w - VB) / 1.0
    r = op.report()
    assert near(r["armature_current_A"], ia)
    assert near(r["shaft_torque_Nm"], kp * ia - 0.01 * w)
    assert near(r["losses_W"]["friction_W"], 0.01 * w * w)


def test_separate_motor_regenerating_above_no_load_speed(tmp_path):
    plant = tiny(tmp_path, "separate")
    # overhauled to 2200 r/min: E > Vt, the current reverses and so does the brush drop
    op = opoint.solve_motor(plant, 200.0, speed_rpm=2200.0, field_voltage_V=100.0)
    kp = kphi_of(1.0)
    e = kp * 2200.0 * RPM
    ia = (200.0 - e + VB) / 1.0  # Vt = E + Ia Ra - Vb for Ia < 0
    r = op.report()
    assert ia < 0
    assert near(r["armature_current_A"], ia)
    assert r["convention"] == "motor" and r["duty"] == "generating"
    assert near(r["output_power_W"], -200.0 * ia)


def test_shunt_motor_given_line_current(tmp_path):
    plant = tiny(tmp_path, "shunt", rf=200.0)
    op = opoint.solve_motor(plant, 200.0, line_current_A=8.0)
    # If = Vt / Rf, Ia = IL - If, E = Vt - Ia Ra - Vb
    i_f = 200.0 / 200.0
    ia = 8.0 - i_f
    e = 200.0 - ia - VB
    kp = kphi_of(i_f)
    r = op.report()
    assert near(r["field_current_A"], i_f)
    assert near(r["armature_current_A"], ia)
    assert near(r["speed_rpm"], e / kp / RPM)
    assert near(r["torque_Nm"], kp * ia)
    assert near(r["input_power_W"], 200.0 * 8.0)


def test_shunt_motor_rheostat_and_copper_correction(tmp_path):
    # field winding 150 ohm at 40 degC measured, run at 75 degC (IEC 60034-1, from memory:
    # R2 = R1 (235 + t2)/(235 + t1)), plus 20 ohm rheostat
    plant = tiny(tmp_path, "shunt", rf=150.0, rheo=20.0,
                 overrides=["machine.field_temp_C=75.0", "machine.thermal.initial_C=95.0"])
    rf = 150.0 * (235.0 + 75.0) / (235.0 + 40.0) + 20.0
    ra = 1.0 * (235.0 + 95.0) / (235.0 + 40.0)
    op = opoint.solve_motor(plant, 180.0, armature_current_A=6.0)
    i_f = 180.0 / rf
    e = 180.0 - 6.0 * ra - VB
    r = op.report()
    assert near(r["field_current_A"], i_f)
    assert near(r["line_current_A"], 6.0 + i_f)
    assert near(r["speed_rpm"], e / kphi_of(i_f) / RPM)
    assert near(r["losses_W"]["field_rheostat_W"], 20.0 * i_f * i_f)
    assert near(r["losses_W"]["armature_copper_W"], ra * 36.0)


def test_series_motor_given_load_torque(tmp_path):
    plant = tiny(tmp_path, "series")
    op = opoint.solve_motor(plant, 200.0, load_torque_Nm=3.0)
    # series: K phi = (E0 + 10 Ia) / wc, T = K phi Ia -> 10/wc Ia^2 + E0/wc Ia - T = 0
    a, b, c = 10.0 / WC, E0 / WC, -3.0
    ia = (-b + math.sqrt(b * b - 4 * a * c)) / (2 * a)
    kp = (E0 + 10.0 * ia) / WC
    e = 200.0 - ia * (1.0 + 0.5) - VB  # Vt = E + Ia (Ra + Rse) + Vb
    r = op.report()
    assert ia < 15.0  # still on the straight part of the curve
    assert near(r["armature_current_A"], ia)
    assert near(r["series_field_current_A"], ia)
    assert near(r["speed_rpm"], e / kp / RPM)
    assert near(r["losses_W"]["series_field_copper_W"], 0.5 * ia * ia)
    assert any("runaway" in c_ for c_ in r["cautions"])


@pytest.mark.parametrize("compound,sign", [("cumulative", 1.0), ("differential", -1.0)])
def test_long_shunt_compound_motor(tmp_path, compound, sign):
    plant = tiny(tmp_path, "compound_long", compound=compound, rf=200.0)
    op = opoint.solve_motor(plant, 200.0, armature_current_A=8.0)
    # long shunt: the shunt field sees Vt; the series field carries Ia
    i_f = 200.0 / 200.0
    i_net = i_f + sign * 0.05 * 8.0
    e = 200.0 - 8.0 * (1.0 + 0.5) - VB
    kp = kphi_of(i_net)
    r = op.report()
    assert near(r["field_current_A"], i_f)
    assert near(r["series_field_current_A"], 8.0)
    assert near(r["line_current_A"], 8.0 + i_f)
    assert near(r["net_excitation_A"], i_net)
    assert near(r["speed_rpm"], e / kp / RPM)
    assert near(r["torque_Nm"], kp * 8.0)


@pytest.mark.parametrize("compound,sign", [("cumulative", 1.0), ("differential", -1.0)])
def test_short_shunt_compound_motor(tmp_path, compound, sign):
    plant = tiny(tmp_path, "compound_short", compound=compound, rf=200.0)
    op = opoint.solve_motor(plant, 200.0, line_current_A=8.0)
    # short shunt: the series field carries the line current; the shunt field sees the voltage
    # inside it, Vt - IL Rse; Ia = IL - If
    v_in = 200.0 - 8.0 * 0.5
    i_f = v_in / 200.0
    ia = 8.0 - i_f
    i_net = i_f + sign * 0.05 * 8.0
    e = v_in - ia * 1.0 - VB
    kp = kphi_of(i_net)
    r = op.report()
    assert near(r["field_current_A"], i_f)
    assert near(r["armature_current_A"], ia)
    assert near(r["series_field_current_A"], 8.0)
    assert near(r["armature_voltage_V"], v_in)
    assert near(r["speed_rpm"], e / kp / RPM)


def test_short_shunt_given_torque_matches_given_current(tmp_path):
    plant = tiny(tmp_path, "compound_short", rf=200.0)
    a = opoint.solve_motor(plant, 200.0, line_current_A=8.0).report()
    b = opoint.solve_motor(plant, 200.0, load_torque_Nm=a["torque_Nm"]).report()
    c = opoint.solve_motor(plant, 200.0, speed_rpm=a["speed_rpm"]).report()
    for r in (b, c):
        assert near(r["line_current_A"], 8.0, rel=1e-7)


# ------------------------------------------------------------------------------ generating


def test_separate_generator_resistive_load(tmp_path):
    plant = tiny(tmp_path, "separate")
    op = opoint.solve_generator(plant, 1000.0, load_ohm=20.0, field_voltage_V=100.0)
    # Vt = E - Ia Ra - Vb, Ia = Vt / RL -> Vt = (E - Vb) / (1 + Ra / RL)
    e = E0 + K * 1.0
    vt = (e - VB) / (1.0 + 1.0 / 20.0)
    ia = vt / 20.0
    r = op.report()
    assert r["convention"] == "generator"
    assert near(r["terminal_voltage_V"], vt)
    assert near(r["armature_current_A"], ia)  # positive: delivered (generator convention)
    assert near(r["torque_Nm"], (e / WC) * ia)  # counter-torque, positive
    assert near(r["output_power_W"], vt * ia)
    assert near(r["input_power_W"], e * ia + 100.0 * 1.0)  # shaft E Ia (no friction) + field
    assert near(r["input_power_W"] - r["output_power_W"], r["losses_W"]["total_W"])


def test_separate_generator_open_circuit_and_load_current(tmp_path):
    plant = tiny(tmp_path, "separate")
    r = opoint.solve_generator(plant, 1500.0, field_voltage_V=120.0).report()
    e = (E0 + K * 1.2) * 1.5
    assert near(r["terminal_voltage_V"], e)
    r = opoint.solve_generator(plant, 1500.0, load_current_A=6.0, field_voltage_V=120.0).report()
    assert near(r["terminal_voltage_V"], e - 6.0 * 1.0 - VB)


def _curve_direct(plant):
    """The packed table as scipy's monotone cubic (same interior slopes; ends kept inside)."""
    import numpy as np
    from scipy.interpolate import PchipInterpolator

    v = plant.machine.values
    return PchipInterpolator(np.array(v["machine.magnetization.field_current_A"]),
                             np.array(v["machine.magnetization.emf_V"]))


def _check_generator_equations(r, conn, rsh, rse, ra, r_load):
    """Whatever the excitation came out as, the textbook generator equations must hold."""
    vt, ia, il, i_f = r["terminal_voltage_V"], r["armature_current_A"], r["line_current_A"], r["field_current_A"]
    assert near(il, vt / r_load, rel=1e-8)
    if conn == "shunt":
        assert near(i_f, vt / rsh, rel=1e-8)  # IL = Ia - If (generator), If = Vt / Rf
        assert near(ia, il + i_f, rel=1e-8)
        assert near(vt, r["emf_V"] - ia * ra - VB, rel=1e-8)
    elif conn == "compound_long":
        assert near(i_f, vt / rsh, rel=1e-8)
        assert near(ia, il + i_f, rel=1e-8)
        assert near(vt, r["emf_V"] - ia * (ra + rse) - VB, rel=1e-8)
    else:  # short shunt: the field sees Vt + IL Rse
        assert near(i_f, (vt + il * rse) / rsh, rel=1e-8)
        assert near(ia, il + i_f, rel=1e-8)
        assert near(vt, r["emf_V"] - ia * ra - il * rse - VB, rel=1e-8)


@pytest.mark.parametrize("conn,compound,gen_sign,rf", [
    ("shunt", "cumulative", 0.0, 80.0),
    # the config's cumulative/differential is defined for motoring current (host/schema.py);
    # generating reverses the armature current, so a "cumulative" connection becomes
    # differential as a generator, and a "differential" one cumulative
    # (field circuits chosen so each point lies on the interior curve segments)
    ("compound_long", "cumulative", -1.0, 80.0),
    ("compound_long", "differential", 1.0, 95.0),
    ("compound_short", "cumulative", -1.0, 80.0),
    ("compound_short", "differential", 1.0, 95.0),
])
def test_self_excited_generators_under_load(tmp_path, conn, compound, gen_sign, rf):
    from scipy.optimize import brentq

    plant = tiny(tmp_path, conn, compound=compound, rf=rf)
    r_load = 40.0
    r = opoint.solve_generator(plant, 1000.0, load_ohm=r_load).report()
    assert r["operating_point_found"], r.get("reason")
    _check_generator_equations(r, conn, rf, 0.5, 1.0, r_load)
    # independent solution of the same equations: scalar in Vt, scipy's curve and root finder
    curve = _curve_direct(plant)

    def resid(vt):
        il = vt / r_load
        if conn == "shunt":
            i_f = vt / rf
            ia = il + i_f
            return float(curve(i_f)) - ia * 1.0 - VB - vt
        if conn == "compound_long":
            i_f = vt / rf
            ia = il + i_f
            return float(curve(i_f + gen_sign * 0.05 * ia)) - ia * 1.5 - VB - vt
        i_f = (vt + il * 0.5) / rf
        ia = il + i_f
        return float(curve(i_f + gen_sign * 0.05 * il)) - ia * 1.0 - il * 0.5 - VB - vt

    vt_ref = brentq(resid, 120.0, 260.0, xtol=1e-12)
    assert r["terminal_voltage_V"] == pytest.approx(vt_ref, rel=1e-7)
    # on the interior curve segments, where scipy's and the packed curve are the same cubic
    assert 1.5 < r["net_excitation_A"] < 3.0


def test_series_generator_builds_up_only_with_load(tmp_path):
    from scipy.optimize import brentq

    plant = tiny(tmp_path, "series")
    oc = opoint.solve_generator(plant, 1000.0).report()
    assert near(oc["terminal_voltage_V"], E0)  # residual EMF only
    assert oc["self_excitation"]["built_up"] is False
    # driven in the motoring direction with the motoring connection, the generated current
    # flows backwards through the series field and demagnetizes it: no build-up (the reason
    # series motors need the field reversed for dynamic braking)
    same = opoint.solve_generator(plant, 1000.0, load_ohm=7.5).report()
    assert same["operating_point_found"] is False and "residual" in same["reason"]
    r = opoint.solve_generator(plant, 1000.0, load_ohm=7.5, field_reversed=True).report()
    assert r["operating_point_found"]
    curve = _curve_direct(plant)
    # Vt = E(Ia) - Ia (Ra + Rse) - Vb = Ia RL
    ia_ref = brentq(lambda i: float(curve(i)) - i * (1.5 + 7.5) - VB, 15.0, 29.9, xtol=1e-12)
    assert r["armature_current_A"] == pytest.approx(ia_ref, rel=1e-7)
    assert r["terminal_voltage_V"] == pytest.approx(7.5 * ia_ref, rel=1e-7)
    # above the critical resistance (10 V/A curve slope) there is no build-up
    none = opoint.solve_generator(plant, 1000.0, load_ohm=9.0, field_reversed=True).report()
    assert none["operating_point_found"] is False
    # rotation reversed instead of the field: the same magnitude, negative voltage
    back = opoint.solve_generator(plant, -1000.0, load_ohm=7.5).report()
    assert back["terminal_voltage_V"] == pytest.approx(-7.5 * ia_ref, rel=1e-7)


def test_bad_combinations_raise_config_error(tmp_path):
    from host.errors import ConfigError

    plant = tiny(tmp_path, "shunt", rf=200.0)
    with pytest.raises(ConfigError):
        opoint.solve_motor(plant, 200.0)
    with pytest.raises(ConfigError):
        opoint.solve_motor(plant, 200.0, speed_rpm=1000.0, load_torque_Nm=1.0)
    with pytest.raises(ConfigError):
        opoint.solve_motor(plant, 200.0, speed_rpm=1000.0, field_voltage_V=100.0)  # not separate
    with pytest.raises(ConfigError):
        opoint.solve_generator(plant, 1000.0, load_ohm=10.0, load_current_A=1.0)
    with pytest.raises(ConfigError):
        opoint.solve_generator(plant, 1000.0, load_ohm=-1.0)
