"""The C99 firmware library (tools/fwlib) compiled with the system cc and checked against
independent references and against the Python host side.

No skips: a missing compiler fails the tests. References: the `cobs` PyPI package, the
`crc` PyPI package (Crc16.IBM_3740) and the CRC catalogue check value 0x29B1 for
"123456789" (reveng CRC catalogue, CRC-16/IBM-3740).
"""

import os
import random
import shutil
import subprocess

import numpy as np
import pytest
from cobs import cobs as ref_cobs
from crc import Calculator, Crc16

from host import signals as S
from host.errors import LinkError
from host.link import frames as F
from host.link.session import HostSession
from host.link.transport import VirtualCable
from host.link.wire import Deframer, encode_wire

FWLIB = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "tools", "fwlib")
CFLAGS = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-O2"]
T = 5.0


def _cc(out, sources, extra=()):
    cc = shutil.which("cc")
    if cc is None:
        pytest.fail("the system C compiler `cc` is missing: the firmware library cannot be checked")
    cmd = [cc, *CFLAGS, *extra, "-o", str(out), *[os.path.join(FWLIB, s) for s in sources]]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    if res.returncode != 0:
        pytest.fail(f"compile failed: {' '.join(cmd)}\n{res.stderr}")
    return str(out)


@pytest.fixture(scope="module")
def bins(tmp_path_factory):
    d = tmp_path_factory.mktemp("fwlib")
    return {
        "fixed": _cc(d / "ctl_fixed", ["example_controller.c", "dcrig_link.c"]),
        "float32": _cc(d / "ctl_float", ["example_controller.c", "dcrig_link.c"], ["-DDCRIG_WITH_FLOAT32"]),
        "vectors": _cc(d / "vectors", ["dcrig_vectors.c", "dcrig_link.c"]),
    }


def vectors(bins, lines):
    res = subprocess.run([bins["vectors"]], input="\n".join(lines) + "\n", capture_output=True, text=True, timeout=60)
    assert res.returncode == 0, res.stderr
    return res.stdout.splitlines()


def hx(b: bytes) -> str:
    return b.hex() if b else "-"


def test_c_crc_matches_catalogue_and_crc_package(bins):
    rng = random.Random(7)
    data = [b"123456789"] + [bytes(rng.randrange(256) for _ in range(rng.randrange(0, 200))) for _ in range(50)]
    out = vectors(bins, [f"crc {hx(d)}" for d in data])
    assert out[0] == "29b1"  # CRC catalogue check value
    calc = Calculator(Crc16.IBM_3740)
    assert [int(x, 16) for x in out] == [calc.checksum(d) for d in data]


def test_c_cobs_matches_cobs_package(bins):
    rng = random.Random(11)
    data = [b"", b"\x00", b"\x01" * 253, b"\x01" * 254, b"\x01" * 255, b"\x01" * 254 + b"\x00", bytes(range(256)) * 3]
    data += [bytes(rng.choice((0, rng.randrange(1, 256))) for _ in range(rng.randrange(0, 600))) for _ in range(60)]
    enc = vectors(bins, [f"cobs {hx(d)}" for d in data])
    assert enc == [hx(ref_cobs.encode(d)) for d in data]
    dec = vectors(bins, [f"uncobs {e}" for e in enc])
    assert dec == [hx(d) for d in data]
    assert vectors(bins, ["uncobs 050102", "uncobs ff01"]) == ["error", "error"]


def test_c_wire_and_hello_are_byte_identical_to_python(bins):
    frames = [bytes([0x13, i, 0]) + bytes(range(i * 7 % 256)) for i in range(20)]
    assert vectors(bins, [f"wire {hx(f)}" for f in frames]) == [hx(encode_wire(f)) for f in frames]
    for role, enc, period in ((0, 0, 1000), (1, 1, 250)):
        (line,) = vectors(bins, [f"hello {role} {enc} {period}"])
        assert line == hx(encode_wire(F.pack_hello(F.Hello(role, enc, period), 0xFFFF)))


def test_c_deframer_agrees_with_python_deframer(bins):
    rng = random.Random(3)
    stream = bytearray(b"\x55\xaa\x01")  # torn start
    for i in range(30):
        w = bytearray(encode_wire(bytes([0x13, i, 0]) + bytes(rng.randrange(256) for _ in range(20))))
        if i % 7 == 3:
            w[5] ^= 0x04  # bit error
        if i % 11 == 5:
            stream += bytes(rng.randrange(1, 256) for _ in range(9)) + b"\x00"  # noise burst
        stream += w
    stream += b"\x01" * 1500 + b"\x00"  # oversize
    stream += encode_wire(b"\x13\x63\x00last")
    out = vectors(bins, [f"deframe {hx(bytes(stream))}"])
    d = Deframer()
    py_frames = d.feed(bytes(stream))
    assert [x[len("frame ") :] for x in out[:-1]] == [hx(f) for f in py_frames]
    # "torn" counts partial frames dropped when a host transport resets (a TCP peer gone); a
    # firmware deframer on a UART has no such event, so the C library has no such counter
    want = " ".join(f"{k}={v}" for k, v in d.stats().items() if k != "torn")
    assert out[-1] == f"stats {want}"
    assert d.crc_errors + d.cobs_errors >= 3 and d.oversize == 1


