"""Closed loop, link loss: the controller stops answering and the host reacts within the
configured number of frames.

The emulated controller (in a thread on a virtual cable) answers exactly N feedback frames
(run_controller max_frames=N) and then falls silent with its end of the cable still open.
Lockstep frames 1..N get their commands; from frame N+1 on every wait times out
(command_timeout_s short), and the host must log the link-loss event in frame N + W, W =
watchdog_periods - not one frame earlier or later. Reaction "block": pulses blocked, contactor
opened, armature current decays to zero, no thyristor receives another firing pulse (model
output Y_FIRED_MASK). Reaction "hold": the last command stays applied (same sequence number,
same firing angle, bridge and contactor) and the bridge keeps firing.

Owns nothing but tests.
"""

from __future__ import annotations

import os

import numpy as np
import pytest

from host import signals as sig
from host.loop import R
from rtmodel import layout as L

from conftest import make_plant
from test_closed_loop_lockstep import COMMAND_TIMEOUT_S, MOTORS, ClosedLoop, timeline_for

pytestmark = pytest.mark.skipif(os.name != "posix", reason="virtual cables need pseudo-terminals")

SILENT_TIMEOUT_S = 0.02  # lockstep wait per frame once the controller is silent
N_ANSWERED = 450  # 1.5 s at 1/300 s: the pinch roll is accelerating in current limit
WATCHDOG = 7
AFTER = 40  # silent frames run after the loss (enough for the current to decay)


def _run_until_silent(on_link_loss: str):
    motor = MOTORS["pinch_roll"]
    plant = make_plant(motor.machine, motor.converter)
    fired, cur = [], []

    def log(loop):
        fired.append(int(loop.y[L.Y_FIRED_MASK]))
        cur.append((float(loop.y[L.Y_I_LINE_A]), float(loop.y[L.Y_IA_A]), float(loop.y[L.Y_IF_A])))

    with ClosedLoop(plant, motor.settings_path, watchdog_periods=WATCHDOG, on_link_loss=on_link_loss,
                    max_controller_frames=N_ANSWERED) as cl:
        loop = cl.loop
        loop.hooks.append(timeline_for(plant, motor))
        loop.run_lockstep(N_ANSWERED, on_frame=log, command_timeout_s=COMMAND_TIMEOUT_S)
        cl.thread.join(timeout=10.0)  # the controller stops after its N frames
        assert not cl.thread.is_alive()
        assert loop.stats.missed_commands == 0 and loop.stats.link_loss_events == 0
        loop.run_lockstep(WATCHDOG + AFTER, on_frame=log, command_timeout_s=SILENT_TIMEOUT_S)
    assert "error" not in cl.result, cl.result.get("error")
    assert cl.result["summary"]["frames"] == N_ANSWERED
    return loop, np.array(fired), np.array(cur).reshape(-1, 3)


def _check_loss_frame(loop):
    rows = loop.rows()
    period_s = loop.frame_period_us * 1e-6
    assert loop.stats.link_loss_events == 1
    assert loop.stats.missed_commands == WATCHDOG + AFTER
    assert loop.stats.commands == N_ANSWERED
    link_ok = rows[:, R["link_ok"]]
    k_loss = N_ANSWERED + WATCHDOG - 1  # 0-based row of frame N + W
    assert np.all(link_ok[:k_loss] == 1.0), "link reported lost too early"
    assert np.all(link_ok[k_loss:] == 0.0), "link loss not reported in frame N + W"
    losses = [e for e in loop.events if e[1] == "link" and "link loss" in e[2]]
    assert len(losses) == 1
    # the event is stamped with the model time at the start of frame N + W
    assert losses[0][0] == pytest.approx(k_loss * period_s, abs=1e-6)
    assert f"no valid command for {WATCHDOG} frames" in losses[0][2]
    return k_loss, losses[0]


def test_block_blocks_pulses_and_opens_the_contactor(kernel):
    loop, fired, cur = _run_until_silent("block")
    rows = loop.rows()
    k_loss, ev = _check_loss_frame(loop)
    assert "reaction: block" in ev[2]
    # before the loss the drive was firing (last held command, contactor closed)
    assert rows[k_loss - 1, R["bridge_select"]] == sig.BRIDGE_FORWARD
    assert rows[k_loss - 1, R["armature_current_A"]] > 100.0
    assert fired[k_loss - 1] != 0
    # from the loss frame on: pulses blocked, contactor commanded open
    assert np.all(rows[k_loss:, R["bridge_select"]] == sig.BRIDGE_BLOCKED)
    assert np.all(rows[k_loss:, R["contactor_cmd"]] == 0)
    # no thyristor fires after the loss frame; the bridge (line) current has decayed to zero.
    # The pinch roll's shunt field is across the terminals (long shunt): with the contactor
    # open it stays connected across the spinning armature, so the armature carries exactly
    # the field current, reversed (the machine feeds its own field) - KCL at the terminals.
    assert np.all(fired[k_loss:] == 0), fired[k_loss:]
    i_line, i_arm, i_field = cur[:, 0], cur[:, 1], cur[:, 2]
    assert np.max(np.abs(i_line[-10:])) < 1e-6
    assert i_arm[-1] == pytest.approx(-i_field[-1], rel=1e-6, abs=1e-9)
    # the contactor feedback opened after its mechanical delay (host.loop.Sensors: 40 ms)
    assert loop.u[L.U_CONTACTOR] == 0.0
    status = np.bitwise_or.reduce(rows[k_loss:, R["model_status"]].astype(int))
    zero = k_loss + int(np.argmax(np.abs(i_line[k_loss:]) < 1e-6))
    print(f"\nblock: line current {i_line[k_loss - 1]:.1f} A at the loss, zero {zero - k_loss} frames later; "
          f"model flags after the loss: {[n for b, n in L.ST_NAMES.items() if status & b]}")


