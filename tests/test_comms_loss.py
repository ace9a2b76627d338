"""The emulated controller's comms-loss protection (trip code 10) and the reset that clears the
host's latched watchdog (docs/protocol.md section 8, docs/controller.md).

Common practice, no source: a drive controller that stops hearing from its feedback source
trips, and after a fault reset it must not restart by itself. Here the controller knows time
only from the feedback (model_time_us), so a silence is measured between two feedback frames;
the host's HOST_WATCHDOG_TRIPPED bit coming on (the host refuses its commands) trips as well.

Checks: the time threshold from both sides (a gap of 40 ms passes, 60 ms trips, detail = the
gap in ms), the watchdog bit's rising edge, no trip from a latch already on at reset; then the
shipped f3_link_drop scenario in process and with the controller as its own process over the
virtual cable: the comms-loss trip when the link returns, the operator's reset clearing the
host's latch (the event says who cleared it), and the stand back at speed.
"""

from __future__ import annotations

import os
from dataclasses import replace

import pytest

from host import signals as sig
from host.controller import TripCode, load_settings
from host.controller.drive import DriveController
from host.shipped import shipped_config

PERIOD_US = 3333


def _controller(**over):
    s = load_settings(shipped_config("controllers/kestrel_f3_stand.toml"))
    return DriveController(s.replace(over) if over else s)


def _fb(t_us, status=0):
    # a stopped drive at standstill: nothing but the comms check can trip it
    return sig.Feedback(model_time_us=t_us, mains_voltage_V=400.0, host_status=status)


def _feed(ctrl, times_us, status=None):
    for k, t in enumerate(times_us):
        ctrl.step(_fb(t, 0 if status is None else status[k]), PERIOD_US * 1e-6)


@pytest.mark.parametrize("gap_ms, trips", [(40.0, False), (49.9, False), (50.1, True), (60.0, True)])
def test_a_silence_longer_than_the_timeout_trips_with_its_length(gap_ms, trips):
    ctrl = _controller()
    t = [k * PERIOD_US for k in range(5)]
    t.append(t[-1] + int(gap_ms * 1000))
    _feed(ctrl, t)
    assert ctrl.tripped == trips
    if trips:
        code, _, model_us, detail = ctrl.first_trip
        assert code == TripCode.COMMS_LOSS and model_us == t[-1]
        assert detail == pytest.approx(gap_ms, abs=1e-3)


def test_timeout_zero_turns_the_time_check_off():
    ctrl = _controller(**{"protection.comms_loss.timeout_s": 0.0})
    _feed(ctrl, [0, PERIOD_US, PERIOD_US + 2_000_000])
    assert not ctrl.tripped


def test_the_host_watchdog_bit_trips_on_its_rising_edge_only():
    wd = sig.HOST_WATCHDOG_TRIPPED
    ctrl = _controller()
    _feed(ctrl, [k * PERIOD_US for k in range(4)], [0, 0, wd, wd])
    assert ctrl.tripped and ctrl.first_trip[0] == TripCode.COMMS_LOSS
    ctrl.reset()
    # the host's latch is still on for a frame or two after the reset: not a new loss
    _feed(ctrl, [k * PERIOD_US for k in range(10, 14)], [wd, wd, 0, 0])
    assert not ctrl.tripped
    _feed(ctrl, [k * PERIOD_US for k in range(14, 16)], [wd, wd])
    assert ctrl.tripped


@pytest.mark.skipif(os.name != "posix", reason="the process path needs pseudo-terminals")
@pytest.mark.parametrize("kind", ["emulated", "process"])
def test_link_drop_trips_and_the_reset_clears_the_host_latch(kernel, kind):
    from host.scenario.load import load_scenario
    from host.scenario.run import run_scenario
    from host.verdict.judge import judge

    scn = load_scenario(shipped_config("scenarios/f3_link_drop.toml"))
    scn = replace(scn, controller_kind=kind)
    rec = run_scenario(scn)
    v = judge(rec.frames, rec.columns, rec.events, rec.meta, scn.expects)
    assert v.passed, v.problems
    texts = [e[2] for e in rec.events]
    assert any("watchdog reaction reset by the controller (CONTROL reset)" in t for t in texts), texts
    trip = [e for e in v.expectations if e.kind == "trip"][0]
    # the controller hears of the silence in the first feedback after the 150 ms drop
    period_ms = rec.meta["frame_period_s"] * 1e3
    assert 150.0 <= trip.measured <= 150.0 + 2 * period_ms, trip.text
