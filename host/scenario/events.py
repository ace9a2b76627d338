"""A scenario's timeline as a HostLoop hook: operator inputs, load changes and faults at model times.

Owns where each fault lives: the model's fault inputs (rtmodel.layout U_* slots), the field
rheostat (a plant parameter), the sensor path of the host (host.loop.Sensors: tacho and
encoder faults) and the link (LinkGate: a dropped link in both directions). Each start and
end is an event in the run's record, kind "timeline", text "<id>: ..." or "<id>.end: ...", so
verdicts find their reference instants in the record alone.

The hook runs at the start of a frame, before the command is applied: a fault that starts at
t is in the model from t on, and the controller sees its first effect in the feedback at the
end of that frame.
"""

from __future__ import annotations

import bisect

from rtmodel import layout as L

from .. import signals as sig
from .load import Action, Scenario

_PHASE = {"a": 0, "b": 1, "c": 2}


class LinkGate:
    """Wraps a host session; while `dropped`, nothing crosses in either direction.

    The answer to the last feedback sent before the drop is taken off the link and thrown
    away, so the lockstep pairing of feedback k and command k survives the drop.
    """

    def __init__(self, session):
        self.inner = session
        self.dropped = False
        self._owed = 0  # feedbacks sent whose command has not been read yet

    def __getattr__(self, name):
        return getattr(self.inner, name)

    def send_feedback(self, fb):
        if self.dropped:
            return fb.seq
        self._owed += 1
        return self.inner.send_feedback(fb)

    def send_control(self, op_or_msg, value: float = 0.0, text: str = ""):
        send = getattr(self.inner, "send_control", None)
        if self.dropped or send is None:
            return None  # lost with everything else while the link is down; or nobody to tell
        return send(op_or_msg, value, text)

    def recv_command(self, timeout_s):
        if self.dropped:
            while self._owed:
                self._owed -= 1
                self.inner.recv_command(timeout_s)
            return None
        got = self.inner.recv_command(timeout_s)
        if got is not None and self._owed:
            self._owed -= 1
        return got


