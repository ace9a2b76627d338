"""Closed loop, deliberately wrong controller settings: the drive trips and the trip report
reaches the host's events with its code.

Two mistakes on the coil hoist (its settings file with one line changed):
* a current-loop gain 30 x too high: the current oscillates past the overcurrent threshold
  -> trip code 1 (overcurrent), detail = the armature current that tripped it;
* a tacho constant 1.5 x the real one: the controller reads 2/3 of the speed, drives the motor
  past rated, and the EMF-based speed disagrees with the tacho -> trip code 5 (tacho_loss).
The codes are the controller's published table (docs/controller.md, host.controller.TripCode).

After the trip the controller holds the inversion end, then blocks pulses, then opens the
contactor in a later frame (never both in the same frame). Nothing holds the hook after a
trip in the model (no brake is modelled), so the speed afterwards is not checked.

Owns nothing but tests.
"""

from __future__ import annotations

import os
import re

import numpy as np
import pytest

from host import signals as sig
from host.controller import TripCode, load_settings
from host.controller.protection import TRIP_DETAIL_UNIT
from host.loop import R

from conftest import make_plant
from test_closed_loop_lockstep import COMMAND_TIMEOUT_S, MOTORS, ClosedLoop, timeline_for

pytestmark = pytest.mark.skipif(os.name != "posix", reason="virtual cables need pseudo-terminals")


def _wrong_settings(tmp_path, section, key, value):
    motor = MOTORS["coil_hoist"]
    text = motor.settings_path.read_text()
    pat = re.compile(r"(\[" + re.escape(section) + r"\][^\[]*?\n" + re.escape(key) + r"\s*=\s*)([^\s#]+)", re.S)
    text, n = pat.subn(lambda m: m.group(1) + value, text)
    assert n == 1, f"{section}.{key} not found once"
    path = tmp_path / f"wrong_{key}.toml"
    path.write_text(text)
    load_settings(path)  # still valid settings: the mistake is in the tuning, not the file
    return path


def _run(settings_path, t_end_s=1.5):
    motor = MOTORS["coil_hoist"]
    plant = make_plant(motor.machine, motor.converter)
    with ClosedLoop(plant, settings_path) as cl:
        cl.loop.hooks.append(timeline_for(plant, motor))
        n = int(round(t_end_s / (cl.loop.frame_period_us * 1e-6)))
        cl.loop.run_lockstep(n, command_timeout_s=COMMAND_TIMEOUT_S)
    assert "error" not in cl.result, cl.result.get("error")
    return cl.loop, cl.result["summary"]


def _check_trip(loop, summary, code):
    rows = loop.rows()
    period_s = loop.frame_period_us * 1e-6
    tripped = np.nonzero(rows[:, R["controller_trip"]])[0]
    assert len(tripped), "the wrong settings did not trip"
    k = tripped[0]
    # latched from the trip frame on, with its code
    assert np.all(rows[k:, R["controller_trip"]] == 1) and np.all(rows[k:, R["trip_code"]] == code)
    assert np.all(rows[:k, R["controller_trip"]] == 0)
    # both host events: the command's trip flag and the TripReport frame, with the code
    texts = [e for e in loop.events if e[1] == "trip"]
    name = TripCode(code).name.lower()
    flag = [e for e in texts if e[2] == f"controller tripped, code {code} ({name})"]
    report = [e for e in texts if e[2].startswith(f"trip report: code {code} ({name}), detail ")]
    assert len(flag) == 1 and len(report) == 1, texts
    assert flag[0][0] == pytest.approx(rows[k, R["time_s"]], abs=1e-9)
    assert abs(report[0][0] - rows[k, R["time_s"]]) <= 2 * period_s + 1e-9
    assert len(summary["trips"]) == 1 and summary["trips"][0].trip_code == code
    assert summary["first_trip"][0] == TripCode(code)
    # pulses blocked after the trip, contactor opened only in a later frame than the block
    bridge = rows[k:, R["bridge_select"]]
    contactor = rows[k:, R["contactor_cmd"]]
    assert bridge[-1] == sig.BRIDGE_BLOCKED and contactor[-1] == 0
    first_block = int(np.argmax(bridge == sig.BRIDGE_BLOCKED))
    first_open = int(np.argmax(contactor == 0))
    assert first_open > first_block
    value, unit = report[0][2].split("detail ")[1].split(",")[0].split(" ")
    assert unit == TRIP_DETAIL_UNIT[TripCode(code)]  # the value is printed with its unit
    detail = float(value)
    return k, detail


def test_far_too_high_current_gain_trips_on_overcurrent(kernel, tmp_path):
    path = _wrong_settings(tmp_path, "current_loop", "kp_V_per_A", "25.0")
    loop, summary = _run(path)
    k, detail = _check_trip(loop, summary, TripCode.OVERCURRENT)
    threshold = load_settings(path)["protection.overcurrent.threshold_A"]
    print(f"\novercurrent trip at {loop.rows()[k, R['time_s']]:.3f} s, detail {detail:g} A")
    assert detail > threshold  # the reported current is the one that tripped it
    assert summary["trips"][0].detail == pytest.approx(detail, rel=1e-5)


def test_wrong_tacho_constant_trips_on_tacho_loss(kernel, tmp_path):
    path = _wrong_settings(tmp_path, "tacho", "volts_per_rpm", "0.09")
    loop, summary = _run(path)
    k, detail = _check_trip(loop, summary, TripCode.TACHO_LOSS)
    s = load_settings(path)
    print(f"\ntacho-loss trip at {loop.rows()[k, R['time_s']]:.3f} s, EMF speed - tacho speed {detail:g} rpm")
    assert abs(detail) > s["protection.tacho_loss.threshold_rpm"]
    # the controller believed 2/3 of the real speed and drove the hoist past its rated speed
    rows = loop.rows()
    assert rows[k, R["speed_rpm"]] > loop.plant.machine.values["machine.rated_speed_rpm"]
