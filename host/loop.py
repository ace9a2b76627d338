"""The host loop: applies controller commands to the model, one kernel call per frame.

Owns: mapping Command -> model inputs and model outputs -> Feedback (the plant's sensors),
the lockstep and paced real-time loops, the watchdog reaction, the frame record and the
timing statistics. The link is a host.link.HostSession; the model is the plant's frame kernel (Plant.kernel(),
a build of rtmodel.kernel.step_frame specialised for the plant's codes), fetched once per run.

Per frame the Python work is constant: decode one command, write a few input slots, one
numba call for n_sub steps, copy one output row into a preallocated record, encode one
feedback. Nothing here grows with n_sub.

Lockstep: the host sends feedback k, waits for command k, advances the model one frame with
it, sends feedback k+1 - deterministic and repeatable for regression. Paced: the host runs
on the wall clock at the frame period, uses the latest command that arrived, busy-waits the
last stretch before each deadline and counts every deadline it misses.
"""

from __future__ import annotations

import gc
import math
import os
import time
from dataclasses import dataclass, field

import numpy as np

from rtmodel import layout as L

from . import signals as sig
from .controller import firing  # the bridge voltage laws (pure; shared with the controller)
from .controller.protection import trip_detail, trip_label  # trip codes printed with their names
from .errors import ConfigError
from .interrupts import raise_if_lost
from .params import Plant

RAD2DEG = 180.0 / math.pi

# frame record: one fixed-layout float64 row per frame (appended without Python objects)
REC_COLUMNS = (
    "time_s", "cmd_seq", "cmd_mode", "bridge_select", "armature_cmd", "field_cmd", "contactor_cmd",
    "controller_trip", "trip_code", "armature_current_A", "armature_current_peak_A", "field_current_A",
    "terminal_voltage_V", "emf_V", "speed_rpm", "torque_Nm", "load_torque_Nm", "firing_angle_deg",
    "armature_temperature_C", "model_status", "host_status", "link_ok", "op_speed_ref_rpm",
    "host_work_us", "field_mode", "link_errors", "refused_commands",
)  # fmt: skip
# armature_current_A, terminal_voltage_V and torque_Nm are means over the frame (a frame of
# 3.33 ms is one 300 Hz ripple period of a 50 Hz bridge, so an end-of-frame sample sees the
# same phase of the ripple every frame: torque read 10-15 % off the mean current's torque,
# and after a blown fuse 1500 N m in frames whose mean current was 20 A);
# armature_current_peak_A is the frame's largest |ia|; the others are end-of-frame values.
# link_errors: running total of every detected link error (CRC, COBS, runt, oversize, torn,
# bad frame, sequence gap/repeat/out-of-order/restart, unexpected kind); refused_commands:
# running total of commands refused (malformed, inapplicable, out of range). Both also go to
# the events with their classes, and to the summary.
R = {name: k for k, name in enumerate(REC_COLUMNS)}


@dataclass
class Operator:
    """What a PLC or an operator desk would send: run, stop, speed reference."""

    run: int = 0
    stop: int = 0
    speed_ref_rpm: float = 0.0


@dataclass
class LoopStats:
    frames: int = 0
    commands: int = 0
    missed_commands: int = 0  # lockstep: frames advanced without a fresh command
    link_loss_events: int = 0
    deadline_misses: int = 0
    end_stop_commands: int = 0  # firing angles applied at the converter's end stop (counted, not refused)
    overspeed_frames: int = 0
    rehandshakes: int = 0  # handshakes after the first: controller reconnected or restarted
    watchdog_resets: int = 0
    run_invalid: str = ""  # why the error-rate supervisor marked the run invalid ("" = valid)
    jitter_ns: np.ndarray | None = None
    granted: dict = field(default_factory=dict)  # what the OS allowed: priority, affinity, gc


def warm_kernel(plant: Plant) -> float:
    """Compile (first run) or load (cached) the step kernel before any deadline runs.

    Returns the seconds it took. The first call on a fresh machine compiles for 15-30 s; a
    controller waiting for the handshake must not be started before this returns.
    """
    import time as _time

    t0 = _time.perf_counter()
    step_frame = plant.kernel()
    x, u, y = plant.new_state(), plant.new_inputs(), np.zeros(L.N_OUTPUT)
    step_frame(x, plant.p, u, y, 0)
    raise_if_lost()  # a Ctrl-C that landed in the compiler's callbacks
    return _time.perf_counter() - t0


