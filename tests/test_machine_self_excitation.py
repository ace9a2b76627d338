"""Self-excited shunt generator: build-up, critical field resistance, critical speed, reversal.

Sources (textbook statements, from memory): Chapman, Electric Machinery Fundamentals, and
Fitzgerald & Kingsley, Electric Machinery, DC generator chapters -
  * driven at constant speed on open circuit, a shunt generator builds up from its residual
    EMF to the intersection of the field-resistance line with the magnetization curve;
  * it fails to build up when the field circuit resistance exceeds the critical resistance,
    the slope of the straight (air-gap) part of the curve at that speed; the critical
    resistance is proportional to speed, so for a given field circuit there is a critical
    speed n_crit = n_curve * R_field / slope;
  * it fails to build up when the field is connected the wrong way round (or the machine is
    driven backwards): the field current then demagnetizes the residual flux.
The intersections are computed here from the curve with scipy's brentq, including Ra, the
brush drop law and the field current flowing through the armature (open circuit).

Reversed field connection: the config key machine.field_reversed connects the shunt field the
other way round; driving the machine backwards is exactly equivalent in this model, which gives
an independent check of the key: with j the field current, a reversed connection obeys
R j + L dj/dt = E(-j) w / w_c, and backwards rotation obeys R j' + L dj'/dt = E(j') (-w) / w_c;
substituting j' = -j turns one into the other (Ra, the brush drop and the leakage are odd in
the current). So the reversed connection is tested both ways and against each other.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq

import reference_models as R
from host.config import load
from rtmodel import layout as L

RPM = R.RPM
L_FIELD_H = 10.0  # smaller than the test machine's 40 H so build-up takes ~1 s, not ~5 s


def _gen(tmp_path, rheostat_ohm=0.0):
    over = (
        f"machine.field_inductance_H={L_FIELD_H}",
        f"machine.field_rheostat_ohm={rheostat_ohm}",
        "machine.thermal.frozen=true",
        "machine.thermal.initial_C=40.0",
        # the loader rejects a rated field current the field circuit cannot carry from rated
        # voltage; with a large rheostat the test machine's 0.9 A would be refused
        "machine.rated_field_current_A=0.5",
    )
    path = R.write_machine(tmp_path, f"shunt_gen_{rheostat_ohm:g}", R.machine_toml(R.SHUNT, "generator", load="prime_mover"))
    plant = R.load_plant(path, over)
    m = R.machine_from_config(load("machine", path, list(over)).values)
    return plant, m


def _field_line_roots(m, w):
    """Open-circuit operating points: E(i) w/w_c = (Rsh + Ra) i + Vb(i), i the field current,
    which also flows (backwards) through the armature. Returns the list of roots (scipy brentq
    on a fine bracket scan), sorted by |i|."""
    ra = R.copper_ohm(m.ra_ref, 40.0, m.t_ref)

    def f(i):
        vb = m.vb0 * max(-1.0, min(1.0, i / m.knee))
        return m.curve.emf(i)[0] * w / m.curve.w_c - (m.rsh + ra) * i - vb

    grid = np.linspace(-3.0 * m.curve.i[-1], 3.0 * m.curve.i[-1], 60001)
    vals = np.array([f(i) for i in grid])
    roots = []
    for a, b, fa, fb in zip(grid[:-1], grid[1:], vals[:-1], vals[1:]):
        if fa == 0.0:
            roots.append(a)
        elif fa * fb < 0.0:
            roots.append(brentq(f, a, b, xtol=1e-14))
    return sorted(roots, key=abs)


def _run_open(kernel, plant, m, w, t_end_s, i0=0.0):
    inp = R.Inputs(contactor=False, prime_rad_s=w)
    x = R.kernel_state(plant, m, [-i0, i0, w, 40.0])
    t, Y = R.run_kernel(kernel, plant, x, [(0.0, inp)], t_end_s, 5e-3)
    return t, Y


def test_builds_up_to_intersection_of_field_line_and_curve(kernel, tmp_path):
    plant, m = _gen(tmp_path, rheostat_ohm=0.0)
    w = 1500 * RPM
    t, Y = _run_open(kernel, plant, m, w, 3.0)
    i_end = Y[-1, L.Y_IF_A]
    roots = _field_line_roots(m, w)
    i_up = max(roots)
    rel = abs(i_end - i_up) / i_up
    print(f"\nbuild-up at 1500 r/min, R_field {m.rsh:.1f} ohm: model {i_end:.5f} A, intersection "
          f"{i_up:.5f} A (rel. error {rel:.1e}); terminal {Y[-1, L.Y_VT_V]:.1f} V")
    assert len([r for r in roots if r > 0]) == 1  # the line crosses the curve once, above residual
    assert rel < 1e-3
    assert abs(Y[-1, L.Y_VT_V] - m.rsh * i_up) < 1e-3 * m.rsh * i_up  # vt = Rsh * i_f
    assert abs(Y[-1, L.Y_IF_A] - Y[-20, L.Y_IF_A]) < 1e-4 * i_up  # settled
    assert Y[0, L.Y_IF_A] == 0.0  # from residual alone


@pytest.mark.parametrize("factor,builds", [(0.8, True), (1.25, False)])
def test_critical_field_resistance(kernel, tmp_path, factor, builds):
    """R_crit = slope of the tangent from the origin to the curve (residual off) at this speed:
    the textbook tangent construction, done here with scipy's brentq (reference_models)."""
    w = 1500 * RPM
    _, m0 = _gen(tmp_path)
    r_crit = m0.curve.tangent_from_origin_slope() * w / m0.curve.w_c
    rheo = factor * r_crit - m0.rsh
    plant, m = _gen(tmp_path, rheostat_ohm=rheo)
    assert abs(plant.derived["critical_field_ohm_at_rated_speed"] * (1500 / 1450) - r_crit) < 1e-9 * r_crit
    t, Y = _run_open(kernel, plant, m, w, 3.0)
    i_end = Y[-1, L.Y_IF_A]
    roots = [r for r in _field_line_roots(m, w) if r > 0]
    expect = max(roots)  # the only positive root: built-up point, or the low one near residual
    print(f"\nR_field = {factor} R_crit ({m.rsh:.0f} of {r_crit:.0f} ohm): model {i_end:.4f} A, "
          f"intersection {expect:.4f} A")
    assert abs(i_end - expect) < 2e-3 * max(expect, 0.05)
    if builds:
        assert i_end > 0.5  # A: well up the curve
    else:
        assert i_end < 0.1 * 0.9  # stays near residual: below 10 % of rated field current
        # near residual: with the line above the air-gap line the low crossing is at about
        # E_res / (1 - slope/R) - a few times the residual, far below rated voltage
        assert Y[-1, L.Y_VT_V] < 0.1 * 440.0


