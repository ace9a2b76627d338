"""Self-excited shunt generator: build-up point, critical field resistance, reversed field.

References: the build-up point is the intersection of the field-resistance line with the
open-circuit curve (any machines textbook, e.g. Chapman, Electric Machinery Fundamentals:
voltage build-up in a shunt generator); checked here against a direct numerical
intersection with scipy (PchipInterpolator of the same table, brentq), and against the
compiled kernel building up from residual magnetism from a dead start.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from host import opoint
from host.config import load
from host.params import pack
from host.sim import run_offline
from rtmodel import layout as L

RPM = math.pi / 30.0
I_TAB = [0.0, 0.25, 0.5, 0.75, 1.0, 1.25, 1.5, 1.75, 2.0, 2.5, 3.0, 3.5]
E_NORMAL = [5.0, 60.0, 115.0, 168.0, 212.0, 244.0, 264.0, 278.0, 288.0, 302.0, 311.0, 317.0]
# a curve with a shallow foot (slope 60 V/A up to 0.25 A, then 240 V/A): a field circuit
# between the two slopes has a near-residual point AND a built-up point
E_FOOT = [5.0, 20.0, 80.0, 140.0, 200.0, 240.0, 262.0, 276.0, 286.0, 300.0, 309.0, 315.0]

CFG = """
[machine]
name = "test shunt generator"
connection = "shunt"
duty = "generator"
rated_power_kW = 11.0
rated_voltage_V = 250.0
rated_current_A = 48.0
rated_speed_rpm = 1500.0
rated_field_current_A = 0.8
ra_ohm = 0.25
la_H = 0.01
brush_drop_V = 2.0
field_resistance_ohm = 120.0
field_rheostat_ohm = {rheo}
field_inductance_H = 12.0
resistance_ref_C = 40.0
field_temp_C = 40.0

[machine.magnetization]
speed_rpm = 1500.0
field_current_A = {i}
emf_V = {e}

[machine.thermal]
ambient_C = 40.0
frozen = true

[mechanics]
inertia_kgm2 = 0.2
load = "prime_mover"

