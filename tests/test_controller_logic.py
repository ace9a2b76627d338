"""Start/stop order, protections and dual-bridge changeover of the emulated drive controller,
driven by synthetic Feedback sequences (no plant)."""

from __future__ import annotations

import math
import random

import pytest

from host.controller import DriveController, TripCode, load_settings
from host.shipped import shipped_dir
from host.signals import (
    BRIDGE_BLOCKED,
    BRIDGE_FORWARD,
    BRIDGE_REVERSE,
    MODE_CURRENT,
    MODE_VOLTAGE,
    Feedback,
)

CFG = shipped_dir("controllers")
DT = 1.0 / 300.0
MAX_FRAMES = 20000  # every loop below has this bound (a wait with a timeout)


NO_TACHO_CHECK = {"protection.tacho_loss.threshold_rpm": 1e6}  # isolates other protections


def mill(**changes):
    s = load_settings(CFG / "kestrel_bench_mill.toml")
    return s.replace(changes) if changes else s


class Bench:
    """Synthetic sensors: the contactor follows the command one frame later, mains healthy."""

    def __init__(self, settings, **fb):
        self.s = settings
        self.c = DriveController(settings)
        self.fb = Feedback(field_current_A=settings["field.rated_current_A"],
                           mains_voltage_V=settings["drive.mains_voltage_V"], op_run=1)
        for k, v in fb.items():
            setattr(self.fb, k, v)
        self.contactor_follows = True
        self.cmd = None
        self.frames = 0

    def speed(self, n_rpm):
        """Tacho and armature voltage of a machine at n_rpm with rated flux (consistent
        sensors: the tacho-loss check stays quiet)."""
        self.fb.tacho_voltage_V = n_rpm * self.s["tacho.volts_per_rpm"]
        kphi = (self.s["motor.rated_voltage_V"] - self.s["motor.ra_ohm"] * self.s["motor.rated_current_A"]
                ) / self.s["motor.base_speed_rpm"]
        self.fb.armature_voltage_V = kphi * n_rpm

    def step(self, **fb):
        for k, v in fb.items():
            setattr(self.fb, k, v)
        cmd = self.c.step(self.fb, DT)
        self.frames += 1
        self.fb.mains_angle_deg = (self.fb.mains_angle_deg + 360.0 * 50.0 * DT) % 360.0
        self.fb.model_time_us = int(round(self.frames * DT * 1e6))
        if self.contactor_follows:
            self.fb.contactor_closed = cmd.contactor
        self.cmd = cmd
        return cmd

    def until(self, pred, limit=MAX_FRAMES):
        for _ in range(limit):
            cmd = self.step()
            if pred(cmd):
                return cmd
        raise AssertionError("condition not reached within the frame limit")

    def run_up(self):
        self.until(lambda c: self.c.signals.state == "running")
        return self


def frames_to_trip(bench, limit=MAX_FRAMES):
    """Frames after (and including) the current one until a trip shows in the command."""
    for k in range(limit):
        cmd = bench.step()
        if cmd.trip:
            return k, cmd
    raise AssertionError("no trip within the frame limit")


def expected_frames(delay_s):
    # trip in the frame where the condition has persisted delay_s (Persist: first frame = 0 s)
    return math.ceil(delay_s / DT - 1e-6)


# ---- start and stop----------------------------------------------------------------------------
def test_contactor_closes_before_pulses_and_pulses_wait_for_its_feedback():
    b = Bench(mill())
    b.contactor_follows = False
    cmds = [b.step() for _ in range(60)]
    assert cmds[0].contactor == 1
    assert all(c.bridge_select == BRIDGE_BLOCKED for c in cmds)  # no feedback yet: no pulses
    b.contactor_follows = True
    b.fb.contactor_closed = 1
    first = None
    for k in range(200):
        c = b.step()
        if c.bridge_select != BRIDGE_BLOCKED:
            first = k
            break
    assert first is not None
    # the release delay counts from the first frame the contactor is seen closed
    assert first == expected_frames(b.s["start_stop.pulse_release_delay_s"])
    assert c.contactor == 1