def frame_steps(plant: Plant, frame_period_us: int) -> tuple[int, float]:
    """Substeps per frame and the step that makes them fill the frame exactly."""
    n = max(1, round(frame_period_us * 1e-6 / plant.dt_s))
    return n, frame_period_us * 1e-6 / n


class Sensors:
    """Model outputs -> what the controller's sensors read; sensor faults live here."""

    def __init__(self, plant: Plant):
        self.v_ll = float(plant.p[L.P_MAINS_VLL_V]) if plant.converter is not None else 0.0
        self.tacho_gain = 1.0  # 0: tachogenerator lost, -1: leads reversed
        self.encoder_lost = False
        self.contactor_delay_s = 0.04  # main contactor closing/opening time (common practice: tens of ms)
        self._contactor_closed = 0
        self._contactor_t = 0.0

    @property
    def contactor_closed(self) -> int:
        return self._contactor_closed

    def contactor(self, cmd: int, t_s: float) -> int:
        """Feedback contact follows the command after the mechanical delay."""
        if cmd != self._contactor_closed:
            if self._contactor_t == 0.0:
                self._contactor_t = t_s
            if t_s - self._contactor_t >= self.contactor_delay_s:
                self._contactor_closed = cmd
                self._contactor_t = 0.0
        else:
            self._contactor_t = 0.0
        return self._contactor_closed


