"""The emulated thyristor DC drive controller, stepped once per frame.

Owns: DriveController.step(fb, dt_s) -> Command, the start/stop order (contactor before pulses,
pulses blocked before the contactor opens), the cascade speed loop -> current loop -> firing
angle, the field loop with EMF-controlled field weakening, the dual-bridge changeover and the
protections with their latching trip. Pure logic on plain floats: no I/O, no clock of its own
(time is the sum of the dt_s it is given).
Must never import serial, numba, rtmodel or host.link.

SAFETY: this is an emulation for a test bench. It is not a safety function and must never
drive a real power converter or machine: a real drive needs independent hardware
overcurrent/overspeed protection, a safe-torque-off path and, on hoists, a brake sequence.
"""

from __future__ import annotations

import math

from host.controller import firing
from host.controller.blocks import PI, Ramp, interp, lowpass_factor
from host.controller.changeover import CONDUCT, DEAD, PHASE_NAMES, ZEROING, Changeover
from host.controller.protection import Persist, TripCode
from host.controller.settings import Settings
from host.signals import (
    ARMATURE_MODES,
    BRIDGE_BLOCKED,
    BRIDGE_FORWARD,
    BRIDGE_REVERSE,
    FIELD_MODE_FIRING_ANGLE,
    FIELD_MODE_VOLTAGE,
    HOST_WATCHDOG_TRIPPED,
    MODE_FIRING_ANGLE,
    MODE_VOLTAGE,
    Command,
    Feedback,
    TripReport,
)

RPM_TO_RAD_S = math.pi / 30.0

# sequence states
STOPPED = 0  # contactor open, pulses blocked, economy field
CLOSING = 1  # contactor commanded, waiting for its feedback, the release delay and the field
RUNNING = 2  # pulses released, speed loop follows the operator reference
STOPPING = 3  # pulses released, ramping to zero, then current to zero
OPENING = 4  # one frame: pulses blocked, contactor still closed (opens next frame)
TRIPPED = 5  # latched trip: inversion end, then pulses blocked and contactor open
STATE_NAMES = {STOPPED: "stopped", CLOSING: "closing", RUNNING: "running",
               STOPPING: "stopping", OPENING: "opening", TRIPPED: "tripped"}


class ControllerSignals:
    """Read-only view of the controller's internal signals, for logging."""

    __slots__ = ("_c",)

    NAMES = ("speed_rpm", "speed_ref_ramped_rpm", "current_ref_A", "voltage_ref_V",
             "firing_angle_deg", "field_current_ref_A", "field_voltage_ref_V", "emf_V",
             "flux_pu", "thermal_pu", "discontinuous", "bridge", "changeover_phase",
             "state", "tripped", "trip_code")

    def __init__(self, controller: "DriveController"):
        self._c = controller

    speed_rpm = property(lambda s: s._c._n_rpm, doc="filtered tacho speed")
    speed_ref_ramped_rpm = property(lambda s: s._c._ramp.out, doc="speed reference after ramp")
    current_ref_A = property(lambda s: s._c._i_ref, doc="armature current reference (signed)")
    voltage_ref_V = property(lambda s: s._c._v_ref, doc="armature voltage reference (signed)")
    firing_angle_deg = property(lambda s: s._c._alpha_deg, doc="armature firing angle")
    field_current_ref_A = property(lambda s: s._c._if_ref)
    field_voltage_ref_V = property(lambda s: s._c._vf_ref)
    emf_V = property(lambda s: s._c._emf_V, doc="filtered Va - Ra*Ia")
    flux_pu = property(lambda s: s._c._phi_pu)
    thermal_pu = property(lambda s: s._c._theta_pu, doc="I^2t thermal image, 1.0 = rated steady")
    discontinuous = property(lambda s: s._c._dcm)
    bridge = property(lambda s: s._c._bridge_select)
    changeover_phase = property(lambda s: PHASE_NAMES[s._c._co.phase])
    state = property(lambda s: STATE_NAMES[s._c._state])
    tripped = property(lambda s: s._c._state == TRIPPED)
    trip_code = property(lambda s: s._c._trip_code)

    def snapshot(self) -> dict:
        return {n: getattr(self, n) for n in self.NAMES}


