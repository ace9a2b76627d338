"""Constant-flux separately excited motor against its closed-form second-order step response.

Source: Krishnan, Electric Motor Drives, ch. 3 (from memory): with constant flux the speed
responds to the armature voltage as
    omega(s)/V(s) = (1/K) / (tau_a tau_m s^2 + tau_m s + 1),
    tau_a = La/Ra, tau_m = J Ra / K^2, omega_n = 1/sqrt(tau_a tau_m), zeta = 0.5 sqrt(tau_m/tau_a).
The standard second-order step response (any control textbook, e.g. Ogata, Modern Control
Engineering, ch. 5, from memory) gives omega(t); the armature current is J domega/dt / K.

Flux is held constant: the field current starts at its steady value on a table point (so K is
the tabulated EMF over the curve speed, no interpolation) and the separate field loop does not
see the armature. Brush drop 0, no friction, no load, temperature frozen at the reference
temperature (so Ra is the configured value).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import reference_models as R
from host.config import load
from rtmodel import layout as L

I_F = 1.0  # A, a point of the test machine's magnetization table (440 V at 1500 r/min)
E_AT_I_F = 440.0
V_STEP = 200.0


def step_response(t, v, k, la, ra, j):
    """(omega, ia) of the ideal constant-flux motor for a voltage step v from rest."""
    tau_a = la / ra
    tau_m = j * ra / k**2
    wn = 1.0 / math.sqrt(tau_a * tau_m)
    zeta = 0.5 * math.sqrt(tau_m / tau_a)
    w_ss = v / k
    if zeta < 1.0:
        wd = wn * math.sqrt(1.0 - zeta**2)
        env = np.exp(-zeta * wn * t)
        w = w_ss * (1.0 - env * (np.cos(wd * t) + zeta / math.sqrt(1.0 - zeta**2) * np.sin(wd * t)))
        dw = w_ss * wn / math.sqrt(1.0 - zeta**2) * env * np.sin(wd * t)
    else:
        r = wn * math.sqrt(zeta**2 - 1.0)
        s1 = -zeta * wn + r
        s2 = -zeta * wn - r
        w = w_ss * (1.0 + (s2 * np.exp(s1 * t) - s1 * np.exp(s2 * t)) / (s1 - s2))
        dw = w_ss * s1 * s2 * (np.exp(s1 * t) - np.exp(s2 * t)) / (s1 - s2)
    return w, j * dw / k, zeta, wn


@pytest.mark.parametrize("j_kgm2,t_end_s,damped", [(0.2, 0.4, "under"), (3.0, 1.5, "over")])
def test_voltage_step_matches_second_order_closed_form(kernel, tmp_path, j_kgm2, t_end_s, damped):
    over = (
        "machine.brush_drop_V=0",
        "machine.thermal.frozen=true",
        "machine.thermal.initial_C=20.0",
        f"mechanics.inertia_kgm2={j_kgm2}",
        'mechanics.load="none"',
    )
    path = R.write_machine(tmp_path, "sep_const_flux", R.machine_toml(R.SEPARATE))
    plant = R.load_plant(path, over)
    m = R.machine_from_config(load("machine", path, list(over)).values)
    k = E_AT_I_F / m.curve.w_c
    inp = R.Inputs(vs_V=V_STEP, field_V=I_F * m.rsh)
    x = R.kernel_state(plant, m, [0.0, I_F, 0.0, 20.0])
    t, Y = R.run_kernel(kernel, plant, x, [(0.0, inp)], t_end_s, 1e-3)
    w_cf, ia_cf, zeta, wn = step_response(t, V_STEP, k, m.la, m.ra_ref, j_kgm2)
    assert (zeta < 1.0) == (damped == "under")
    w_ss = V_STEP / k
    err_w = np.max(np.abs(Y[1:, L.Y_SPEED_RAD_S] - w_cf[1:]))
    err_i = np.max(np.abs(Y[1:, L.Y_IA_A] - ia_cf[1:]))
    drift_if = np.max(np.abs(Y[:, L.Y_IF_A] - I_F))
    print(f"\n{damped}-damped zeta={zeta:.3f} wn={wn:.1f} rad/s: max |speed error| {err_w:.2e} rad/s "
          f"({err_w / w_ss:.2e} of final), max |ia error| {err_i:.2e} A, field drift {drift_if:.1e} A")
    assert drift_if < 1e-9  # the flux really is constant
    assert err_w < 1e-3 * w_ss
    assert err_i < 1e-3 * m.i_rated
    if zeta < 1.0:
        # peak overshoot exp(-pi zeta / sqrt(1 - zeta^2)) (same textbooks)
        mp = math.exp(-math.pi * zeta / math.sqrt(1.0 - zeta**2))
        mp_meas = np.max(Y[:, L.Y_SPEED_RAD_S]) / w_ss - 1.0
        print(f"overshoot: closed form {mp:.4f}, model {mp_meas:.4f}")
        assert abs(mp_meas - mp) < 2e-3
    else:
        assert np.max(Y[:, L.Y_SPEED_RAD_S]) <= w_ss * (1.0 + 1e-6)  # no overshoot
