"""Compiled machine model against an independent scipy reference, every connection.

The reference (tests/reference_models.py) states the circuit in natural states (ia, ish, w, T)
with the mass matrix of the coupled inductances and is integrated by scipy.integrate.solve_ivp
(Radau, rtol 1e-9). The model runs at its default step (20 us). Requirement (issue): error
within 1 % of the rated value for speed, armature current and field current. The measured
maxima are printed (run with -s) so reviewers see the margin.
"""

from __future__ import annotations

import numpy as np
import pytest

import reference_models as R
from host.config import load
from host.shipped import shipped_dir
from rtmodel import layout as L

RPM = R.RPM
SAMPLE_S = 1e-3
TOL_PU = 0.01  # issue requirement: 1 % of rated

CASES = [
    (R.SEPARATE, "cumulative"),
    (R.SHUNT, "cumulative"),
    (R.SERIES, "cumulative"),
    (R.LONG_SHUNT, "cumulative"),
    (R.LONG_SHUNT, "differential"),
    (R.SHORT_SHUNT, "cumulative"),
    (R.SHORT_SHUNT, "differential"),
]
IDS = [f"{c}-{k}" if c.startswith("compound") else c for c, k in CASES]


def _setup(tmp_path, conn, compound, duty, load_law, overrides=()):
    path = R.write_machine(tmp_path, f"{conn}_{compound}_{duty}", R.machine_toml(conn, duty, compound, load_law))
    plant = R.load_plant(path, overrides)
    m = R.machine_from_config(load("machine", path, list(overrides)).values)
    return plant, m


def _compare(kernel, plant, m, s0, segments, t_end_s, label, i_f_rated_A=0.9):
    x = R.kernel_state(plant, m, s0)
    t, Y = R.run_kernel(kernel, plant, x, segments, t_end_s, SAMPLE_S)
    assert Y[-1, L.Y_STATUS] == 0 or not (int(Y[-1, L.Y_STATUS]) & L.ST_NONFINITE)
    ref = R.simulate(m, s0, segments, t)
    assert np.all(np.isfinite(ref))
    # row 0 is the initial state: the kernel reports algebraic outputs only after a step
    err_w = np.max(np.abs(Y[1:, L.Y_SPEED_RAD_S] - ref[1:, 2]))
    err_ia = np.max(np.abs(Y[1:, L.Y_IA_A] - ref[1:, 0]))
    err_if = np.max(np.abs(Y[1:, L.Y_IF_A] - ref[1:, 1]))
    i_f_rated = i_f_rated_A
    print(
        f"\n{label}: max |error| speed {err_w:.3g} rad/s ({err_w / m.w_rated:.2e} pu), "
        f"ia {err_ia:.3g} A ({err_ia / m.i_rated:.2e} pu), if {err_if:.3g} A ({err_if / i_f_rated:.2e} pu); "
        f"peak ia {np.max(np.abs(ref[:, 0])):.0f} A, final speed {ref[-1, 2] / RPM:.0f} r/min"
    )
    assert err_w <= TOL_PU * m.w_rated
    assert err_ia <= TOL_PU * m.i_rated
    if m.conn != R.SERIES:
        assert err_if <= TOL_PU * i_f_rated
    return t, Y, ref


@pytest.mark.parametrize("conn,compound", CASES, ids=IDS)
def test_motoring_start_load_step_voltage_step(kernel, tmp_path, conn, compound):
    """DC-source start from standstill with the field established, a load-torque step at
    0.6 s, a terminal-voltage step at 1.0 s (and a field-voltage step at 1.2 s, separate)."""
    law = "quadratic" if conn == R.SERIES else "constant"  # an unloaded series motor runs away
    plant, m = _setup(tmp_path, conn, compound, "motor", law)
    v = 440.0
    field_v = v if conn == R.SEPARATE else 0.0
    ish0 = 0.0 if conn == R.SERIES else v / m.rsh
    t_load = 150.0 if conn == R.SERIES else 100.0
    inp = R.Inputs(vs_V=v, field_V=field_v)
    segs = [
        (0.0, inp),
        (0.6, inp.with_(load_torque_Nm=t_load)),
        (1.0, inp.with_(load_torque_Nm=t_load, vs_V=380.0)),
    ]
    if conn == R.SEPARATE:
        segs.append((1.2, inp.with_(load_torque_Nm=t_load, vs_V=380.0, field_V=0.8 * field_v)))
    t, Y, ref = _compare(kernel, plant, m, [0.0, ish0, 0.0, 40.0], segs, 1.6, f"motor {conn} {compound}")
    # the scenario does what it claims: the machine started and carries the load
    assert ref[-1, 2] > 0.5 * m.w_rated
    assert ref[-1, 0] > 10.0


