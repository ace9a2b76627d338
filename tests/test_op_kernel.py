"""The operating point agrees with the compiled kernel run to steady state (DC source).

Reference: the kernel itself (rtmodel/kernel.py through host.sim.run_offline), an independent
implementation of the same circuit: it integrates the differential equations in time, where
host.opoint solves their algebraic steady state. Every demo machine in configs/machines/ that
exists when the tests run is checked (glob), motors at rated voltage and 60 % of rated torque,
generators at their configured speed and load, self-excited ones building up from residual
magnetism from a dead start.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from host import opoint
from host.sim import run_offline
from rtmodel import layout as L

from conftest import MACHINES, make_plant

DEMOS = sorted(p.stem for p in MACHINES.glob("*.toml"))
TOL = 0.005  # 0.5 %, the brief's acceptance band


def _settle(plant, x, chunk_s=1.0, max_s=60.0, rel=2e-6):
    """Run the kernel in chunks until speed and currents stop moving; return the last row."""
    prev = None
    t = 0.0
    while t < max_s:
        _, Y = run_offline(plant, chunk_s, 0.1, [], x=x)
        row = Y[-1]
        assert not (int(row[L.Y_STATUS]) & L.ST_NONFINITE)
        cur = np.array([row[L.Y_SPEED_RPM], row[L.Y_I_LINE_A], row[L.Y_IF_A], row[L.Y_VT_V]])
        t += chunk_s
        if prev is not None:
            scale = np.maximum(np.abs(cur), 1.0)
            if np.all(np.abs(cur - prev) <= rel * scale):
                return row, t
        prev = cur
    return row, t


def _close(a, b, scale):
    return abs(a - b) <= TOL * max(abs(b), scale)


@pytest.mark.parametrize("stem", DEMOS)
def test_demo_machine_op_matches_kernel(stem, kernel):
    base = make_plant(stem)
    v = base.machine.values
    ir = v["machine.rated_current_A"]
    common = ["machine.thermal.frozen=true", "terminal.source_ohm=0.0"]
    if v["machine.duty"] == "motor":
        t_load = float(0.6 * base.derived["rated_torque_Nm"])
        vt = float(v["machine.rated_voltage_V"])
        plant = make_plant(stem, overrides=common + [
            "mechanics.load=\"constant\"", f"mechanics.load_torque_Nm={t_load!r}",
            "terminal.load_ohm=0.0", f"terminal.voltage_V={vt!r}"])
        op = opoint.solve_motor(plant, vt, load_torque_Nm=t_load)
        assert op.found
        s = op.state
        # start close to the point (a dead start direct on line is not how these motors are
        # started, and a differential compound would reverse its flux): 10 % slow, field set
        x = plant.new_state()
        x[L.X_SPEED_RAD_S] = 0.9 * s.w
        x[L.X_I_LINE_A] = s.i1
        x[L.X_I_FIELD_A] = s.ish if op.circuit.has_shunt else 0.0
    else:
        n = v["mechanics.prime_mover_speed_rpm"] or v["machine.rated_speed_rpm"]
        r_load = v["terminal.load_ohm"]
        plant = make_plant(stem, overrides=common + ["mechanics.load=\"prime_mover\""])
        op = opoint.solve_generator(plant, n, load_ohm=r_load if r_load > 0 else None)
        assert op.found, op.reason
        s = op.state
        x = plant.new_state()  # dead start: self-excited machines build up from residual
    row, t_run = _settle(plant, x)
    r = op.report()
    sg = -1.0 if r["convention"] == "generator" else 1.0
    checks = [
        ("speed_rpm", row[L.Y_SPEED_RPM], r["speed_rpm"], v["machine.rated_speed_rpm"] * 0.01),
        ("armature_current_A", sg * row[L.Y_IA_A], r["armature_current_A"], 0.01 * ir),
        ("line_current_A", sg * row[L.Y_I_LINE_A], r["line_current_A"], 0.01 * ir),
        ("terminal_voltage_V", row[L.Y_VT_V], r["terminal_voltage_V"], 1.0),
        ("emf_V", row[L.Y_EMF_V], r["emf_V"], 1.0),
        ("torque_Nm", sg * row[L.Y_TORQUE_NM], r["torque_Nm"], 0.01 * base.derived["rated_torque_Nm"]),
    ]
    if op.circuit.has_shunt:
        checks.append(("field_current_A", row[L.Y_IF_A], r["field_current_A"], 0.01 * (v["machine.rated_field_current_A"] or 1.0)))
    if op.circuit.has_series:
        checks.append(("series_field_current_A", sg * row[L.Y_ISE_A], r["series_field_current_A"], 0.01 * ir))
    worst = max(abs(k - o) / max(abs(o), sc) for _, k, o, sc in checks)
    print(f"{stem}: worst relative deviation {worst:.2e} after {t_run:.0f} s")
    bad = [(name, k, o) for name, k, o, sc in checks if not _close(k, o, sc)]
    assert not bad, f"{stem}: kernel vs op after {t_run:.0f} s: {bad}"