@pytest.mark.parametrize("rheo_ohm", [0.0, 100.0])
@pytest.mark.parametrize("speed_factor,builds", [(1.25, True), (0.8, False)])
def test_critical_speed_scales_with_field_resistance(kernel, tmp_path, rheo_ohm, speed_factor, builds):
    """n_crit = n_curve * R_field / slope: proportional to the field circuit resistance."""
    plant, m = _gen(tmp_path, rheostat_ohm=rheo_ohm)
    n_crit = m.curve.w_c / RPM * m.rsh / m.curve.slope_max
    w = speed_factor * n_crit * RPM
    t, Y = _run_open(kernel, plant, m, w, 4.0)
    i_end = Y[-1, L.Y_IF_A]
    expect = max(r for r in _field_line_roots(m, w) if r > 0)
    print(f"\nR_field {m.rsh:.0f} ohm, n_crit {n_crit:.0f} r/min, run at {speed_factor} n_crit: "
          f"model {i_end:.4f} A, intersection {expect:.4f} A")
    assert abs(i_end - expect) < 2e-3 * max(expect, 0.05)
    assert (i_end > 0.3) == builds


def test_reversed_field_connection_does_not_build_up(kernel, tmp_path):
    """Tested as backwards rotation (equivalent, see module docstring): the residual-driven
    field current opposes the residual flux; the EMF falls below the residual value."""
    plant, m = _gen(tmp_path)
    w = -1500 * RPM
    t, Y = _run_open(kernel, plant, m, w, 2.0)
    e_res = m.curve.e_res * abs(w) / m.curve.w_c
    roots = _field_line_roots(m, w)
    expect = roots[0]
    i_end = Y[-1, L.Y_IF_A]
    print(f"\nbackwards at 1500 r/min: field {i_end:.5f} A (expected {expect:.5f} A), "
          f"|EMF| {abs(Y[-1, L.Y_EMF_V]):.3f} V vs residual {e_res:.3f} V")
    assert expect < 0.0 and len([r for r in roots if r < 0 and abs(r) < m.curve.i1]) == 1
    assert abs(i_end - expect) < 1e-3 * abs(expect)
    assert abs(Y[-1, L.Y_EMF_V]) < e_res  # driven down from the residual, not built up
    # the same machine forward builds up (the reversal, not the machine, stops it)
    t2, Y2 = _run_open(kernel, plant, m, -w, 2.0)
    assert Y2[-1, L.Y_IF_A] > 0.5


