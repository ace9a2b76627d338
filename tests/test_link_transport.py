"""Transports (host.link.transport): pty virtual cable, accept:// (TCP listening) on 127.0.0.1, loop://,
pyserial socket:// as the TCP client, URL errors, USB latency timer."""

import os
import subprocess
import sys
import textwrap
import warnings

import pytest

from host import signals as S
from host.errors import ConfigError, LinkError
from host.link import transport as tr
from host.link.session import HostSession
from host.link.transport import AcceptLink, LinkWarning, VirtualCable, open_link
from host.link.wire import encode_wire

T = 5.0
REPO = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def frames(n, tag):
    return [bytes([0x13, i & 0xFF, i >> 8]) + tag * (i % 50) + b"\x00\x01" for i in range(n)]


def test_pty_cable_carries_frames_both_ways_in_process():
    with VirtualCable() as cab:
        with cab.host_link() as host, cab.controller_link() as ctrl:
            assert cab.slave_path.startswith("/dev/")
            down, up = frames(200, b"D"), frames(200, b"U")
            for a, b in zip(down, up):
                host.send_frame(a)
                ctrl.send_frame(b)
            got_down = [ctrl.recv_frame(T) for _ in down]
            got_up = [host.recv_frame(T) for _ in up]
            assert got_down == down and got_up == up
            assert host.recv_frame(0.05) is None  # nothing more: timeout gives None
            for link in (host, ctrl):
                st = link.stats()
                assert st["crc_errors"] == st["cobs_errors"] == st["garbage_bytes"] == 0


def test_pty_raw_mode_passes_every_byte_value():
    # no line discipline: CR/LF translation, XON/XOFF or ^C would corrupt binary frames
    with VirtualCable() as cab:
        with cab.host_link() as host, cab.controller_link() as ctrl:
            payload = bytes([0x13, 0, 0]) + bytes(range(256)) + b"\r\n\x03\x11\x13\x7f"
            host.send_frame(payload)
            assert ctrl.recv_frame(T) == payload


CHILD = textwrap.dedent(
    """
    import sys
    from host import signals as S
    from host.link import ControllerSession, open_link
    with open_link(sys.argv[1]) as link:
        s = ControllerSession(link)
        s.handshake(5.0)
        n = 0
        while True:
            fb = s.recv_feedback(5.0)
            if fb is None:
                break
            s.send_command(S.Command(armature_cmd=fb.armature_current_A * 2, mode=S.MODE_VOLTAGE))
            n += 1
        print("child", n, s.bye)
    """
)


def test_pty_cable_by_path_from_a_separate_process():
    with VirtualCable() as cab, cab.host_link() as host:
        env = dict(os.environ, PYTHONPATH=REPO)
        child = subprocess.Popen(
            [sys.executable, "-c", CHILD, cab.slave_path], stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env, text=True
        )
        try:
            hs = HostSession(host, encoding="fixed")
            hs.handshake(T)
            for i in range(30):
                hs.send_feedback(S.Feedback(armature_current_A=float(i)))
                cmd = hs.recv_command(T)
                assert cmd is not None and cmd.armature_cmd == 2.0 * i and cmd.mode == S.MODE_VOLTAGE
            hs.send_control(S.CTRL_BYE)
            out, err = child.communicate(timeout=T)
        finally:
            if child.poll() is None:
                child.kill()
                child.wait(T)
        assert child.returncode == 0, err
        assert out.strip() == "child 30 True"


def test_pty_url_gives_master_and_peer_path():
    with open_link("pty://") as host:
        assert host.peer_path.startswith("/dev/")
        with open_link(host.peer_path, baud=115200) as ctrl:  # pyserial on the slave path
            host.send_frame(b"\x13\x01\x00abc")
            assert ctrl.recv_frame(T) == b"\x13\x01\x00abc"
            ctrl.send_frame(b"\x12\x02\x00xyz")
            assert host.recv_frame(T) == b"\x12\x02\x00xyz"


def test_pty_write_times_out_when_nobody_reads():
    with VirtualCable() as cab, cab.host_link() as host:
        host._write_timeout_s = 0.05
        with pytest.raises(LinkError, match="write timed out"):
            for _ in range(10000):
                host.send_frame(b"\x13\x00\x00" + b"x" * 500)


