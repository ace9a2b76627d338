"""Thyristor converter and mains model of the kernel against published formulas and an
independent scipy circuit reference (tests/reference_bridge.py).

Formula sources: Mohan, Undeland, Robbins, "Power Electronics" (three-phase fully controlled
bridge: Vd = 1.35 V_LL cos(alpha), overlap drop (3/pi) w Ls Id, overlap angle relation,
6-pulse ripple; single-phase half-controlled bridge), Sueker, "Power Electronics Design",
App. A (the same bridge relations). Values below are from memory where marked.

The machine is used as an R-L-E load: the shaft speed is imposed by the prime-mover load kind,
the separately excited field is held at rated current from its DC supply (the field state is
preset), and the armature temperature is frozen at the resistance reference temperature so
that R is exactly machine.ra_ohm. TEST_LOAD raises R and L of the armature so that the
current is not absurdly sensitive to a volt of error (the stock mill motor has 17.5 mOhm).
Every check prints its measured error.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from rtmodel import layout as L
from tests.conftest import make_plant
from tests.reference_bridge import BridgeCircuit, BridgeReference

SQ2 = math.sqrt(2.0)
VLL = 415.0  # kestrel_f3_bridge.toml mains.voltage_V
F_HZ = 50.0
W = 2 * math.pi * F_HZ
VDO = 3 * SQ2 / math.pi * VLL  # Mohan et al.: ideal no-load DC voltage of the 6-pulse bridge
BASE = (
    "mechanics.load=prime_mover",
    "field.kind=dc_source",
    "machine.thermal.frozen=true",
    "machine.thermal.initial_C=20",
)
TEST_LOAD = ("machine.ra_ohm=0.25", "machine.la_H=0.005")
R_TEST = 0.25
L_TEST = 0.005
BRUSH_V = 2.0  # kestrel_f3_stand.toml machine.brush_drop_V
BRUSH_KNEE_A = 10.4  # default 1 % of rated current


class Rig:
    """One plant and its arrays; frames of many steps to settle, single steps to record."""

    def __init__(self, kernel, overrides=(), dt_us=20.0, field_A=18.0, machine="kestrel_f3_stand",
                 converter="kestrel_f3_bridge"):
        self.k = kernel
        self.plant = make_plant(machine, converter, list(BASE) + [f"sim.dt_us={dt_us}"] + list(overrides))
        self.p = self.plant.p
        self.x = self.plant.new_state()
        self.u = self.plant.new_inputs()
        self.y = np.zeros(L.N_OUTPUT)
        self.x[L.X_I_FIELD_A] = field_A
        self.dt = self.plant.dt_s

    def kphi(self):
        from host.params import emf_at

        return emf_at(self.p, self.x[L.X_I_FIELD_A], 1.0)

    def set_emf(self, e_V):
        self.u[L.U_PRIME_SPEED_RAD_S] = e_V / self.kphi()

    def settle(self, t_s, frame=500):
        n = int(round(t_s / self.dt))
        st = 0
        while n > 0:
            m = min(frame, n)
            st |= int(self.k(self.x, self.p, self.u, self.y, m))
            n -= m
        return st

    def record(self, t_s, cols=(L.Y_VT_V, L.Y_I_LINE_A)):
        """Per-step outputs: columns cols..., then the step-mean terminal voltage, then status."""
        n = int(round(t_s / self.dt))
        out = np.empty((n, len(cols) + 2))
        idx = list(cols)
        for j in range(n):
            s = self.k(self.x, self.p, self.u, self.y, 1)
            out[j, :-2] = self.y[idx]
            out[j, -2] = self.y[L.Y_VT_MEAN_V]
            out[j, -1] = s
        return out

    def cycles(self, n=2, cols=(L.Y_VT_V, L.Y_I_LINE_A)):
        f = self.p[L.P_MAINS_HZ] + self.u[L.U_MAINS_HZ_DEV]
        return self.record(n / f, cols)


def flags(out):
    st = 0
    for s in out[:, -1]:
        st |= int(s)
    return st


def amplitude(v, dt, f):
    """Amplitude of the f component of v (v spans whole cycles of f's fundamental)."""
    n = len(v)
    spec = np.abs(np.fft.rfft(v - v.mean())) * 2.0 / n
    fr = np.fft.rfftfreq(n, dt)
    return spec[np.argmin(np.abs(fr - f))]


def emf_for(alpha_deg, i_A, r_ohm=R_TEST, ls_H=0.0, pu=1.0):
    """EMF that gives about i_A through the R-L-E load in continuous conduction."""
    vd = pu * VDO * math.cos(math.radians(alpha_deg)) - 3 / math.pi * W * ls_H * i_A
    return vd - BRUSH_V - r_ohm * i_A


# ---- 1. average output voltage ------------------------------------------------------------------
@pytest.mark.parametrize("alpha_deg", [15, 30, 45, 60, 75, 90, 105, 120, 140])
def test_mean_voltage_follows_vdo_cos_alpha(kernel, alpha_deg):
    # Mohan et al. (and Sueker App. A): Vd = (3 sqrt2 / pi) V_LL cos(alpha) in continuous
    # conduction with Ls -> 0. Ls = 2 uH, Rs = 0: the overlap drop (3/pi) w Ls Id is subtracted.
    ls = 2e-6
    r = Rig(kernel, TEST_LOAD + (f"mains.inductance_H={ls}", "mains.resistance_ohm=0",
                                 "bridge.alpha_max_deg=150"))
    r.set_emf(emf_for(alpha_deg, 400.0))
    r.u[L.U_ALPHA_DEG] = alpha_deg
    r.settle(0.1)
    out = r.cycles(3)
    vm = out[:, -2].mean()
    im = out[:, 1].mean()
    vd = VDO * math.cos(math.radians(alpha_deg)) - 3 / math.pi * W * ls * im
    err = (vm - vd) / VDO
    print(f"alpha {alpha_deg}: Vmean {vm:.2f} V, formula {vd:.2f} V, error {100 * err:+.3f} % of Vdo, "
          f"Id {im:.0f} A (min {out[:, 1].min():.0f})")
    assert not flags(out) & L.ST_DISCONTINUOUS and out[:, 1].min() > 0.0
    assert abs(err) < 0.01


# ---- 2. overlap ---------------------------------------------------------------------------------
@pytest.mark.parametrize("alpha_deg", [20, 50, 110])
def test_overlap_drop_and_angle(kernel, alpha_deg):
    # Mohan et al.: Vd = Vdo cos(alpha) - (3/pi) w Ls Id, and the overlap angle mu from
    # cos(alpha) - cos(alpha + mu) = 2 w Ls Id / (sqrt2 V_LL). Ls is raised to 300 uH so that
    # mu spans ~40 steps of 10 us; Rs = 0 (the formulas have none).
    ls = 300e-6
    r = Rig(kernel, TEST_LOAD + (f"mains.inductance_H={ls}", "mains.resistance_ohm=0"), dt_us=10.0)
    r.set_emf(emf_for(alpha_deg, 500.0, ls_H=ls))
    r.u[L.U_ALPHA_DEG] = alpha_deg
    r.settle(0.12)
    out = r.cycles(2, cols=(L.Y_VT_V, L.Y_I_LINE_A, L.Y_CONDUCTING_MASK))
    im = out[:, 1].mean()
    vm = out[:, -2].mean()
    drop = VDO * math.cos(math.radians(alpha_deg)) - vm
    drop_f = 3 / math.pi * W * ls * im
    print(f"alpha {alpha_deg}: Id {im:.1f} A, drop {drop:.2f} V vs (3/pi) w Ls Id {drop_f:.2f} V "
          f"({100 * (drop - drop_f) / drop_f:+.2f} %)")
    assert not flags(out) & L.ST_DISCONTINUOUS
    assert abs(drop - drop_f) < 0.03 * drop_f + 0.002 * VDO
    # overlap intervals: runs of steps with three devices conducting
    three = np.array([bin(int(m)).count("1") == 3 for m in out[:, 2]])
    edges = np.flatnonzero(np.diff(three.astype(int)))
    runs = []
    for a, b in zip(edges[:-1], edges[1:]):
        if three[a + 1]:
            runs.append((a + 1, b + 1))
    assert len(runs) >= 10, "expected six overlaps per cycle"
    dth_deg = math.degrees(W * r.dt)
    worst = 0.0
    for a, b in runs:
        i_c = out[a, 1]  # DC current at the start of the overlap
        cos_end = math.cos(math.radians(alpha_deg)) - 2 * W * ls * i_c / (SQ2 * VLL)
        mu_f = math.degrees(math.acos(cos_end)) - alpha_deg
        mu = (b - a) * dth_deg
        worst = max(worst, abs(mu - mu_f))
    print(f"  overlap angle: formula {mu_f:.2f} deg, measured {mu:.2f} deg, worst error {worst:.2f} deg "
          f"(step {dth_deg:.2f} deg)")
    assert worst <= 2 * dth_deg + 0.02 * mu_f


# ---- 3. ripple ----------------------------------------------------------------------------------
def _ripple_rig(kernel):
    r = Rig(kernel, TEST_LOAD)
    r.set_emf(280.0)
    r.u[L.U_ALPHA_DEG] = 45.0
    r.settle(0.1)
    return r


def test_ripple_is_six_pulse(kernel):
    # Mohan et al.: the DC side of a 6-pulse bridge carries harmonics of order 6k only.
    r = _ripple_rig(kernel)
    out = r.cycles(4)
    a = {f: amplitude(out[:, 0], r.dt, f) for f in (50, 100, 150, 200, 250, 300, 600)}
    print("amplitudes (V):", {f: round(v, 2) for f, v in a.items()})
    others = max(a[f] for f in (50, 100, 150, 200, 250))
    assert a[300] > 50.0 and a[300] > a[600]
    assert others < 0.02 * a[300]


def test_misfire_brings_a_mains_frequency_component(kernel):
    # One device (T1) never fires: two of the six pulses are lost each cycle, so the pattern
    # repeats once per mains cycle: a 50 Hz component appears (expected comparable to 300 Hz).
    r = _ripple_rig(kernel)
    a300_ok = amplitude(r.cycles(2)[:, 0], r.dt, 300)
    r.u[L.U_MISFIRE_MASK] = 1
    r.settle(0.1)
    out = r.cycles(4, cols=(L.Y_VT_V, L.Y_I_LINE_A, L.Y_LINE_IA_A))
    a50 = amplitude(out[:, 0], r.dt, 50)
    print(f"misfire T1: 50 Hz {a50:.1f} V (300 Hz healthy {a300_ok:.1f} V), "
          f"phase a current max {out[:, 2].max():.1f} A")
    assert a50 > 0.3 * a300_ok
    assert out[:, 2].max() <= 0.0  # the upper device of phase a never carried current


@pytest.mark.parametrize("fault", ["fuse", "phase_lost"])
def test_lost_phase_makes_a_two_pulse_output(kernel, fault):
    # With phase a open only the b-c line voltage feeds the bridge: a single-phase (2-pulse)
    # bridge, so the ripple is dominated by 100 Hz (2 x mains) and 300 Hz is no longer the
    # strongest line; phase a carries no current.
    r = _ripple_rig(kernel)
    if fault == "fuse":
        r.u[L.U_FUSE_BLOWN_MASK] = 1
    else:
        r.u[L.U_PHASE_LOST] = 1
    r.settle(0.1)
    out = r.cycles(4, cols=(L.Y_VT_V, L.Y_I_LINE_A, L.Y_LINE_IA_A))
    a = {f: amplitude(out[:, 0], r.dt, f) for f in (50, 100, 300)}
    print(f"{fault} a: amplitudes", {f: round(v, 1) for f, v in a.items()},
          f"mean {out[:, -2].mean():.1f} V")
    assert a[100] > 2 * a[300] and a[100] > 5 * a[50]
    assert np.all(out[:, 2] == 0.0)


# ---- 4. discontinuous conduction ----------------------------------------------------------------
def test_light_load_is_discontinuous_and_lifts_the_mean(kernel):
    # Mohan et al.: in discontinuous conduction the terminals show the EMF while the current is
    # zero, so the mean voltage rises above Vdo cos(alpha). Stock mill motor, alpha 60 deg.
    r = Rig(kernel)
    alpha = 60.0
    r.set_emf(VDO * math.cos(math.radians(alpha)) + 15.0)
    r.u[L.U_ALPHA_DEG] = alpha
    r.settle(0.3)
    out = r.cycles(2)
    i = out[:, 1]
    n6 = len(i) // 12  # twelve pulse intervals in two cycles
    zero_in_each = all(np.any(i[k * n6:(k + 1) * n6] == 0.0) for k in range(12))
    vm = out[:, -2].mean()
    vd = VDO * math.cos(math.radians(alpha))
    print(f"DCM: Imean {i.mean():.1f} A, zero in every pulse {zero_in_each}, Vmean {vm:.1f} V vs "
          f"Vdo cos a {vd:.1f} V")
    assert flags(out) & L.ST_DISCONTINUOUS
    assert zero_in_each and i.max() > 0.0
    assert vm > vd + 0.01 * VDO


def test_heavy_load_is_not_flagged_discontinuous(kernel):
    r = Rig(kernel, TEST_LOAD)
    r.set_emf(emf_for(60.0, 500.0))
    r.u[L.U_ALPHA_DEG] = 60.0
    r.settle(0.1)
    out = r.cycles(2)
    print(f"CCM: Imin {out[:, 1].min():.1f} A, flags {flags(out)}")
    assert out[:, 1].min() > 0 and not flags(out) & L.ST_DISCONTINUOUS


# ---- 5. independent reference -------------------------------------------------------------------
def _bound(alpha_deg, mu_deg, dt, ls, r_loop, l_loop):
    """Error bound of a fixed-step, frozen-pattern bridge against the exact circuit.

    Two switching events per pulse: firing (the DC voltage jumps by half the commutating
    line voltage, v_c(alpha)/2) and the end of overlap (jump v_c(alpha+mu)/2). The kernel
    moves each by at most one step (firing at the start of its step, current zero at the step
    end), so the volt-seconds per pulse are off by at most dt * (dV1 + dV2):
        mean voltage error   B_V  = 6 f dt (dV1 + dV2)
        DC current error     B_I  = B_V / R_loop + dt (dV1 + dV2) / L_loop
        line current error   B_ph = B_I + dt * max di_x/dt in overlap = B_I + dt v_c,max / (2 Ls)
    """
    vc1 = SQ2 * VLL * math.sin(math.radians(alpha_deg))
    vc2 = SQ2 * VLL * math.sin(math.radians(alpha_deg + mu_deg))
    dv = 0.5 * (abs(vc1) + abs(vc2))
    b_v = 6 * F_HZ * dt * dv
    b_i = b_v / r_loop + dt * dv / l_loop
    b_ph = b_i + dt * max(abs(vc1), abs(vc2)) / (2 * ls)
    return b_v, b_i, b_ph


@pytest.mark.parametrize("dt_us", [20.0, 10.0])
def test_switched_bridge_matches_scipy_circuit_reference(kernel, dt_us):
    # Operating point: alpha 45 deg, E 280 V, R 0.25 ohm, L 5 mH, stock Ls 60 uH, Rs 2 mOhm:
    # continuous conduction, overlap ~2 deg, modelled in the reference by the three-device
    # circuit. Steady state is compared over one mains cycle at the kernel's step ends.
    alpha = 45.0
    ls, rs = 60e-6, 0.002  # kestrel_f3_bridge.toml
    r = Rig(kernel, TEST_LOAD, dt_us=dt_us)
    r.set_emf(280.0)
    r.u[L.U_ALPHA_DEG] = alpha
    r.settle(0.2)
    out = r.cycles(1, cols=(L.Y_TIME_S, L.Y_I_LINE_A, L.Y_LINE_IA_A, L.Y_LINE_IB_A, L.Y_EMF_V))
    e = out[0, 4]
    circ = BridgeCircuit(VLL, F_HZ, ls, rs, R_TEST, L_TEST, e, BRUSH_V, BRUSH_KNEE_A)
    ref = BridgeReference(circ, alpha)
    tr, i_star, log = ref.periodic_trace(out[:, 0])
    # overlap angle of the reference, from its turn-on/turn-off log
    ons = [t for t, kind, _ in log if kind == "on"]
    offs = [t for t, kind, _ in log if kind == "off"]
    mu_deg = math.degrees(W * (offs[1] - ons[0]))
    assert 0.5 < mu_deg < 10.0 and len(ons) >= 5
    b_v, b_i, b_ph = _bound(alpha, mu_deg, r.dt, ls, R_TEST + 2 * rs, L_TEST + 2 * ls)
    e_i = np.abs(out[:, 1] - tr.i_d).max()
    e_ph = max(np.abs(out[:, 2] - tr.i_abc[:, 0]).max(), np.abs(out[:, 3] - tr.i_abc[:, 1]).max())
    e_v = abs(out[:, -2].mean() - tr.v_dc.mean())
    print(f"dt {dt_us} us: Id kernel {out[:, 1].mean():.2f} A, reference {tr.i_d.mean():.2f} A; "
          f"max|dI_dc| {e_i:.2f} A (bound {b_i:.2f}); max|dI_line| {e_ph:.2f} A (bound {b_ph:.2f}); "
          f"|dVmean| {e_v:.3f} V (bound {b_v:.3f}); mu {mu_deg:.2f} deg")
    assert e_v <= b_v + 0.5  # + sampling error of the reference's step-end mean
    assert e_i <= b_i
    assert e_ph <= b_ph


def test_reference_itself_obeys_the_formulas():
    # The reference is checked on its own against Mohan et al. so that a shared error cannot
    # pass: in steady state mean V = R Id + E + Vb (zero mean L di/dt), and
    # Vd = Vdo cos a - (3/pi) w Ls Id - 2 Rs Id within the ripple effect.
    alpha, ls = 30.0, 100e-6
    circ = BridgeCircuit(VLL, F_HZ, ls, 0.0, 0.2, 0.02, 300.0)
    ref = BridgeReference(circ, alpha)
    t = np.arange(20000) / 20000 / F_HZ
    tr, i_star, _ = ref.periodic_trace(t)
    vm, im = tr.v_dc.mean(), tr.i_d.mean()
    vd = VDO * math.cos(math.radians(alpha)) - 3 / math.pi * W * ls * im
    print(f"reference: Vmean {vm:.3f} V, R Id + E {0.2 * im + 300:.3f} V, formula {vd:.3f} V")
    assert abs(vm - (0.2 * im + 300.0)) < 0.05
    assert abs(vm - vd) < 0.002 * VDO


# ---- 6. inversion and commutation failure ------------------------------------------------------
@pytest.mark.parametrize("alpha_deg", [120.0, 150.0])
def test_inversion_returns_power_to_the_mains(kernel, alpha_deg):
    # Mohan et al.: with alpha > 90 deg and a negative (regenerating) EMF the bridge inverts:
    # Vd < 0 while Id > 0, mean power Vt*I < 0. 150 deg leaves a margin
    # gamma = 180 - alpha - mu ~ 26 deg (~1.4 ms) >> t_q = 120 us: no commutation failure.
    r = Rig(kernel, TEST_LOAD)
    r.set_emf(emf_for(alpha_deg, 500.0, ls_H=60e-6))
    r.u[L.U_ALPHA_DEG] = alpha_deg
    r.settle(0.1)
    out = r.cycles(2, cols=(L.Y_VT_V, L.Y_I_LINE_A, L.Y_INPUT_POWER_W))
    p = out[:, 2].mean()
    print(f"alpha {alpha_deg}: Vmean {out[:, -2].mean():.1f} V, Imean {out[:, 1].mean():.1f} A, "
          f"P {p / 1e3:.1f} kW, flags {flags(out)}")
    assert p < -0.5 * 500.0 * abs(VDO * math.cos(math.radians(alpha_deg)))
    assert not flags(out) & L.ST_COMMUTATION_FAILURE


def test_commutation_failure_at_179_deg_is_flagged_with_a_surge(kernel):
    # At alpha = 179 deg the outgoing device cannot regain blocking before the commutating
    # voltage reverses (margin < mu + t_q): the commutation fails and the EMF and the mains
    # drive the current up (common practice, no source: a shoot-through surge).
    r = Rig(kernel, TEST_LOAD + ("bridge.alpha_max_deg=179",))
    r.set_emf(emf_for(150.0, 500.0, ls_H=60e-6))
    r.u[L.U_ALPHA_DEG] = 150.0
    r.settle(0.1)
    before = r.cycles(1)
    assert not flags(before) & L.ST_COMMUTATION_FAILURE
    r.u[L.U_ALPHA_DEG] = 179.0
    out = r.cycles(2)
    i_before = before[:, 1].max()
    print(f"alpha 179: flags {flags(out)}, peak current {out[:, 1].max():.0f} A "
          f"(before {i_before:.0f} A)")
    assert flags(out) & L.ST_COMMUTATION_FAILURE
    assert out[:, 1].max() > 2.5 * i_before


# ---- 7. dual converter --------------------------------------------------------------------------
def _dual(kernel):
    r = Rig(kernel, TEST_LOAD + ("converter.kind=dual_bridge",))
    r.set_emf(300.0)
    r.u[L.U_ALPHA_DEG] = 45.0
    r.u[L.U_BRIDGE_SELECT] = 1
    r.settle(0.1)
    assert r.y[L.Y_I_LINE_A] > 50.0
    return r


def test_changeover_under_current_is_a_deadtime_violation(kernel):
    r = _dual(kernel)
    r.u[L.U_BRIDGE_SELECT] = 2
    out = r.record(0.001)
    print(f"select 2 at {r.y[L.Y_I_LINE_A]:.0f} A: flags {flags(out)}")
    assert flags(out) & L.ST_DEADTIME_VIOLATION


def test_changeover_before_the_deadtime_is_a_violation(kernel):
    r = _dual(kernel)
    r.u[L.U_BRIDGE_SELECT] = 0
    t = 0.0
    while r.y[L.Y_I_LINE_A] != 0.0:
        r.settle(20e-6, frame=1)
        t += 20e-6
        assert t < 0.05, "current did not reach zero after blocking"
    r.settle(0.5e-3)  # dead time is 2 ms (schema default)
    r.u[L.U_BRIDGE_SELECT] = 2
    r.u[L.U_ALPHA_DEG] = 120.0
    out = r.record(0.001)
    print(f"zero current for 0.5 ms, select 2: flags {flags(out)}")
    assert flags(out) & L.ST_DEADTIME_VIOLATION


def test_proper_changeover_reverses_the_current_and_brakes(kernel):
    # block, wait for zero current plus the 2 ms dead time, then select the reverse bridge at
    # alpha 120 deg: its output is -Vdo cos(120) = +280 V < E = 300 V, so the current reverses
    # (negative armature current) and power flows back to the mains: regenerative braking.
    r = _dual(kernel)
    r.u[L.U_BRIDGE_SELECT] = 0
    out0 = r.record(0.02)
    t_zero = np.flatnonzero(out0[:, 1] == 0.0)
    assert len(t_zero) and out0[-1, 1] == 0.0
    wait = 0.02 - t_zero[0] * r.dt
    assert wait > 2.5e-3
    r.u[L.U_BRIDGE_SELECT] = 2
    r.u[L.U_ALPHA_DEG] = 120.0
    out = r.record(0.06, cols=(L.Y_VT_V, L.Y_IA_A, L.Y_INPUT_POWER_W))
    tail = out[len(out) // 2:]
    print(f"proper changeover: flags {flags(out0) | flags(out)}, Ia mean {tail[:, 1].mean():.1f} A, "
          f"P {tail[:, 2].mean() / 1e3:.1f} kW")
    assert not (flags(out0) | flags(out)) & L.ST_DEADTIME_VIOLATION
    assert tail[:, 1].mean() < -10.0 and tail[:, 2].mean() < 0.0


# ---- 8. averaged converter and current source ---------------------------------------------------
def test_averaged_bridge_matches_switched_mean(kernel):
    # The averaged bridge (Vdo cos a minus the overlap drop (3/pi) w Ls Id, Mohan et al.) and
    # the switched one at the same EMF and angle: mean voltage and current agree within 2 %.
    res = {}
    for kind in ("bridge", "averaged_bridge"):
        r = Rig(kernel, TEST_LOAD + (f"converter.kind={kind}",))
        r.set_emf(280.0)
        r.u[L.U_ALPHA_DEG] = 40.0
        r.settle(0.15)
        out = r.cycles(2)
        res[kind] = (out[:, -2].mean(), out[:, 1].mean())
    (vs, is_), (va, ia) = res["bridge"], res["averaged_bridge"]
    print(f"switched {vs:.2f} V {is_:.1f} A, averaged {va:.2f} V {ia:.1f} A: "
          f"dV {100 * (va - vs) / vs:+.2f} %, dI {100 * (ia - is_) / is_:+.2f} %")
    assert abs(va - vs) < 0.02 * abs(vs)
    assert abs(ia - is_) < 0.02 * abs(is_)


def test_averaged_bridge_shows_the_statistical_dead_time(kernel):
    # A new angle takes effect only at the next natural commutation instant (every 60 deg,
    # first at 30 deg of phase a): the latched voltage must not move before it.
    r = Rig(kernel, TEST_LOAD + ("converter.kind=averaged_bridge",))
    r.set_emf(250.0)
    r.u[L.U_ALPHA_DEG] = 30.0
    r.settle(0.1)
    # advance to 45 deg of phase a (between the instants at 30 and 90 deg)
    for _ in range(int(1.0 / (F_HZ * r.dt)) + 1):  # at most one cycle
        if abs(math.degrees(r.y[L.Y_MAINS_ANGLE_RAD]) - 45.0) <= 0.2:
            break
        r.settle(r.dt, frame=1)
    assert abs(math.degrees(r.y[L.Y_MAINS_ANGLE_RAD]) - 45.0) <= 0.2
    r.u[L.U_ALPHA_DEG] = 70.0
    out = r.record(0.006, cols=(L.Y_LAST_FIRE_ANGLE_DEG, L.Y_MAINS_ANGLE_RAD, L.Y_VT_V))
    changed = np.flatnonzero(np.abs(out[:, 0] - 70.0) < 1e-6)[0]
    th = math.degrees(out[changed, 1])
    delay = changed * r.dt
    print(f"command at 45 deg, latched at {th:.2f} deg after {1e3 * delay:.3f} ms "
          f"(expected 90 deg, {1e3 * (45 / 360) / F_HZ:.3f} ms)")
    assert abs(th - 90.0) <= math.degrees(W * r.dt) + 1e-9
    assert np.all(np.abs(out[:changed, 0] - 30.0) < 1e-6)


def test_current_source_follows_a_first_order_step(kernel):
    # First-order source (from memory: i = I (1 - exp(-t/tau)), tau = 1/(2 pi f_bw)), 200 Hz.
    r = Rig(kernel, ("converter.kind=current_source",), dt_us=10.0)
    r.set_emf(200.0)
    r.u[L.U_IREF_A] = 0.0
    r.settle(0.01)
    r.u[L.U_IREF_A] = 800.0
    out = r.record(0.005, cols=(L.Y_I_LINE_A,))
    tau = 1.0 / (2 * math.pi * 200.0)
    t = (np.arange(len(out)) + 1) * r.dt
    ideal = 800.0 * (1.0 - np.exp(-t / tau))
    err = np.abs(out[:, 0] - ideal).max()
    print(f"current source: max error {err:.3f} A of 800 A (tau {1e3 * tau:.3f} ms)")
    assert err < 0.005 * 800.0


# ---- 9. field supply ----------------------------------------------------------------------------
@pytest.mark.parametrize("alpha_deg", [30.0, 80.0, 120.0])
def test_field_half_bridge_mean_voltage(kernel, alpha_deg):
    # Mohan et al. (from memory): single-phase half-controlled bridge with freewheeling,
    # Vavg = (sqrt2 / pi) Vac (1 + cos alpha). Averaged and switched field supply both.
    vac = 415.0
    v_f = SQ2 / math.pi * vac * (1 + math.cos(math.radians(alpha_deg)))
    res = {}
    for kind in ("averaged_half_bridge", "half_bridge"):
        r = Rig(kernel, (f"field.kind={kind}",), field_A=10.0)
        r.u[L.U_CONTACTOR] = 0.0
        r.u[L.U_PRIME_SPEED_RAD_S] = 0.0
        r.u[L.U_FIELD_ALPHA_DEG] = alpha_deg
        r.settle(0.02)  # the switched bridge schedules its first firing at a zero crossing
        out = r.cycles(4, cols=(L.Y_FIELD_VT_V, L.Y_IF_A))
        res[kind] = out[:, 0].mean()
    print(f"field alpha {alpha_deg}: formula {v_f:.2f} V, averaged {res['averaged_half_bridge']:.2f} V, "
          f"switched {res['half_bridge']:.2f} V")
    assert abs(res["averaged_half_bridge"] - v_f) < 0.005 * v_f + 0.5
    assert abs(res["half_bridge"] - v_f) < 0.01 * (2 * SQ2 / math.pi * vac)


def test_field_forcing_speeds_the_field_current_rise(kernel):
    # Rated field voltage needs alpha ~81 deg; alpha 0 deg applies 2 sqrt2/pi Vac = 374 V, i.e.
    # ~1.7 x: the field reaches 90 % of rated (16.2 A) much sooner (common practice, no source).
    times = {}
    for alpha in (0.0, 81.0):
        r = Rig(kernel, ("field.kind=averaged_half_bridge",), dt_us=100.0, field_A=0.0)
        r.u[L.U_CONTACTOR] = 0.0
        r.u[L.U_PRIME_SPEED_RAD_S] = 0.0
        r.u[L.U_FIELD_ALPHA_DEG] = alpha
        t = 0.0
        while r.y[L.Y_IF_A] < 16.2 and t < 20.0:
            r.settle(0.01, frame=100)
            t += 0.01
        times[alpha] = t
    print(f"time to 16.2 A: forcing (0 deg) {times[0.0]:.2f} s, rated angle (81 deg) {times[81.0]:.2f} s")
    assert times[81.0] < 20.0
    assert times[0.0] < 0.5 * times[81.0]


# ---- 10. mains events ---------------------------------------------------------------------------
def test_mains_dip_lowers_vd_proportionally(kernel):
    # Vd is proportional to V_LL (Mohan et al.): a 0.8 pu dip gives 0.8 Vd (Ls tiny, Rs 0).
    res = {}
    for pu in (1.0, 0.8):
        r = Rig(kernel, TEST_LOAD + ("mains.inductance_H=2e-6", "mains.resistance_ohm=0"))
        r.u[L.U_MAINS_PU] = pu
        r.set_emf(emf_for(40.0, 300.0, pu=pu))
        r.u[L.U_ALPHA_DEG] = 40.0
        r.settle(0.1)
        res[pu] = r.cycles(2)[:, -2].mean()
    ratio = res[0.8] / res[1.0]
    print(f"dip: {res[1.0]:.2f} V -> {res[0.8]:.2f} V, ratio {ratio:.4f}")
    assert abs(ratio - 0.8) < 0.01 * 0.8


@pytest.mark.parametrize("dev_hz", [-2.0, 3.0])
def test_frequency_deviation_moves_the_pulse_rate(kernel, dev_hz):
    # 6 firing pulses per mains cycle at f + df.
    r = Rig(kernel, TEST_LOAD)
    r.set_emf(280.0)
    r.u[L.U_ALPHA_DEG] = 45.0
    r.u[L.U_MAINS_HZ_DEV] = dev_hz
    r.settle(0.05)
    out = r.record(0.5, cols=(L.Y_FIRED_MASK,))
    n_fired = sum(bin(int(m)).count("1") for m in out[:, 0])
    expected = 6 * (F_HZ + dev_hz) * 0.5
    print(f"df {dev_hz:+} Hz: {n_fired} pulses in 0.5 s, expected {expected:.0f}")
    assert abs(n_fired - expected) <= 1
    a_moved = amplitude(r.record(4 / (F_HZ + dev_hz))[:, 0], r.dt, 6 * (F_HZ + dev_hz))
    print(f"  ripple at 6 (f + df): {a_moved:.1f} V")
    assert a_moved > 50.0


def test_phase_reversal_upsets_the_output(kernel):
    # With sequence a-c-b the firing instants (laid out for a-b-c) fall on the wrong voltages:
    # expected a strong loss of mean voltage and of the 6-pulse pattern (ripple no longer
    # dominated by 300 Hz).
    r = _ripple_rig(kernel)
    ok = r.cycles(2)
    r.u[L.U_PHASE_REVERSED] = 1
    r.settle(0.1)
    out = r.cycles(4)
    a100, a300 = amplitude(out[:, 0], r.dt, 100), amplitude(out[:, 0], r.dt, 300)
    print(f"reversed: mean {out[:, -2].mean():.1f} V (healthy {ok[:, -2].mean():.1f} V), "
          f"100 Hz {a100:.1f} V, 300 Hz {a300:.1f} V, flags {flags(out)}")
    assert out[:, -2].mean() < ok[:, -2].mean() - 0.05 * VDO
    assert a100 > a300


def test_shorted_thyristor_gives_a_line_to_line_fault_current(kernel):
    # T1 (a+) shorted: when T3 (b+) fires, phases a and b are joined on the + rail through T3
    # and the reverse-conducting T1: a line-to-line short limited by 2 Ls only, i_b = -i_a
    # growing towards sqrt2 V_LL / (w 2 Ls) (~15 kA). Kirchhoff's current law must hold at
    # every step (the mains is a three-wire system: i_a + i_b + i_c = 0).
    r = _ripple_rig(kernel)
    i_dc = r.y[L.Y_I_LINE_A]
    r.u[L.U_SHORT_MASK] = 1
    out = r.cycles(1, cols=(L.Y_I_LINE_A, L.Y_LINE_IA_A, L.Y_LINE_IB_A, L.Y_LINE_IC_A))
    kcl = np.abs(out[:, 1] + out[:, 2] + out[:, 3]).max()
    peak = np.abs(out[:, 1]).max()
    print(f"short T1: peak |i_a| {peak:.0f} A (DC before {i_dc:.0f} A), peak |i_b| "
          f"{np.abs(out[:, 2]).max():.0f} A, worst KCL residue {kcl:.0f} A, "
          f"min DC current {out[:, 0].min():.0f} A")
    assert peak > 5 * i_dc
    assert kcl < 1e-6 * peak
    assert out[:, 0].min() >= 0.0  # a single bridge cannot carry negative DC current


# ---- 11. mean voltage at the step where an overlap ends -----------------------------------------
# When an overlap ends inside a step, the rest of that step belongs to the new circuit. Its
# current and its voltage must both be accounted to it: a kernel that gave the current the new
# slope but kept the overlap voltage for the whole step read the mean terminal voltage (and the
# input power) low by up to ~1 % at 20 us, while its current said otherwise.
def _whole_cycles(r, n_cycles):
    """Frame means over whole mains cycles, one kernel call per cycle (no ripple-phase bias).

    Returns (V mean, Ia mean, E mean, P_in mean, inductive term La (i_end - i_start) / T, flags).
    """
    n = int(round(1.0 / (F_HZ * r.dt)))
    i_start = r.x[L.X_I_LINE_A]
    v, i, e, pw = [], [], [], []
    st = 0
    for _ in range(n_cycles):
        st |= int(r.k(r.x, r.p, r.u, r.y, n))
        v.append(r.y[L.Y_VT_MEAN_V])
        i.append(r.y[L.Y_IA_MEAN_A])
        e.append(r.y[L.Y_EMF_V])
        pw.append(r.y[L.Y_INPUT_POWER_W])
    t = n_cycles * n * r.dt
    l_term = r.p[L.P_LA_H] * (r.x[L.X_I_LINE_A] - i_start) / t
    return np.mean(v), np.mean(i), np.mean(e), np.mean(pw), l_term, st


@pytest.mark.parametrize("alpha_deg", [30, 45, 60, 75, 105, 120, 135])
def test_mean_voltage_obeys_the_armature_kvl_at_20us(kernel, alpha_deg):
    # Armature KVL averaged over whole cycles of a periodic steady state (any machines text,
    # e.g. Chapman, Electric Machinery Fundamentals: Vt = E + Ra Ia + Vbrush; the La di/dt
    # term averages to zero, and is measured here to show that it does). Same run, default
    # 20 us step, stock commutating inductance (60 uH: each overlap spans ~5 steps, so an
    # overlap ends inside a step at every commutation). Issue 7: to 0.1 %.
    r = Rig(kernel, TEST_LOAD)
    r.set_emf(emf_for(alpha_deg, 400.0, ls_H=60e-6))
    r.u[L.U_ALPHA_DEG] = alpha_deg
    r.settle(0.25)
    i_min = r.cycles(1)[:, 1].min()
    vm, im, e, p_in, l_term, st = _whole_cycles(r, 5)
    kvl = e + R_TEST * im + BRUSH_V
    err = (vm - kvl) / abs(kvl)
    print(f"alpha {alpha_deg}: Vmean {vm:.3f} V, E + Ra Ia + Vb {kvl:.3f} V ({100 * err:+.4f} %), "
          f"La di/dt term {l_term:+.4f} V, Id {im:.1f} A (min {i_min:.1f} A)")
    # continuous conduction above the brush knee, so the brush drop is the full 2 V throughout
    assert not st & L.ST_DISCONTINUOUS and i_min > BRUSH_KNEE_A
    assert abs(l_term) < 1e-4 * abs(kvl)
    assert abs(err) < 1e-3


@pytest.mark.parametrize("alpha_deg", [30, 75, 105, 135])
def test_input_power_obeys_the_energy_balance_at_20us(kernel, alpha_deg):
    # Energy balance of the armature over whole cycles (from Vt = E + R i + Vb + La di/dt
    # times i; La i di/dt integrates to zero in a periodic steady state): mean Vt i equals
    # E mean(i) + R mean(i^2) + Vb mean(i). mean(i^2) from the step-end currents of one cycle.
    r = Rig(kernel, TEST_LOAD)
    r.set_emf(emf_for(alpha_deg, 400.0, ls_H=60e-6))
    r.u[L.U_ALPHA_DEG] = alpha_deg
    r.settle(0.25)
    n = int(round(1.0 / (F_HZ * r.dt)))
    i0 = r.x[L.X_I_LINE_A]
    out = r.record(n * r.dt, cols=(L.Y_I_LINE_A, L.Y_INPUT_POWER_W, L.Y_EMF_V))
    i_end = out[:, 0]
    i_beg = np.concatenate([[i0], i_end[:-1]])
    i_mean = 0.5 * (i_beg + i_end).mean()
    i2_mean = ((i_beg * i_beg + i_beg * i_end + i_end * i_end) / 3.0).mean()  # i linear in a step
    p_in = out[:, 1].mean()
    balance = out[:, 2].mean() * i_mean + R_TEST * i2_mean + BRUSH_V * i_mean
    err = (p_in - balance) / abs(balance)
    print(f"alpha {alpha_deg}: P_in {p_in / 1e3:.3f} kW, E I + R I^2 + Vb I {balance / 1e3:.3f} kW "
          f"({100 * err:+.4f} %)")
    assert not flags(out) & L.ST_DISCONTINUOUS
    assert abs(err) < 1e-3


@pytest.mark.parametrize("ls_H", [60e-6, 200e-6])
@pytest.mark.parametrize("dt_us", [20.0, 5.0])
@pytest.mark.parametrize("alpha_deg", [15, 45, 75, 90, 105, 135])
def test_mean_voltage_follows_mohan_with_overlap_at_the_default_step(kernel, alpha_deg, dt_us, ls_H):
    # Mohan, Undeland, Robbins, Power Electronics (three-phase fully controlled bridge with
    # commutating inductance): Vd = (3 sqrt2 / pi) V_LL cos(alpha) - (3/pi) w Ls Id, here at the
    # default 20 us step and at 5 us, with overlaps of ~2 and ~5 deg (Rs = 0 as in the formula).
    # The formula takes Id free of ripple; La = 50 mH keeps the ripple to a few amperes, so its
    # own effect on the overlap (the current at the commutation instant is not the mean) stays
    # near 0.03 % of Vdo. The earlier kernel read up to 0.3 % of Vdo low at 20 us.
    r = Rig(kernel, ("machine.ra_ohm=0.25", "machine.la_H=0.05", f"mains.inductance_H={ls_H}",
                     "mains.resistance_ohm=0", "bridge.alpha_max_deg=150"), dt_us=dt_us)
    r.set_emf(emf_for(alpha_deg, 400.0, ls_H=ls_H))
    r.u[L.U_ALPHA_DEG] = alpha_deg
    r.settle(2.0, frame=5000)  # ten loop time constants (La / R = 0.2 s)
    vm, im, _e, _p, _l, st = _whole_cycles(r, 5)
    vd = VDO * math.cos(math.radians(alpha_deg)) - 3 / math.pi * W * ls_H * im
    err = (vm - vd) / VDO
    print(f"alpha {alpha_deg}, {dt_us} us, Ls {1e6 * ls_H:.0f} uH: Vmean {vm:.3f} V, formula {vd:.3f} V, "
          f"error {100 * err:+.4f} % of Vdo, Id {im:.1f} A")
    assert not st & L.ST_DISCONTINUOUS
    assert abs(err) < 5e-4


@pytest.mark.parametrize("i_frac", [0.7, 0.8, 0.9])
def test_a_current_zero_inside_a_step_is_flagged(kernel, i_frac):
    # Just below the edge of continuous conduction the current gap lasts less than a step: the
    # current reaches zero inside one step and the next firing falls at the start of the next,
    # so no step starts without a conducting pair. Every step that ends at zero current must
    # carry the discontinuous-conduction bit itself. The EMF is set for i_frac of the edge
    # current by the continuous-conduction formula (the switched bridge then carries somewhat
    # more: its mean voltage rises in the gaps). Edge of the 6-pulse bridge with R and overlap
    # neglected, I_crit = (sqrt2 V_LL / (w L)) (3/pi - sqrt3/2) sin(alpha) for alpha above
    # ~10 deg (derived in tests/test_op_converter.py, icrit_closed_form).
    alpha = 60.0
    l_loop = L_TEST + 2 * 60e-6
    i_crit = SQ2 * VLL / (W * l_loop) * (3 / math.pi - math.sqrt(3) / 2) * math.sin(math.radians(alpha))
    r = Rig(kernel, TEST_LOAD)
    r.set_emf(emf_for(alpha, i_frac * i_crit, ls_H=60e-6))
    r.u[L.U_ALPHA_DEG] = alpha
    r.settle(0.2)
    out = r.cycles(2)
    zero_end = out[:, 1] == 0.0
    flagged = (out[:, -1].astype(int) & L.ST_DISCONTINUOUS) != 0
    print(f"{i_frac} I_crit ({i_crit:.1f} A): mean {out[:, 1].mean():.1f} A, {zero_end.sum()} steps end at "
          f"zero, {flagged.sum()} flagged, {(zero_end & ~flagged).sum()} of them unflagged")
    assert zero_end.sum() >= 6  # at least one gap per pulse in two cycles
    assert np.all(flagged[zero_end])