def test_reversed_residual_builds_up_with_reversed_polarity(kernel, tmp_path):
    """An initial field current beyond the residual wipe-out (i < -i_1, where the model's curve
    is exactly odd) builds the machine up with the opposite polarity, to the mirror image of
    the normal operating point."""
    plant, m = _gen(tmp_path)
    w = 1500 * RPM
    t, Y = _run_open(kernel, plant, m, w, 3.0, i0=-1.5 * m.curve.i1)
    i_up = max(_field_line_roots(m, w))
    print(f"\nreversed residual: model {Y[-1, L.Y_IF_A]:.5f} A, mirror point {-i_up:.5f} A")
    assert abs(Y[-1, L.Y_IF_A] + i_up) < 1e-3 * i_up
    assert Y[-1, L.Y_VT_V] < -0.5 * 440.0


def test_field_reversed_key_fails_to_build_up_like_backwards_rotation(kernel, tmp_path):
    """machine.field_reversed = true (the shunt field connected the other way round) at forward
    speed must give the same collapse as the backwards-rotation equivalent above: the field
    current settles at the mirrored near-residual root, the EMF stays below the residual."""
    plant, m = _gen(tmp_path)
    path = R.write_machine(tmp_path, "shunt_gen_reversed", R.machine_toml(R.SHUNT, "generator", load="prime_mover"))
    over = (f"machine.field_inductance_H={L_FIELD_H}", "machine.field_rheostat_ohm=0.0",
            "machine.thermal.frozen=true", "machine.thermal.initial_C=40.0",
            "machine.rated_field_current_A=0.5", "machine.field_reversed=true")
    plant_rev = R.load_plant(path, over)
    w = 1500 * RPM
    t, Y = _run_open(kernel, plant_rev, m, w, 2.0)
    e_res = m.curve.e_res * w / m.curve.w_c
    roots_backwards = _field_line_roots(m, -w)  # the equivalent circuit, solved independently
    expect = -roots_backwards[0]  # j' = -j: the reversed winding carries the opposite current
    i_end = Y[-1, L.Y_IF_A]
    print(f"\nfield reversed at 1500 r/min: field {i_end:.5f} A (expected {expect:.5f} A), "
          f"EMF {Y[-1, L.Y_EMF_V]:.3f} V vs residual {e_res:.3f} V")
    assert abs(i_end - expect) < 1e-3 * abs(expect)
    assert 0.0 < Y[-1, L.Y_EMF_V] < e_res
    # and the op solver agrees that no built-up point exists
    from host import opoint

    op = opoint.solve_generator(plant_rev, 1500.0)
    assert not op.found or abs(op.state.vt) < e_res


def test_check_and_op_report_one_critical_resistance(tmp_path):
    """`dcrig check` (params.derive) and `dcrig op` (opoint) give the same critical field
    resistance, and it is the textbook tangent from the origin, here on a curve whose foot
    bends upwards first (an S-shaped start, invented numbers), where the tangent touches the
    curve above the foot and differs from both the steepest segment and the steepest point."""
    from host.config import resolve
    from host.opoint import circuit, solve_generator
    from host.params import pack

    i_tab = [0.0, 0.2, 0.4, 0.6, 0.8, 1.0, 1.2, 1.5, 2.0, 2.5, 3.0]
    e_tab = [4.0, 20.0, 50.0, 95.0, 140.0, 180.0, 210.0, 240.0, 270.0, 285.0, 295.0]
    table = {
        "machine": {"name": "s-curve exciter", "connection": "shunt", "duty": "generator", "rated_power_kW": 10.0,
                    "rated_voltage_V": 230.0, "rated_current_A": 45.0, "rated_speed_rpm": 1500.0,
                    "rated_field_current_A": 1.5, "ra_ohm": 0.2, "la_H": 0.005, "field_resistance_ohm": 100.0,
                    "field_inductance_H": 50.0,
                    "magnetization": {"speed_rpm": 1500.0, "field_current_A": i_tab, "emf_V": e_tab}},
        "mechanics": {"inertia_kgm2": 0.3, "load": "prime_mover"},
    }
    plant = pack(resolve("machine", table, "s-curve"))
    ref = R.MagCurve(i_tab, e_tab, 1500 * RPM).tangent_from_origin_slope()
    steepest_segment = max((b - a) / (y - x) for x, y, a, b in zip(i_tab, i_tab[1:], e_tab, e_tab[1:]))
    assert abs(ref - steepest_segment) > 0.02 * ref  # the definitions really differ on this curve
    assert plant.derived["critical_field_ohm_at_rated_speed"] == pytest.approx(ref, rel=1e-6)
    op = solve_generator(plant, 1500.0).report()
    assert op["self_excitation"]["critical_field_ohm"] == pytest.approx(ref, rel=1e-6)
    assert circuit(plant) is not None