class ScenarioDriver:
    """Applies a Scenario's timeline to a HostLoop, once per frame (loop.hooks)."""

    def __init__(self, scenario: Scenario, gate: LinkGate | None = None):
        self.actions = list(scenario.timeline)
        self.gate = gate
        self._next = 0
        self._active: list[tuple[Action, float]] = []  # ramps, profiles, faults with an end; start value
        self._rheo_base: float | None = None
        self._quick_stop_on = False

    @staticmethod
    def _control(loop, op: int, value: float) -> None:
        """An operator input that travels as a CONTROL message (docs/protocol.md 6.4); a
        session without a controller (playback) has nobody to tell."""
        send = getattr(loop.session, "send_control", None)
        if send is not None:
            send(op, value)

    def __call__(self, loop) -> None:
        t = float(loop.y[L.Y_TIME_S])
        eps = 1e-9
        while self._next < len(self.actions) and self.actions[self._next].at_s <= t + eps:
            a = self.actions[self._next]
            self._next += 1
            self._start(loop, a, t)
        keep = []
        for a, v0 in self._active:
            end = a.at_s + (a.profile[-1][0] if a.profile else a.times_s[-1] if a.times_s else a.over_s)
            if a.action == "trace":
                self._hold(loop, a, t)
            elif a.action in ("speed_ramp", "load_ramp"):
                f = min(1.0, (t - a.at_s) / a.over_s)
                v = v0 + (a.value - v0) * f
                if a.action == "speed_ramp":
                    loop.operator.speed_ref_rpm = v
                else:
                    loop.u[L.U_LOAD_TORQUE_NM] = v
            elif a.profile:
                loop.u[L.U_LOAD_TORQUE_NM] = _interp(a.profile, t - a.at_s)
            if t + eps >= end:
                if a.action == "fault":
                    self._fault(loop, a, on=False)
                loop.event("timeline", f"{a.id}.end: {a.fault or a.action} ends")
            else:
                keep.append((a, v0))
        self._active = keep

    def _start(self, loop, a: Action, t: float) -> None:
        op = loop.operator
        text = a.action
        if a.action == "run":
            op.run, op.stop = 1, 0
            if self._quick_stop_on:  # a run after a quick stop releases the quick-stop input
                self._control(loop, sig.CTRL_SET_QUICK_STOP, 0.0)
                self._quick_stop_on = False
        elif a.action == "stop":
            op.run, op.stop = 0, 1
        elif a.action == "quick_stop":
            # the operator panel's quick stop: stop with the reference taken to zero at once,
            # and the quick-stop input (CONTROL op 9) for a controller with its own quick ramp
            op.run, op.stop = 0, 1
            op.speed_ref_rpm = 0.0
            self._control(loop, sig.CTRL_SET_QUICK_STOP, 1.0)
            self._quick_stop_on = True
        elif a.action == "reset":
            # the operator's fault reset (CONTROL op 1 to the controller); a controller that
            # resets answers with its own CONTROL reset, which clears a latched host watchdog
            self._control(loop, sig.CTRL_RESET, 0.0)
            text = "operator reset"
        elif a.action == "field_economy":
            self._control(loop, sig.CTRL_SET_FIELD_ECONOMY, a.value)
            text = f"field economy {'on' if a.value else 'off'}"
        elif a.action == "speed_ref":
            op.speed_ref_rpm = a.value
            text = f"speed reference {a.value:g} r/min"
        elif a.action == "load_step":
            loop.u[L.U_LOAD_TORQUE_NM] = a.value
            text = f"load torque {a.value:g} N m"
        elif a.action == "speed_ramp":
            self._active.append((a, op.speed_ref_rpm))
            text = f"speed reference ramp to {a.value:g} r/min over {a.over_s:g} s"
        elif a.action == "load_ramp":
            self._active.append((a, float(loop.u[L.U_LOAD_TORQUE_NM])))
            text = f"load torque ramp to {a.value:g} N m over {a.over_s:g} s"
        elif a.action == "load_profile":
            self._active.append((a, 0.0))
            loop.u[L.U_LOAD_TORQUE_NM] = _interp(a.profile, 0.0)
            text = f"load torque profile of {len(a.profile)} points over {a.profile[-1][0]:g} s"
        elif a.action == "trace":
            self._hold(loop, a, t)
            if len(a.times_s) > 1:
                self._active.append((a, 0.0))
            text = (f"replayed {a.target} {a.values[0]:g}" if len(a.times_s) == 1 else
                    f"replayed trace of {a.target}: {len(a.times_s)} changes over {a.times_s[-1]:g} s")
        elif a.action == "fault":
            self._fault(loop, a, on=True)
            if a.over_s > 0:
                self._active.append((a, 0.0))
            text = f"fault {a.fault}" + (f" {a.param}" if a.param is not None else "") + (
                f" for {a.over_s:g} s" if a.over_s > 0 else "")
        loop.event("timeline", f"{a.id}: {text}")

    def _hold(self, loop, a: Action, t: float) -> None:
        """A replayed channel: the sample in force at t (held from one sample to the next). A
        sample within 1 % of a frame after t counts as at t: trace times are printed with few
        digits (as host.replay does for an open-loop trace)."""
        slack = 1e-9 + 0.01 * loop.frame_period_us * 1e-6
        k = max(0, bisect.bisect_right(a.times_s, t - a.at_s + slack) - 1)
        v = a.values[k]
        if a.target == "speed_ref_rpm":
            loop.operator.speed_ref_rpm = v
        else:
            from host.sim import INPUTS

            idx, scale = INPUTS[a.target]
            loop.u[idx] = v * scale

    def _fault(self, loop, a: Action, on: bool) -> None:
        u, s = loop.u, loop.sensors
        f = a.fault
        flag = 1.0 if on else 0.0
        if f == "field_open":
            u[L.U_FIELD_OPEN] = flag
        elif f == "armature_short":
            u[L.U_ARMATURE_SHORT] = flag
        elif f == "locked_rotor":
            u[L.U_LOCKED_ROTOR] = flag
        elif f == "coupling_break":
            u[L.U_COUPLING_BROKEN] = flag
        elif f == "field_rheostat":
            if self._rheo_base is None:
                self._rheo_base = float(loop.p[L.P_RHEO_OHM])
            loop.p[L.P_RHEO_OHM] = self._rheo_base + (float(a.param) if on else 0.0)
        elif f == "tacho_loss":
            s.tacho_gain = 0.0 if on else 1.0
        elif f == "tacho_reversed":
            s.tacho_gain = -1.0 if on else 1.0
        elif f == "encoder_loss":
            s.encoder_lost = on
        elif f == "mains_dip":
            u[L.U_MAINS_PU] = float(a.param) if on else 1.0
        elif f == "phase_loss":
            u[L.U_PHASE_LOST] = float(_PHASE[a.param] + 1) if on else 0.0
        elif f == "frequency_step":
            u[L.U_MAINS_HZ_DEV] = float(a.param) if on else 0.0
        elif f in ("misfire", "shorted_thyristor", "blown_fuse"):
            slot = {"misfire": L.U_MISFIRE_MASK, "shorted_thyristor": L.U_SHORT_MASK,
                    "blown_fuse": L.U_FUSE_BLOWN_MASK}[f]
            bit = 1 << (_PHASE[a.param] if f == "blown_fuse" else int(a.param) - 1)
            mask = int(u[slot])
            u[slot] = float(mask | bit if on else mask & ~bit)
        elif f == "link_drop":
            if self.gate is None:
                raise RuntimeError("link_drop needs the session wrapped in a LinkGate")
            self.gate.dropped = on


def _interp(pts, t: float) -> float:
    if t <= pts[0][0]:
        return pts[0][1]
    for (t0, v0), (t1, v1) in zip(pts, pts[1:]):
        if t <= t1:
            return v0 + (v1 - v0) * (t - t0) / (t1 - t0)
    return pts[-1][1]