class DriveController:
    """One drive controller. step() once per frame; reset() clears a latched trip."""

    def __init__(self, settings: Settings):
        self.settings = settings
        g = settings.__getitem__
        self._mode = ARMATURE_MODES[g("drive.armature_mode")]
        self._dual = g("drive.dual_bridge")
        self._vll_nom = g("drive.mains_voltage_V")
        self._f_mains = g("drive.mains_frequency_Hz")
        self._use_meas = g("drive.use_measured_mains")
        self._series = g("motor.connection") == "series"
        # a shunt field across the armature: the controller cannot set it, only judge it
        self._field_across = g("motor.connection") in ("shunt", "compound")
        self._v_start = g("voltage_start.enabled")
        self._v_ramp = g("voltage_start.ramp_V_per_s")
        self._v_ilim = g("voltage_start.current_limit_A") or g("speed_loop.current_limit_motoring_A")
        self._v_rated = g("motor.rated_voltage_V")
        self._i_rated = g("motor.rated_current_A")
        self._n_base = g("motor.base_speed_rpm")
        self._n_top = g("motor.top_speed_rpm")
        self._ra = g("motor.ra_ohm")
        # EMF per rpm at rated flux, from the nameplate
        self._kphi_V_per_rpm = (g("motor.rated_voltage_V") - self._ra * self._i_rated) / self._n_base
        self._mag_if = tuple(g("motor.magnetisation_if_pu"))
        self._mag_phi = tuple(g("motor.magnetisation_phi_pu"))
        self._kt_Nm_per_A = self._kphi_V_per_rpm / RPM_TO_RAD_S  # torque per ampere at rated flux
        self._j_ff = g("speed_loop.accel_feedforward_kgm2")
        self._tacho_k = g("tacho.volts_per_rpm")
        self._tau_tacho = g("tacho.filter_s")
        self._tau_emf = g("emf.filter_s")
        self._accel = g("ramp.accel_rpm_per_s")
        self._decel = g("ramp.decel_rpm_per_s")
        self._stop_decel = g("ramp.stop_decel_rpm_per_s")
        self._quick_decel = g("ramp.quick_stop_decel_rpm_per_s") or self._stop_decel
        self._rounding = g("ramp.rounding_s")
        self._i_rise = g("current_loop.reference_rise_A_per_s")
        # operator inputs that reach the controller as CONTROL messages, not in every feedback;
        # they persist through reset() (they are the operator's, not the controller's state)
        self._economy_on = True
        self._quick_stop = False
        self._reverse = g("speed_loop.reverse_allowed")
        self._lim_mot = g("speed_loop.current_limit_motoring_A")
        self._lim_reg = g("speed_loop.current_limit_regenerating_A")
        self._taper_start = g("speed_loop.taper_start_rpm")
        self._taper_end = g("speed_loop.taper_end_pu")
        self._min_flux_speed = g("speed_loop.min_flux_pu")
        self._emf_ff = g("current_loop.emf_feedforward")
        self._a_min = g("current_loop.alpha_min_deg")
        self._a_max = g("current_loop.alpha_max_deg")
        self._dcm_on = g("current_loop.dcm_adaptive")
        self._dcm_gain = g("current_loop.dcm_gain_factor")
        self._release_rate = g("current_loop.release_rate_deg_per_s")
        self._field_mode = FIELD_MODE_FIRING_ANGLE if g("field.mode") == "firing_angle" else FIELD_MODE_VOLTAGE
        self._if_rated = g("field.rated_current_A")
        self._rf = g("field.rated_voltage_V") / self._if_rated
        self._vac_f = g("field.supply_voltage_V")
        self._vf_max = g("field.voltage_max_V")
        self._if_min = g("field.min_current_A")
        self._if_economy = g("field.economy_fraction") * self._if_rated
        self._af_min = g("field.alpha_min_deg")
        self._af_max = g("field.alpha_max_deg")
        self._weakening = g("field.weakening") and not self._series and not self._field_across
        self._emf_set = g("field.emf_setpoint_V")
        self._run_pulse = g("start_stop.run_input") == "pulse"
        self._release_delay = g("start_stop.pulse_release_delay_s")
        self._zero_speed = g("start_stop.zero_speed_rpm")
        self._zero_i = g("start_stop.zero_current_A")
        self._est_frac = g("start_stop.field_establish_fraction")
        self._field_timeout = g("start_stop.field_establish_timeout_s")
        self._oc_thr = g("protection.overcurrent.threshold_A")
        self._ol_irated = g("protection.overload.rated_current_A")
        self._ol_tau = g("protection.overload.time_constant_s")
        self._ol_level = g("protection.overload.trip_level_pu")
        self._os_thr = g("protection.overspeed.threshold_rpm")
        self._fl_frac = g("protection.field_loss.fraction")
        self._tl_thr = g("protection.tacho_loss.threshold_rpm")
        self._tl_min_flux = g("protection.tacho_loss.min_flux_pu")
        self._ov_thr = g("protection.overvoltage.threshold_V")
        self._ml_thr = g("protection.mains_loss.threshold_V")
        self._ms_min_adv = g("protection.mains_sync.min_advance_deg")
        self._suppress_timeout = g("trip.suppress_timeout_s")
        self._cl_timeout_us = g("protection.comms_loss.timeout_s") * 1e6

        self._p_oc = Persist(g("protection.overcurrent.delay_s"))
        self._p_ol = Persist(g("protection.overload.delay_s"))
        self._p_os = Persist(g("protection.overspeed.delay_s"))
        self._p_fl = Persist(g("protection.field_loss.delay_s"))
        self._p_tl = Persist(g("protection.tacho_loss.delay_s"))
        self._p_ov = Persist(g("protection.overvoltage.delay_s"))
        self._p_ml = Persist(g("protection.mains_loss.delay_s"))
        self._p_ms = Persist(g("protection.mains_sync.delay_s"))
        self._p_ct = Persist(g("protection.contactor.timeout_s"))
        self._persists = (self._p_oc, self._p_ol, self._p_os, self._p_fl, self._p_tl,
                          self._p_ov, self._p_ml, self._p_ms, self._p_ct)

        # the boundary of continuous conduction at the nominal mains, every 5 deg of alpha
        _, self._icrit_tab = firing.critical_current_table(self._vll_nom, self._f_mains,
                                                           g("motor.la_H"), 5.0)

        self._v_top_pu = math.cos(math.radians(self._a_min))
        self._ramp = Ramp()
        self._speed_pi = PI(g("speed_loop.kp_A_per_rpm"), g("speed_loop.ti_s"))
        self._cur_pi = PI(g("current_loop.kp_V_per_A"), g("current_loop.ti_s"))
        self._field_pi = PI(g("field.kp_V_per_A"), g("field.ti_s"))
        self._emf_pi = PI(g("field.emf_kp_A_per_V"), g("field.emf_ti_s"))
        self._co = Changeover(self._dual, g("changeover.zero_current_A"),
                              g("changeover.dead_time_s"), g("changeover.hysteresis_A"),
                              g("changeover.dwell_s"))
        self.signals = ControllerSignals(self)
        self._dt_cache = (-1.0, 0.0, 0.0, 0.0)
        self._await_run_release = False
        self.reset()
        self._await_run_release = False  # a fresh controller may start on a held run input

    # ------------------------------------------------------------------------------------------
    def set_field_economy(self, on: bool) -> None:
        """The operator's field economy input: on (the default), the field falls to
        field.economy_fraction of rated while stopped; off, it is held at rated (ready for a
        start without waiting for the field)."""
        self._economy_on = bool(on)

    def set_quick_stop(self, on: bool) -> None:
        """The operator's quick-stop input: while on, the drive stops (as op_stop) at
        ramp.quick_stop_decel_rpm_per_s and does not restart; off releases it."""
        self._quick_stop = bool(on)

    def reset(self) -> None:
        """Clear the latched trip and every internal state. A held run input does not restart
        the drive: after reset the run input must be seen off before a new start."""
        self._t_s = 0.0
        self._seq = 0
        self._state = STOPPED
        self._state_timer_s = 0.0
        self._run_latch = False
        self._prev_op_run = 0
        self._await_run_release = True
        self._n_rpm = 0.0
        self._n_init = False
        self._emf_V = 0.0
        self._phi_pu = 0.0
        self._theta_pu = 0.0
        self._i_ref = 0.0
        self._v_ref = 0.0
        self._v_cmd = 0.0
        self._alpha_deg = self._a_max
        self._alpha_floor = self._a_max
        self._floor_limited = False
        self._i_b_prev = 0.0  # bridge-relative current reference of the last frame (rise limit)
        self._rise_limited = False
        self._dcm = False
        self._if_ref = 0.0
        self._vf_ref = 0.0
        self._contactor = 0
        self._bridge_select = BRIDGE_BLOCKED
        self._field_established = False
        self._closed_seen = False
        self._release_timer_s = 0.0
        self._at_rest = False  # a stop has reached zero speed: current to zero, no speed loop
        self._prev_mains_deg = -1.0
        self._last_fb_us = -1  # model time of the last feedback, -1 none since reset
        self._watchdog_seen = True  # a latch already on at reset is not a new one: trip on its rising edge
        self._trip_code = 0
        self._trip_time_s = 0.0
        self._trip_model_time_us = 0
        self._trip_detail = 0.0
        self._report_pending = False
        self._suppressing = False
        self._ramp.reset()
        self._speed_pi.reset()
        self._cur_pi.reset()
        self._field_pi.reset()
        self._emf_pi.reset()
        self._co.reset()
        for p in self._persists:
            p.reset()

    # ------------------------------------------------------------------------------------------
    @property
    def tripped(self) -> bool:
        return self._state == TRIPPED

    @property
    def first_trip(self) -> tuple[TripCode, float, int, float] | None:
        """(code, controller time s, model time us, measured value) of the latched trip."""
        if self._state != TRIPPED:
            return None
        return (TripCode(self._trip_code), self._trip_time_s, self._trip_model_time_us,
                self._trip_detail)

    def take_trip_report(self) -> TripReport | None:
        """The TripReport of a new trip, once; None otherwise."""
        if not self._report_pending:
            return None
        self._report_pending = False
        return TripReport(trip_code=self._trip_code,
                          controller_time_us=int(round(self._trip_time_s * 1e6)),
                          detail=self._trip_detail)

    def trip(self, code: int, detail: float = 0.0, model_time_us: int = 0) -> None:
        """Latch a trip (first one wins); also used for an external trip request."""
        if self._state == TRIPPED:
            return
        self._trip_code = int(code)
        self._trip_time_s = self._t_s
        self._trip_model_time_us = model_time_us
        self._trip_detail = detail
        self._report_pending = True
        # pulses already released: phase back to the inversion end before blocking, so a
        # bridge in inversion does not lose commutation when its pulses stop under current
        self._suppressing = self._bridge_select != BRIDGE_BLOCKED
        self._state = TRIPPED
        self._state_timer_s = 0.0
        self._run_latch = False

    # ------------------------------------------------------------------------------------------
    def _dt_factors(self, dt_s: float):
        c = self._dt_cache
        if c[0] != dt_s:
            c = (dt_s, lowpass_factor(dt_s, self._tau_tacho), lowpass_factor(dt_s, self._tau_emf),
                 1.0 - math.exp(-dt_s / self._ol_tau))
            self._dt_cache = c
        return c

    def step(self, fb: Feedback, dt_s: float) -> Command:
        _, k_tacho, k_emf, k_therm = self._dt_factors(dt_s)
        self._t_s += dt_s
        ia = fb.armature_current_A
        va = fb.armature_voltage_V
        i_f = fb.field_current_A

        # ---- measurements ---------------------------------------------------------------------
        n_raw = fb.tacho_voltage_V / self._tacho_k
        if self._n_init:
            n = self._n_rpm + k_tacho * (n_raw - self._n_rpm)
        else:
            n = n_raw
            self._n_init = True
        self._n_rpm = n
        emf = self._emf_V + k_emf * (va - self._ra * ia - self._emf_V)
        self._emf_V = emf
        if self._series:
            phi = interp(abs(ia) / self._i_rated, self._mag_if, self._mag_phi)
        else:
            phi = interp(i_f / self._if_rated, self._mag_if, self._mag_phi)
        self._phi_pu = phi
        x = ia / self._ol_irated
        self._theta_pu += k_therm * (x * x - self._theta_pu)
        vll = fb.mains_voltage_V if self._use_meas and fb.mains_voltage_V > 0.5 * self._vll_nom \
            else self._vll_nom

        # ---- operator -------------------------------------------------------------------------
        op_run = fb.op_run
        if self._await_run_release:
            if not op_run:
                self._await_run_release = False
            op_run = 0
        if self._run_pulse:
            if op_run and not self._prev_op_run:
                self._run_latch = True
            if fb.op_stop:
                self._run_latch = False
            run = self._run_latch
        else:
            run = bool(op_run) and not fb.op_stop
        if self._quick_stop:
            run = False
            self._run_latch = False
        self._prev_op_run = op_run

        state = self._state
        # time in the present state; a state entered in this frame starts at 0
        self._state_timer_s += dt_s
        # ---- protections ----------------------------------------------------------------------
        mt = fb.model_time_us
        gap_us = (mt - self._last_fb_us) & 0xFFFFFFFF if self._last_fb_us >= 0 else 0
        self._last_fb_us = mt
        watchdog = bool(fb.host_status & HOST_WATCHDOG_TRIPPED)
        watchdog_new = watchdog and not self._watchdog_seen
        self._watchdog_seen = watchdog
        if state != TRIPPED and ((self._cl_timeout_us > 0.0 and gap_us > self._cl_timeout_us) or watchdog_new):
            self.trip(TripCode.COMMS_LOSS, gap_us * 1e-3, mt)
            state = self._state
        if state != TRIPPED:
            self._protect(fb, dt_s, ia, va, i_f, n_raw, n, emf, phi, state)
            state = self._state

        # ---- start and stop -------------------------------------------------------------------
        released = False
        if state == STOPPED:
            self._contactor = 0
            if run:
                state = CLOSING
                self._state_timer_s = 0.0
                self._field_established = False
                self._contactor = 1
        elif state == CLOSING:
            self._contactor = 1
            if not run:
                state = STOPPED
                self._contactor = 0
            else:
                if not self._field_established:
                    if self._series or self._field_across or i_f >= self._est_frac * self._if_rated:
                        self._field_established = True
                    elif self._state_timer_s + 1e-9 >= self._field_timeout:
                        self.trip(TripCode.FIELD_LOSS, i_f, fb.model_time_us)
                        state = TRIPPED
            if state == CLOSING:
                if fb.contactor_closed:
                    if self._closed_seen:
                        self._release_timer_s += dt_s
                    else:
                        self._closed_seen = True
                        self._release_timer_s = 0.0
                    if self._field_established and self._release_timer_s + 1e-9 >= self._release_delay:
                        state = RUNNING
                        self._ramp.reset(n)  # flying start: the ramp begins at the actual speed
                        self._speed_pi.reset()
                        self._cur_pi.reset()
                        self._co.start(0.0)
                        self._alpha_floor = self._a_max
                        self._i_b_prev = 0.0
                        released = True
                else:
                    self._closed_seen = False
        elif state == RUNNING:
            released = True
            if not run:
                state = STOPPING
        elif state == STOPPING:
            released = True
            if run:
                state = RUNNING
        elif state == OPENING:
            state = STOPPED
            self._contactor = 0
        if state != CLOSING:
            self._closed_seen = False
            self._release_timer_s = 0.0

        # ---- speed loop -----------------------------------------------------------------------
        if state != STOPPING:
            self._at_rest = False
        co = self._co
        bridge = BRIDGE_BLOCKED
        if state == TRIPPED:
            i_ref = 0.0
            self._ramp.reset(0.0)
            self._speed_pi.reset()
        elif released:
            if state == RUNNING:
                ref = fb.op_speed_ref_rpm
                if ref > self._n_top:
                    ref = self._n_top
                lo = -self._n_top if self._reverse else 0.0
                if ref < lo:
                    ref = lo
                w_before = self._ramp.out
                w = self._ramp.step(ref, dt_s, self._accel, self._decel, self._rounding)
            else:
                w_before = self._ramp.out
                rate = self._quick_decel if self._quick_stop else self._stop_decel
                w = self._ramp.step(0.0, dt_s, rate, rate, 0.0 if self._quick_stop else self._rounding)
            # acceleration feedforward: the current that accelerates the inertia at the ramp's
            # rate, I = J dw/dt / (k phi), so the integrator holds only the load and nothing is
            # left in it to overshoot with when the ramp ends
            i_acc = self._j_ff * (w - w_before) / dt_s * RPM_TO_RAD_S / self._kt_Nm_per_A
            if state == STOPPING and w == 0.0 and (self._at_rest or -self._zero_speed < n < self._zero_speed):
                # at rest: current to zero, then block pulses, then open the contactor. Latched:
                # a speed reading that leaves the zero-speed band again while the current falls
                # (the shaft rocks on its coupling) must not restart the speed loop, or the
                # drive hunts across zero with a changeover each way (seen: +-400 A at rest)
                self._at_rest = True
                i_ref = 0.0
                self._speed_pi.reset()
                if -self._zero_i < ia < self._zero_i:
                    state = OPENING
            else:
                n_abs = n if n >= 0.0 else -n
                taper = 1.0
                if self._taper_start > 0.0 and n_abs > self._taper_start:
                    taper = 1.0 - (1.0 - self._taper_end) * (n_abs - self._taper_start) / (
                        self._n_top - self._taper_start)
                    if taper < self._taper_end:
                        taper = self._taper_end
                # the direction of travel decides which limit is motoring; around standstill
                # the reference decides, or a single-bridge drive with no regenerating limit
                # is clamped to zero current by a speed reading of -0.001 r/min and never starts
                forward = n > self._zero_speed or (n >= -self._zero_speed and w >= 0.0)
                if forward:
                    hi = self._lim_mot * taper
                    lo = -self._lim_reg * taper
                else:
                    hi = self._lim_reg * taper
                    lo = -self._lim_mot * taper
                if not self._dual:
                    lo = 0.0
                phi_s = phi if phi > self._min_flux_speed else self._min_flux_speed
                if self._series:
                    phi_s = 1.0  # series flux follows the current itself; no scheduling
                # no torque while the bridges change over or a bridge soft-starts: freeze the
                # speed integrator then, or it winds up and the drive hunts across zero current
                hold = co.phase != CONDUCT or self._floor_limited or self._rise_limited
                if self._dual and co.phase == CONDUCT:
                    # a reference the active bridge cannot carry gives no torque: once it has
                    # passed the changeover hysteresis (the changeover dwell is running) the
                    # integrator stops there; winding it further made the new bridge start with
                    # a large reference, and the drive hunted from bridge to bridge at light load
                    i_prev = self._i_ref
                    h = co.hysteresis_A
                    hold = hold or (i_prev < -h if co.bridge != BRIDGE_REVERSE else i_prev > h)
                i_ref = self._speed_pi.step(w - n, dt_s, lo, hi, i_acc / phi_s, 1.0 / phi_s, None, hold)
        else:
            i_ref = 0.0
            self._ramp.reset(0.0)
            self._speed_pi.reset()
        self._i_ref = i_ref

        # ---- changeover and current loop ------------------------------------------------------
        v_do = firing.VDO_PER_VLL * vll
        a_max = self._a_max
        alpha = a_max
        v_b = v_do * math.cos(math.radians(a_max))  # inversion-end voltage
        i_cmd = 0.0
        if state == TRIPPED:
            if self._suppressing:
                bridge = self._bridge_select if self._bridge_select != BRIDGE_BLOCKED else co.bridge
                if (-self._zero_i < ia < self._zero_i) or self._state_timer_s + 1e-9 >= self._suppress_timeout:
                    self._suppressing = False
                    bridge = BRIDGE_BLOCKED
                    self._state_timer_s = 0.0
                self._v_ref = (-v_b if bridge == BRIDGE_REVERSE else v_b)
            self._cur_pi.reset()
            # the contactor opens only in a frame after the pulses were blocked
            if not self._suppressing and self._bridge_select == BRIDGE_BLOCKED:
                self._contactor = 0
        elif released and state != OPENING:
            phase = co.step(i_ref, ia, dt_s)
            bridge = co.select
            s = -1.0 if co.bridge == BRIDGE_REVERSE else 1.0
            if co.switched:
                self._alpha_floor = a_max
                self._cur_pi.reset()
                self._i_b_prev = 0.0
            self._rise_limited = False
            if phase == CONDUCT:
                i_b = s * i_ref
                if i_b < 0.0:
                    i_b = 0.0
                if self._i_rise > 0.0:
                    top = self._i_b_prev + self._i_rise * dt_s
                    if i_b > top:
                        i_b = top
                        self._rise_limited = True
                self._i_b_prev = i_b
                i_cmd = s * i_b
                ia_b = s * ia
                floor = self._alpha_floor
                a_top = floor if floor > self._a_min else self._a_min
                v_hi = v_do * math.cos(math.radians(a_top))
                ff = s * emf + self._ra * i_b if self._emf_ff else 0.0
                gain = 1.0
                if self._dcm_on:
                    # boundary current at the last firing angle (table every 5 deg)
                    a = self._alpha_deg * 0.2
                    k = int(a)
                    if k >= 36:
                        k = 35
                    tab = self._icrit_tab
                    i_crit = tab[k] + (tab[k + 1] - tab[k]) * (a - k)
                    ia_abs = ia_b if ia_b > 0.0 else -ia_b
                    edge = i_crit * 1.1 if self._dcm else i_crit
                    self._dcm = ia_abs < edge
                    if self._dcm and i_crit > 0.0:
                        r = ia_abs / i_crit
                        gain = 1.0 + (self._dcm_gain - 1.0) * (1.0 - (r if r < 1.0 else 1.0))
                v_b = self._cur_pi.step(i_b - ia_b, dt_s, v_b, v_hi, ff, gain, self._v_top_pu * v_do)
                alpha = firing.bridge_alpha_deg(v_b, v_do, a_top, a_max)
                self._floor_limited = floor > self._a_min and alpha <= floor + 1e-6
                fl = self._alpha_floor - self._release_rate * dt_s
                self._alpha_floor = fl if fl > self._a_min else self._a_min
            else:
                self._cur_pi.reset()
                self._i_b_prev = 0.0
            if phase == ZEROING:
                bridge = co.bridge
            if phase == DEAD:
                bridge = BRIDGE_BLOCKED
            self._v_ref = s * v_b
        if self._v_start and released and state in (RUNNING, STOPPING):
            # voltage-ramp start: the armature voltage reference, not the speed loop, runs the
            # machine; the current only holds the ramp back
            ref = fb.op_speed_ref_rpm if state == RUNNING else 0.0
            if ref < 0.0:
                ref = 0.0
            if ref > self._n_base:
                ref = self._n_base
            target = self._v_rated * ref / self._n_base
            v = self._v_cmd
            ia_abs = ia if ia >= 0.0 else -ia
            step = self._v_ramp * dt_s
            if ia_abs > 1.1 * self._v_ilim:
                v -= step
            elif v < target and ia_abs <= self._v_ilim:
                v = v + step if v + step < target else target
            elif v > target:
                v = v - step if v - step > target else target
            if v < 0.0:
                v = 0.0
            self._v_cmd = v
            bridge = BRIDGE_FORWARD
            self._i_ref = 0.0
            alpha = firing.bridge_alpha_deg(v, v_do, self._a_min, a_max)
            self._v_ref = v
            if state == STOPPING and v == 0.0 and -self._zero_i < ia < self._zero_i:
                state = OPENING
        elif not (released and state in (RUNNING, STOPPING)):
            self._v_cmd = 0.0
        if state == OPENING or (not released and state != TRIPPED):
            bridge = BRIDGE_BLOCKED
            self._cur_pi.reset()
        if bridge == BRIDGE_BLOCKED:
            self._v_ref = 0.0
        self._alpha_deg = alpha
        self._bridge_select = bridge
        self._state = state

        # ---- field ----------------------------------------------------------------------------
        if self._series or self._field_across:
            self._if_ref = 0.0
            vf = 0.0
        else:
            energised = state in (CLOSING, RUNNING, STOPPING, OPENING) or (
                state == TRIPPED and self._suppressing)
            if energised:
                if_ref = self._if_rated
                if self._weakening and released:
                    n_abs = n if n >= 0.0 else -n
                    if_ff = self._if_rated
                    if n_abs > 1.0:
                        # flux for the EMF setpoint at this speed, through the magnetisation curve.
                        # Continuous in speed: it leaves full field where k*phi*n reaches the setpoint
                        # (a switch at base speed instead made a step of several amperes for a
                        # change of 1 r/min, and the field rang around base speed)
                        phi_w = self._emf_set / (self._kphi_V_per_rpm * n_abs)
                        if phi_w < 1.0:
                            if_ff = interp(phi_w, self._mag_phi, self._mag_if) * self._if_rated
                    e_abs = emf if emf >= 0.0 else -emf
                    if_ref = self._emf_pi.step(self._emf_set - e_abs, dt_s, self._if_min,
                                               self._if_rated, if_ff)
                else:
                    self._emf_pi.reset()
            else:
                # held at rated while stopped when the operator turned the economy off; after a
                # trip it falls to the economy level either way
                if_ref = self._if_rated if (state == STOPPED and not self._economy_on) else self._if_economy
                self._emf_pi.reset()
            self._if_ref = if_ref
            if if_ref > 0.0:
                vmax = self._vf_max
                vac = self._vac_f * (vll / self._vll_nom)
                if self._field_mode == FIELD_MODE_FIRING_ANGLE:
                    vb = firing.HALF_BRIDGE_K * vac * (1.0 + math.cos(math.radians(self._af_min)))
                    if vb < vmax:
                        vmax = vb
                vf = self._field_pi.step(if_ref - i_f, dt_s, 0.0, vmax, self._rf * if_ref)
            else:
                self._field_pi.reset()
                vac = self._vac_f
                vf = 0.0
        self._vf_ref = vf
        if self._field_mode == FIELD_MODE_FIRING_ANGLE:
            if self._series or self._field_across or vf <= 0.0:
                field_cmd = self._af_max
            else:
                field_cmd = firing.half_bridge_alpha_deg(vf, vac, self._af_min, self._af_max)
        else:
            field_cmd = vf

        # ---- command --------------------------------------------------------------------------
        mode = self._mode
        if mode == MODE_FIRING_ANGLE:
            arm = alpha
        elif mode == MODE_VOLTAGE:
            arm = self._v_ref
        else:
            arm = i_cmd if bridge != BRIDGE_BLOCKED else 0.0
        self._seq = (self._seq + 1) & 0xFFFF
        tripped = state == TRIPPED
        return Command(self._seq, mode, bridge, arm, self._field_mode, field_cmd,
                       self._contactor, 1 if tripped else 0, self._trip_code)

    # ------------------------------------------------------------------------------------------
    def _protect(self, fb, dt_s, ia, va, i_f, n_raw, n, emf, phi, state) -> None:
        mt = fb.model_time_us
        ia_abs = ia if ia >= 0.0 else -ia
        if self._p_oc.update(ia_abs > self._oc_thr, dt_s):
            return self.trip(TripCode.OVERCURRENT, ia, mt)
        if self._p_ol.update(self._theta_pu > self._ol_level, dt_s):
            return self.trip(TripCode.OVERLOAD, self._theta_pu, mt)
        n_abs = n_raw if n_raw >= 0.0 else -n_raw
        if self._p_os.update(n_abs > self._os_thr, dt_s):
            return self.trip(TripCode.OVERSPEED, n_raw, mt)
        va_abs = va if va >= 0.0 else -va
        if self._p_ov.update(va_abs > self._ov_thr, dt_s):
            return self.trip(TripCode.OVERVOLTAGE, va, mt)
        # field loss: only once the field has been established after energising (the start
        # itself is guarded by the establish timeout in the sequencer)
        if self._field_across:
            # the field the armature voltage should drive through the field circuit
            va_abs = va if va >= 0.0 else -va
            fl = (state in (RUNNING, STOPPING) and va_abs > 0.3 * self._v_rated
                  and i_f < self._fl_frac * self._if_rated * va_abs / self._v_rated)
        else:
            fl = (not self._series and self._field_established and state in (CLOSING, RUNNING, STOPPING)
                  and i_f < self._fl_frac * self._if_ref)
        if self._p_fl.update(fl, dt_s):
            return self.trip(TripCode.FIELD_LOSS, i_f, mt)
        # tacho loss: the EMF estimate as a second speed measurement, while pulses run
        tl = False
        n_emf = 0.0
        if (state == RUNNING or state == STOPPING) and phi > self._tl_min_flux:
            n_emf = emf / (self._kphi_V_per_rpm * phi)
            d = n_emf - n
            tl = d > self._tl_thr or d < -self._tl_thr
        if self._p_tl.update(tl, dt_s):
            return self.trip(TripCode.TACHO_LOSS, n_emf - n, mt)
        if self._contactor:
            if self._p_ml.update(fb.mains_voltage_V < self._ml_thr, dt_s):
                return self.trip(TripCode.MAINS_LOSS, fb.mains_voltage_V, mt)
            ang = fb.mains_angle_deg
            stuck = False
            if self._prev_mains_deg >= 0.0:
                expected = (360.0 * self._f_mains * dt_s) % 360.0
                m = 2.0 * self._ms_min_adv
                if m < expected < 360.0 - m:  # not aliased: a healthy angle must move
                    d = (ang - self._prev_mains_deg) % 360.0
                    stuck = d < self._ms_min_adv or d > 360.0 - self._ms_min_adv
            self._prev_mains_deg = ang
            if self._p_ms.update(stuck, dt_s):
                return self.trip(TripCode.MAINS_SYNC, ang, mt)
        else:
            self._p_ml.reset()
            self._p_ms.reset()
            self._prev_mains_deg = -1.0
        # contactor feedback must follow the command sent in the previous frame
        if self._p_ct.update(bool(fb.contactor_closed) != bool(self._contactor), dt_s):
            return self.trip(TripCode.CONTACTOR, self._p_ct.elapsed_s, mt)
        return None
