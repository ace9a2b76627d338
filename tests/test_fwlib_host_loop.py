"""The C firmware library's example controller closing the loop with the real host loop.

tools/fwlib/example_controller.c is compiled with the system C compiler and run as a
separate process on the slave side of a pseudo-terminal pair; the Python HostLoop runs the
compiled F3 stand model lockstep on the master side. Checks: every frame answered, the C
controller's integer firing law reproduced exactly from the feedback the host sent, and the
model's armature current follows the firing angle it was given.
"""

import os
import shutil
import subprocess

import numpy as np
import pytest

from host.link import HostSession, VirtualCable
from host.signals import CTRL_BYE
from host.loop import R, HostLoop
from host.runner import Timeline, TimelineStep
from rtmodel import layout as L
from tests.conftest import make_plant

FWLIB = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "tools", "fwlib")
IREF_A = 300
KP = 20  # 0.01 deg per A
N_FRAMES = 400


@pytest.fixture(scope="module")
def c_controller(tmp_path_factory):
    cc = shutil.which("cc")
    if cc is None:
        pytest.fail("the system C compiler `cc` is missing")
    out = tmp_path_factory.mktemp("fwhost") / "ctl"
    cmd = [cc, "-std=c99", "-Wall", "-Wextra", "-Werror", "-O2", "-o", str(out),
           os.path.join(FWLIB, "example_controller.c"), os.path.join(FWLIB, "dcrig_link.c")]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    return str(out)


def _c_alpha_cdeg(ia_A: float) -> int:
    """The example controller's law in C integer arithmetic (truncation toward zero)."""
    ia_ca = round(ia_A * 100)  # the fixed-point encoding's 0.01 A, rounded (docs/protocol.md)
    num = KP * (IREF_A * 100 - ia_ca)
    q = abs(num) // 100
    q = q if num >= 0 else -q
    return max(1500, min(15000, 9000 - q))


def test_c_controller_drives_the_model_lockstep(kernel, c_controller):
    plant = make_plant("kestrel_f3_stand", "kestrel_f3_bridge")
    with VirtualCable() as cable:
        proc = subprocess.Popen(
            [c_controller, cable.slave_path, "-n", str(N_FRAMES + 50), "-i", str(IREF_A), "-k", str(KP),
             "-t", "5000", "-w", "5000"],
            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        )
        try:
            session = HostSession(cable.host_link(), encoding="fixed", frame_period_us=3333)
            loop = HostLoop(plant, session, 3333, watchdog_periods=10)
            # field established from the start, as if the field supply had been on
            loop.x[L.X_I_FIELD_A] = 18.0
            loop.hooks.append(Timeline([TimelineStep(0.0, "run")]))
            session.handshake(timeout_s=10.0)
            loop.run_lockstep(N_FRAMES, command_timeout_s=5.0)
            session.send_control(CTRL_BYE)
            out, err = proc.communicate(timeout=20)
        finally:
            if proc.poll() is None:
                proc.kill()
                proc.wait()
    assert proc.returncode == 0, err
    assert "bye=1" in out, out
    rows = loop.rows()
    assert loop.stats.frames == N_FRAMES and loop.stats.missed_commands == 0
    # command k was computed by the C program from the feedback of frame k-1
    ia_sent = rows[:-1, R["armature_current_A"]]
    alpha_got = np.round(rows[1:, R["armature_cmd"]] * 100).astype(int)
    alpha_want = np.array([_c_alpha_cdeg(i) for i in ia_sent])
    assert np.array_equal(alpha_got, alpha_want), np.nonzero(alpha_got != alpha_want)[0][:5]
    # the C loop pulls the armature current towards its reference through the real bridge
    late = rows[-100:, R["armature_current_A"]]
    assert late.mean() > 0.3 * IREF_A, late.mean()
    assert np.all(rows[50:, R["bridge_select"]] == 1)