class HostLoop:
    """Runs the plant against a controller over a HostSession.

    Parameters
    ----------
    plant : packed Plant (its dt is adjusted so n_sub steps fill one frame)
    session : host.link.HostSession after handshake
    frame_period_us : frame period
    watchdog_periods : frames without a valid command that make a link-loss event
    on_link_loss : "block" (firing blocked, contactor opened) or "hold" (last command held)
    clock : injectable ns clock (tests force overruns with it)
    recorder : a host.record.RunRecorder (columns REC_COLUMNS) that gets every frame row and
        event as it happens, so a killed run keeps what it did; the in-memory array stays for
        the live summary. The hand-off publishes the array and its row count (no copy, no
        disk I/O on this thread); the recorder's writer thread reads the new rows from it.
    """

    def __init__(self, plant: Plant, session, frame_period_us: int, watchdog_periods: int = 10,
                 on_link_loss: str = "block", record_rows: int = 65536, clock=time.perf_counter_ns,
                 max_error_rate: float = 0.01, error_rate_min_frames: int = 100, recorder=None):
        if on_link_loss not in ("block", "hold"):
            raise ConfigError(f"link: on_link_loss: expected one of ['block', 'hold'], got {on_link_loss!r}")
        self._step = plant.kernel()  # the build for this plant's codes, fetched once per run
        self.plant = plant
        self.session = session
        self.frame_period_us = int(frame_period_us)
        self.n_sub, dt = frame_steps(plant, self.frame_period_us)
        self.p = plant.p.copy()
        self.p[L.P_DT_S] = dt
        self.x = plant.new_state()
        self.u = plant.new_inputs()
        self.u[L.U_CONTACTOR] = 0.0
        self.u[L.U_BRIDGE_SELECT] = 0.0
        self.y = np.zeros(L.N_OUTPUT)
        self.watchdog_periods = watchdog_periods
        # the error-rate supervisor: detected link errors per frame above this (after at least
        # error_rate_min_frames frames) mark the run invalid; the run goes on, the record says so
        self.max_error_rate = max_error_rate
        self.error_rate_min_frames = error_rate_min_frames
        self.on_link_loss = on_link_loss
        self.clock = clock
        self.sensors = Sensors(plant)
        self.operator = Operator()
        self.record = np.zeros((record_rows, len(REC_COLUMNS)))  # doubles when full
        self.n_rec = 0
        self.events: list[tuple[float, str, str]] = []  # (time_s, kind, text)
        self.recorder = recorder
        self.stats = LoopStats()
        self.last_cmd = sig.Command()
        self.fb = sig.Feedback()
        self._no_cmd_frames = 0
        self._link_lost = False  # the watchdog reaction, latched until reset_watchdog()
        self._held_cmd: sig.Command | None = None  # "hold": the command held since the loss
        self._latched_cmd_logged = False
        self._trip_logged = False
        self.applied_seq: int | None = None  # seq of the last command applied (FEEDBACK.ack_seq)
        self._handshakes_seen = getattr(session, "handshakes", 0)
        self.overspeed_rpm = float(plant.machine.values["machine.max_speed_rpm"]
                                   or 1.2 * plant.machine.values["machine.rated_speed_rpm"])
        self._overspeed = False
        self._link_err_seen = 0
        self._link_err_last: dict = {}
        self._refused_seen = 0
        self._refused_now = False  # a command was refused in this frame (HOST_COMMAND_REFUSED)
        # an in-process controller has no channel, so nothing to count (no deframer, no seq check)
        self._has_channel = session is not None and hasattr(session, "rx")
        self.lockstep = False  # set by run_lockstep (HOST_LOCKSTEP in every feedback)
        self.hooks = []  # callables hook(loop) before each frame (scenario timeline, faults)
        self.supply = int(self.p[L.P_SUPPLY_KIND])
        self.field_kind = int(self.p[L.P_FIELD_SUPPLY_KIND])
        self.vdo = firing.vdo(float(self.p[L.P_MAINS_VLL_V]))
        self.field_vac = float(self.p[L.P_FIELD_VAC_V])
        self._limits = self._command_limits(plant)
        if session is not None:
            session.command_check = self.command_refusal
            v = plant.machine.values
            session.sensors = (int(round(v["sensors.tacho_V_per_1000rpm"] * 1000.0)),  # uV per rpm
                               4 * int(v["sensors.encoder_ppr"]))
        self._step(self.x, self.p, self.u, self.y, 0)  # outputs of the initial state, compiles if needed

    # ------------------------------------------------------------------ command rules
    def _command_limits(self, plant: Plant) -> dict:
        """What this plant accepts: armature modes, bridge selections and value ranges
        (docs/protocol.md section 8). Beyond a range a value cannot be a command for this
        machine (a firing angle of 1e12 deg); it is refused, never clamped."""
        v = plant.machine.values
        vr = v["machine.rated_voltage_V"]
        ir = v["machine.rated_current_A"]
        supply = int(self.p[L.P_SUPPLY_KIND])
        if supply == L.SUPPLY_DC:
            modes = {sig.MODE_VOLTAGE}
            selects = {sig.BRIDGE_BLOCKED, sig.BRIDGE_FORWARD}
        elif supply == L.SUPPLY_CURRENT:
            modes = {sig.MODE_CURRENT}
            selects = {sig.BRIDGE_BLOCKED, sig.BRIDGE_FORWARD, sig.BRIDGE_REVERSE}
        elif supply == L.SUPPLY_BRIDGE:
            modes = {sig.MODE_FIRING_ANGLE, sig.MODE_VOLTAGE}
            selects = {sig.BRIDGE_BLOCKED, sig.BRIDGE_FORWARD}
        else:  # dual bridge, averaged bridge (four quadrants)
            modes = {sig.MODE_FIRING_ANGLE, sig.MODE_VOLTAGE}
            selects = {sig.BRIDGE_BLOCKED, sig.BRIDGE_FORWARD, sig.BRIDGE_REVERSE}
        vdo = self.vdo if supply not in (L.SUPPLY_DC, L.SUPPLY_CURRENT) else 0.0
        v_lim = 1.5 * vdo if vdo > 0.0 else 2.0 * vr
        vf_lim = 3.0 * max(vr, math.sqrt(2.0) * self.field_vac, plant.derived.get("field_voltage_rated_V", 0.0))
        return {
            "modes": modes, "selects": selects, "supply": supply,
            sig.MODE_FIRING_ANGLE: (0.0, 180.0, "deg"),
            sig.MODE_VOLTAGE: (-v_lim, v_lim, "V"),
            sig.MODE_CURRENT: (-10.0 * ir, 10.0 * ir, "A"),
            "field": {sig.FIELD_MODE_FIRING_ANGLE: (0.0, 180.0, "deg"), sig.FIELD_MODE_VOLTAGE: (-vf_lim, vf_lim, "V")},
            "alpha_end_stops": (math.degrees(self.p[L.P_ALPHA_MIN_RAD]), math.degrees(self.p[L.P_ALPHA_MAX_RAD])),
        }

    def command_refusal(self, cmd: sig.Command) -> tuple[str, str] | None:
        """(class, reason) when this plant must not apply cmd, else None. Classes:
        mode_not_applicable, bridge_not_applicable, out_of_range (field values included)."""
        lim = self._limits
        if cmd.mode not in lim["modes"]:
            names = {0: "firing angle", 1: "voltage", 2: "current"}
            return ("mode_not_applicable", f"{names[cmd.mode]} mode does not apply to this supply "
                    f"({', '.join(names[m] for m in sorted(lim['modes']))} only)")
        if cmd.bridge_select not in lim["selects"]:
            return ("bridge_not_applicable", f"bridge_select {cmd.bridge_select} on a supply without a reverse bridge")
        lo, hi, unit = lim[cmd.mode]
        if not lo <= cmd.armature_cmd <= hi:
            return ("out_of_range", f"armature_cmd {cmd.armature_cmd:g} {unit} outside [{lo:g}, {hi:g}]")
        lo, hi, unit = lim["field"][cmd.field_mode]
        if not lo <= cmd.field_cmd <= hi:
            return ("out_of_range", f"field_cmd {cmd.field_cmd:g} {unit} outside [{lo:g}, {hi:g}]")
        return None

    def reset_watchdog(self, source: str) -> None:
        """The explicit reset that clears a latched watchdog reaction (CONTROL reset from the
        controller, or the operator). Valid commands alone never clear it."""
        if self._link_lost:
            self._link_lost = False
            self._held_cmd = None
            self._latched_cmd_logged = False
            self.stats.watchdog_resets += 1
            self.event("link", f"watchdog reaction reset by {source}")
        self._no_cmd_frames = 0

    # ------------------------------------------------------------------ mapping
    def apply_command(self, cmd: sig.Command) -> None:
        """Write a controller command into the model inputs."""
        u = self.u
        if cmd.mode == sig.MODE_FIRING_ANGLE:
            u[L.U_ALPHA_DEG] = cmd.armature_cmd
        elif cmd.mode == sig.MODE_VOLTAGE:
            if self.supply == L.SUPPLY_DC:
                u[L.U_VT_V] = cmd.armature_cmd
            else:  # a voltage-controlled converter: linearise here
                u[L.U_ALPHA_DEG] = firing.bridge_alpha_deg(cmd.armature_cmd, self.vdo)
        else:
            u[L.U_IREF_A] = cmd.armature_cmd
        u[L.U_BRIDGE_SELECT] = cmd.bridge_select
        if cmd.field_mode == sig.FIELD_MODE_FIRING_ANGLE:
            u[L.U_FIELD_ALPHA_DEG] = cmd.field_cmd
            if self.field_kind == L.FIELD_SUPPLY_DC:
                u[L.U_FIELD_V] = firing.half_bridge_voltage(cmd.field_cmd, self.field_vac)
        else:
            u[L.U_FIELD_V] = cmd.field_cmd
            if self.field_kind != L.FIELD_SUPPLY_DC:
                u[L.U_FIELD_ALPHA_DEG] = firing.half_bridge_alpha_deg(cmd.field_cmd, self.field_vac)
        if self.supply == L.SUPPLY_DC and cmd.bridge_select == sig.BRIDGE_BLOCKED:
            u[L.U_VT_V] = 0.0 if cmd.mode == sig.MODE_VOLTAGE else u[L.U_VT_V]
        u[L.U_CONTACTOR] = 1.0 if cmd.contactor else 0.0

    def make_feedback(self) -> sig.Feedback:
        y = self.y
        fb = self.fb
        s = self.sensors
        t = y[L.Y_TIME_S]
        fb.model_time_us = int(t * 1e6) & 0xFFFFFFFF
        fb.armature_current_A = y[L.Y_IA_MEAN_A]
        fb.field_current_A = y[L.Y_IF_A]
        fb.armature_voltage_V = y[L.Y_VT_MEAN_V]
        fb.tacho_voltage_V = y[L.Y_TACHO_V] * s.tacho_gain
        if not s.encoder_lost:
            c = int(y[L.Y_ENCODER_COUNT])
            fb.encoder_count = ((c + 2**31) % 2**32) - 2**31
        fb.mains_angle_deg = y[L.Y_MAINS_ANGLE_RAD] * RAD2DEG
        fb.mains_voltage_V = s.v_ll * self.u[L.U_MAINS_PU] * (0.5 if self.u[L.U_PHASE_LOST] else 1.0)
        fb.contactor_closed = s.contactor(int(self.last_cmd.contactor), t)
        # the model's contactor follows the feedback contact, not the command
        self.u[L.U_CONTACTOR] = float(fb.contactor_closed)
        status = int(y[L.Y_STATUS]) << 8
        if self._link_lost:
            status |= sig.HOST_WATCHDOG_TRIPPED
        if status >> 8:
            status |= sig.HOST_MODEL_ALARM
        if self._overspeed:
            status |= sig.HOST_OVERSPEED | sig.HOST_MODEL_ALARM
        if self._refused_now:
            status |= sig.HOST_COMMAND_REFUSED
        if self.lockstep:
            status |= sig.HOST_LOCKSTEP
        fb.host_status = status
        fb.op_run = self.operator.run
        fb.op_stop = self.operator.stop
        fb.op_speed_ref_rpm = self.operator.speed_ref_rpm
        sess = self.session
        if sess is not None and getattr(sess, "handshakes", 0) != self._handshakes_seen:
            self._handshakes_seen = sess.handshakes  # a new session: nothing of it applied yet
            self.applied_seq = None
        fb.ack_seq = sig.ACK_NONE if self.applied_seq is None else self.applied_seq
        return fb

    # ------------------------------------------------------------------ one frame
    def _advance(self, cmd: sig.Command | None, work_start_ns: int) -> None:
        if cmd is not None:
            self.stats.commands += 1
            self._no_cmd_frames = 0
            if self._link_lost:
                # latched: a valid command is received but not applied until a reset
                if not self._latched_cmd_logged:
                    self._latched_cmd_logged = True
                    self.event("link", "valid commands again; the watchdog reaction stays latched until a reset")
            if not (self._link_lost and self.on_link_loss == "hold"):  # hold keeps the command held at the loss
                self.last_cmd = cmd
                if not self._link_lost:
                    self.applied_seq = cmd.seq
                    lo, hi = self._limits["alpha_end_stops"]
                    if cmd.mode == sig.MODE_FIRING_ANGLE and cmd.bridge_select and not lo <= cmd.armature_cmd <= hi:
                        self.stats.end_stop_commands += 1
                        if self.stats.end_stop_commands == 1:
                            self.event("command", f"firing angle {cmd.armature_cmd:g} deg applied at the converter's "
                                                  f"end stop [{lo:g}, {hi:g}] deg (counted)")
        else:
            self._no_cmd_frames += 1
            self.stats.missed_commands += 1
            if self._no_cmd_frames >= self.watchdog_periods and not self._link_lost:
                self._link_lost = True
                self.stats.link_loss_events += 1
                self._held_cmd = self.last_cmd
                self.event("link", f"link loss: no valid command for {self._no_cmd_frames} frames; "
                                   f"reaction: {self.on_link_loss} (latched until a reset)")
        c = self.last_cmd
        if self._link_lost and self.on_link_loss == "block":
            # the controller's trip flag and code stay: they are what it reports, not what is applied
            # (a trip it declares while the host holds the latch must still reach the record)
            c = sig.Command(mode=c.mode, bridge_select=sig.BRIDGE_BLOCKED, armature_cmd=c.armature_cmd,
                            field_mode=c.field_mode, field_cmd=c.field_cmd, contactor=0, trip=c.trip,
                            trip_code=c.trip_code, seq=c.seq)
            self.last_cmd = c
        for hook in self.hooks:
            hook(self)
        self.apply_command(c)
        self.u[L.U_CONTACTOR] = float(self.sensors.contactor_closed)
        self._step(self.x, self.p, self.u, self.y, self.n_sub)
        over = abs(self.y[L.Y_SPEED_RPM]) > self.overspeed_rpm
        if over:
            self.stats.overspeed_frames += 1
            if not self._overspeed:
                self.event("model", f"overspeed: {self.y[L.Y_SPEED_RPM]:.0f} r/min above the machine's limit "
                                    f"{self.overspeed_rpm:.0f} r/min")
        self._overspeed = over
        if self.session is not None and self._has_channel:
            self._note_link_errors()
        if c.trip and not self._trip_logged:
            self._trip_logged = True
            self.event("trip", f"controller tripped, code {trip_label(c.trip_code)}")
        self._log_row(c, work_start_ns)
        self.stats.frames += 1

    def _log_row(self, c: sig.Command, work_start_ns: int) -> None:
        k = self.n_rec
        if k >= len(self.record):
            self.record = np.concatenate([self.record, np.zeros_like(self.record)])
        r = self.record[k]
        y = self.y
        r[0] = y[L.Y_TIME_S]
        r[1] = c.seq
        r[2] = c.mode
        r[3] = c.bridge_select
        r[4] = c.armature_cmd
        r[5] = c.field_cmd
        r[6] = c.contactor
        r[7] = c.trip
        r[8] = c.trip_code
        r[9] = y[L.Y_IA_MEAN_A]
        r[10] = y[L.Y_IA_PEAK_A]
        r[11] = y[L.Y_IF_A]
        r[12] = y[L.Y_VT_MEAN_V]
        r[13] = y[L.Y_EMF_V]
        r[14] = y[L.Y_SPEED_RPM]
        r[15] = y[L.Y_TORQUE_MEAN_NM]  # a mean, like the current beside it (see REC_COLUMNS)
        r[16] = y[L.Y_LOAD_TORQUE_NM]
        r[17] = y[L.Y_LAST_FIRE_ANGLE_DEG]
        r[18] = y[L.Y_TEMP_ARM_C]
        r[19] = y[L.Y_STATUS]
        r[20] = self.fb.host_status
        r[21] = 0.0 if self._link_lost else 1.0
        r[22] = self.operator.speed_ref_rpm
        r[23] = (self.clock() - work_start_ns) * 1e-3
        r[24] = c.field_mode  # with the command columns, what an open-loop replay needs
        r[25] = self._link_err_seen
        r[26] = self._refused_seen
        self.n_rec = k + 1
        if self.recorder is not None:
            self.recorder.publish(self.record, k + 1)  # zero copy: rows up to k are final

    # the counters that make up "link errors": each is a detected fault of the channel
    LINK_ERROR_COUNTERS = ("crc_errors", "cobs_errors", "oversize", "runts", "torn", "bad_frames", "unexpected",
                           "seq_gaps", "seq_repeats", "seq_out_of_order", "seq_restarts")

    def link_error_counts(self) -> dict[str, int]:
        """Detected link errors per class (see LINK_ERROR_COUNTERS), and refused commands per class."""
        sess = self.session
        if not self._has_channel:
            return {}
        d = sess.link.deframer
        rx = sess.rx
        out = {"crc_errors": d.crc_errors, "cobs_errors": d.cobs_errors, "oversize": d.oversize, "runts": d.runts,
               "torn": getattr(d, "torn", 0), "bad_frames": sess.bad_frames, "unexpected": sess.unexpected,
               "seq_gaps": rx.gaps, "seq_repeats": rx.repeats, "seq_out_of_order": rx.out_of_order,
               "seq_restarts": rx.restarts}
        for cls, n in getattr(sess, "refused", {}).items():
            out[f"refused_{cls}"] = n
        return out

    def _note_link_errors(self) -> None:
        """One event per frame in which a counter moved, naming the classes (constant work:
        a sum of a dozen integers per frame, the dict only when something changed)."""
        sess = self.session
        d = sess.link.deframer
        rx = sess.rx
        total = (d.crc_errors + d.cobs_errors + d.oversize + d.runts + getattr(d, "torn", 0) + sess.bad_frames
                 + sess.unexpected + rx.gaps + rx.repeats + rx.out_of_order + rx.restarts)
        refused = getattr(sess, "invalid_commands", 0)
        self._refused_now = refused != self._refused_seen
        if total == self._link_err_seen and not self._refused_now:
            return
        now = self.link_error_counts()
        moved = {k: v - self._link_err_last.get(k, 0) for k, v in now.items() if v != self._link_err_last.get(k, 0)}
        self._link_err_last = now
        self._link_err_seen = total
        if refused != self._refused_seen:
            self._refused_seen = refused
        frames = max(self.stats.frames, 1)
        if (not self.stats.run_invalid and self.max_error_rate is not None
                and self.stats.frames >= self.error_rate_min_frames and total / frames > self.max_error_rate):
            self.stats.run_invalid = (f"{total} link errors in {frames} frames, above the supervisor's "
                                      f"{self.max_error_rate:g} per frame")
            self.event("link", f"run invalid: {self.stats.run_invalid}")
        text = ", ".join(f"{k} +{n}" for k, n in moved.items())
        kind = "command" if all(k.startswith("refused_") for k in moved) else "link"
        extra = f"; last refusal {sess.last_refusal}" if any(k.startswith("refused_") for k in moved) else ""
        self.event(kind, f"errors detected: {text}{extra}")

    def event(self, kind: str, text: str, **data) -> None:
        t = float(self.y[L.Y_TIME_S])
        self.events.append((t, kind, text))
        if self.recorder is not None:
            self.recorder.event(t, kind, text, **data)

    def rows(self) -> np.ndarray:
        return self.record[: self.n_rec]

    # ------------------------------------------------------------------ loops
    def run_lockstep(self, n_frames: int, on_frame=None, command_timeout_s: float | None = None,
                     peer_timeout_s: float | None = None, handshake_timeout_s: float = 5.0) -> LoopStats:
        """Feedback -> wait for command -> one frame. Deterministic given the controller.

        command_timeout_s: wall-clock wait for the command answering each FEEDBACK; when it
        passes the frame runs without a command (counted; after watchdog_periods of them the
        watchdog reaction latches). Default: one frame period, at least 0.2 s.
        peer_timeout_s: no valid command for this long (wall clock) means the controller is
        dead or gone: the run ends with LinkTimeout (the caller keeps the record). None: never.
        A controller that reconnects (listening link) or restarts (a HELLO after its
        commands) gets a new handshake within handshake_timeout_s; the model stays where it is.
        """
        from .errors import LinkTimeout

        sess = self.session
        self.lockstep = True
        timeout = command_timeout_s or max(0.2, self.frame_period_us * 1e-6)
        connects = getattr(getattr(sess, "link", None), "connects", None)
        sess.send_feedback(self.make_feedback())
        last_valid = time.monotonic()
        for _ in range(n_frames):
            cmd = sess.recv_command(timeout)
            t0 = self.clock()
            if cmd is None and sess.bye:
                self.event("link", "controller said bye")
                break
            now_connects = getattr(getattr(sess, "link", None), "connects", None)
            # a channel-less session (in-process controller, playback) never restarts
            restarted = getattr(sess, "peer_restarted", False)
            if restarted or now_connects != connects:
                connects = now_connects
                self._rehandshake(handshake_timeout_s, "restarted" if restarted else "reconnected")
                sess.send_feedback(self.make_feedback())
                continue
            if cmd is not None:
                last_valid = time.monotonic()
            elif peer_timeout_s is not None and time.monotonic() - last_valid >= peer_timeout_s:
                self._drain_events()
                self.event("link", f"lockstep: no valid command for {peer_timeout_s:g} s: the controller is dead "
                                   "or disconnected; run ended")
                raise LinkTimeout(f"link '{sess.link.url}': lockstep: no valid command from the controller for "
                                  f"{peer_timeout_s:g} s (dead or disconnected); run ended")
            self._drain_events()
            self._advance(cmd, t0)
            sess.send_feedback(self.make_feedback())
            if on_frame is not None and on_frame(self) is False:
                break
        self._drain_events()
        return self.stats

    def _rehandshake(self, timeout_s: float, why: str) -> None:
        """The controller came back: HELLO again; numbering and ack restart, the watchdog
        latch (if set) stays until a reset."""
        self._drain_events()
        self.event("link", f"controller {why}: new handshake")
        self.session.handshake(timeout_s=timeout_s)
        self.stats.rehandshakes += 1

    def run_paced(self, n_frames: int, on_frame=None, busy_wait_us: float = 300.0,
                  realtime: bool = True) -> LoopStats:
        """Wall-clock frames: latest command, one model frame, feedback; deadlines counted.

        realtime: try SCHED_FIFO and pin to the last CPU (reported in stats.granted); the
        garbage collector is frozen for the run either way.
        """
        granted = self._grant_realtime() if realtime else {}
        gc.collect()
        gc.freeze()
        gc_was = gc.isenabled()
        gc.disable()
        granted["gc"] = "frozen and disabled during the run"
        self.stats.granted = granted
        sess = self.session
        period = self.frame_period_us * 1000
        clock = self.clock
        jitter = np.zeros(n_frames, dtype=np.int64)
        latest: sig.Command | None = None
        try:
            next_t = clock() + period
            sess.send_feedback(self.make_feedback())
            for k in range(n_frames):
                # wait: sleep most of the way, poll the link, busy-wait the last stretch
                while True:
                    now = clock()
                    left = next_t - now
                    if left <= 0:
                        break
                    if left > busy_wait_us * 1000:
                        got = sess.recv_command((left - busy_wait_us * 1000) * 1e-9)
                        if got is not None:
                            latest = got
                    # else spin
                start = clock()
                jitter[k] = start - next_t
                got = sess.recv_command(0.0)
                while got is not None:
                    latest = got
                    got = sess.recv_command(0.0)
                if sess.bye:
                    self.event("link", "controller said bye")
                    jitter = jitter[: k + 1]
                    break
                self._drain_events()
                self._advance(latest, start)
                latest = None
                sess.send_feedback(self.make_feedback())
                done = clock()
                next_t += period
                if done > next_t:
                    # never hide a miss: count it and skip the frames we cannot catch up on
                    missed = (done - next_t) // period + 1
                    self.stats.deadline_misses += int(missed)
                    next_t += int(missed) * period
                    self.event("deadline", f"frame deadline missed by {(done - next_t + int(missed) * period) / 1000:.0f} us; "
                                           f"{int(missed)} frame(s) skipped", missed=int(missed))
                if on_frame is not None and on_frame(self) is False:
                    jitter = jitter[: k + 1]
                    break
        finally:
            if gc_was:
                gc.enable()
            gc.unfreeze()
            self._drop_realtime(granted)
        self.stats.jitter_ns = jitter
        self._drain_events()
        return self.stats

    def _drain_events(self) -> None:
        for ev in self.session.pop_events():
            if isinstance(ev, sig.TripReport):
                self.event("trip", f"trip report: code {trip_label(ev.trip_code)}, "
                                   f"detail {trip_detail(ev.trip_code, ev.detail)}, "
                                   f"controller time {ev.controller_time_us} us")
            elif isinstance(ev, sig.ControlMessage):
                self.event("control", f"control op {ev.op} value {ev.value:g} {ev.text}".strip())
                if ev.op == sig.CTRL_RESET:
                    self.reset_watchdog("the controller (CONTROL reset)")

    @staticmethod
    def _grant_realtime() -> dict:
        granted = {}
        try:
            cpus = sorted(os.sched_getaffinity(0))
            granted["affinity_before"] = cpus
            os.sched_setaffinity(0, {cpus[-1]})
            granted["affinity"] = f"pinned to CPU {cpus[-1]}"
        except (AttributeError, OSError) as err:
            granted["affinity"] = f"not pinned ({err})"
        try:
            granted["policy_before"] = os.sched_getscheduler(0)
            os.sched_setscheduler(0, os.SCHED_FIFO, os.sched_param(10))
            granted["scheduler"] = "SCHED_FIFO priority 10"
        except (AttributeError, OSError, PermissionError) as err:
            granted["scheduler"] = f"normal scheduling ({err.__class__.__name__}: SCHED_FIFO not permitted)"
        return granted

    @staticmethod
    def _drop_realtime(granted: dict) -> None:
        try:
            if "policy_before" in granted and granted.get("scheduler", "").startswith("SCHED_FIFO"):
                os.sched_setscheduler(0, granted["policy_before"], os.sched_param(0))
            if "affinity_before" in granted:
                os.sched_setaffinity(0, set(granted["affinity_before"]))
        except OSError:
            pass


def jitter_table(jitter_ns: np.ndarray) -> dict:
    """Percentiles of frame start lateness, us."""
    if jitter_ns is None or len(jitter_ns) == 0:
        return {}
    j = np.asarray(jitter_ns, dtype=float) * 1e-3
    return {
        "frames": int(len(j)),
        "median_us": float(np.median(j)),
        "p99_us": float(np.percentile(j, 99)),
        "p999_us": float(np.percentile(j, 99.9)),
        "max_us": float(np.max(j)),
    }