@pytest.mark.parametrize("conn,compound", CASES, ids=IDS)
def test_generating_load_switching_with_prime_mover(kernel, tmp_path, conn, compound):
    """Prime mover at constant speed; load resistor switched on, then changed. Self-excited
    machines start at their built-up open-circuit point; the series generator builds up on its
    load from the residual."""
    overrides = ()
    if conn == R.SERIES:
        # a 5 A brush knee: with the default 1 % knee the brush drop below the knee acts as a
        # 3.6 ohm resistor and (realistically) stops a series generator building up
        overrides = ("machine.brush_knee_A=5.0",)
    plant, m = _setup(tmp_path, conn, compound, "generator", "prime_mover", overrides)
    if conn == R.SEPARATE:
        w = 1500 * RPM
        vf = m.rsh * 0.9
        inp = R.Inputs(contactor=False, field_V=vf, prime_rad_s=w)
        s0 = [0.0, 0.9, w, 40.0]
        segs = [(0.0, inp), (0.05, inp.with_(load_ohm=10.0)), (0.4, inp.with_(load_ohm=6.0)),
                (0.6, inp.with_(load_ohm=6.0, field_V=0.8 * vf))]
        t_end = 0.8
    elif conn == R.SERIES:
        # driven backwards: with one fixed winding connection, forward rotation makes the
        # generated current demagnetize the residual flux (textbook: a series machine must
        # have its field reversed, or be driven the other way, to self-excite as a generator)
        w = -1200 * RPM
        inp = R.Inputs(contactor=False, load_ohm=5.0, prime_rad_s=w)
        s0 = [0.0, 0.0, w, 40.0]
        segs = [(0.0, inp), (0.6, inp.with_(load_ohm=5.5))]
        t_end = 1.0
    else:
        w = 1500 * RPM
        i0 = R.open_circuit_field_A(m, w, 40.0)
        inp = R.Inputs(contactor=False, prime_rad_s=w)
        s0 = [-i0, i0, w, 40.0]
        segs = [(0.0, inp), (0.05, inp.with_(load_ohm=20.0)), (0.4, inp.with_(load_ohm=12.0))]
        t_end = 0.8
    t, Y, ref = _compare(kernel, plant, m, s0, segs, t_end, f"generator {conn} {compound}")
    # generating: power flows out of the terminals (motor convention: negative input power)
    assert Y[-1, L.Y_INPUT_POWER_W] < -0.2 * 440.0 * 56.0 * 0.5
    assert np.all(Y[1:, L.Y_SPEED_RAD_S] == w)


DEMO = sorted(p.stem for p in shipped_dir("machines").glob("*.toml"))
assert DEMO, "no machine configs found"


@pytest.mark.parametrize("stem", DEMO)
def test_demo_machine_configs(kernel, stem):
    """Every shipped machine config, its own inputs: motors start from standstill (field
    established) through a starting resistor (source_ohm, limiting the inrush to ~2.5 x rated)
    with their configured load, then take a 20 % load-torque step; generators start at their
    built-up (or separately excited) open-circuit point and have their configured load switched
    on. The reference has no armature reaction; a config with one is reported, not skipped."""
    from conftest import MACHINES, make_plant

    cfg = load("machine", MACHINES / f"{stem}.toml")
    v = cfg.values
    assert not v["machine.armature_reaction.armature_current_A"], "reference lacks armature reaction"
    motor = v["machine.duty"] == "motor"
    overrides = []
    if motor:
        r_start = v["machine.rated_voltage_V"] / (2.5 * v["machine.rated_current_A"])
        overrides.append(f"terminal.source_ohm={r_start}")
    if v["machine.series_short_open_rpm"]:
        # the series-field shorting relay switches between two connections this reference checks
        # on their own (shunt, compound); tests/test_series_short.py checks the switch itself
        overrides.append("machine.series_short_open_rpm=0")
    plant = make_plant(stem, overrides=overrides)
    m = R.machine_from_config(load("machine", MACHINES / f"{stem}.toml", overrides).values)
    u0 = plant.new_inputs()
    inp = R.Inputs(vs_V=u0[L.U_VT_V], source_ohm=v["terminal.source_ohm"] if not motor else r_start,
                   contactor=u0[L.U_CONTACTOR] > 0.5, load_ohm=u0[L.U_LOAD_OHM], field_V=u0[L.U_FIELD_V],
                   load_torque_Nm=u0[L.U_LOAD_TORQUE_NM], prime_rad_s=u0[L.U_PRIME_SPEED_RAD_S])
    t_amb = plant.new_state()[L.X_TEMP_ARM_C]
    if motor:
        if m.conn == R.SEPARATE:
            ish0 = inp.field_V / m.rsh
        elif m.conn == R.SERIES:
            ish0 = 0.0
        else:
            ish0 = inp.vs_V / m.rsh  # at standstill, before current flows, the field sees vs
        s0 = [0.0, ish0, 0.0, t_amb]
        t_end = 1.0
        segs = [(0.0, inp), (0.6, inp.with_(load_torque_Nm=1.2 * inp.load_torque_Nm))]
    else:
        w = inp.prime_rad_s
        if m.conn == R.SEPARATE:
            ish0 = inp.field_V / m.rsh
            s0 = [0.0, ish0, w, t_amb]
        elif m.conn == R.SERIES:
            s0 = [0.0, 0.0, w, t_amb]
        else:
            i0 = R.open_circuit_field_A(m, w, t_amb)
            s0 = [-i0, i0, w, t_amb]
        t_end = 0.5
        segs = [(0.0, inp.with_(load_ohm=0.0, contactor=False)), (0.05, inp)]
    _compare(kernel, plant, m, s0, segs, t_end, f"demo {stem}",
             i_f_rated_A=v["machine.rated_field_current_A"] or m.i_rated)
