"""Magnetization curve: shape, extrapolation, negative excitation, speed scaling, inductance.

References: scipy.interpolate.PchipInterpolator (Fritsch & Carlson 1980 monotone slopes) for
the interior knot slopes, CubicHermiteSpline for evaluation (see tests/reference_models.py,
MagCurve, for why the end slopes are the end secants); the model's module docstring for the
rules it promises (end secants, straight-line extrapolation, mirrored negative branch with the
residual fading over the first segment). EMF proportional to speed at constant flux:
E = K phi w (any machines textbook, e.g. Chapman, Electric Machinery Fundamentals, from memory).
Field time constant L/R with the incremental inductance following the curve slope (the
saturated field responds faster): Fitzgerald & Kingsley, Electric Machinery (from memory).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.interpolate import PchipInterpolator

import reference_models as R
from conftest import MACHINES
from host.config import load
from rtmodel import layout as L
from rtmodel.magnetization import curve_emf_py, pchip_slopes


def _curves(tmp_path):
    """(name, packed p, MagCurve) for every machine config in configs/machines and the test
    machines (shunt-field and series curves)."""
    out = []
    paths = sorted(MACHINES.glob("*.toml"))
    paths.append(R.write_machine(tmp_path, "mag_shunt", R.machine_toml(R.SHUNT)))
    paths.append(R.write_machine(tmp_path, "mag_series", R.machine_toml(R.SERIES, load="quadratic")))
    for path in paths:
        cfg = load("machine", path)
        plant = R.load_plant(path)
        v = cfg.values
        c = R.MagCurve(v["machine.magnetization.field_current_A"], v["machine.magnetization.emf_V"],
                       v["machine.magnetization.speed_rpm"] * R.RPM)
        out.append((path.stem, plant.p, c))
    return out


def _model(p, i):
    return np.array([curve_emf_py(p, float(x)) for x in np.atleast_1d(i)])


def test_knot_slopes_match_scipy_pchip_interior_and_end_secants(tmp_path):
    for name, p, c in _curves(tmp_path):
        d = pchip_slopes(c.i, c.e)
        d_scipy = PchipInterpolator(c.i, c.e).derivative()(c.i)
        secant = np.diff(c.e) / np.diff(c.i)
        err = np.max(np.abs(d[1:-1] - d_scipy[1:-1]) / np.max(secant))
        print(f"\n{name}: interior slopes vs scipy PchipInterpolator, max rel. error {err:.1e}")
        assert err < 1e-12
        assert d[0] == pytest.approx(secant[0], rel=1e-14)
        assert d[-1] == pytest.approx(secant[-1], rel=1e-14)
        n = int(p[L.P_MAG_N])
        assert np.allclose(p[L.P_MAG_D0 : L.P_MAG_D0 + n], d, rtol=1e-14)


def test_curve_matches_scipy_reference_everywhere(tmp_path):
    for name, p, c in _curves(tmp_path):
        i = np.linspace(-2.0 * c.i[-1], 2.0 * c.i[-1], 4001)
        got = _model(p, i)
        ref = np.array([c.emf(x) for x in i])
        err_e = np.max(np.abs(got[:, 0] - ref[:, 0])) / c.e[-1]
        err_d = np.max(np.abs(got[:, 1] - ref[:, 1])) / c.slope_max
        print(f"\n{name}: model curve vs scipy CubicHermiteSpline, max rel. error E {err_e:.1e}, dE/di {err_d:.1e}")
        assert err_e < 1e-12 and err_d < 1e-10


def test_monotone_no_overshoot_residual_and_knots(tmp_path):
    for name, p, c in _curves(tmp_path):
        assert _model(p, 0.0)[0, 0] == c.e_res  # residual at zero excitation
        assert np.array_equal(_model(p, c.i)[:, 0], c.e)  # passes through every point
        for k in range(len(c.i) - 1):
            i = np.linspace(c.i[k], c.i[k + 1], 401)
            e = _model(p, i)
            assert np.all(np.diff(e[:, 0]) >= 0.0), f"{name}: not monotone in segment {k}"
            assert np.all(e[:, 0] >= c.e[k]) and np.all(e[:, 0] <= c.e[k + 1]), f"{name}: overshoot in segment {k}"
            assert np.all(e[:, 1] >= 0.0)
        i = np.linspace(-3.0 * c.i[-1], 3.0 * c.i[-1], 20001)
        assert np.all(np.diff(_model(p, i)[:, 0]) >= 0.0), f"{name}: not monotone overall"


def test_linear_extrapolation_past_last_point(tmp_path):
    for name, p, c in _curves(tmp_path):
        s_last = (c.e[-1] - c.e[-2]) / (c.i[-1] - c.i[-2])
        i = c.i[-1] * np.array([1.0, 1.1, 1.5, 2.0, 4.0])
        got = _model(p, i)
        expect = c.e[-1] + s_last * (i - c.i[-1])
        assert np.allclose(got[:, 0], expect, rtol=1e-13)
        assert np.allclose(got[:, 1], s_last, rtol=1e-13)
        assert s_last > 0.0  # deep saturation keeps a small positive slope


def test_negative_excitation_mirrored_with_fading_residual(tmp_path):
    """E(-i) = -E_tab(i) + 2 E_res max(0, 1 - i/i_1) (model docstring): continuous at zero,
    exactly odd beyond the first table point."""
    for name, p, c in _curves(tmp_path):
        i = np.linspace(0.0, 2.0 * c.i[-1], 2001)
        pos = _model(p, i)[:, 0]
        neg = _model(p, -i)[:, 0]
        expect = -pos + 2.0 * c.e_res * np.maximum(0.0, 1.0 - i / c.i1)
        assert np.allclose(neg, expect, rtol=0, atol=1e-12 * c.e[-1])
        beyond = i >= c.i1
        assert np.array_equal(neg[beyond], -pos[beyond])
        assert abs(_model(p, -1e-12)[0, 0] - c.e_res) < 1e-9 * c.e[-1]  # continuous at zero


def _sep(tmp_path, over=()):
    over = ("machine.thermal.frozen=true",) + tuple(over)
    path = R.write_machine(tmp_path, "mag_sep", R.machine_toml(R.SEPARATE, duty="generator", load="prime_mover"))
    plant = R.load_plant(path, over)
    m = R.machine_from_config(load("machine", path, list(over)).values)
    return plant, m


@pytest.mark.parametrize("i_f", [0.0, 0.7, 2.0])  # residual, between points, past the last point
def test_open_circuit_emf_scales_with_speed(kernel, tmp_path, i_f):
    plant, m = _sep(tmp_path)
    for n_rpm in (300.0, 1500.0, 2400.0, -1000.0):
        w = n_rpm * R.RPM
        inp = R.Inputs(contactor=False, field_V=i_f * m.rsh, prime_rad_s=w)
        x = R.kernel_state(plant, m, [0.0, i_f, w, 40.0])
        t, Y = R.run_kernel(kernel, plant, x, [(0.0, inp)], 0.01, 1e-3)
        e_expect = m.curve.emf(i_f)[0] * w / m.curve.w_c
        assert abs(Y[-1, L.Y_EMF_V] - e_expect) <= 1e-12 * 500.0 + 1e-12 * abs(e_expect)
        assert abs(Y[-1, L.Y_VT_V] - e_expect) <= 1e-9 * 500.0  # open circuit: vt = E
        assert Y[-1, L.Y_IA_A] == 0.0


def test_field_time_constant_follows_incremental_inductance(kernel, tmp_path):
    """Small field-voltage step (0.5 %) with the armature open: the field current rises with
    tau = (L_leak + L_m0 E'(i)/E'_max) / R_f; longer on the straight part than in saturation."""
    plant, m = _sep(tmp_path)
    step = 1.005
    t63s = {}
    for i0 in (0.3, 1.3):  # straight part / saturation
        inp = R.Inputs(contactor=False, field_V=i0 * m.rsh * step, prime_rad_s=1500 * R.RPM)
        x = R.kernel_state(plant, m, [0.0, i0, 1500 * R.RPM, 40.0])
        tau_guess = (m.lfl + m.lm0) / m.rsh
        t, Y = R.run_kernel(kernel, plant, x, [(0.0, inp)], 6.0 * tau_guess, 2e-4)
        i = Y[:, L.Y_IF_A]
        i_end = i0 * step
        t63 = np.interp(0.632 * (i_end - i0), i - i0, t)
        i_mid = i0 + 0.5 * (i_end - i0)
        tau = (m.lfl + m.lm0 * m.curve.emf(i_mid)[1] / m.curve.slope_max) / m.rsh
        rel = abs(t63 - tau) / tau
        print(f"\nfield step at {i0} A: 63 % time {t63 * 1e3:.2f} ms, L/R {tau * 1e3:.2f} ms (rel. error {rel:.1e})")
        assert rel < 0.01
        t63s[i0] = t63
    assert t63s[0.3] > 2.0 * t63s[1.3]
