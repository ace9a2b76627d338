"""Each fault of a scenario timeline, applied through the scenario driver, against the physics it
should show. The machine runs open loop (a fixed command every frame, no controller to hide the
effect) on the real kernel, and the fault reaches the model exactly the way a scenario puts it
there (host.scenario.events.ScenarioDriver).

Sources, beside each check: the speed equation n = (V - Ia Ra) / (k phi) and the series motor's
runaway when unloaded (any electrical machines textbook, e.g. Chapman, Electric Machinery
Fundamentals, ch. 9 - from memory); the bridge output ripple at 6 f for a six-pulse bridge and at
2 f for a single-phase (two-pulse) bridge, and Vd = 1.35 V_LL cos(alpha) (Mohan, Undeland,
Robbins, Power Electronics, ch. 6 - from memory); the current rise into a terminal short,
di/dt = E / La at the first instant (circuit law, common practice).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from host import signals as sig
from host.loop import R, HostLoop
from host.scenario.events import LinkGate, ScenarioDriver
from host.scenario.load import Action
from rtmodel import layout as L
from tests.conftest import make_plant

RPM = math.pi / 30


class FixedSession:
    """Answers every feedback with the same command: the machine runs open loop."""

    url = "fixed://"
    bye = False
    last_command_seq = 0
    peer_restarted = False  # HostLoop asks (a controller that started over); never here

    @property
    def link(self):  # HostLoop asks session.link for its url and connection count
        return self

    def __init__(self, cmd: sig.Command):
        self.cmd = cmd
        self.fbs = []

    def send_feedback(self, fb):
        self.fbs.append((fb.tacho_voltage_V, fb.encoder_count, fb.model_time_us))

    def recv_command(self, timeout_s):
        return self.cmd

    def pop_events(self):
        return []

    def stats(self):
        return {}


class _Scn:
    def __init__(self, actions):
        self.timeline = sorted(actions, key=lambda a: a.at_s)


def _loop(plant, cmd, actions, speed_rpm=0.0, field_A=None, load_Nm=0.0):
    sess = FixedSession(cmd)
    gate = LinkGate(sess)
    period = int(round(plant.derived["frame_period_us"]))
    loop = HostLoop(plant, gate, period)
    loop.x[L.X_SPEED_RAD_S] = speed_rpm * RPM
    if field_A is not None:
        loop.x[L.X_I_FIELD_A] = field_A
    loop.u[L.U_LOAD_TORQUE_NM] = load_Nm
    loop.sensors._contactor_closed = 1  # the contactor was closed before the test starts
    loop._step(loop.x, loop.p, loop.u, loop.y, 0)
    loop.hooks.append(ScenarioDriver(_Scn(actions), gate))
    return loop, sess


def _run(loop, t_s):
    loop.run_lockstep(int(round(t_s / (loop.frame_period_us * 1e-6))), command_timeout_s=1.0)
    return loop.rows()


def _at(rows, t_s, name):
    k = int(np.argmin(np.abs(rows[:, R["time_s"]] - t_s)))
    return rows[k, R[name]]


def test_field_weakened_by_a_rheostat_step_raises_a_light_shunt_motor_speed(kernel):
    # fume fan motor on an ideal 440 V source, load off: a shunt field fed from the armature
    plant = make_plant("kestrel_shunt_fan", overrides=["mechanics.load_torque_Nm=0"])
    cmd = sig.Command(mode=sig.MODE_VOLTAGE, bridge_select=sig.BRIDGE_FORWARD, armature_cmd=440.0,
                      field_mode=sig.FIELD_MODE_VOLTAGE, field_cmd=440.0, contactor=1)
    loop, _ = _loop(plant, cmd, [Action(2.0, "fault", "r", fault="field_rheostat", param=100.0)],
                    speed_rpm=1450.0, field_A=1.8)
    rows = _run(loop, 9.0)
    n0, if0 = _at(rows, 1.95, "speed_rpm"), _at(rows, 1.95, "field_current_A")
    n1, if1 = _at(rows, 8.95, "speed_rpm"), _at(rows, 8.95, "field_current_A")
    assert if1 < 0.8 * if0  # the rheostat took the field down
    assert n1 > 1.1 * n0, (n0, n1)  # and the speed up
    # n = (V - Ia Ra)/(k phi): at light load the speed ratio is the inverse flux ratio, flux read
    # from the machine's own magnetisation curve (EMF at 1450 r/min against field current)
    curve_if = [0.0, 0.25, 0.5, 0.75, 1.0, 1.25, 1.5, 1.75, 2.0, 2.25, 2.5, 3.0, 3.5]
    curve_e = [10.0, 84.0, 158.0, 230.0, 292.0, 340.0, 376.0, 403.0, 421.0, 434.0, 444.0, 459.0, 471.0]
    ratio = np.interp(if0, curve_if, curve_e) / np.interp(if1, curve_if, curve_e)
    assert n1 / n0 == pytest.approx(ratio, rel=0.05), (n1 / n0, ratio)


def test_coupling_break_runs_an_unloaded_series_motor_away(kernel):
    plant = make_plant("kestrel_coil_hoist", "kestrel_hoist_bridge")
    cmd = sig.Command(mode=sig.MODE_FIRING_ANGLE, bridge_select=sig.BRIDGE_FORWARD, armature_cmd=55.0,
                      contactor=1)
    loop, _ = _loop(plant, cmd, [Action(1.0, "fault", "c", fault="coupling_break")], speed_rpm=500.0,
                    load_Nm=480.0)
    rows = _run(loop, 3.0)
    n_before = _at(rows, 0.98, "speed_rpm")
    n = rows[:, R["speed_rpm"]]
    t = rows[:, R["time_s"]]
    after = n[t > 1.0]
    # runaway: the speed keeps rising for as long as the run lasts, far past where it was
    assert after[-1] > 2.0 * n_before, (n_before, after[-1])
    assert np.all(np.diff(after[::30]) > 0)


def _bridge_run(phase_lost=None, dip=None):
    plant = make_plant("kestrel_f3_stand", "kestrel_f3_bridge")
    cmd = sig.Command(mode=sig.MODE_FIRING_ANGLE, bridge_select=sig.BRIDGE_FORWARD, armature_cmd=50.0,
                      field_mode=sig.FIELD_MODE_FIRING_ANGLE, field_cmd=60.0, contactor=1)
    acts = []
    if phase_lost:
        acts.append(Action(0.0, "fault", "p", fault="phase_loss", param=phase_lost))
    if dip:
        acts.append(Action(0.0, "fault", "d", fault="mains_dip", param=dip))
    loop, _ = _loop(plant, cmd, acts, speed_rpm=400.0, field_A=18.0)
    loop.x[L.X_I_LINE_A] = 1500.0  # near the steady current at this angle and speed
    return plant, loop


def _ripple_hz(plant, loop, t_s=0.3):
    """Terminal voltage sampled every model step inside frames: via the kernel once per step."""
    from rtmodel.kernel import step_frame

    loop.hooks[0](loop)  # apply the faults at t = 0
    loop.apply_command(loop.session.inner.cmd)
    loop.u[L.U_CONTACTOR] = 1.0
    n = int(t_s / loop.p[L.P_DT_S])
    vt = np.empty(n)
    for k in range(n):
        step_frame(loop.x, loop.p, loop.u, loop.y, 1)
        vt[k] = loop.y[L.Y_VT_V]
    vt = vt[n // 3:]  # after the start transient
    spec = np.abs(np.fft.rfft(vt - vt.mean())) / len(vt)
    f = np.fft.rfftfreq(len(vt), loop.p[L.P_DT_S])

    def amp(hz):  # the largest line within 5 Hz of hz (the record is 0.2 s: 5 Hz bins)
        return float(np.max(spec[np.abs(f - hz) <= 5.0]))

    return {hz: amp(hz) for hz in (100.0, 300.0)}, float(vt.mean())


def test_phase_loss_leaves_two_pulse_ripple_at_twice_mains_frequency(kernel):
    a_ok, _ = _ripple_hz(*_bridge_run())
    a_lost, _ = _ripple_hz(*_bridge_run(phase_lost="b"))
    # six-pulse: ripple at 6 x 50 Hz, nothing at 100 Hz; two-pulse: the 2 x 50 Hz line dominates
    assert a_ok[100.0] < 0.1 * a_ok[300.0], a_ok
    assert a_lost[100.0] > a_lost[300.0] and a_lost[100.0] > 20 * a_ok[100.0], (a_ok, a_lost)


def test_mains_dip_scales_the_bridge_voltage(kernel):
    # continuous conduction at a low speed and alpha = 80 deg: Vd = 1.35 V_LL cos(alpha) less the
    # overlap drop 3 w Ls Id / pi and the source resistance 2 Rs Id (Mohan et al., ch. 6)
    out = {}
    for dip in (None, 0.8):
        plant, loop = _bridge_run(dip=dip)
        loop.session.inner.cmd.armature_cmd = 80.0
        loop.x[L.X_SPEED_RAD_S] = 50.0 * RPM
        loop.x[L.X_I_LINE_A] = 2000.0
        _, v = _ripple_hz(plant, loop)
        out[dip] = (v, loop.y[L.Y_IA_A], plant)
    for dip, (v, ia, plant) in out.items():
        vll = 415.0 * (dip or 1.0)
        w = 2 * math.pi * 50.0
        pred = 1.35 * vll * math.cos(math.radians(80.0)) - 3 * w * 60e-6 / math.pi * ia - 2 * 0.002 * ia
        assert v == pytest.approx(pred, rel=0.08), (dip, v, pred, ia)


def test_armature_short_current_rises_at_emf_over_la(kernel):
    plant = make_plant("kestrel_f3_stand", "kestrel_f3_bridge")
    cmd = sig.Command(mode=sig.MODE_FIRING_ANGLE, bridge_select=sig.BRIDGE_BLOCKED, armature_cmd=150.0,
                      field_mode=sig.FIELD_MODE_FIRING_ANGLE, field_cmd=60.0, contactor=0)
    loop, _ = _loop(plant, cmd, [Action(0.1, "fault", "a", fault="armature_short")], speed_rpm=400.0, field_A=18.0)
    rows = _run(loop, 0.2)
    t_fault = [e[0] for e in loop.events if e[2].startswith("a:")][0]
    k = int(np.nonzero(rows[:, R["time_s"]] > t_fault + 1e-9)[0][0])
    emf = rows[k - 1, R["emf_V"]]
    la = plant.machine["machine.la_H"]
    period = loop.frame_period_us * 1e-6
    assert abs(rows[k, R["terminal_voltage_V"]]) < 0.02 * emf  # the terminals are shorted
    # the generated current (negative, motor convention) rises at (E - brush drop)/La; La/Ra =
    # 49 ms >> T = 3.3 ms, so the rise is linear over the first frame and the frame mean the
    # record holds is half the end value
    di = abs(rows[k, R["armature_current_A"]] - rows[k - 1, R["armature_current_A"]])
    assert di == pytest.approx((emf - 2.0) / la * period / 2.0, rel=0.1), (di, emf / la * period / 2)


def test_sensor_faults_reach_the_controller_feedback_only(kernel):
    plant = make_plant("kestrel_f3_stand", "kestrel_f3_bridge")
    cmd = sig.Command(mode=sig.MODE_FIRING_ANGLE, bridge_select=sig.BRIDGE_BLOCKED, armature_cmd=150.0, contactor=0)
    acts = [Action(0.1, "fault", "t", over_s=0.1, fault="tacho_loss"),
            Action(0.3, "fault", "r", over_s=0.1, fault="tacho_reversed"),
            Action(0.5, "fault", "e", over_s=0.1, fault="encoder_loss")]
    loop, sess = _loop(plant, cmd, acts, speed_rpm=400.0, field_A=18.0)
    rows = _run(loop, 0.7)
    tacho = np.array([f[0] for f in sess.fbs])
    enc = np.array([f[1] for f in sess.fbs])
    t = np.array([f[2] for f in sess.fbs]) * 1e-6
    n = np.interp(t, rows[:, R["time_s"]], rows[:, R["speed_rpm"]])
    k_t = 60.0 / 1000.0  # 60 V per 1000 r/min (the machine config)
    ok = (t > 0.02) & (t < 0.09)
    assert np.allclose(tacho[ok], n[ok] * k_t, rtol=0.02)
    assert np.all(tacho[(t > 0.11) & (t < 0.19)] == 0.0)
    rev = (t > 0.31) & (t < 0.39)
    assert np.allclose(tacho[rev], -n[rev] * k_t, rtol=0.02)
    lost = (t > 0.51) & (t < 0.59)
    assert len(set(enc[lost])) == 1  # no pulses: the count stands still
    assert len(set(enc[(t > 0.61)])) > 1  # and moves again after the fault
    # the shaft itself kept turning: sensor faults never touch the model
    assert rows[-1, R["speed_rpm"]] > 300.0


def test_locked_rotor_holds_the_shaft_and_frequency_step_moves_the_mains(kernel):
    plant = make_plant("kestrel_f3_stand", "kestrel_f3_bridge")
    cmd = sig.Command(mode=sig.MODE_FIRING_ANGLE, bridge_select=sig.BRIDGE_FORWARD, armature_cmd=85.0,
                      field_mode=sig.FIELD_MODE_FIRING_ANGLE, field_cmd=60.0, contactor=1)
    acts = [Action(0.0, "fault", "l", fault="locked_rotor"), Action(0.1, "fault", "f", fault="frequency_step", param=2.0)]
    loop, _ = _loop(plant, cmd, acts, field_A=18.0)
    rows = _run(loop, 0.3)
    assert np.all(rows[:, R["speed_rpm"]] == 0.0)
    assert np.max(np.abs(rows[:, R["torque_Nm"]])) > 1000.0  # torque on a held shaft
    # the mains angle advances at 52 Hz after the step (the definition of the input)
    assert loop.y[L.Y_MAINS_ANGLE_RAD] > 0.0


def test_misfire_and_blown_fuse_take_their_device_and_phase_out(kernel):
    plant = make_plant("kestrel_f3_stand", "kestrel_f3_bridge")
    cmd = sig.Command(mode=sig.MODE_FIRING_ANGLE, bridge_select=sig.BRIDGE_FORWARD, armature_cmd=50.0,
                      field_mode=sig.FIELD_MODE_FIRING_ANGLE, field_cmd=60.0, contactor=1)
    acts = [Action(0.05, "fault", "m", over_s=0.1, fault="misfire", param=1),
            Action(0.2, "fault", "b", fault="blown_fuse", param="c")]
    loop, _ = _loop(plant, cmd, acts, speed_rpm=400.0, field_A=18.0)
    fired = []
    line_c = []
    loop.hooks.append(lambda lp: (fired.append((lp.y[L.Y_TIME_S], int(lp.y[L.Y_CONDUCTING_MASK]))),
                                  line_c.append((lp.y[L.Y_TIME_S], lp.y[L.Y_LINE_IC_A]))))
    _run(loop, 0.3)
    during = [m for t, m in fired if 0.06 < t < 0.15]
    before = [m for t, m in fired if 0.01 < t < 0.05]
    assert any(m & 1 for m in before)  # T1 conducts when healthy
    assert not any(m & 1 for m in during)  # and never while it gets no gate pulse
    assert all(abs(i) < 1e-6 for t, i in line_c if t > 0.21)  # no current in the open phase
    assert any(abs(i) > 10.0 for t, i in line_c if t < 0.19)