def test_hold_keeps_the_last_command(kernel):
    loop, fired, cur = _run_until_silent("hold")
    rows = loop.rows()
    k_loss, ev = _check_loss_frame(loop)
    assert "reaction: hold" in ev[2]
    last = rows[N_ANSWERED - 1]
    held = rows[N_ANSWERED:]
    for col in ("cmd_seq", "cmd_mode", "bridge_select", "armature_cmd", "field_cmd", "contactor_cmd"):
        assert np.all(held[:, R[col]] == last[R[col]]), col
    assert last[R["bridge_select"]] == sig.BRIDGE_FORWARD and last[R["contactor_cmd"]] == 1
    # the bridge keeps firing and carrying current at the held firing angle
    assert np.all(fired[N_ANSWERED:] != 0)
    assert np.all(rows[N_ANSWERED:, R["firing_angle_deg"]] == pytest.approx(last[R["armature_cmd"]]))
    assert np.min(cur[-10:, 0]) > 10.0
    assert loop.u[L.U_CONTACTOR] == 1.0


def test_loss_stays_latched_until_a_control_reset(kernel):
    """A controller restarted on the same cable end after a loss (new handshake): its valid
    commands do NOT clear the loss (docs/protocol.md section 8: the reaction latches); pulses
    stay blocked and link_ok 0 until the controller sends CONTROL reset (op 1), after which its
    commands are applied again and acknowledged."""
    from host.controller.process import run_controller
    from host.link import Codec
    import threading

    motor = MOTORS["pinch_roll"]
    plant = make_plant(motor.machine, motor.converter)
    with ClosedLoop(plant, motor.settings_path, watchdog_periods=WATCHDOG, max_controller_frames=60) as cl:
        loop = cl.loop
        loop.hooks.append(timeline_for(plant, motor))
        loop.run_lockstep(60, command_timeout_s=COMMAND_TIMEOUT_S)
        cl.thread.join(timeout=10.0)
        loop.run_lockstep(WATCHDOG + 3, command_timeout_s=SILENT_TIMEOUT_S)
        assert loop.stats.link_loss_events == 1
        # a second controller on the same (still open) end: it needs the host's HELLO
        res = {}

        def again():
            try:
                res["s"] = run_controller(cl.ctrl_link, motor.settings_path, handshake_timeout_s=10.0,
                                          idle_timeout_s=10.0)
            except Exception as err:
                res["e"] = err

        th = threading.Thread(target=again, daemon=True)
        th.start()
        cl.session.handshake(timeout_s=10.0)
        commands_before = loop.stats.commands
        loop.run_lockstep(10, command_timeout_s=COMMAND_TIMEOUT_S)
        latched = loop.rows()[-10:]
        assert loop.stats.commands == commands_before + 10, "the new controller's commands arrived"
        assert np.all(latched[:, R["link_ok"]] == 0.0), "valid commands must not clear the latched reaction"
        assert np.all(latched[:, R["bridge_select"]] == sig.BRIDGE_BLOCKED)
        assert loop.fb.ack_seq == sig.ACK_NONE, "commands received while latched are not applied"
        # the controller resets the reaction; it waits for feedback now, so its end is quiet
        cl.ctrl_link.send_frame(Codec(0).pack_control(sig.ControlMessage(sig.CTRL_RESET), 0xFFFF))
        loop.run_lockstep(10, command_timeout_s=COMMAND_TIMEOUT_S)
        cl.session.send_control(sig.CTRL_BYE)
        th.join(timeout=10.0)
        assert not th.is_alive() and "e" not in res, res
    assert any(e[1] == "link" and "stays latched until a reset" in e[2] for e in loop.events)
    assert any(e[1] == "link" and "reset by the controller" in e[2] for e in loop.events)
    assert loop.stats.watchdog_resets == 1
    assert loop.rows()[-1, R["link_ok"]] == 1.0
    assert loop.fb.ack_seq == int(loop.rows()[-1, R["cmd_seq"]])
