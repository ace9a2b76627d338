"""Verdicts: harm checks against hand-computed limits, expectation arithmetic on synthetic records,
and trip timing against a controller with a known trip delay, measured within one frame period.

The synthetic records are built here, row by row, so every expected figure is computed by hand
from the numbers in the test (no run of the model is involved until the timing test).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest

from host.loop import REC_COLUMNS, R
from host.scenario.load import Expect
from host.verdict import harm_checks, judge

PERIOD = 0.01


def _meta(**harm):
    h = {"rated_current_A": 100.0, "base_speed_rpm": 1000.0,
         "commutation_speed_pu": [0.0, 1.0, 2.0], "commutation_current_pu": [2.0, 2.0, 1.0],
         "mechanical_limit_rpm": 2400.0, "temperature_limit_C": 155.0, "insulation_class": "F",
         "overvoltage_V": 528.0, "di_dt_A_per_s": 20000.0, "field_loss_fraction": 0.4,
         "field_loss_current_pu": 0.1, "rated_field_current_A": 10.0, "connection": "separate", "accept": []}
    h.update(harm)
    return {"frame_period_s": PERIOD, "trip_classes": {"1": "overcurrent", "4": "field_loss", "44": "field_loss"},
            "harm": h, "status": "complete"}


def _frames(n=200, **cols):
    f = np.zeros((n, len(REC_COLUMNS)))
    f[:, R["time_s"]] = (np.arange(n) + 1) * PERIOD
    f[:, R["field_current_A"]] = 10.0
    f[:, R["armature_temperature_C"]] = 60.0
    for name, v in cols.items():
        f[:, R[name]] = v
    return f


def _harm(frames, **harm):
    return {h.check: h for h in harm_checks(frames, REC_COLUMNS, _meta(**harm))}


def test_commutation_limit_falls_above_base_speed():
    # 1500 rpm = 1.5 pu: the curve gives 2.0 - 0.5 * 1.0 = 1.5 pu = 150 A (hand interpolation)
    f = _frames(speed_rpm=1500.0, armature_current_A=140.0, armature_current_peak_A=149.0)
    assert not _harm(f)["commutation_limit"].flagged
    f[120:, R["armature_current_peak_A"]] = 151.0
    h = _harm(f)["commutation_limit"]
    assert h.flagged and h.t_s == pytest.approx(1.21) and h.limit == pytest.approx(150.0) and h.value == 151.0
    # the same 151 A below base speed is inside the 200 A limit
    f[:, R["speed_rpm"]] = 900.0
    assert not _harm(f)["commutation_limit"].flagged


def test_overspeed_temperature_overvoltage_against_their_limits():
    f = _frames(speed_rpm=2399.0, terminal_voltage_V=527.0, armature_temperature_C=154.9)
    h = _harm(f)
    assert not (h["overspeed"].flagged or h["armature_overvoltage"].flagged or h["winding_temperature"].flagged)
    f[50, R["speed_rpm"]] = -2401.0  # either direction
    f[60, R["terminal_voltage_V"]] = -529.0
    f[70:, R["armature_temperature_C"]] = 155.2
    h = _harm(f)
    assert h["overspeed"].flagged and h["overspeed"].t_s == pytest.approx(0.51) and h["overspeed"].value == 2401.0
    assert h["armature_overvoltage"].flagged and h["armature_overvoltage"].value == 529.0
    assert h["winding_temperature"].flagged and h["winding_temperature"].t_s == pytest.approx(0.71)
    # IEC 60034-1 / IEC 60085 thermal classes (from memory): B 130 C, F 155 C, H 180 C
    from host.scenario.run import THERMAL_CLASS_C

    assert (THERMAL_CLASS_C["B"], THERMAL_CLASS_C["F"], THERMAL_CLASS_C["H"]) == (130.0, 155.0, 180.0)
    assert not _harm(f, temperature_limit_C=180.0)["winding_temperature"].flagged


def test_field_loss_only_counts_with_the_armature_energised():
    f = _frames(field_current_A=3.9, armature_current_A=9.0)  # < 4 A field, but Ia < 10 A
    assert not _harm(f)["field_loss_energised"].flagged
    f[100:, R["armature_current_A"]] = -11.0
    h = _harm(f)["field_loss_energised"]
    assert h.flagged and h.t_s == pytest.approx(1.01) and h.value == pytest.approx(3.9)
    assert not _harm(f, connection="series")["field_loss_energised"].flagged
    # a shunt field across the armature is judged against the field its voltage drives: at
    # 100 V of 500 V (below 30 %) nothing; at 300 V it should carry 0.4 x 10 x 300/500 = 2.4 A
    f[:, R["terminal_voltage_V"]] = 100.0
    assert not _harm(f, connection="shunt", rated_voltage_V=500.0)["field_loss_energised"].flagged
    f[:, R["terminal_voltage_V"]] = 300.0
    f[:, R["field_current_A"]] = 2.5
    assert not _harm(f, connection="shunt", rated_voltage_V=500.0)["field_loss_energised"].flagged
    f[150:, R["field_current_A"]] = 2.3
    h = _harm(f, connection="shunt", rated_voltage_V=500.0)["field_loss_energised"]
    assert h.flagged and h.t_s == pytest.approx(1.51)


def test_current_rise_rate_is_per_frame_and_counts_rises_only():
    # 20 000 A/s x 0.01 s = 200 A per frame is the limit
    ia = np.zeros(200)
    ia[100] = 199.0
    ia[101] = -10.0  # a fall of 209 A: not a rise of |Ia| beyond 200 A? |Ia| falls 189 A: not harm
    f = _frames(armature_current_A=ia)
    assert not _harm(f)["current_rise_rate"].flagged
    f[150, R["armature_current_A"]] = 201.0
    h = _harm(f)["current_rise_rate"]
    assert h.flagged and h.value == pytest.approx(20100.0) and h.t_s == pytest.approx(1.51)


def test_expectations_on_a_synthetic_record():
    f = _frames(speed_rpm=1000.0, op_speed_ref_rpm=1000.0)
    f[:80, R["speed_rpm"]] = np.linspace(0.0, 990.0, 80)
    # trip flag from row 130 on (time 1.31 s): tripping command took effect at 1.30 s
    f[130:, R["controller_trip"]] = 1
    f[130:, R["trip_code"]] = 44
    f[:140, R["armature_current_A"]] = 500.0  # zero from row 140 (1.41 s): 110 ms after the trip
    events = [(0.0, "timeline", "start: standstill"), (1.2, "timeline", "field_open: fault field_open")]
    ex = [Expect("trip", "t", trip_class="field_loss", after="field_open", within_ms=100.0),
          Expect("trip", "t_late", trip_class="field_loss", after="field_open", within_ms=99.0),
          Expect("trip", "t_wrong", trip_class="overcurrent", after="field_open", within_ms=500.0),
          Expect("no_trip", "nt", from_s=0.0, to_s=1.2), Expect("no_trip", "nt_bad", from_s=0.0, to_s=1.35),
          Expect("settles", "s", signal="speed_rpm", target=1000.0, band=10.5, by_s=0.8),
          Expect("settles", "s_late", signal="speed_rpm", target=1000.0, band=10.5, by_s=0.7),
          Expect("bounds", "b", signal="speed_rpm", min=-1.0, max=1000.0, from_s=0.0, to_s=2.0),
          Expect("bounds", "b_bad", signal="speed_rpm", min=0.5, from_s=0.0, to_s=2.0),
          Expect("current_zero", "cz", within_ms=110.0, below_A=1.0),
          Expect("current_zero", "cz_bad", within_ms=100.0, below_A=1.0)]
    v = judge(f, REC_COLUMNS, events, _meta(), ex)
    res = {e.name: e for e in v.expectations}
    assert res["t"].passed and res["t"].measured == pytest.approx(100.0) and res["t"].margin == pytest.approx(0.0)
    assert not res["t_late"].passed
    assert not res["t_wrong"].passed and "first trip was field_loss" in res["t_wrong"].text
    assert res["nt"].passed and not res["nt_bad"].passed
    # speed ramp rows 0..79 (0.01..0.80 s), 990 at 0.80 s: within 10.5 of 1000 from row 79 (0.80 s) on
    assert res["s"].passed and res["s"].measured == pytest.approx(0.80)
    assert not res["s_late"].passed
    assert res["b"].passed and res["b"].margin == pytest.approx(0.0)
    assert not res["b_bad"].passed and res["b_bad"].measured == 0.0
    assert res["cz"].passed and res["cz"].measured == pytest.approx(110.0)
    assert not res["cz_bad"].passed
    assert not v.passed and len(v.problems) == 6


def test_harm_flag_fails_the_run_unless_accepted_or_expected():
    f = _frames(speed_rpm=2500.0)
    assert not judge(f, REC_COLUMNS, [], _meta(), []).passed
    assert judge(f, REC_COLUMNS, [], _meta(accept=["overspeed"]), []).passed
    assert judge(f, REC_COLUMNS, [], _meta(), [Expect("harm", "h", check="overspeed")]).passed
    assert not judge(_frames(), REC_COLUMNS, [], _meta(), [Expect("harm", "h", check="overspeed")]).passed


# ---------------------------------------------------------------------- timing, in closed loop
class _DelayedTrip:
    """Wraps a DriveController: trips with a given code exactly delay_s of controller-seen model
    time after the feedback first shows the tacho at zero (the tacho_loss fault of the scenario)."""

    def __init__(self, ctrl, delay_s, code):
        self.ctrl, self.delay_s, self.code = ctrl, delay_s, code
        self.seen_us = None
        self.tripped_at_us = None  # model time of the feedback the trip was decided on

    def step(self, fb, dt_s):
        if self.seen_us is None and fb.contactor_closed and abs(fb.tacho_voltage_V) < 1e-9:
            self.seen_us = fb.model_time_us
        if self.seen_us is not None and (fb.model_time_us - self.seen_us) * 1e-6 + 1e-9 >= self.delay_s:
            if self.tripped_at_us is None:
                self.tripped_at_us = fb.model_time_us
            self.ctrl.trip(self.code, 0.0, fb.model_time_us)
        return self.ctrl.step(fb, dt_s)

    def __getattr__(self, name):
        return getattr(self.ctrl, name)


@pytest.mark.parametrize("delay_s", [0.0, 0.05, 0.1234])
def test_trip_timing_is_measured_within_one_frame_period(kernel, monkeypatch, delay_s):
    from pathlib import Path

    from host.controller import drive as drive_mod
    from host.scenario import load_scenario
    from host.scenario.run import run_scenario

    root = Path(__file__).resolve().parents[1]
    scn = load_scenario(root / "configs" / "scenarios" / "f3_tacho_loss.toml")
    scn = replace(scn, duration_s=0.8, expects=[
        Expect("trip", "t", trip_class="field_loss", after="tacho_loss", within_ms=1000.0)])
    real = drive_mod.DriveController
    # a different firmware numbering: the scenario's trip-class table maps its code 44
    scn.trip_classes = {"field_loss": [44]}
    made = []
    monkeypatch.setattr(drive_mod, "DriveController", lambda s: made.append(_DelayedTrip(real(s), delay_s, 44))
                        or made[-1])
    rec = run_scenario(scn)
    v = judge(rec.frames, rec.columns, rec.events, rec.meta, scn.expects)
    res = v.expectations[0]
    assert res.passed, res.text
    period_ms = rec.meta["frame_period_s"] * 1e3
    t_fault = [e[0] for e in rec.events if e[2].startswith("tacho_loss:")][0]
    decided_ms = (made[0].tripped_at_us * 1e-6 - t_fault) * 1e3
    # the verdict dates the trip at the instant the controller decided it, within one frame
    assert abs(res.measured - decided_ms) <= period_ms, (res.measured, decided_ms, period_ms)
    # and the reaction is the delay plus one frame for the fault to reach the feedback, the delay
    # rounded up to whole frames (a controller that runs once a frame cannot do better)
    frames_of_delay = math.ceil(delay_s * 1e3 / period_ms - 1e-6)
    assert res.measured == pytest.approx((1 + frames_of_delay) * period_ms, abs=0.01), (res.measured, period_ms)
