"""A machine written the way a book problem or a test sheet gives it: resistances as measured
(no temperature correction) and a magnetization curve of two points (a straight line).

Hand numbers by the steady equivalent circuit of a shunt motor (any machines textbook, e.g.
Chapman, *Electric Machinery Fundamentals*): If = Vt / Rf, E = Vt - Ia Ra (no brush drop
given), K phi = E_curve(If) / w_curve, w = E / K phi, T = K phi Ia. The machine data are
invented in the style of such a problem, not taken from a book.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from host.config import resolve
from host.params import pack

BOOK = {
    "machine": {
        "name": "book-style shunt motor", "connection": "shunt",
        "rated_power_kW": 10.0, "rated_voltage_V": 250.0, "rated_current_A": 45.0, "rated_speed_rpm": 1150.0,
        "rated_field_current_A": 1.0, "ra_ohm": 0.25, "field_resistance_ohm": 250.0, "brush_drop_V": 0.0,
        "resistances_as_measured": True,
        # the steady answer does not depend on these two (checked below by changing them)
        "la_H": 0.01, "field_inductance_H": 50.0,
        "magnetization": {"speed_rpm": 1200.0, "field_current_A": [0.0, 1.2], "emf_V": [0.0, 300.0]},
    },
    "mechanics": {"inertia_kgm2": 0.5, "load": "constant"},
}


def _steady(table, load_Nm, t_s=4.0):
    from rtmodel import layout as L
    from rtmodel.kernel import step_frame

    plant = pack(resolve("machine", table, "book"))
    x, u, y = plant.new_state(), plant.new_inputs(), np.zeros(L.N_OUTPUT)
    x[L.X_I_FIELD_A] = 1.0
    x[L.X_SPEED_RAD_S] = 1150 * math.pi / 30
    u[L.U_LOAD_TORQUE_NM] = load_Nm
    step_frame(x, plant.p, u, y, int(round(t_s / plant.dt_s)))
    return plant, y


def test_book_style_shunt_motor_by_hand(kernel):
    from rtmodel import layout as L

    # If = 250/250 = 1 A; the straight curve gives 300 x 1/1.2 = 250 V at 1200 r/min:
    # K phi = 250 / (1200 pi/30) = 1.98944 V s/rad. At Ia = 40 A: E = 250 - 40 x 0.25 = 240 V,
    # n = 240 / 250 x 1200 = 1152 r/min, T = 1.98944 x 40 = 79.577 N m.
    kphi = 250.0 / (1200 * math.pi / 30)
    plant, y = _steady(BOOK, kphi * 40.0)
    assert plant.derived["ra_hot_ohm"] == 0.25  # as measured: no correction to a hot temperature
    assert y[L.Y_IF_A] == pytest.approx(1.0, rel=1e-6)
    assert y[L.Y_IA_A] == pytest.approx(40.0, rel=1e-4)
    assert y[L.Y_SPEED_RPM] == pytest.approx(1152.0, rel=1e-4)
    # the answer does not depend on the inductances and inertia the transient model needs
    other = {"machine": dict(BOOK["machine"], la_H=0.03, field_inductance_H=20.0), "mechanics": {"inertia_kgm2": 2.0, "load": "constant"}}
    _, y2 = _steady(other, kphi * 40.0, t_s=8.0)
    assert y2[L.Y_SPEED_RPM] == pytest.approx(1152.0, rel=1e-4)


def test_without_the_switch_resistances_are_corrected():
    from host.errors import ConfigError

    table = {"machine": dict(BOOK["machine"], resistances_as_measured=False), "mechanics": BOOK["mechanics"]}
    # IEC 60034-1 (235, from memory): the 250 ohm field read at 20 degC is 250 x 310/255 = 304 ohm
    # at 75 degC, too much to carry 1 A from 250 V: the loader says so
    with pytest.raises(ConfigError, match="field circuit with rheostat needs 304 V"):
        resolve("machine", table, "book")
    table["machine"]["field_resistance_ohm"] = 200.0
    plant = pack(resolve("machine", table, "book"))
    assert plant.derived["field_circuit_ohm"] == pytest.approx(200 * 310 / 255)


def test_curve_in_ampere_turns_is_the_same_machine():
    # 1.2 A on a 1000-turn-per-pole field is 1200 ampere-turns: the packed curve is identical
    m = dict(BOOK["machine"], field_turns_per_pole=1000.0,
             magnetization={"speed_rpm": 1200.0, "ampere_turns": [0.0, 1200.0], "emf_V": [0.0, 300.0]})
    a = pack(resolve("machine", {"machine": m, "mechanics": BOOK["mechanics"]}, "at"))
    b = pack(resolve("machine", BOOK, "amps"))
    assert np.array_equal(a.p, b.p)


def test_ampere_turns_rules():
    from host.errors import ConfigError

    m = dict(BOOK["machine"], magnetization={"speed_rpm": 1200.0, "ampere_turns": [0.0, 1200.0], "emf_V": [0.0, 300.0]})
    with pytest.raises(ConfigError, match=r"^book: machine.field_turns_per_pole: required with machine.magnetization.ampere_turns"):
        resolve("machine", {"machine": m, "mechanics": BOOK["mechanics"]}, "book")
    m = dict(m, field_turns_per_pole=1000.0, magnetization=dict(m["magnetization"], field_current_A=[0.0, 1.2]))
    with pytest.raises(ConfigError, match="not both"):
        resolve("machine", {"machine": m, "mechanics": BOOK["mechanics"]}, "book")


def test_constant_flux_machine_by_hand(kernel):
    """K phi given instead of a curve (separately excited, field held at rated): at 440 V and
    a 1000 A armature current, E = 440 - 1000 x 0.02 = 420 V (no brush drop given), so the
    speed is E / K phi = 420 / 8 = 52.5 rad/s = 501.3 r/min (the constant-flux motor equation,
    any machines textbook)."""
    import math

    from rtmodel import layout as L
    from rtmodel.kernel import step_frame

    table = {
        "machine": {"name": "constant-flux motor", "connection": "separate", "rated_voltage_V": 440.0,
                    "rated_current_A": 1040.0, "rated_speed_rpm": 500.0, "rated_field_current_A": 18.0,
                    "ra_ohm": 0.02, "la_H": 0.0008, "brush_drop_V": 0.0, "field_resistance_ohm": 12.0,
                    "field_inductance_H": 30.0, "resistances_as_measured": True, "flux_constant_Vs": 8.0},
        "mechanics": {"inertia_kgm2": 100.0, "load": "constant"},
    }
    cfg = resolve("machine", table, "kphi")
    assert any("rated_power_kW not given" in w for w in cfg.warnings)  # the skipped cross-check is said
    plant = pack(cfg)
    assert plant.derived["flux_constant_Vs"] == pytest.approx((440 - 1040 * 0.02) / (500 * math.pi / 30))
    x, u, y = plant.new_state(), plant.new_inputs(), np.zeros(L.N_OUTPUT)
    x[L.X_I_FIELD_A] = 18.0
    x[L.X_SPEED_RAD_S] = 52.5
    u[L.U_LOAD_TORQUE_NM] = 8.0 * 1000.0
    step_frame(x, plant.p, u, y, int(round(3.0 / plant.dt_s)))
    assert y[L.Y_FLUX_VS] == pytest.approx(8.0, rel=1e-9)
    assert y[L.Y_IA_A] == pytest.approx(1000.0, rel=1e-4)
    assert y[L.Y_SPEED_RAD_S] == pytest.approx(52.5, rel=1e-4)


def test_constant_flux_rules():
    from host.errors import ConfigError

    m = dict(BOOK["machine"], flux_constant_Vs=2.0)
    with pytest.raises(ConfigError, match="either a flux constant or a magnetization curve"):
        resolve("machine", {"machine": m, "mechanics": BOOK["mechanics"]}, "book")


def test_piecewise_linear_curve_reads_like_a_hand_calculation(kernel):
    """machine.magnetization.interpolation = piecewise_linear: the model's open-circuit EMF
    between points is the straight-line reading, here against numpy.interp; the default
    monotone cubic differs from it between points."""
    from rtmodel import layout as L
    from rtmodel.kernel import step_frame

    xs = [0.0, 0.5, 1.0, 1.5, 2.0]
    es = [5.0, 120.0, 210.0, 250.0, 270.0]
    base = {"machine": dict(BOOK["machine"], connection="separate", rated_field_current_A=1.5,
                            magnetization={"speed_rpm": 1200.0, "field_current_A": xs, "emf_V": es,
                                           "interpolation": "piecewise_linear"}),
            "mechanics": {"inertia_kgm2": 0.5, "load": "prime_mover", "prime_mover_speed_rpm": 900.0}}

    def emf_at(table, i_f):
        plant = pack(resolve("machine", table, "book"))
        x, u, y = plant.new_state(), plant.new_inputs(), np.zeros(L.N_OUTPUT)
        u[L.U_CONTACTOR] = 0.0
        x[L.X_I_FIELD_A] = i_f
        u[L.U_FIELD_V] = i_f * 250.0
        x[L.X_SPEED_RAD_S] = 900 * np.pi / 30
        step_frame(x, plant.p, u, y, 10)
        return float(y[L.Y_EMF_V])

    for i_f in (0.3, 0.75, 1.2, 1.8, 2.4):
        assert emf_at(base, i_f) == pytest.approx(np.interp(i_f, xs, es) * 900 / 1200 if i_f <= 2.0
                                                 else (270 + 40 * (i_f - 2.0)) * 900 / 1200, rel=1e-6)
    cubic = {"machine": dict(base["machine"], magnetization=dict(base["machine"]["magnetization"], interpolation="monotone_cubic")),
             "mechanics": base["mechanics"]}
    assert abs(emf_at(cubic, 0.75) - emf_at(base, 0.75)) > 1.0


def test_armature_resistance_neglected(kernel):
    """ra_ohm = 0 as a book problem neglects it (brush drop 0 too): the separately excited
    motor's speed is V / K phi at any load (E = Vt), here with K phi = 8 V s/rad at 440 V:
    55 rad/s at no load and at 1000 A (the constant-flux motor equation)."""
    from rtmodel import layout as L
    from rtmodel.kernel import step_frame

    table = {
        "machine": {"name": "no-Ra motor", "connection": "separate", "rated_voltage_V": 440.0,
                    "rated_current_A": 1040.0, "rated_speed_rpm": 500.0, "rated_field_current_A": 18.0,
                    "ra_ohm": 0.0, "la_H": 0.0008, "brush_drop_V": 0.0, "field_resistance_ohm": 12.0,
                    "field_inductance_H": 30.0, "resistances_as_measured": True, "flux_constant_Vs": 8.0},
        "mechanics": {"inertia_kgm2": 100.0, "viscous_Nm_per_rad_s": 50.0, "load": "constant"},
    }
    plant = pack(resolve("machine", table, "no-ra"))
    assert math.isinf(plant.derived["time_constants_s"]["armature_s"])
    for load in (0.0, 8000.0):
        x, u, y = plant.new_state(), plant.new_inputs(), np.zeros(L.N_OUTPUT)
        x[L.X_I_FIELD_A] = 18.0
        x[L.X_SPEED_RAD_S] = 55.0
        # viscous friction damps the L-J oscillation (no resistance damps it electrically)
        u[L.U_LOAD_TORQUE_NM] = load
        step_frame(x, plant.p, u, y, int(round(60.0 / plant.dt_s)))  # 15 decay times 2J/b
        assert y[L.Y_SPEED_RAD_S] == pytest.approx(55.0, rel=1e-4)
        assert y[L.Y_IA_A] == pytest.approx((load + 50.0 * 55.0) / 8.0, rel=1e-3)
    from host.opoint import solve_motor

    op = solve_motor(plant, 440.0, load_torque_Nm=8000.0)
    assert op.state.w == pytest.approx(55.0, rel=1e-9)