def test_pulses_wait_for_the_field_and_a_weak_field_trips_at_start():
    s = mill(**{"start_stop.field_establish_timeout_s": 0.5})
    b = Bench(s, field_current_A=2.0)
    k, cmd = frames_to_trip(b)
    assert cmd.trip_code == TripCode.FIELD_LOSS
    assert k == expected_frames(0.5)
    assert all(True for _ in ())  # no pulses were released before the trip:
    assert b.c.signals.bridge == BRIDGE_BLOCKED


def test_stop_ramps_down_blocks_pulses_then_opens_contactor_at_zero_current():
    b = Bench(mill()).run_up()
    b.fb.op_speed_ref_rpm = 300.0
    for _ in range(MAX_FRAMES):  # the tacho follows the ramp up to 300 rpm
        b.speed(b.c.signals.speed_ref_ramped_rpm)
        b.step(armature_current_A=400.0)
        if b.c.signals.speed_ref_ramped_rpm == 300.0:
            break
    b.fb.op_run = 0
    # speed feedback follows the ramp exactly; current stays high until the ramp is done
    seen = []
    for _ in range(3000):
        w = b.c.signals.speed_ref_ramped_rpm
        b.speed(w)
        at_rest = w == 0.0
        c = b.step(armature_current_A=0.0 if at_rest and len(seen) > 5 else 400.0)
        seen.append((c.bridge_select, c.contactor, b.fb.armature_current_A))
        if c.contactor == 0:
            break
    assert seen[-1][1] == 0
    # the frame that blocked pulses still had the contactor closed; the next one opened it
    assert seen[-2][0] == BRIDGE_BLOCKED and seen[-2][1] == 1
    assert seen[-3][0] != BRIDGE_BLOCKED
    # pulses blocked only after the current had fallen below the zero-current threshold
    assert abs(seen[-2][2]) < b.s["start_stop.zero_current_A"]
    # the ramp-down took (300 rpm) / (stop decel) within a frame or two
    n_down = sum(1 for x in seen if x[2] == 400.0)
    assert n_down * DT == pytest.approx(300.0 / b.s["ramp.stop_decel_rpm_per_s"], abs=3 * DT)


def test_pulse_run_input_latches_until_stop():
    b = Bench(mill(**{"start_stop.run_input": "pulse"}))
    b.step(op_run=1)
    b.step(op_run=0)
    b.until(lambda c: b.c.signals.state == "running", 200)
    for _ in range(10):
        b.step()
    assert b.c.signals.state == "running"
    b.step(op_stop=1)
    assert b.c.signals.state in ("stopping", "opening")  # at rest: it stops at once
    b.step(op_stop=0)
    for _ in range(10):
        c = b.step()
    assert c.contactor == 0  # the latch stays released after op_stop goes away


def test_no_restart_after_reset_while_run_is_held():
    b = Bench(mill()).run_up()
    b.c.trip(TripCode.OVERSPEED, 0.0)
    b.step()
    b.c.reset()
    for _ in range(30):
        c = b.step(op_run=1)
        assert c.contactor == 0
    b.step(op_run=0)
    b.fb.op_run = 1
    b.until(lambda c: c.contactor == 1, 10)


# ---- protections -------------------------------------------------------------------------------
def test_overcurrent_trips_in_the_same_frame_and_latches():
    b = Bench(mill()).run_up()
    thr = b.s["protection.overcurrent.threshold_A"]
    c = b.step(armature_current_A=thr * 0.99)
    assert not c.trip
    c = b.step(armature_current_A=thr * 1.01)
    assert c.trip == 1 and c.trip_code == TripCode.OVERCURRENT
    for _ in range(50):
        c = b.step(armature_current_A=0.0)
    assert c.trip == 1 and c.contactor == 0 and c.bridge_select == BRIDGE_BLOCKED
    code, t_s, model_us, detail = b.c.first_trip
    assert code == TripCode.OVERCURRENT and detail == pytest.approx(thr * 1.01)
    report = b.c.take_trip_report()
    assert report.trip_code == TripCode.OVERCURRENT and b.c.take_trip_report() is None
    b.c.reset()
    assert not b.step(op_run=0).trip


def test_overcurrent_with_delay_waits_for_it():
    b = Bench(mill(**{"protection.overcurrent.delay_s": 0.01})).run_up()
    b.fb.armature_current_A = 2500.0
    k, cmd = frames_to_trip(b)
    assert k == expected_frames(0.01) and cmd.trip_code == TripCode.OVERCURRENT