[terminal]
load_ohm = {rl}
"""


def gen(tmp_path, rheo=30.0, curve=E_NORMAL, rl=0.0):
    path = tmp_path / f"gen_{rheo}_{rl}_{curve[1]}.toml"
    path.write_text(CFG.format(rheo=rheo, i=I_TAB, e=curve, rl=rl))
    return pack(load("machine", path))


def direct_intersection(curve_e, r_field, speed_rpm, ra=0.25, vb=2.0, lo=0.8, hi=3.0):
    """Open circuit: E(If) w/wc = (Rf + Ra) If + Vb, solved with scipy (independent of dcrig)."""
    from scipy.interpolate import PchipInterpolator
    from scipy.optimize import brentq

    pc = PchipInterpolator(I_TAB, curve_e)
    k = speed_rpm / 1500.0
    i_f = brentq(lambda i: float(pc(i)) * k - (r_field + ra) * i - vb, lo, hi, xtol=1e-13)
    return i_f, r_field * i_f


def test_built_up_voltage_is_the_intersection(tmp_path):
    plant = gen(tmp_path, rheo=30.0)
    r = opoint.solve_generator(plant, 1500.0).report()
    assert r["operating_point_found"]
    i_ref, v_ref = direct_intersection(E_NORMAL, 150.0, 1500.0)
    assert r["field_current_A"] == pytest.approx(i_ref, rel=1e-8)
    assert r["terminal_voltage_V"] == pytest.approx(v_ref, rel=1e-8)
    se = r["self_excitation"]
    assert se["built_up"] and se["builds_up_from_residual"]
    # and at a lower speed the line meets the curve lower down
    r2 = opoint.solve_generator(plant, 1300.0).report()
    i2, v2 = direct_intersection(E_NORMAL, 150.0, 1300.0, lo=0.5)
    assert r2["terminal_voltage_V"] == pytest.approx(v2, rel=1e-8)


def test_critical_field_resistance(tmp_path):
    # critical resistance = slope of the tangent from the origin to the curve with the residual
    # taken off (the textbook tangent construction; scipy's PchipInterpolator for the interior
    # slopes, end secants as the model documents); the loop also holds Ra
    import reference_models as R

    r_crit = R.MagCurve(I_TAB, E_NORMAL, 1.0).tangent_from_origin_slope() * 1.0  # at the curve speed
    # on this curve the tangent touches just above the foot: a little steeper than the first secant
    assert (60.0 - 5.0) / 0.25 <= r_crit < 1.01 * (60.0 - 5.0) / 0.25
    below = gen(tmp_path, rheo=0.95 * r_crit - 120.0 - 0.25)
    above = gen(tmp_path, rheo=1.05 * r_crit - 120.0 - 0.25)
    ok = opoint.solve_generator(below, 1500.0).report()
    assert ok["operating_point_found"] and ok["terminal_voltage_V"] > 10 * 5.0
    none = opoint.solve_generator(above, 1500.0).report()
    assert none["operating_point_found"] is False
    assert "critical" in none["reason"]
    assert none["self_excitation"]["critical_field_ohm"] == pytest.approx(r_crit, rel=1e-3)
    # what it settles at instead: above the residual EMF (the field adds a little) but far
    # below the built-up voltage; on the straight foot (slope s, 220 V/A) the near-residual
    # point is Vt = Rf E_res / (Rf + Ra + Vb/knee - s) (below the brush knee, 1 % of rated
    # current, the brush drop is a resistance Vb/knee), from the same line/curve intersection
    assert 5.0 < none["terminal_voltage_V"] < ok["terminal_voltage_V"] / 2
    far = gen(tmp_path, rheo=230.0)
    rf = opoint.solve_generator(far, 1500.0).report()
    assert rf["terminal_voltage_V"] == pytest.approx(350.0 * 5.0 / (350.0 + 0.25 + 2.0 / 0.48 - 220.0), rel=1e-9)
    # the same machine at a lower speed: the critical resistance falls with speed
    slow = opoint.solve_generator(gen(tmp_path, rheo=30.0), 1500.0 * 150.0 / r_crit * 0.95).report()
    assert slow["operating_point_found"] is False and "critical" in slow["reason"]


def test_reversed_field_has_no_operating_point(tmp_path):
    plant = gen(tmp_path, rheo=30.0)
    r = opoint.solve_generator(plant, 1500.0, field_reversed=True).report()
    assert r["operating_point_found"] is False
    assert "reversed" in r["reason"]
    assert 0.0 < r["terminal_voltage_V"] < 5.0  # pushed below the residual EMF
    # rotation reversed with the field as connected: the same
    back = opoint.solve_generator(plant, -1500.0).report()
    assert back["operating_point_found"] is False and "reversed" in back["reason"]
    # both reversed: builds up with negative polarity
    both = opoint.solve_generator(plant, -1500.0, field_reversed=True).report()
    fwd = opoint.solve_generator(plant, 1500.0).report()
    assert both["terminal_voltage_V"] == pytest.approx(-fwd["terminal_voltage_V"], rel=1e-9)


def test_loaded_build_up_and_collapse(tmp_path):
    from scipy.interpolate import PchipInterpolator
    from scipy.optimize import brentq

    plant = gen(tmp_path, rheo=30.0)
    r = opoint.solve_generator(plant, 1500.0, load_ohm=8.0).report()
    pc = PchipInterpolator(I_TAB, E_NORMAL)
    # Vt = E(If) - Ia Ra - Vb, If = Vt / Rf, Ia = Vt / RL + If
    vt = brentq(lambda v: float(pc(v / 150.0)) - (v / 8.0 + v / 150.0) * 0.25 - 2.0 - v, 150.0, 300.0, xtol=1e-12)
    assert r["terminal_voltage_V"] == pytest.approx(vt, rel=1e-8)
    # a heavy enough load collapses the voltage (no built-up point)
    c = opoint.solve_generator(plant, 1500.0, load_ohm=0.3).report()
    assert c["operating_point_found"] is False and "load" in c["reason"]


def test_shallow_foot_stalls_near_residual(tmp_path):
    # field circuit 150 ohm: above the foot's 60 V/A, below the 240 V/A middle
    plant = gen(tmp_path, rheo=30.0, curve=E_FOOT)
    op = opoint.solve_generator(plant, 1500.0)
    r = op.report()
    assert r["operating_point_found"]
    se = r["self_excitation"]
    assert se["built_up"] and se["builds_up_from_residual"] is False
    assert 5.0 < se["stalls_near_V"] < 20.0
    assert any("flash the field" in c for c in r["cautions"])
    i_ref, v_ref = direct_intersection(E_FOOT, 150.0, 1500.0)
    assert r["terminal_voltage_V"] == pytest.approx(v_ref, rel=1e-8)


def _run(plant, x, t_s):
    _, Y = run_offline(plant, t_s, 0.05, [], x=x)
    return Y[-1]


def test_kernel_builds_up_to_the_op_point_and_stalls_where_op_says(tmp_path, kernel):
    plant = gen(tmp_path, rheo=30.0)
    r = opoint.solve_generator(plant, 1500.0).report()
    row = _run(plant, plant.new_state(), 12.0)
    assert row[L.Y_VT_V] == pytest.approx(r["terminal_voltage_V"], rel=1e-4)
    # shallow foot: from residual the kernel stalls near residual, as op warns ...
    foot = gen(tmp_path, rheo=30.0, curve=E_FOOT)
    rf = opoint.solve_generator(foot, 1500.0).report()
    row = _run(foot, foot.new_state(), 12.0)
    assert row[L.Y_VT_V] == pytest.approx(rf["self_excitation"]["stalls_near_V"], rel=1e-3)
    # ... and a flashed field (start at 1 A) reaches the built-up point
    x = foot.new_state()
    x[L.X_I_FIELD_A] = 1.0
    row = _run(foot, x, 12.0)
    assert row[L.Y_VT_V] == pytest.approx(rf["terminal_voltage_V"], rel=1e-4)
    # above critical the kernel stays near residual too
    above = gen(tmp_path, rheo=200.0)
    ra = opoint.solve_generator(above, 1500.0).report()
    row = _run(above, above.new_state(), 12.0)
    assert ra["operating_point_found"] is False
    assert row[L.Y_VT_V] == pytest.approx(ra["terminal_voltage_V"], rel=1e-3)
