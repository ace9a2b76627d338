"""The identification formulas against their standards and reference libraries.

Hand numbers are worked in the comments; "from memory" marks values recalled, not looked up.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import interpolate, stats

from host.identify import fits as F
from host.identify import formulas as fm
from host.identify.nameplate import RATIOS, frohlich_curve


def test_iec_60034_1_resistance_method_by_hand():
    # IEC 60034-1, resistance method for copper: theta2 = R2/R1 (235 + theta1) - 235 (235 from memory).
    # R1 = 0.0175 ohm at 20 degC, R2 = 0.0228 ohm: 0.0228/0.0175 = 1.302857; x 255 = 332.229; - 235 = 97.229 degC
    assert fm.winding_temp_C(0.0175, 20.0, 0.0228) == pytest.approx(97.229, abs=0.001)
    # rise over a 40 degC coolant: 57.229 K
    assert fm.temperature_rise_K(0.0175, 20.0, 0.0228, 40.0) == pytest.approx(57.229, abs=0.001)
    # the same relation the other way: 9.9 ohm at 20 degC is 9.9 x 310/255 = 12.0353 ohm at 75 degC
    assert fm.resistance_at(9.9, 20.0, 75.0) == pytest.approx(12.0353, abs=1e-4)
    # and the two are inverse to each other
    assert fm.winding_temp_C(9.9, 20.0, fm.resistance_at(9.9, 20.0, 131.0)) == pytest.approx(131.0)


def test_copper_constant_is_the_models():
    # the model corrects resistances with the same constant (rtmodel.kernel.COPPER_K)
    from rtmodel import kernel

    assert kernel.COPPER_K == fm.COPPER_K_C == 235.0


def test_ieee_113_retardation_by_hand():
    # IEEE Std 113 retardation method (formula from memory): J = P / (0.010966 n dn/dt), n in r/min.
    # P = 18.7 kW at 500 r/min falling at 28.5 r/min per s: 18700 / (0.010966 x 500 x 28.5) = 119.67 kg m^2
    assert fm.retardation_inertia_kgm2(18700.0, 500.0, 28.5) == pytest.approx(119.67, rel=2e-4)
    # 0.010966 is (pi/30)^2 rounded
    assert (math.pi / 30) ** 2 == pytest.approx(0.010966, rel=5e-5)


def test_retardation_inverts_a_closed_form_run_down():
    # a run-down with viscous loss only: J dw/dt = -b w  ->  w = w0 exp(-b t / J) (closed form);
    # at any speed the losses are P = b w^2, so J = P / (w dw/dt) must give J back
    j, b, w0 = 40.0, 3.0, 150.0
    t = 2.5
    w = w0 * math.exp(-b * t / j)
    dw = b * w / j
    n, dn = w * 30 / math.pi, dw * 30 / math.pi
    assert fm.retardation_inertia_kgm2(b * w * w, n, dn) == pytest.approx(j, rel=1e-12)


def test_nema_code_c_pairs_as_quoted():
    # NEMA MG 1 power-supply code C, as quoted in a manufacturer's instruction manual (REFERENCES.md):
    # 230 V ac for 240 V dc, 460 V ac for 500 and 550 V dc; nothing else is claimed
    assert fm.nema_code_c_ac_V(240.0) == 230.0
    assert fm.nema_code_c_ac_V(500.0) == 460.0
    assert fm.nema_code_c_ac_V(550.0) == 460.0
    assert fm.nema_code_c_ac_V(440.0) is None


def test_steady_armature_equation():
    # any machines textbook: motor E = Vt - Ia Ra - Vb; generator E = Vt + Ia Ra + Vb
    assert fm.armature_emf_V(440.0, 1040.0, 0.0214, 2.0) == pytest.approx(440 - 22.256 - 2)
    assert fm.armature_emf_V(230.0, 98.0, 0.12, 2.0, motor=False) == pytest.approx(230 + 11.76 + 2)


def test_curve_is_scipy_pchip_on_interior_segments():
    # the monotone cubic the identification writes is the model's (Fritsch-Carlson slopes, as
    # scipy.interpolate.PchipInterpolator); the end slopes differ on purpose (the model uses the
    # end secants), so compare where only interior slopes are used
    i = np.array([0.0, 2, 4, 6, 8, 10, 12, 14, 16, 18, 20, 24, 28])
    e = np.array([9.0, 95, 180, 255, 310, 345, 370, 388, 401, 412, 421, 435, 446])
    ref = interpolate.PchipInterpolator(i, e)
    x = np.linspace(i[1], i[-2], 500)
    got, dgot = F.curve_eval(i, e, x)
    assert np.max(np.abs(got - ref(x))) < 1e-9
    assert np.max(np.abs(dgot - ref.derivative()(x))) < 1e-7
    back = F.curve_inverse(i, e, got[::50])
    assert np.max(np.abs(back - x[::50])) < 1e-9


def test_resistance_fit_is_ordinary_least_squares():
    # the V = Vb + R I fit against scipy.stats.linregress on the same points
    from host.identify.records import ARMATURE_VI, Record

    rng = np.random.default_rng(2)
    i = np.array([100.0, 250, 400, 600, 800, 1000])
    v = 2.0 + 0.0189 * i + rng.normal(0, 0.02, i.size)
    rec = Record("mem", ARMATURE_VI, {"current_A": i, "voltage_V": v}, {"winding_temp_C": 20.0, "brushes": 1.0}, list(range(6)))
    fit = F.fit_resistance(rec, 20.0)
    ref = stats.linregress(i, v)
    assert fit.values["resistance_at_test_ohm"] == pytest.approx(ref.slope, rel=1e-10)
    assert fit.values["brush_drop_V"] == pytest.approx(ref.intercept, rel=1e-10)
    assert fit.quality["resistance_std_error_pct"] == pytest.approx(100 * ref.stderr / ref.slope, rel=1e-6)


def test_pava_against_brute_force():
    # pool-adjacent-violators gives the least-squares non-decreasing fit: check against a
    # brute-force search over all block partitions of a short sequence
    import itertools

    y = np.array([1.0, 3.0, 2.0, 2.5, 5.0, 4.0])
    w = np.ones_like(y)
    blocks = F._pava(y, w)
    fit = np.concatenate([[v] * (b - a) for a, b, v in blocks])
    best = None
    n = len(y)
    for cuts in itertools.product([0, 1], repeat=n - 1):
        idx = [0] + [k + 1 for k, c in enumerate(cuts) if c] + [n]
        vals = [y[a:b].mean() for a, b in zip(idx, idx[1:])]
        if any(b_ < a_ for a_, b_ in zip(vals, vals[1:])):
            continue
        cand = np.concatenate([[v] * (b - a) for v, a, b in zip(vals, idx, idx[1:])])
        err = float(np.sum((cand - y) ** 2))
        if best is None or err < best[0]:
            best = (err, cand)
    assert np.allclose(fit, best[1])


def test_frohlich_estimate_passes_the_rated_point():
    # the nameplate curve goes through (If_rated, E_rated) and its air-gap line lies the
    # labelled saturation factor above it there
    k = RATIOS["saturation_factor"][0]
    i, e = frohlich_curve(18.0, 412.0, 10.0, k)
    e_at, _ = F.curve_eval(i, e, [18.0])
    # the Froehlich form is sampled at 9 points; the table's cubic passes within 0.5 % of the form
    assert e_at[0] == pytest.approx(412.0, rel=0.005)
    slope0 = (e[1] - e[0]) / (i[1] - i[0])
    assert np.all(np.diff(e) > 0)
    assert slope0 * 18.0 / (412.0 - 10.0) == pytest.approx(k, rel=0.15)  # first segment is a secant: near k