def test_overload_trip_time_follows_the_thermal_cold_curve():
    # IEC 60255-149 thermal element, cold start: t = tau * ln(I^2 / (I^2 - (k*IB)^2))
    # (formula from memory); trip level k^2 = 1.1025 (k = 1.05), I = 1.5 IB
    tau = 10.0
    s = mill(**{"protection.overload.time_constant_s": tau})
    b = Bench(s, op_run=0)
    ib = s["protection.overload.rated_current_A"]
    i = 1.5 * ib
    t_expected = tau * math.log(i**2 / (i**2 - 1.1025 * ib**2))
    b.fb.armature_current_A = i
    k, cmd = frames_to_trip(b)
    assert cmd.trip_code == TripCode.OVERLOAD
    assert abs((k + 1) * DT - t_expected) <= DT, ((k + 1) * DT, t_expected)


def test_overload_never_trips_at_rated_current():
    s = mill(**{"protection.overload.time_constant_s": 1.0})
    b = Bench(s, op_run=0, armature_current_A=s["protection.overload.rated_current_A"])
    for _ in range(3000):  # 10 time constants
        assert not b.step().trip
    assert b.c.signals.thermal_pu == pytest.approx(1.0, abs=1e-3)


@pytest.mark.parametrize("delay", [0.02, 0.1])
def test_overspeed_trips_at_its_delay_not_before(delay):
    b = Bench(mill(**{"protection.overspeed.delay_s": delay}, **NO_TACHO_CHECK)).run_up()
    b.speed(b.s["protection.overspeed.threshold_rpm"] * 0.99)
    for _ in range(100):
        assert not b.step(armature_voltage_V=420.0).trip
    b.speed(b.s["protection.overspeed.threshold_rpm"] * 1.01)
    b.fb.armature_voltage_V = 420.0
    k, cmd = frames_to_trip(b)
    assert cmd.trip_code == TripCode.OVERSPEED and k == expected_frames(delay)


def test_overspeed_condition_that_clears_restarts_the_timer():
    b = Bench(mill(**{"protection.overspeed.delay_s": 0.1}, **NO_TACHO_CHECK)).run_up()
    thr = b.s["protection.overspeed.threshold_rpm"]
    for _ in range(5):
        for _ in range(20):  # 20 frames < 30 frames of delay
            b.speed(thr + 10)
            assert not b.step(armature_voltage_V=420.0).trip
        b.speed(thr - 10)
        b.step(armature_voltage_V=420.0)
    assert not b.c.tripped


def test_field_loss_trips_after_its_delay():
    b = Bench(mill()).run_up()
    for _ in range(10):
        b.step()
    ref = b.c.signals.field_current_ref_A
    b.fb.field_current_A = 0.4 * ref
    k, cmd = frames_to_trip(b)
    assert cmd.trip_code == TripCode.FIELD_LOSS
    assert k == expected_frames(b.s["protection.field_loss.delay_s"])


def test_field_above_the_fraction_does_not_trip():
    b = Bench(mill()).run_up()
    b.fb.field_current_A = 0.6 * b.s["field.rated_current_A"]
    for _ in range(600):
        assert not b.step().trip


def test_tacho_loss_trips_when_tacho_disagrees_with_emf():
    s = mill(**{"tacho.filter_s": 0.0, "emf.filter_s": 0.0})
    b = Bench(s).run_up()
    kphi = (440.0 - 0.02 * 1000.0) / 500.0  # V per rpm from the nameplate
    # consistent sensors at 300 rpm: no trip (flux 1 pu at rated field current)
    b.speed(300.0)
    b.fb.op_speed_ref_rpm = 300.0
    for _ in range(200):
        assert not b.step(armature_voltage_V=kphi * 300.0, armature_current_A=0.0).trip
    b.fb.tacho_voltage_V = 0.0  # tacho wire broken
    k, cmd = frames_to_trip(b)
    assert cmd.trip_code == TripCode.TACHO_LOSS
    assert k == expected_frames(s["protection.tacho_loss.delay_s"])
    assert b.c.first_trip[3] == pytest.approx(300.0, rel=1e-6)


