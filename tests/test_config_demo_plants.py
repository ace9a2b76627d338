"""The demo machines behave as their headers say: each motor, started on a voltage ramp from a DC
source, settles where a steady-state solution of its circuit equations puts it, and the exciter
builds up from residual magnetism to the intersection of its curve with the field-resistance line.

Reference: the steady-state equations of the DC machine (V = E + Ia Ra + Vb, T = K phi Ia,
E = E_curve(i_excitation) w / w_curve; shunt, series and compound excitation as in any machines
textbook, written here from memory) solved with scipy.optimize.brentq, the curve interpolated
with scipy.interpolate.PchipInterpolator (independent of rtmodel's own curve code; operating
points lie between the knots, where both use the Fritsch-Carlson slopes). Copper resistance at
temperature: IEC 60034-1 (from memory), R2/R1 = (235 + t2)/(235 + t1). The armature temperature is frozen at
the ambient so the reference and the model use the same resistance.
Short runs only (20 us step, 8-22 s simulated, about 0.1 s each).
"""

from __future__ import annotations

import math
import tomllib

import numpy as np
import pytest
from scipy.interpolate import PchipInterpolator
from scipy.optimize import brentq

from host.config import load
from host.params import pack
from host.shipped import shipped_dir
from host.sim import parse_ramp, run_offline
from rtmodel import layout as L

MACHINES = shipped_dir("machines")
CONVERTERS = shipped_dir("converters")
RPM = math.pi / 30.0


def _cfg(stem: str) -> dict:
    return tomllib.loads((MACHINES / f"{stem}.toml").read_text(encoding="utf-8"))


def _copper(r, t, t_ref=20.0):
    return r * (235.0 + t) / (235.0 + t_ref)  # IEC 60034-1 copper law (from memory)


class Ref:
    """Steady state of one demo machine from its TOML values, by hand."""

    def __init__(self, stem: str):
        d = self.d = _cfg(stem)
        m, mag, mech = d["machine"], d["machine"]["magnetization"], d["mechanics"]
        self.m, self.mech = m, mech
        self.curve = PchipInterpolator(mag["field_current_A"], mag["emf_V"])
        self.wc = mag["speed_rpm"] * RPM
        t_amb = d.get("machine", {}).get("thermal", {}).get("ambient_C", 40.0)
        tf = m.get("field_temp_C", 75.0)
        self.ra = _copper(m["ra_ohm"], t_amb)
        self.rse = _copper(m.get("series_resistance_ohm", 0.0), tf)
        self.rf = _copper(m.get("field_resistance_ohm", 0.0), tf) + m.get("field_rheostat_ohm", 0.0)
        self.vb = m.get("brush_drop_V", 2.0)
        self.wr = m["rated_speed_rpm"] * RPM
        sign = 1.0 if m.get("compound", "cumulative") == "cumulative" else -1.0
        self.ks = sign * m.get("series_turns_ratio", 0.0)

    def kphi(self, i_exc):
        return float(self.curve(i_exc)) / self.wc

    def load_torque(self, w):
        mech, kind = self.mech, self.mech.get("load", "constant")
        t = mech.get("load_torque_Nm", 0.0)
        if kind == "quadratic":
            t = t * w * abs(w) / self.wr**2
        elif kind == "proportional":
            t = t * w / self.wr
        # constant and overhauling: t itself (at speeds well above the smoothing band)
        return t + mech.get("viscous_Nm_per_rad_s", 0.0) * w + mech.get("coulomb_Nm", 0.0)

    def motor(self, v):
        """(speed rad/s, armature A, shunt field A) at terminal voltage v."""
        conn = self.m["connection"]

        def state(ia):
            if conn == "shunt":
                i_sh = v / self.rf
                v_arm, i_exc = v, i_sh
            elif conn == "series":
                i_sh, v_arm, i_exc = 0.0, v - ia * self.rse, ia
            elif conn == "compound_long":
                i_sh = v / self.rf
                v_arm, i_exc = v - ia * self.rse, i_sh + self.ks * ia
            elif conn == "compound_short":
                # series field carries the line current ia + i_sh; shunt across the armature
                i_sh = (v - ia * self.rse) / (self.rf + self.rse)
                v_arm = v - (ia + i_sh) * self.rse
                i_exc = i_sh + self.ks * (ia + i_sh)
            else:
                raise AssertionError(conn)
            kphi = self.kphi(i_exc)
            w = (v_arm - ia * self.ra - self.vb) / kphi
            return w, kphi, i_sh

        def torque_gap(ia):
            w, kphi, _ = state(ia)
            return kphi * ia - self.load_torque(w)

        ia = brentq(torque_gap, 1.0, 3.0 * self.m["rated_current_A"], xtol=1e-9)
        w, _, i_sh = state(ia)
        return w, ia, i_sh

    def exciter_open_circuit(self, w):
        """Field current of the self-excited shunt generator on open circuit (ia = field current)."""
        f = lambda i: float(self.curve(i)) * w / self.wc - i * (self.rf + self.ra) - self.vb
        return brentq(f, 0.5, 3.4)

    def exciter_loaded(self, w, r_load):
        """Terminal voltage with a load resistor: E = V + ia Ra + Vb, ia = V/R_load + V/R_f."""
        def f(v):
            i_f = v / self.rf
            ia = v / r_load + i_f
            return float(self.curve(i_f)) * w / self.wc - v - ia * self.ra - self.vb
        return brentq(f, 150.0, 270.0)


