"""Independent circuit reference for the six-pulse thyristor bridge: scipy ODE integration.

Owns: an event-driven integration of the bridge circuit (three-phase sinusoidal source with
inductance Ls and resistance Rs per phase, six ideal thyristors, R-L-E load with an optional
brush-drop term) with scipy.integrate.solve_ivp at tight tolerances, and a shooting solver for
its periodic steady state. Used only by tests/test_converter_*.py to check the compiled kernel.
Must never import rtmodel (it is the thing under test) or host: everything here is derived from
the circuit itself, so that an error shared with the kernel cannot hide.

Circuit, solved as a linear system at every right-hand-side call (unknowns: the derivatives of
the conducting phase currents and the two rail potentials):
    each conducting phase x on rail r:  Ls di_x/dt + V_r = v_x - Rs i_x
    charge balance:                      sum over conducting phases of di_x/dt = 0
    load:                                V+ - V- - L di_d/dt = R i_d + E + Vb(i_d)
with i_d the sum of the + rail phase currents. Phase voltages: v_a = Vpk sin(theta),
v_b = Vpk sin(theta - 120 deg), v_c = Vpk sin(theta + 120 deg), theta = w t (sequence a-b-c).

Thyristor rules: a device turns on at its firing instant (natural commutation instant + alpha)
if forward biased; it turns off when its current reaches zero (solve_ivp event, located to
solver tolerance). When a rail group empties the whole bridge current is zero; from zero
current the firing of device k also re-gates device k-1 (double pulsing), so the pair starts
if the line-to-line voltage exceeds the load EMF. Recovery time and gate-pulse width are not
modelled: the reference is for normal operating points only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

PHASE_SHIFT_RAD = (0.0, -2.0 * math.pi / 3.0, 2.0 * math.pi / 3.0)  # a, b, c


def natural_angles_rad():
    """Natural commutation angle of each device, derived from the phase voltages.

    The upper device of phase x takes over when v_x becomes the largest phase voltage
    (30 deg after its positive-going zero crossing), the lower one when v_x becomes the
    smallest (210 deg). Returned as {(phase, rail): angle} with rail +1 upper, -1 lower.
    """
    out = {}
    for ph, shift in enumerate(PHASE_SHIFT_RAD):
        out[(ph, 1)] = (math.radians(30.0) - shift) % (2 * math.pi)
        out[(ph, -1)] = (math.radians(210.0) - shift) % (2 * math.pi)
    return out


def firing_sequence():
    """Devices in the order of their natural angles, starting from the upper device of a."""
    nat = natural_angles_rad()
    return sorted(nat, key=lambda d: nat[d])


@dataclass
class BridgeCircuit:
    vll_rms_V: float
    f_hz: float
    ls_H: float
    rs_ohm: float
    r_load_ohm: float
    l_load_H: float
    e_V: float
    brush_V: float = 0.0
    brush_knee_A: float = 1.0

    @property
    def w(self):
        return 2.0 * math.pi * self.f_hz

    @property
    def vpk(self):
        return self.vll_rms_V * math.sqrt(2.0 / 3.0)

    def phase_volts(self, t):
        th = self.w * t
        return np.array([self.vpk * math.sin(th + s) for s in PHASE_SHIFT_RAD])

    def brush(self, i):
        return self.brush_V * max(-1.0, min(1.0, i / self.brush_knee_A))


def _solve_rates(c: BridgeCircuit, on, t, i):
    """Derivatives of the phase currents for the conducting set `on` {phase: rail}."""
    phases = sorted(on)
    n = len(phases)
    a = np.zeros((n + 2, n + 2))
    b = np.zeros(n + 2)
    v = c.phase_volts(t)
    for row, ph in enumerate(phases):
        a[row, row] = c.ls_H
        a[row, n if on[ph] > 0 else n + 1] = 1.0
        b[row] = v[ph] - c.rs_ohm * i[ph]
    a[n, :n] = 1.0  # the phase currents always sum to zero
    i_d = sum(i[ph] for ph in phases if on[ph] > 0)
    a[n + 1, n] = 1.0
    a[n + 1, n + 1] = -1.0
    for col, ph in enumerate(phases):
        if on[ph] > 0:
            a[n + 1, col] = -c.l_load_H
    b[n + 1] = c.r_load_ohm * i_d + c.e_V + c.brush(i_d)
    sol = np.linalg.solve(a, b)
    di = np.zeros(3)
    for col, ph in enumerate(phases):
        di[ph] = sol[col]
    return di, sol[n], sol[n + 1]


def dc_voltage(c: BridgeCircuit, on, t, i):
    """Terminal voltage V+ - V- of the bridge for conducting set `on` (0 when it is off)."""
    if not any(r > 0 for r in on.values()) or not any(r < 0 for r in on.values()):
        return c.e_V  # open circuit: the terminals show the EMF
    _, vp, vn = _solve_rates(c, on, t, i)
    return vp - vn


@dataclass
class Trace:
    t: np.ndarray
    i_abc: np.ndarray  # (n, 3) phase currents into the bridge
    i_d: np.ndarray
    v_dc: np.ndarray
    n_on: np.ndarray  # number of conducting devices


class BridgeReference:
    """Event-driven integration of the bridge for one firing angle."""

    def __init__(self, circuit: BridgeCircuit, alpha_deg: float, rtol=1e-10, atol=1e-8):
        self.c = circuit
        self.alpha = math.radians(alpha_deg)
        self.rtol = rtol
        self.atol = atol
        self.seq = firing_sequence()
        self.nat = natural_angles_rad()

    def firing_times(self, t0, t1):
        """(time, index in sequence) of every firing in (t0, t1], sorted."""
        w = self.c.w
        period = 2 * math.pi / w
        out = []
        for k, dev in enumerate(self.seq):
            tf = (self.nat[dev] + self.alpha) / w
            n = math.floor((t0 - tf) / period) + 1
            tk = tf + n * period
            while tk <= t1 + 1e-15:
                if tk > t0:
                    out.append((tk, k))
                tk += period
        return sorted(out)

    def _segment(self, on, t0, t1, i0, dense_t):
        """Integrate with a fixed conducting set until t1 or a device turns off."""
        c = self.c
        phases = sorted(on)

        def rhs(t, y):
            di, _, _ = _solve_rates(c, on, t, y)
            return di

        events = []
        for ph in phases:
            sign = on[ph]

            def ev(t, y, ph=ph, sign=sign):
                return sign * y[ph]

            ev.terminal = True
            ev.direction = -1
            events.append(ev)
        sol = solve_ivp(rhs, (t0, t1), i0, method="DOP853", rtol=self.rtol, atol=self.atol,
                        events=events, dense_output=True)
        t_end = sol.t[-1]
        off = None
        for j, te in enumerate(sol.t_events):
            if len(te):
                off = phases[j]
        ts = dense_t[(dense_t > t0) & (dense_t <= t_end)]
        samples = []
        for t in ts:
            y = sol.sol(t)
            samples.append((t, y.copy(), dict(on)))
        return t_end, sol.y[:, -1].copy(), off, samples

    def run(self, t0, t1, on, i0, dense_t):
        """Integrate from t0 to t1 from conducting set `on` and phase currents i0.

        Returns (Trace at dense_t, final on, final currents, commutation log).
        """
        on = dict(on)
        i = np.array(i0, dtype=float)
        fires = self.firing_times(t0, t1) + [(t1, None)]
        samples = []
        t = t0
        log = []
        for tf, k in fires:
            while t < tf:
                if not on:
                    ts = dense_t[(dense_t > t) & (dense_t <= tf)]
                    samples += [(tt, np.zeros(3), {}) for tt in ts]
                    t = tf
                    break
                t_end, i, off, smp = self._segment(on, t, tf, i, dense_t)
                samples += smp
                t = t_end
                if off is not None and t < tf:
                    del on[off]
                    i[off] = 0.0
                    log.append((t, "off", off))
                    rails = set(on.values())
                    if not (1 in rails and -1 in rails):
                        on = {}
                        i[:] = 0.0
                        log.append((t, "zero", None))
                else:
                    t = tf
            if k is None:
                break
            self._fire(k, tf, on, i, log)
        tr = Trace(
            t=np.array([s[0] for s in samples]),
            i_abc=np.array([s[1] for s in samples]).reshape(-1, 3),
            i_d=np.array([sum(s[1][p] for p, r in s[2].items() if r > 0) for s in samples]),
            v_dc=np.array([dc_voltage(self.c, s[2], s[0], s[1]) for s in samples]),
            n_on=np.array([len(s[2]) for s in samples]),
        )
        return tr, on, i, log

    def _fire(self, k, t, on, i, log):
        ph, rail = self.seq[k]
        v = self.c.phase_volts(t)
        if on:
            same = [p for p, r in on.items() if r == rail]
            if ph in on:
                return
            # forward bias: the incoming phase is beyond the conducting one of its group
            if all(rail * (v[ph] - (v[p] - self.c.rs_ohm * i[p])) > 0 for p in same):
                on[ph] = rail
                log.append((t, "on", ph))
            return
        # start from zero current with the double pulse: device k and device k-1
        ph2, rail2 = self.seq[(k - 1) % 6]
        vu, vl = (v[ph], v[ph2]) if rail > 0 else (v[ph2], v[ph])
        if vu - vl > self.c.e_V:
            on[ph] = rail
            on[ph2] = rail2
            log.append((t, "start", (ph, ph2)))

    def periodic(self, dense_t=None):
        """Periodic steady state in continuous conduction, by shooting over one pulse.

        Starts at the firing of the upper device of phase a with the preceding pair (upper c,
        lower b) conducting; by the six-fold symmetry the DC current at the next firing must
        equal the starting one. Returns (i_d at the firing instant, t_fire).
        """
        w = self.c.w
        t_a = (self.nat[(0, 1)] + self.alpha) / w
        t_next = t_a + (math.pi / 3.0) / w
        on0 = {2: 1, 1: -1}
        eps = 1e-12

        def mismatch(i_d0):
            i0 = np.zeros(3)
            i0[2] = i_d0
            i0[1] = -i_d0
            on = dict(on0)
            self._fire(0, t_a, on, i0, [])
            _, on1, i1, log = self.run(t_a + eps, t_next - eps, on, i0, np.array([]))
            if not on1:
                return -i_d0  # went discontinuous: the start current was too low
            return sum(i1[p] for p, r in on1.items() if r > 0) - i_d0

        hi = 1.0
        while mismatch(hi) > 0:
            hi *= 2.0
            if hi > 1e6:
                raise ValueError("no continuous-conduction periodic solution")
        lo = hi / 2.0
        while mismatch(lo) < 0:
            lo /= 2.0
            if lo < 1e-3:
                raise ValueError("no continuous-conduction periodic solution")
        i_star = brentq(mismatch, lo, hi, xtol=1e-9, rtol=1e-13)
        return i_star, t_a

    def periodic_trace(self, dense_t):
        """One steady-state cycle sampled at dense_t (times are wrapped onto the cycle)."""
        i_star, t_a = self.periodic()
        period = 2 * math.pi / self.c.w
        i0 = np.zeros(3)
        i0[2] = i_star
        i0[1] = -i_star
        on = {2: 1, 1: -1}
        self._fire(0, t_a, on, i0, [])
        rel = t_a + np.mod(np.asarray(dense_t) - t_a, period)
        order = np.argsort(rel)
        tr, _, _, log = self.run(t_a + 1e-12, t_a + period, on, i0, rel[order])
        inv = np.empty_like(order)
        inv[order] = np.arange(len(order))
        tr = Trace(t=np.asarray(dense_t), i_abc=tr.i_abc[inv], i_d=tr.i_d[inv],
                   v_dc=tr.v_dc[inv], n_on=tr.n_on[inv])
        return tr, i_star, log