def test_armature_overvoltage_trips_after_delay():
    b = Bench(mill()).run_up()
    b.fb.armature_voltage_V = -1.01 * b.s["protection.overvoltage.threshold_V"]
    b.speed(-600.0)  # consistent with the EMF: the tacho check stays quiet
    k, cmd = frames_to_trip(b)
    assert cmd.trip_code == TripCode.OVERVOLTAGE
    assert k == expected_frames(b.s["protection.overvoltage.delay_s"])


def test_mains_loss_trips_while_contactor_commanded():
    b = Bench(mill()).run_up()
    b.fb.mains_voltage_V = 0.9 * b.s["protection.mains_loss.threshold_V"]
    k, cmd = frames_to_trip(b)
    assert cmd.trip_code == TripCode.MAINS_LOSS
    assert k == expected_frames(b.s["protection.mains_loss.delay_s"])


def test_mains_loss_ignored_while_stopped():
    b = Bench(mill(), op_run=0, mains_voltage_V=0.0)
    for _ in range(300):
        assert not b.step().trip


def test_mains_angle_standing_still_trips():
    b = Bench(mill()).run_up()
    for _ in range(100):
        assert not b.step().trip
    frozen = (b.fb.mains_angle_deg - 60.0) % 360.0  # the angle the controller saw last
    k = None
    for j in range(200):
        b.fb.mains_angle_deg = frozen
        c = b.c.step(b.fb, DT)
        if c.trip:
            k = j
            break
    assert c.trip_code == TripCode.MAINS_SYNC
    # the first frozen frame is the first one that did not advance
    assert k == expected_frames(b.s["protection.mains_sync.delay_s"])


def test_contactor_not_following_trips_after_timeout():
    b = Bench(mill())
    b.contactor_follows = False
    b.step()  # commands the contactor closed
    k, cmd = frames_to_trip(b)
    assert cmd.trip_code == TripCode.CONTACTOR
    assert k == expected_frames(b.s["protection.contactor.timeout_s"])


def test_trip_with_current_flowing_phases_back_before_blocking():
    b = Bench(mill()).run_up()
    for _ in range(20):
        b.step(armature_current_A=500.0)
    b.c.trip(TripCode.OVERSPEED, 2000.0)
    cmds = []
    for _ in range(int(0.01 / DT) + 1):
        cmds.append(b.step(armature_current_A=500.0))
    alpha_max = b.s["current_loop.alpha_max_deg"]
    assert all(c.trip for c in cmds)
    assert all(c.bridge_select == BRIDGE_FORWARD and c.armature_cmd == alpha_max and c.contactor
               for c in cmds)
    c = b.step(armature_current_A=0.0)
    assert c.bridge_select == BRIDGE_BLOCKED and c.contactor == 1
    c = b.step(armature_current_A=0.0)
    assert c.bridge_select == BRIDGE_BLOCKED and c.contactor == 0


def test_trip_suppression_gives_up_after_its_timeout():
    b = Bench(mill()).run_up()
    b.c.trip(TripCode.OVERSPEED, 0.0)
    n = 0
    for n in range(1, 100):
        if b.step(armature_current_A=800.0).bridge_select == BRIDGE_BLOCKED:
            break
    assert n == expected_frames(b.s["trip.suppress_timeout_s"])


def test_first_trip_is_kept_when_others_follow():
    b = Bench(mill()).run_up()
    b.step(armature_current_A=5000.0)
    b.speed(5000.0)
    for _ in range(50):
        c = b.step(armature_voltage_V=900.0, mains_voltage_V=0.0)
    assert c.trip_code == TripCode.OVERCURRENT
    assert b.c.first_trip[0] == TripCode.OVERCURRENT
    # model time of the frame whose feedback tripped (the 51st step from the end)
    assert b.c.first_trip[2] == int(round((b.frames - 51) * DT * 1e6))


def test_voltage_and_current_modes_send_their_quantity():
    for mode, expect in (("voltage", MODE_VOLTAGE), ("current", MODE_CURRENT)):
        b = Bench(mill(**{"drive.armature_mode": mode})).run_up()
        b.fb.op_speed_ref_rpm = 300.0
        for _ in range(60):
            c = b.step()
        assert c.mode == expect
        if mode == "voltage":
            assert c.armature_cmd == pytest.approx(b.c.signals.voltage_ref_V)
            assert abs(c.armature_cmd) <= b.c.signals.voltage_ref_V + 1e-9 + 600
        else:
            assert c.armature_cmd == pytest.approx(b.c.signals.current_ref_A)
            assert c.armature_cmd > 0.0


