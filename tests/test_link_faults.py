"""The link fault injector against the host: every injected error is detected and counted
under its class, and none reaches the model.

Error classes as IEC 61784-3 and EN 50159 list them for a black channel (corruption,
repetition, incorrect sequence, loss, delay, insertion, masquerade, addressing), plus
truncation and garbage bursts (host/link/faults.py). The emulated controller runs in a
thread behind a FaultyLink that damages its COMMAND frames at 10 %; the host runs lockstep.
Checks: for each class the receiver counters of that class (faults.DETECTED_BY) add up to at
least the number injected; no command is refused (nothing damaged slipped through as a valid
but wrong command); every frame the model ran used a command the controller really sent,
with that sequence number's values. Waits are bounded; no timing is asserted.
"""

from __future__ import annotations

import os
import threading

import pytest

from conftest import make_plant
from host import signals as sig
from host.link import HostSession, VirtualCable
from host.link.faults import CLASSES, DETECTED_BY, FaultyLink
from host.loop import R, HostLoop

from test_closed_loop_lockstep import MOTORS, timeline_for

pytestmark = pytest.mark.skipif(os.name != "posix", reason="virtual cables need pseudo-terminals")

N_FRAMES = 160
CLEAN_TAIL = 20  # the last frames run without faults, so a loss or a delay at the end is seen too


def _run(classes, rate, seed, max_error_rate=0.5, min_frames=100):
    from host.controller.process import run_controller

    motor = MOTORS["pinch_roll"]
    plant = make_plant(motor.machine, motor.converter)
    cable = VirtualCable()
    host_link = cable.host_link()
    faulty = FaultyLink(cable.controller_link(), classes, rate=rate, seed=seed)
    period = int(round(plant.derived["frame_period_us"]))
    session = HostSession(host_link, encoding="fixed", frame_period_us=period)
    loop = HostLoop(plant, session, period, watchdog_periods=50, max_error_rate=max_error_rate,
                    error_rate_min_frames=min_frames)
    loop.hooks.append(timeline_for(plant, motor))
    sent = {}
    result = {}

    def log(fb, cmd, ctrl):
        sent[cmd.seq] = (cmd.mode, cmd.bridge_select, cmd.armature_cmd, cmd.field_cmd, cmd.contactor)

    def controller():
        try:
            result["s"] = run_controller(faulty, motor.settings_path, handshake_timeout_s=30.0,
                                         idle_timeout_s=30.0, on_frame=log)
        except Exception as err:
            result["e"] = err

    th = threading.Thread(target=controller, daemon=True)
    th.start()

    def tail(lp):
        if lp.stats.frames >= N_FRAMES - CLEAN_TAIL:
            faulty.rate = 0.0

    try:
        session.handshake(timeout_s=30.0)
        loop.run_lockstep(N_FRAMES, on_frame=tail, command_timeout_s=0.05)
        session.send_control(sig.CTRL_BYE)
        th.join(timeout=30.0)
    finally:
        host_link.close()
        faulty.close()
    assert not th.is_alive() and "e" not in result, result
    return loop, faulty, sent


@pytest.mark.parametrize("cls", CLASSES)
def test_each_injected_error_class_is_detected_and_never_reaches_the_model(kernel, cls):
    loop, faulty, sent = _run((cls,), rate=0.1, seed=CLASSES.index(cls) + 11)
    counts = loop.link_error_counts()
    counts["seq_lost"] = loop.session.rx.lost  # frames lost, not an error class of its own
    injected = faulty.injected[cls]
    assert injected > 0, "the generator injected nothing: raise the rate or change the seed"
    detected = sum(counts[k] for k in DETECTED_BY[cls])
    assert detected >= injected, (cls, injected, counts)
    assert session_refusals(counts) == 0, counts
    rows = loop.rows()
    for r in rows:
        seq = int(r[R["cmd_seq"]])
        if int(r[R["link_ok"]]) == 0 or seq not in sent:
            continue
        mode, bridge, arm, fld, _cont = sent[seq]
        assert (int(r[R["cmd_mode"]]), int(r[R["bridge_select"]])) == (mode, bridge)
        assert r[R["armature_cmd"]] == pytest.approx(arm, abs=0.006)
        assert r[R["field_cmd"]] == pytest.approx(fld, abs=0.006)
    applied = [int(s) for s in rows[:, R["cmd_seq"]]]
    assert all(b >= a for a, b in zip(applied, applied[1:])), "an older command overrode a newer one"
    # the record's running total agrees with the counters
    assert rows[-1, R["link_errors"]] == sum(v for k, v in counts.items()
                                             if not k.startswith("refused_") and k != "seq_lost")


