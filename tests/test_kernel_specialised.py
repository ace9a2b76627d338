"""Specialised kernel builds against the generic one, on every connection, supply and field supply.

rtmodel.kernel.kernel_for(p) compiles the frame kernel with the connection, supply, field
supply and load of p as compile-time constants (numba drops every other case's code); the
generic rtmodel.kernel.step_frame reads them from p at run time. Both come from the one body
of equations in rtmodel/kernel.py, so they must integrate the same model: after a transient
(start, firing-angle or voltage change, load change) their states agree to 1e-12 of each
value's scale and their status bits and outputs agree likewise. Any difference beyond
rounding would mean the specialisation changed the physics (a code path dropped that the
case needs). No timing is asserted here (speed: tools/bench_model.py).

Each case compiles one specialised build (the cases are chosen to cover the five
connections, five supplies and three field supplies in seven builds).
"""

from __future__ import annotations

import numpy as np
import pytest

from rtmodel import layout as L

# (machine, converter, overrides, first inputs, inputs after the change)
CASES = [
    # separately excited, switched bridge, switched field half bridge, passive constant load
    ("kestrel_f3_stand", "kestrel_f3_bridge", ["field.kind=half_bridge"],
     {L.U_ALPHA_DEG: 40.0}, {L.U_ALPHA_DEG: 70.0, L.U_LOAD_TORQUE_NM: 3000.0}),
    # separately excited, dual bridge (the demo), averaged field bridge
    ("kestrel_f3_stand", "kestrel_f3_dual", [], {L.U_ALPHA_DEG: 40.0},
     {L.U_ALPHA_DEG: 120.0, L.U_BRIDGE_SELECT: 2.0}),
    # separately excited, DC source, DC field
    ("kestrel_f3_stand", None, [], {}, {L.U_VT_V: 300.0, L.U_LOAD_TORQUE_NM: 4000.0}),
    # shunt on the averaged bridge, fan load
    ("kestrel_shunt_fan", "kestrel_f3_averaged", ["field.kind=dc_source"], {L.U_ALPHA_DEG: 60.0},
     {L.U_ALPHA_DEG: 75.0}),
    # series on the current source, overhauling (hoist) load
    ("kestrel_coil_hoist", "kestrel_current_source", [], {L.U_IREF_A: 150.0}, {L.U_IREF_A: 60.0}),
    # compound long shunt on a DC source, constant load
    ("kestrel_pinch_roll", None, [], {}, {L.U_VT_V: 150.0}),
    # compound short shunt on a DC source, proportional load
    ("kestrel_test_stand", None, [], {}, {L.U_LOAD_TORQUE_NM: 60.0, L.U_LOAD_OHM: 20.0}),
]
T_EACH_S = 0.15  # simulated time before and after the change
FRAME_S = 1.0 / 300.0


def _run(step, plant, first, change):
    x = plant.new_state()
    u = plant.new_inputs()
    y = np.zeros(L.N_OUTPUT)
    n_sub = max(1, round(FRAME_S / plant.dt_s))
    n_frames = int(T_EACH_S / FRAME_S)
    status = 0
    outputs = []
    for inputs in (first, change):
        for k, v in inputs.items():
            u[k] = v
        for _ in range(n_frames):
            status |= int(step(x, plant.p, u, y, n_sub))
            outputs.append(y.copy())
    return x, np.array(outputs), status


def _scaled_difference(a, b):
    """Largest |a - b| over max(1, |a|, |b|), element by element."""
    return float(np.max(np.abs(a - b) / np.maximum(1.0, np.maximum(np.abs(a), np.abs(b)))))


@pytest.mark.parametrize("machine, converter, overrides, first, change", CASES,
                         ids=[f"{c[0]}+{c[1] or 'dc_source'}" for c in CASES])
def test_specialised_build_agrees_with_generic(kernel, plant_factory, machine, converter, overrides, first, change):
    import rtmodel.kernel as K

    plant = plant_factory(machine, converter, overrides)
    special = K.kernel_for(plant.p)
    assert special is not K.step_frame, "kernel_for must return a specialised build"
    assert K.kernel_for(plant.p) is special, "one build per set of codes in a process"

    x_gen, y_gen, st_gen = _run(kernel, plant, first, change)
    x_spe, y_spe, st_spe = _run(special, plant, first, change)

    # the transient did happen: current flowed and the shaft or the field moved
    assert np.max(np.abs(y_gen[:, L.Y_IA_A])) > 1.0
    assert np.all(np.isfinite(x_gen)) and not st_gen & L.ST_NONFINITE
    assert st_spe == st_gen
    assert _scaled_difference(x_spe, x_gen) <= 1e-12, [
        (L.STATE_NAMES[k], x_gen[k], x_spe[k]) for k in np.flatnonzero(x_spe != x_gen)]
    assert _scaled_difference(y_spe, y_gen) <= 1e-12


def test_codes_key_the_builds(plant_factory):
    import rtmodel.kernel as K

    f3 = plant_factory("kestrel_f3_stand", "kestrel_f3_dual")
    fan = plant_factory("kestrel_shunt_fan")
    assert K.specialisation_codes(f3.p) == (L.CONN_SEPARATE, L.SUPPLY_DUAL_BRIDGE, L.FIELD_SUPPLY_AVERAGED,
                                            L.LOAD_CONSTANT)
    # the field supply does not matter without a separate field: it does not split the builds
    fan_p = fan.p.copy()
    fan_p[L.P_FIELD_SUPPLY_KIND] = L.FIELD_SUPPLY_HALF_BRIDGE
    assert K.specialisation_codes(fan_p) == K.specialisation_codes(fan.p)
    assert K.kernel_for(fan_p) is K.kernel_for(fan.p)
    assert K.kernel_for(f3.p) is not K.kernel_for(fan.p)
