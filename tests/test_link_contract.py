"""The link contract of docs/protocol.md, proved against the host by an independent codec.

tests/spec_codec.py is a controller written from the document alone (it never imports
host.link; COBS from the `cobs` package, CRC-16/IBM-3740 from the `crc` package, the HELLO
table parsed from the document itself). Against the real host loop in lockstep it checks:
interoperation in both encodings, ack_seq (0xFFFF before anything is applied, then the seq
of the command applied), the sensor block of the host HELLO, HOST_LOCKSTEP, refusal and
per-class counting of out-of-range and inapplicable commands (none reaches the model), a
new handshake after a controller reset, the latched watchdog cleared only by CONTROL reset,
and the end of a lockstep run when the controller dies or falls silent. Waits are bounded;
no timing is asserted.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import threading
from pathlib import Path

import numpy as np
import pytest

import spec_codec as spec
from conftest import make_plant
from host import signals as sig
from host.errors import LinkError, LinkTimeout
from host.link import HostSession, AcceptLink, VirtualCable
from host.loop import R, HostLoop

pytestmark = pytest.mark.skipif(os.name != "posix", reason="virtual cables need pseudo-terminals")

ROOT = Path(__file__).resolve().parents[1]


class SpecController(threading.Thread):
    """Answers each FEEDBACK with the next scripted step. Steps: a dict of command fields, or
    ("hello",) to announce a reset with an unasked HELLO, ("control", op), ("silent",)."""

    def __init__(self, fd: int, encoding: int, script: list, timeout_s: float = 20.0):
        super().__init__(daemon=True)
        self.line = spec.SpecLine(fd)
        self.encoding = encoding
        self.script = list(script)
        self.timeout_s = timeout_s
        self.feedbacks: list[dict] = []
        self.hellos: list[dict] = []
        self.sent_seqs: list[int] = []
        self.error = None

    def _handshake(self):
        f = self.line.recv_kind("hello", self.timeout_s)
        assert f is not None, "no host HELLO"
        h = spec.parse_hello(f)
        self.hellos.append(h)
        assert h["table"] == spec.doc_signal_table(h["encoding"]), "the host's table is not the document's"
        self.line.send(spec.pack_hello_controller(self.encoding, h["period_us"]))
        return h

    def run(self):
        try:
            self.line.send_raw(b"\x00")
            self._handshake()
            seq = 0
            while self.script:
                f = self.line.recv(self.timeout_s)
                if f is None:
                    return
                kind = f[0] & 7
                if kind == spec.KIND["hello"]:  # the host started over: answer, numbering restarts
                    h = spec.parse_hello(f)
                    self.hellos.append(h)
                    self.line.send(spec.pack_hello_controller(self.encoding, h["period_us"]))
                    seq = 0
                    continue
                if kind == spec.KIND["control"] and f[3] == sig.CTRL_BYE:
                    return
                if kind != spec.KIND["feedback"]:
                    continue
                self.feedbacks.append(spec.parse_feedback(f, self.encoding))
                step = self.script.pop(0)
                if step == ("silent",):
                    self.script = []
                    return
                if step == ("hello",):
                    self.line.send(spec.pack_hello_controller(self.encoding, self.hellos[-1]["period_us"]))
                    continue
                if isinstance(step, tuple) and step[0] == "control":
                    self.line.send(spec.pack_control(self.encoding, (seq - 1) & 0xFFFF, step[1]))
                    step = step[2] if len(step) > 2 else None
                    if step is None:
                        continue
                c = dict(mode=0, bridge=0, field_mode=1, contactor=0, armature=150.0, field=0.0)
                c.update(step)
                self.line.send(spec.pack_command(self.encoding, seq, **c))
                self.sent_seqs.append(seq)
                seq = (seq + 1) & 0xFFFF
        except Exception as err:  # reported by the test
            self.error = err


def _host(plant, encoding="fixed", watchdog=10):
    cable = VirtualCable()
    host_link = cable.host_link()
    ctrl_fd = cable._slave
    cable._handed.add("controller")
    period = int(round(plant.derived["frame_period_us"]))
    session = HostSession(host_link, encoding=encoding, frame_period_us=period)
    loop = HostLoop(plant, session, period, watchdog_periods=watchdog)
    return cable, host_link, ctrl_fd, session, loop


OK = dict(mode=0, bridge=1, contactor=1, armature=120.0, field=0.0)


@pytest.mark.parametrize("encoding", [0, 1], ids=["fixed", "float32"])
def test_spec_codec_interoperates_ack_sensors_lockstep(kernel, encoding):
    plant = make_plant("kestrel_f3_stand", "kestrel_f3_bridge")
    cable, link, fd, session, loop = _host(plant, "fixed" if encoding == 0 else "float32")
    n = 12
    ctl = SpecController(fd, encoding, [dict(OK, armature=150.0 - k) for k in range(n)])
    ctl.start()
    try:
        session.handshake(timeout_s=20.0)
        loop.run_lockstep(n, command_timeout_s=5.0)
        session.send_control(sig.CTRL_BYE)
        ctl.join(timeout=20.0)
    finally:
        link.close()
        os.close(fd)
    assert ctl.error is None, ctl.error
    fbs = ctl.feedbacks
    assert len(fbs) == n and ctl.sent_seqs == list(range(n))
    # ack_seq: nothing applied before the first command, then the command of the frame before
    assert fbs[0]["ack_seq"] == spec.ACK_NONE
    # the controller saw n feedbacks (0..n-1); feedback k acknowledges command k-1
    for k in range(1, n):
        assert fbs[k]["ack_seq"] == k - 1
    assert loop.fb.ack_seq == n - 1
    # the model ran each command for one frame: model time advances one period per feedback
    period = int(round(plant.derived["frame_period_us"]))
    for a, b in zip(fbs, fbs[1:]):
        assert (b["model_time_us"] - a["model_time_us"]) % 2**32 in (period - 1, period, period + 1)
    assert all(f["host_status"] & spec.HOST_LOCKSTEP for f in fbs[1:])
    rows = loop.rows()
    assert list(rows[:, R["cmd_seq"]].astype(int)) == list(range(n))
    assert list(rows[:, R["armature_cmd"]]) == pytest.approx([150.0 - k for k in range(n)])
    # the sensor block: the machine's tacho constant and encoder resolution
    v = plant.machine.values
    assert ctl.hellos[0]["sensors"] == (round(v["sensors.tacho_V_per_1000rpm"] * 1000), 4 * v["sensors.encoder_ppr"])
    # decoded measurements agree with the host's record within the fixed-point resolution
    for k in range(1, n):
        assert fbs[k]["armature_current_A"] == pytest.approx(rows[k - 1, R["armature_current_A"]], abs=0.006)


@pytest.mark.parametrize("encoding", [0, 1], ids=["fixed", "float32"])
def test_out_of_range_and_inapplicable_commands_are_refused_and_counted(kernel, encoding):
    plant = make_plant("kestrel_f3_stand", "kestrel_f3_bridge")  # one bridge: no reverse group
    cable, link, fd, session, loop = _host(plant, "fixed" if encoding == 0 else "float32")
    script = [OK, OK,
              dict(OK, armature=1e12),  # float32 1e12 deg; fixed point saturates to 21474836.47
              dict(OK, armature=2.1e7),  # a saturated fixed-point value
              dict(OK, mode=2, armature=100.0),  # current mode on a bridge
              dict(OK, bridge=2),  # reverse bridge on a single bridge
              dict(OK, field_mode=1, field=1e9),  # field voltage far beyond any supply
              OK, OK]
    ctl = SpecController(fd, encoding, script)
    ctl.start()
    try:
        session.handshake(timeout_s=20.0)
        loop.run_lockstep(len(script), command_timeout_s=2.0)
        session.send_control(sig.CTRL_BYE)
        ctl.join(timeout=20.0)
    finally:
        link.close()
        os.close(fd)
    assert ctl.error is None, ctl.error
    assert session.refused == {"out_of_range": 3, "mode_not_applicable": 1, "bridge_not_applicable": 1}
    rows = loop.rows()
    # no refused command reached the model: the frames show the last applied command (seq 1)
    assert list(rows[2:7, R["cmd_seq"]].astype(int)) == [1] * 5
    assert np.all(rows[:, R["armature_cmd"]] == 120.0)
    assert np.all(rows[:, R["bridge_select"]] <= 1) and np.all(rows[:, R["cmd_mode"]] == 0)
    assert rows[-1, R["refused_commands"]] == 5
    # the feedback after a refusal says so, and ack_seq stays on the last applied command
    fbs = ctl.feedbacks
    assert fbs[3]["host_status"] & spec.HOST_COMMAND_REFUSED and fbs[3]["ack_seq"] == 1
    assert not fbs[2]["host_status"] & spec.HOST_COMMAND_REFUSED
    text = " ".join(e[2] for e in loop.events)
    for cls in ("refused_out_of_range", "refused_mode_not_applicable", "refused_bridge_not_applicable"):
        assert cls in text
    from host.runner import link_health

    line = link_health(loop)
    assert "commands refused 5" in line and "mode_not_applicable 1" in line


def test_controller_reset_hello_gets_a_new_handshake(kernel):
    plant = make_plant("kestrel_f3_stand", "kestrel_f3_bridge")
    cable, link, fd, session, loop = _host(plant)
    script = [OK] * 4 + [("hello",)] + [OK] * 4
    ctl = SpecController(fd, 0, script)
    ctl.start()
    try:
        session.handshake(timeout_s=20.0)
        loop.run_lockstep(9, command_timeout_s=0.5, handshake_timeout_s=10.0)
        session.send_control(sig.CTRL_BYE)
        ctl.join(timeout=20.0)
    finally:
        link.close()
        os.close(fd)
    assert ctl.error is None, ctl.error
    assert loop.stats.rehandshakes == 1 and len(ctl.hellos) == 2
    assert any("controller restarted: new handshake" in e[2] for e in loop.events)
    # after the new handshake both numberings restart and nothing is acknowledged yet
    after = ctl.feedbacks[5]
    assert after["seq"] == 0 and after["ack_seq"] == spec.ACK_NONE
    assert ctl.feedbacks[6]["ack_seq"] == 0
    assert ctl.sent_seqs == [0, 1, 2, 3, 0, 1, 2, 3]


def test_latched_watchdog_needs_a_control_reset(kernel):
    plant = make_plant("kestrel_f3_stand", "kestrel_f3_bridge")
    cable, link, fd, session, loop = _host(plant, watchdog=3)
    # three frames without a valid command (refused ones count as none) latch the reaction
    bad = dict(OK, armature=1e12)
    script = [OK, OK, bad, bad, bad, OK, OK, ("control", sig.CTRL_RESET, OK), OK, OK]
    ctl = SpecController(fd, 0, script)
    ctl.start()
    try:
        session.handshake(timeout_s=20.0)
        loop.run_lockstep(len(script), command_timeout_s=2.0)
        session.send_control(sig.CTRL_BYE)
        ctl.join(timeout=20.0)
    finally:
        link.close()
        os.close(fd)
    assert ctl.error is None, ctl.error
    rows = loop.rows()
    ok = rows[:, R["link_ok"]]
    assert list(ok) == [1, 1, 1, 1, 0, 0, 0, 1, 1, 1]
    assert list(rows[4:7, R["bridge_select"]]) == [0, 0, 0], "blocked while latched, valid commands or not"
    fbs = ctl.feedbacks
    assert all(f["host_status"] & spec.HOST_WATCHDOG_TRIPPED for f in fbs[5:8])
    assert not fbs[-1]["host_status"] & spec.HOST_WATCHDOG_TRIPPED
    assert loop.stats.watchdog_resets == 1


def test_lockstep_ends_when_the_controller_falls_silent(kernel, tmp_path):
    from host.runner import Timeline, TimelineStep, run_closed_loop

    plant = make_plant("kestrel_f3_stand", "kestrel_f3_bridge")
    cable = VirtualCable()
    link = cable.host_link()
    fd = cable._slave
    cable._handed.add("controller")
    ctl = SpecController(fd, 0, [OK] * 5 + [("silent",)])  # stops answering, keeps its end open
    ctl.start()
    out = tmp_path / "run"
    try:
        with pytest.raises(LinkTimeout, match="no valid command from the controller for 1 s"):
            run_closed_loop(plant, link, encoding="fixed", paced=False, out_dir=out, plot=False,
                            timeline=Timeline([TimelineStep(60.0, "stop")]), command_timeout_s=0.1,
                            peer_timeout_s=1.0, out=open(os.devnull, "w"))
    finally:
        link.close()
        os.close(fd)
    # the record is closed with what ran: 5 commanded frames and the silent ones up to the end
    frames = (out / "frames.csv").read_text().splitlines()
    assert len(frames) - 1 >= 5
    events = (out / "events.csv").read_text()
    assert "dead or disconnected" in events


def test_lockstep_ends_when_the_controller_process_is_killed(kernel):
    plant = make_plant("kestrel_f3_stand", "kestrel_f3_bridge")
    cable = VirtualCable()
    link = cable.host_link(hold_far_end=True)
    period = int(round(plant.derived["frame_period_us"]))
    session = HostSession(link, encoding="fixed", frame_period_us=period)
    loop = HostLoop(plant, session, period)
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    proc = subprocess.Popen([sys.executable, "-m", "host.cli", "controller", "--link", cable.slave_path,
                             "--settings", str(ROOT / "configs/controllers/kestrel_f3_stand.toml"), "--quiet"],
                            env=env, start_new_session=True)
    try:
        session.handshake(timeout_s=60.0)
        link.release_peer_hold()
        loop.run_lockstep(20, command_timeout_s=5.0)
        assert loop.stats.commands == 20
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=30)
        with pytest.raises(LinkError) as info:
            loop.run_lockstep(100000, command_timeout_s=0.5, peer_timeout_s=10.0)
        assert "closed" in str(info.value) or "no valid command" in str(info.value)
        assert loop.stats.frames < 100000
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=30)
        link.close()


def test_controller_reconnecting_on_a_listening_link_gets_a_new_handshake(kernel):
    from host.controller.process import run_controller

    plant = make_plant("kestrel_f3_stand", "kestrel_f3_bridge")
    settings = ROOT / "configs/controllers/kestrel_f3_stand.toml"
    link = AcceptLink("127.0.0.1", 0)
    port = link.address[1]
    period = int(round(plant.derived["frame_period_us"]))
    session = HostSession(link, encoding="fixed", frame_period_us=period)
    loop = HostLoop(plant, session, period, watchdog_periods=1000)
    results = []

    def controller(frames):
        try:
            results.append(run_controller(f"socket://127.0.0.1:{port}", settings, handshake_timeout_s=30.0,
                                          idle_timeout_s=30.0, max_frames=frames))
        except Exception as err:
            results.append(err)

    first = threading.Thread(target=controller, args=(15,), daemon=True)
    first.start()
    try:
        assert link.wait_connected(30.0)
        session.handshake(timeout_s=30.0)
        # the first controller answers 15 frames and disconnects; the second one connects
        second = threading.Thread(target=controller, args=(None,), daemon=True)

        def start_second(lp):
            if lp.stats.frames == 18 and not second.is_alive():
                first.join(timeout=30.0)
                second.start()

        loop.run_lockstep(60, on_frame=start_second, command_timeout_s=0.3, peer_timeout_s=30.0,
                          handshake_timeout_s=30.0)
        session.send_control(sig.CTRL_BYE)
        second.join(timeout=30.0)
    finally:
        link.close()
    assert not [r for r in results if isinstance(r, Exception)], results
    assert loop.stats.rehandshakes == 1
    assert any("controller reconnected: new handshake" in e[2] for e in loop.events)
    assert loop.stats.commands > 15 + 20, "the second controller's commands were applied"


def test_overspeed_in_the_closed_loop_is_flagged_recorded_and_summarised(kernel):
    """A shaft above machine.max_speed_rpm (default 1.2 x rated; common practice, no source:
    the rating plate's maximum speed) sets HOST_OVERSPEED and HOST_MODEL_ALARM in the
    feedback, logs one event and is counted in the summary."""
    from host.runner import Timeline, summary_lines
    from rtmodel import layout as L

    plant = make_plant("kestrel_f3_stand", "kestrel_f3_bridge")
    period = int(round(plant.derived["frame_period_us"]))
    loop = HostLoop(plant, None, period)
    limit = loop.overspeed_rpm
    assert limit == pytest.approx(plant.machine.values["machine.max_speed_rpm"]
                                  or 1.2 * plant.machine.values["machine.rated_speed_rpm"])
    # the shaft spinning freely at 1.5 x the limit (inertia keeps it there over a few frames)
    loop.x[L.X_SPEED_RAD_S] = 1.5 * limit * 2 * np.pi / 60
    for _ in range(3):
        loop._advance(None, loop.clock())
        fb = loop.make_feedback()
        assert fb.host_status & sig.HOST_OVERSPEED and fb.host_status & sig.HOST_MODEL_ALARM
    assert loop.stats.overspeed_frames == 3
    assert len([e for e in loop.events if e[1] == "model" and "overspeed" in e[2]]) == 1
    text = "\n".join(summary_lines(loop, Timeline([]), 1.0))
    assert "overspeed (3 frames above" in text