def c_alpha_cdeg(kp, iref_A, ia_A):
    """The example's integer law, with C99 division truncating toward zero."""
    prod = kp * (iref_A * 100 - round(ia_A * 100))
    q = abs(prod) // 100
    q = q if prod >= 0 else -q
    return min(max(9000 - q, 1500), 15000)


def start(bins, which, path, *args):
    return subprocess.Popen([bins[which], path, *args], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def finish(proc):
    try:
        out, err = proc.communicate(timeout=T)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(T)
    return proc.returncode, out, err


def test_c_controller_fixed_point_over_pty(bins):
    kp, iref, trip_a = 50, 100, 3000
    with VirtualCable() as cab, cab.host_link() as host:
        proc = start(bins, "fixed", cab.slave_path, "-n", "1000", "-i", str(iref), "-k", str(kp), "-t", str(trip_a))
        try:
            hs = HostSession(host, encoding="fixed", frame_period_us=1000)
            peer = hs.handshake(T)
            assert peer.role == F.ROLE_CONTROLLER and peer.encoding == F.ENC_FIXED
            currents = [0.0, 37.25, 99.99, 100.0, 180.5, -50.0, 2999.0, -1234.56]
            for i, ia in enumerate(currents):
                run = i != 2
                hs.send_feedback(S.Feedback(armature_current_A=ia, op_run=1 if run else 0, model_time_us=i * 1000))
                cmd = hs.recv_command(T)
                assert cmd is not None and cmd.seq == i
                assert cmd.mode == S.MODE_FIRING_ANGLE and cmd.field_mode == S.FIELD_MODE_VOLTAGE
                assert cmd.field_cmd == 220.0
                assert round(cmd.armature_cmd * 100) == c_alpha_cdeg(kp, iref, ia)
                assert (cmd.contactor, cmd.bridge_select) == ((1, S.BRIDGE_FORWARD) if run else (0, S.BRIDGE_BLOCKED))
                assert cmd.trip == 0
            # overcurrent: the C side latches a trip, reports it once and blocks the bridge
            hs.send_feedback(S.Feedback(armature_current_A=3000.5, op_run=1))
            cmd = hs.recv_command(T)
            assert (cmd.trip, cmd.trip_code, cmd.bridge_select, cmd.contactor, cmd.armature_cmd) == (1, 1, 0, 0, 150.0)
            (trip,) = [e for e in hs.pop_events() if isinstance(e, S.TripReport)]
            assert trip.trip_code == 1 and trip.detail == 3000.5
            hs.send_feedback(S.Feedback(armature_current_A=10.0, op_run=1))
            assert hs.recv_command(T).trip == 1  # latched
            hs.send_control(S.CTRL_RESET)
            hs.send_feedback(S.Feedback(armature_current_A=10.0, op_run=1))
            cmd = hs.recv_command(T)
            assert cmd.trip == 0 and round(cmd.armature_cmd * 100) == c_alpha_cdeg(kp, iref, 10.0)
            hs.send_control(S.CTRL_BYE)
        finally:
            rc, out, err = finish(proc)
        assert rc == 0, err
        assert out.strip() == (
            "example_controller: feedback=11 commands=11 trips=1 resets=1 crc_errors=0 cobs_errors=0 seq_gaps=0 bye=1"
        )
        st = hs.stats()
        assert st["crc_errors"] == st["bad_frames"] == st["invalid_commands"] == 0


def test_c_controller_float32_over_pty(bins):
    kp, iref = 40, 200
    with VirtualCable() as cab, cab.host_link() as host:
        proc = start(bins, "float32", cab.slave_path, "-e", "float32", "-n", "6", "-i", str(iref), "-k", str(kp))
        try:
            hs = HostSession(host, encoding="float32", frame_period_us=250)
            hs.handshake(T)
            for i, ia in enumerate([0.0, 150.25, 200.0, 260.0, 512.5, -40.0]):
                hs.send_feedback(S.Feedback(armature_current_A=ia, op_run=1))
                cmd = hs.recv_command(T)
                f = np.float32
                want = f(90.0) - f(kp) / f(100.0) * (f(iref) - f(ia))
                want = min(max(want, f(15.0)), f(150.0))
                assert cmd.seq == i and cmd.armature_cmd == pytest.approx(float(want), abs=1e-4)
        finally:
            rc, out, err = finish(proc)
        assert rc == 0, err
        assert "feedback=6 commands=6" in out and "bye=0" in out  # stopped after -n frames


def test_c_controller_handshake_mismatch(bins):
    with VirtualCable() as cab, cab.host_link() as host:
        proc = start(bins, "fixed", cab.slave_path)  # fixed point only
        try:
            with pytest.raises(LinkError, match="encoding: the host uses float32, the controller fixed"):
                HostSession(host, encoding="float32").handshake(T)
        finally:
            rc, _out, err = finish(proc)
        assert rc == 3 and "handshake: encoding mismatch" in err


def test_c_controller_bad_arguments_exit_2(bins):
    res = subprocess.run([bins["fixed"], "/dev/null", "-n", "lots"], capture_output=True, text=True, timeout=T)
    assert res.returncode == 2
    assert res.stderr.strip() == "example_controller: -n 'lots': must be a whole number from 1 to 100000000"
    res = subprocess.run([bins["fixed"], "/dev/null", "-e", "float32"], capture_output=True, text=True, timeout=T)
    assert res.returncode == 2 and "must be fixed" in res.stderr
