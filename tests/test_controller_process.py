"""The controller process on a real link (pseudo-terminal virtual cable): handshake, the
feedback -> command loop, TripReport, CONTROL reset/run/bye, and the command line's exit codes."""

from __future__ import annotations

import os
import subprocess
import sys
import threading
from pathlib import Path

import pytest

from host import signals as sig
from host.controller import TripCode
from host.controller.process import run_controller
from host.shipped import shipped_config

ROOT = Path(__file__).resolve().parents[1]
SETTINGS = shipped_config("controllers/kestrel_bench_mill.toml")
PERIOD_US = 3333

pytestmark = pytest.mark.skipif(os.name != "posix", reason="virtual cables need pseudo-terminals")


def _host_frames(hs, n, fb, contactor_follows=True, timeout_s=2.0):
    """Send n feedback frames, each answered by one command; returns the commands."""
    cmds = []
    for _ in range(n):
        hs.send_feedback(fb)
        cmd = hs.recv_command(timeout_s)
        assert cmd is not None, "no command within the timeout"
        cmds.append(cmd)
        fb.model_time_us = (fb.model_time_us + PERIOD_US) & 0xFFFFFFFF
        fb.mains_angle_deg = (fb.mains_angle_deg + 360.0 * 50.0 * PERIOD_US * 1e-6) % 360.0
        if contactor_follows:
            fb.contactor_closed = cmd.contactor
    return cmds


def test_controller_in_a_thread_on_a_virtual_cable():
    from host.link import HostSession, VirtualCable

    result = {}
    with VirtualCable() as cable:
        host_link = cable.host_link()
        ctrl_link = cable.controller_link()

        def controller():
            try:
                result["summary"] = run_controller(ctrl_link, SETTINGS, handshake_timeout_s=5.0,
                                                   idle_timeout_s=5.0)
            except Exception as err:  # reported by the main thread
                result["error"] = err

        th = threading.Thread(target=controller, daemon=True)
        th.start()
        with host_link, ctrl_link:
            hs = HostSession(host_link, encoding="float32", frame_period_us=PERIOD_US)
            hs.handshake(timeout_s=5.0)
            fb = sig.Feedback(field_current_A=20.0, mains_voltage_V=415.0, op_run=1,
                              op_speed_ref_rpm=0.0)
            cmds = _host_frames(hs, 40, fb)
            assert cmds[0].contactor == 1 and cmds[0].bridge_select == sig.BRIDGE_BLOCKED
            assert any(c.bridge_select == sig.BRIDGE_FORWARD for c in cmds[-5:])
            # overspeed on the tacho (EMF consistent: flux 1, 0.84 V/rpm)
            fb.tacho_voltage_V = 1400.0 * 0.06
            fb.armature_voltage_V = 450.0
            cmds = _host_frames(hs, 20, fb)
            assert cmds[-1].trip == 1 and cmds[-1].trip_code == TripCode.OVERSPEED
            trips = [e for e in hs.pop_events() if isinstance(e, sig.TripReport)]
            assert len(trips) == 1 and trips[0].trip_code == TripCode.OVERSPEED
            assert trips[0].detail == pytest.approx(1400.0, rel=1e-3)
            # reset with the run input dropped, then run again through a CONTROL message
            fb.tacho_voltage_V = 0.0
            fb.armature_voltage_V = 0.0
            fb.op_run = 0
            hs.send_control(sig.CTRL_RESET)
            cmds = _host_frames(hs, 5, fb)
            assert cmds[-1].trip == 0 and cmds[-1].contactor == 0
            hs.send_control(sig.CTRL_SET_RUN, 1.0)
            cmds = _host_frames(hs, 5, fb)
            assert cmds[-1].contactor == 1
            hs.send_control(sig.CTRL_BYE)
            th.join(timeout=5.0)
            assert not th.is_alive(), "controller did not end after BYE"
    assert "error" not in result, result.get("error")
    s = result["summary"]
    assert s["reason"] == "bye" and s["resets"] == 1 and len(s["trips"]) == 1
    assert s["frames"] == 70


def test_controller_as_a_separate_process():
    from host.link import HostSession, VirtualCable

    env = dict(os.environ, PYTHONPATH=str(ROOT))
    with VirtualCable() as cable:
        host_link = cable.host_link()
        proc = subprocess.Popen(
            [sys.executable, "-m", "host.controller.process", cable.slave_path, str(SETTINGS),
             "--handshake-timeout", "10", "--idle-timeout", "10"],
            env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT)
        try:
            with host_link:
                hs = HostSession(host_link, encoding="fixed", frame_period_us=PERIOD_US)
                hs.handshake(timeout_s=15.0)
                fb = sig.Feedback(field_current_A=20.0, mains_voltage_V=415.0, op_run=1)
                cmds = _host_frames(hs, 30, fb, timeout_s=5.0)
                assert cmds[0].contactor == 1
                assert [c.seq for c in cmds] == list(range(30))
                hs.send_control(sig.CTRL_BYE)
                out, err = proc.communicate(timeout=15.0)
        finally:
            if proc.poll() is None:
                proc.kill()
                proc.communicate(timeout=5.0)
    assert proc.returncode == 0, err
    assert "30 frames" in out and "ended by bye" in out


def test_bad_settings_exit_2_with_one_line(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(SETTINGS.read_text().replace("accel_rpm_per_s = 200.0", "acel_rpm_per_s = 200.0"))
    proc = subprocess.run([sys.executable, "-m", "host.controller.process", "loop://", str(bad)],
                          env=dict(os.environ, PYTHONPATH=str(ROOT)), capture_output=True,
                          text=True, timeout=30, cwd=ROOT)
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1, proc.stderr
    assert lines[0] == (f"error: {bad}: ramp.acel_rpm_per_s: unknown key "
                        "(did you mean 'ramp.accel_rpm_per_s'?)")