def _run(stem, t_end, segments=(), overrides=(), converter=None, sample=1e-3):
    m = load("machine", MACHINES / f"{stem}.toml", ["machine.thermal.frozen=true", *overrides])
    c = load("converter", CONVERTERS / f"{converter}.toml") if converter else None
    plant = pack(m, c)
    assert plant.dt_s == pytest.approx(20e-6)
    t, Y = run_offline(plant, t_end, sample, [parse_ramp(s) for s in segments])
    assert np.all(np.isfinite(Y)), stem
    assert not (int(np.bitwise_or.reduce(Y[:, L.Y_STATUS].astype(int))) & L.ST_NONFINITE)
    return t, Y, plant


MOTORS = [
    # stem, rated voltage, ramp time s, run time s
    ("kestrel_shunt_fan", 440.0, 3.0, 14.0),
    ("kestrel_coil_hoist", 240.0, 2.0, 8.0),
    ("kestrel_pinch_roll", 440.0, 2.0, 10.0),
    ("kestrel_test_stand", 440.0, 10.0, 20.0),  # header: ramp it over 10 s or more
]


@pytest.mark.parametrize("stem,v,t_ramp,t_end", MOTORS, ids=[m[0] for m in MOTORS])
def test_motor_settles_at_hand_steady_state(stem, v, t_ramp, t_end, kernel):
    ref = Ref(stem)
    w_ref, ia_ref, ish_ref = ref.motor(v)
    t, Y, _ = _run(stem, t_end, [f"terminal_voltage_V@0:{t_ramp}={0.0}:{v}"])
    last = Y[-1]
    assert last[L.Y_SPEED_RAD_S] == pytest.approx(w_ref, rel=5e-3), stem
    assert last[L.Y_IA_A] == pytest.approx(ia_ref, rel=1e-2), stem
    if ish_ref:
        assert last[L.Y_IF_A] == pytest.approx(ish_ref, rel=5e-3), stem
    # settled: the last second moves the speed by less than 0.1 %
    k = np.searchsorted(t, t_end - 1.0)
    assert abs(Y[-1, L.Y_SPEED_RAD_S] - Y[k, L.Y_SPEED_RAD_S]) < 1e-3 * w_ref
    # and within the machine's permitted speed on the way (a start, not a runaway)
    assert np.max(np.abs(Y[:, L.Y_SPEED_RPM])) < _cfg(stem)["machine"]["max_speed_rpm"]


def test_motor_steady_states_are_near_rating():
    """The demo ratings hang together: rated voltage gives about rated speed and current."""
    for stem, v, _, _ in MOTORS:
        ref = Ref(stem)
        w, ia, _ = ref.motor(v)
        m = ref.m
        assert 0.9 < w / ref.wr < 1.1, (stem, w / RPM)
        assert 0.7 < ia / m["rated_current_A"] < 1.05, (stem, ia)


def test_exciter_builds_up_open_circuit(kernel):
    ref = Ref("kestrel_exciter")
    w = ref.wr
    i_ref = ref.exciter_open_circuit(w)
    t, Y, plant = _run("kestrel_exciter", 8.0, overrides=["terminal.load_ohm=0"])
    assert Y[0, L.Y_IF_A] == 0.0
    assert Y[-1, L.Y_IF_A] == pytest.approx(i_ref, rel=5e-3)
    # header: settles near 253 V, about 110 % of rated
    assert 245.0 < Y[-1, L.Y_VT_V] < 258.0
    # and it is the residual EMF that starts it: with the curve shifted to zero residual it stays dead
    flat = [e - 6.0 for e in _cfg("kestrel_exciter")["machine"]["magnetization"]["emf_V"]]
    flat[0] = 0.0
    _, Y0, _ = _run("kestrel_exciter", 2.0, overrides=["terminal.load_ohm=0",
                                                        f"machine.magnetization.emf_V={flat}"])
    assert abs(Y0[-1, L.Y_VT_V]) < 1.0


def test_exciter_builds_up_into_rated_load(kernel):
    ref = Ref("kestrel_exciter")
    r_load = _cfg("kestrel_exciter")["terminal"]["load_ohm"]
    v_ref = ref.exciter_loaded(ref.wr, r_load)
    t, Y, _ = _run("kestrel_exciter", 8.0)
    assert Y[-1, L.Y_VT_V] == pytest.approx(v_ref, rel=5e-3)
    # header: about rated voltage (230 V) and rated current (98 A) at rated load
    assert Y[-1, L.Y_VT_V] == pytest.approx(230.0, rel=0.03)
    assert abs(Y[-1, L.Y_IA_A]) == pytest.approx(98.0, rel=0.05)


@pytest.mark.parametrize("connection", ["shunt", "compound_long"])
def test_bridge_fed_shunt_field_obeys_ohms_law(connection, kernel):
    """In periodic steady state the flux-linkage terms average out, so the mean field current is
    the mean voltage across the field circuit over its resistance (Kirchhoff; no source needed).

    Fails for compound connections on the switched bridge at the time of writing: the field
    current is about 30 % high at the default 20 us step and the excess shrinks in proportion to
    the step (see the report on the demo configs)."""
    t, Y, plant = _run("kestrel_pinch_roll", 7.0, ["firing_angle_deg@0:2=90:37"],
                       overrides=[f"machine.connection='{connection}'"],
                       converter="kestrel_pinch_bridge", sample=100e-6)
    w = t > 6.5  # 150 whole pulses
    # the shunt field sits across the terminals in both connections; frame means are exact means
    v_field = Y[w, L.Y_VT_MEAN_V].mean()
    i_field = Y[w, L.Y_IF_A].mean()
    assert v_field == pytest.approx(440.0, rel=0.03)
    assert i_field * plant.derived["field_circuit_ohm"] == pytest.approx(v_field, rel=0.02)