def test_current_limits_motoring_and_regenerating_with_taper():
    s = mill(**{"speed_loop.current_limit_regenerating_A": 800.0}, **NO_TACHO_CHECK)
    b = Bench(s, op_speed_ref_rpm=1200.0).run_up()
    for _ in range(200):
        b.step()
    assert b.c.signals.current_ref_A == pytest.approx(1500.0)  # motoring limit at standstill
    b.speed(1200.0)  # at top speed the taper leaves 0.7 of the limit
    b.fb.armature_voltage_V = 420.0  # weakened field: EMF held at its setpoint
    for _ in range(5):
        b.step(op_speed_ref_rpm=1200.0)
    for _ in range(400):
        b.step(op_speed_ref_rpm=0.0)
    # far above the ramp: full regenerating torque, tapered
    assert b.c.signals.current_ref_A == pytest.approx(-800.0 * 0.7, rel=1e-6)


# ---- dual-bridge changeover --------------------------------------------------------------------
def test_changeover_never_switches_with_current_or_before_dead_time():
    s = mill(**{"changeover.dead_time_s": 0.01})  # 3 frames
    thr = s["changeover.zero_current_A"]
    rng = random.Random(20240607)
    b = Bench(s).run_up()
    history = []  # (bridge_select, |ia| fed with that frame, alpha)
    for k in range(6000):
        # the speed error flips sign now and then: the current reference follows it
        if k % 300 == 0:
            b.speed(rng.choice((-200.0, 200.0)))
        # current that sometimes lingers above the zero threshold
        ia = rng.choice((0.0, 5.0, 15.0, 25.0, 60.0, 300.0)) * (1 if rng.random() < 0.5 else -1)
        c = b.step(armature_current_A=ia)
        history.append((c.bridge_select, abs(ia), c.armature_cmd))
    m = expected_frames(0.01)  # frames of dead time
    switches = 0
    last_bridge = BRIDGE_FORWARD  # the bridge released by run_up()
    for idx, (br, ia_abs, alpha) in enumerate(history):
        if br == BRIDGE_BLOCKED:
            continue
        if br != last_bridge:
            switches += 1
            # the m frames before the switch were blocked, and the current read below the
            # threshold in each of them and in the switching frame itself
            window = history[idx - m: idx + 1]
            assert all(x[0] == BRIDGE_BLOCKED for x in window[:-1]), ("no dead time", idx, window)
            assert all(x[1] < thr for x in window), ("switched while current flowed", idx, window)
            assert alpha == s["current_loop.alpha_max_deg"], "new bridge not started at inversion end"
        last_bridge = br
    assert switches >= 5  # the test did exercise changeovers


def test_changeover_holds_inversion_end_while_current_flows():
    b = Bench(mill()).run_up()
    b.speed(300.0)  # above the zero reference: negative current wanted
    for _ in range(300):
        c = b.step(armature_current_A=400.0)
        assert c.bridge_select == BRIDGE_FORWARD
    assert c.armature_cmd == b.s["current_loop.alpha_max_deg"]
    c = b.step(armature_current_A=0.0)
    assert c.bridge_select == BRIDGE_BLOCKED
    c = b.until(lambda c: c.bridge_select != BRIDGE_BLOCKED, 10)
    assert c.bridge_select == BRIDGE_REVERSE


def test_single_bridge_never_selects_reverse_nor_negative_current():
    b = Bench(mill(**{"drive.dual_bridge": False})).run_up()
    b.speed(300.0)
    for _ in range(300):
        c = b.step(armature_current_A=0.0)
        assert c.bridge_select in (BRIDGE_FORWARD, BRIDGE_BLOCKED)
        assert b.c.signals.current_ref_A >= 0.0


def test_series_hoist_runs_without_field_loop():
    s = load_settings(CFG / "kestrel_bench_hoist.toml")
    b = Bench(s, field_current_A=0.0, op_speed_ref_rpm=500.0).run_up()
    for _ in range(100):
        c = b.step(armature_current_A=100.0)
    assert not c.trip and c.field_cmd == 0.0
    assert c.bridge_select == BRIDGE_FORWARD