def test_accept_on_loopback_with_pyserial_socket_client():
    with open_link("accept://127.0.0.1:0") as srv:
        assert isinstance(srv, AcceptLink)
        host, port = srv.address
        assert host == "127.0.0.1"
        srv.send_frame(b"\x13\x00\x00lost")  # nobody connected yet: dropped like on a dead line
        assert srv.bytes_dropped > 0
        with open_link(f"socket://127.0.0.1:{port}") as cli:
            assert srv.wait_connected(T)
            for f in frames(50, b"T"):
                srv.send_frame(f)
                assert cli.recv_frame(T) == f
                cli.send_frame(f[::-1] + b"\x01")
                assert srv.recv_frame(T) == f[::-1] + b"\x01"
        assert srv.recv_frame(0.2) is None  # client gone
        assert not srv.connected
        with open_link(f"socket://127.0.0.1:{port}") as cli2:  # a new peer may connect
            cli2.send_frame(b"\x12\x07\x00again")
            assert srv.recv_frame(T) == b"\x12\x07\x00again"
        assert srv.connects == 2


def test_accept_defaults_to_loopback():
    with open_link("accept://:0") as srv:
        assert srv.address[0] == "127.0.0.1"


def test_loop_url_round_trip_and_resync():
    with open_link("loop://") as link:
        link.ser.write(b"\x42\x42garbage")  # torn bytes, no delimiter after them
        link.send_frame(b"\x13\x05\x00lost")  # merges with the garbage: fails its CRC
        link.send_frame(b"\x13\x06\x00ok")  # the delimiter before it resynchronised us
        assert link.recv_frame(T) == b"\x13\x06\x00ok"
        st = link.stats()
        assert st["crc_errors"] + st["cobs_errors"] == 1 and st["garbage_bytes"] > 0
        link.ser.write(b"\x99junk")
        link.send_delimiter()  # the flush idiom: a lone 0x00 ends the garbage, nothing is lost
        link.ser.write(encode_wire(b"\x13\x07\x00a") + encode_wire(b"\x13\x08\x00b"))
        assert link.recv_frame(T) == b"\x13\x07\x00a"
        assert link.recv_frame(T) == b"\x13\x08\x00b"


@pytest.mark.parametrize(
    ("url", "kw", "msg"),
    [
        ("foo://x", {}, "link 'foo://x': scheme 'foo': unknown"),
        ("/dev/dcrig-no-such-port", {}, "link '/dev/dcrig-no-such-port': port: no such device"),
        ("loop://", {"baud": "fast"}, "link 'loop://': baud 'fast': must be a whole number"),
        ("loop://", {"baud": 10}, "link 'loop://': baud 10: must be from 50 to 12000000"),
        ("loop://", {"baud": 9600.5}, "baud 9600.5: must be a whole number"),
        ("loop://", {"parity": "X"}, "link 'loop://': parity 'X': must be N, E or O"),
        ("accept://127.0.0.1", {}, "must name a port"),
        ("accept://127.0.0.1:99999", {}, "address"),
        ("", {}, "url: must be a port path or a URL"),
        ("pty://x", {}, "pty:// takes no path"),
        ("socket://127.0.0.1:notaport", {}, "address"),  # checked before pyserial, like socket:// with no port
            ("socket://", {}, "must name a port"),
    ],
)
def test_open_link_errors_are_one_line_link_errors(url, kw, msg):
    with pytest.raises(LinkError) as info:
        open_link(url, **kw)
    text = str(info.value)
    assert msg in text and "\n" not in text


def test_old_tcp_listen_scheme_is_refused_with_its_new_name():
    with pytest.raises(ConfigError) as info:
        open_link("tcp-listen://127.0.0.1:5020")
    assert str(info.value) == ("--link: tcp-listen://: renamed to accept:// (use accept://127.0.0.1:5020), "
                               "got 'tcp-listen://127.0.0.1:5020'")


def test_open_link_accepts_parity_words():
    with open_link("loop://", baud="115200", parity="even") as link:
        assert link.ser.parity == "E" and link.ser.baudrate == 115200


def test_usb_latency_timer_from_sysfs(tmp_path):
    d = tmp_path / "bus" / "usb-serial" / "devices" / "ttyUSB7"
    d.mkdir(parents=True)
    (d / "latency_timer").write_text("16\n")
    assert tr.usb_latency_timer_ms("/dev/ttyUSB7", sysfs_root=str(tmp_path)) == 16
    assert tr.usb_latency_timer_ms("/dev/ttyUSB8", sysfs_root=str(tmp_path)) is None


def test_open_link_warns_about_slow_latency_timer(monkeypatch):
    monkeypatch.setattr(tr, "usb_latency_timer_ms", lambda path, sysfs_root="/sys": 16)
    with VirtualCable() as cab:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            link = open_link(cab.slave_path)
        link.close()
    assert link.latency_timer_ms == 16
    assert any(issubclass(w.category, LinkWarning) and "latency timer is 16 ms" in str(w.message) for w in caught)