def session_refusals(counts):
    return sum(v for k, v in counts.items() if k.startswith("refused_"))


def test_error_rate_supervisor_marks_the_run_invalid(kernel):
    loop, faulty, _ = _run(("corrupt", "loss"), rate=0.2, seed=5, max_error_rate=0.02, min_frames=40)
    assert loop.stats.run_invalid, loop.stats
    assert any("run invalid" in e[2] for e in loop.events)
    from host.runner import link_health

    assert "RUN INVALID" in link_health(loop)


def test_a_clean_link_stays_valid(kernel):
    loop, faulty, _ = _run(CLASSES, rate=0.0, seed=1, max_error_rate=0.0001, min_frames=10)
    assert not loop.stats.run_invalid
    assert sum(faulty.injected.values()) == 0
    assert sum(loop.link_error_counts().values()) == 0


def test_fault_proxy_between_controller_and_host(kernel):
    """The proxy form: host <-> cable A <-> FaultProxy <-> cable B <-> controller."""
    from host.controller.process import run_controller
    from host.link.faults import FaultProxy

    motor = MOTORS["pinch_roll"]
    plant = make_plant(motor.machine, motor.converter)
    a, b = VirtualCable(), VirtualCable()
    host_link, proxy_host_end = a.host_link(), a.controller_link()
    proxy_ctl_end, ctl_link = b.host_link(), b.controller_link()
    faulty = FaultyLink(proxy_host_end, ("corrupt", "repeat", "loss"), rate=0.1, seed=3)
    proxy = FaultProxy(proxy_host_end, proxy_ctl_end, faulty)
    stop = threading.Event()
    pump = threading.Thread(target=lambda: [proxy.pump(0.005) for _ in iter(stop.is_set, True)], daemon=True)
    period = int(round(plant.derived["frame_period_us"]))
    session = HostSession(host_link, encoding="fixed", frame_period_us=period)
    loop = HostLoop(plant, session, period, watchdog_periods=50)
    res = {}
    th = threading.Thread(target=lambda: res.update(s=run_controller(ctl_link, motor.settings_path,
                                                                      handshake_timeout_s=30.0, idle_timeout_s=30.0)),
                          daemon=True)
    pump.start()
    th.start()
    try:
        session.handshake(timeout_s=30.0)
        loop.run_lockstep(120, on_frame=lambda lp: setattr(faulty, "rate", 0.0) if lp.stats.frames > 100 else None,
                          command_timeout_s=0.05)
        session.send_control(sig.CTRL_BYE)
        th.join(timeout=30.0)
    finally:
        stop.set()
        pump.join(timeout=10.0)
        for ln in (host_link, proxy_host_end, proxy_ctl_end, ctl_link):
            ln.close()
    assert "s" in res and res["s"]["reason"] == "bye", res
    counts = loop.link_error_counts()
    counts["seq_lost"] = session.rx.lost
    for cls, n in faulty.injected.items():
        assert sum(counts[k] for k in DETECTED_BY[cls]) >= n, (cls, n, counts)
    assert sum(faulty.injected.values()) > 0 and loop.stats.commands > 80
