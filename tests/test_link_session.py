"""Sessions (host.link.session): handshake, mismatch errors, sequence tracking, watchdog.

Both session ends run in this process over a VirtualCable (pty pair); the side that has to
block runs in a thread that is always joined with a timeout.
"""

import threading

import pytest

from host import signals as S
from host.errors import LinkError, LinkTimeout
from host.link import frames as F
from host.link.session import REORDER_WINDOW, ControllerSession, HostSession, SeqTracker, Watchdog
from host.link.transport import VirtualCable, open_link

T = 5.0  # generous upper bound for any wait; tests never sleep for it unless something broke


@pytest.fixture
def cable():
    cab = VirtualCable()
    host, ctrl = cab.host_link(), cab.controller_link()
    yield host, ctrl
    host.close()
    ctrl.close()
    cab.close()


def run_in_thread(fn):
    box = {}

    def target():
        try:
            box["value"] = fn()
        except Exception as err:  # noqa: BLE001 - handed to the test thread
            box["error"] = err

    th = threading.Thread(target=target, daemon=True)
    th.start()
    return th, box


def join(th, box):
    th.join(T)
    assert not th.is_alive(), "thread did not finish in time"
    if "error" in box:
        raise box["error"]
    return box.get("value")


def shake(host_link, ctrl_link, host_kw=None, ctrl_kw=None):
    hs = HostSession(host_link, **(host_kw or {}))
    cs = ControllerSession(ctrl_link, **(ctrl_kw or {}))
    th, box = run_in_thread(lambda: cs.handshake(T))
    peer = hs.handshake(T)
    join(th, box)
    return hs, cs, peer


@pytest.mark.parametrize("enc", ["fixed", "float32"])
def test_handshake_and_frames_both_ways(cable, enc):
    hs, cs, peer = shake(*cable, host_kw={"encoding": enc, "frame_period_us": 500})
    assert peer.role == F.ROLE_CONTROLLER and cs.encoding == F.ENCODINGS[enc] and cs.frame_period_us == 500
    for i in range(20):
        hs.send_feedback(S.Feedback(armature_current_A=10.0 * i, ack_seq=i))
        fb = cs.recv_feedback(T)
        assert fb.seq == i and fb.armature_current_A == 10.0 * i
        cs.send_command(S.Command(armature_cmd=30.0 + i))
        cmd = hs.recv_command(T)
        assert cmd.seq == i and cmd.armature_cmd == 30.0 + i
    st = hs.stats()
    assert st["seq_accepted"] == 20 and st["seq_gaps"] == 0 and st["crc_errors"] == 0


def test_host_handshake_names_encoding_mismatch(cable):
    host, ctrl = cable
    ctrl.send_frame(F.pack_hello(F.Hello(F.ROLE_CONTROLLER, F.ENC_FLOAT32, 1000)))
    with pytest.raises(LinkError, match="encoding: the host uses fixed, the controller float32"):
        HostSession(host, encoding="fixed").handshake(T)


def test_host_handshake_names_period_mismatch(cable):
    host, ctrl = cable
    ctrl.send_frame(F.pack_hello(F.Hello(F.ROLE_CONTROLLER, F.ENC_FIXED, 2000)))
    with pytest.raises(LinkError, match="frame period: the host runs 1000 us, the controller 2000 us"):
        HostSession(host, frame_period_us=1000).handshake(T)


def test_host_handshake_names_version_mismatch(cable):
    host, ctrl = cable
    frame = bytearray(F.pack_hello(F.Hello(F.ROLE_CONTROLLER, F.ENC_FIXED, 1000)))
    frame[0] = (2 << 4) | F.KIND_HELLO
    frame[3] = 2
    ctrl.send_frame(bytes(frame))
    with pytest.raises(LinkError, match="protocol version: the controller speaks 2, the host 1"):
        HostSession(host).handshake(T)


def test_host_handshake_names_signal_mismatch(cable):
    host, ctrl = cable
    sigs = tuple(s._replace(unit="kA") if s.name == "field_current_A" else s for s in F.signal_table(F.ENC_FIXED))
    ctrl.send_frame(F.pack_hello(F.Hello(F.ROLE_CONTROLLER, F.ENC_FIXED, 1000, signals=sigs)))
    with pytest.raises(LinkError, match=r"signal list: signal feedback\.field_current_A"):
        HostSession(host).handshake(T)


def test_host_handshake_rejects_an_empty_signal_table(cable):
    host, ctrl = cable
    ctrl.send_frame(F.pack_hello(F.Hello(F.ROLE_CONTROLLER, F.ENC_FIXED, 1000, signals=())))
    with pytest.raises(LinkError, match=r"signal list: signal command\.mode is missing at the peer"):
        HostSession(host).handshake(T)


def test_host_handshake_rejects_small_peer_buffer(cable):
    host, ctrl = cable
    ctrl.send_frame(F.pack_hello(F.Hello(F.ROLE_CONTROLLER, F.ENC_FIXED, 1000, max_payload=64)))
    with pytest.raises(LinkError, match="max payload"):
        HostSession(host).handshake(T)


def test_host_handshake_times_out_and_ignores_own_echo():
    with open_link("loop://") as link:  # hears only its own HELLO (role host): not an answer
        with pytest.raises(LinkTimeout, match="no HELLO from the controller within 0.3 s"):
            HostSession(link).handshake(timeout_s=0.3, retry_s=0.1)
        assert link.frames_sent >= 2  # it retried


def test_controller_answers_then_raises_on_mismatch(cable):
    host, ctrl = cable
    host.send_frame(F.pack_hello(F.Hello(F.ROLE_HOST, F.ENC_FLOAT32, 1000)))
    with pytest.raises(LinkError, match="encoding: the controller uses fixed, the host float32"):
        ControllerSession(ctrl, encoding="fixed").handshake(T)
    reply = host.recv_frame(T)  # the answer went out first, so the host can report it too
    assert F.unpack_hello(reply).role == F.ROLE_CONTROLLER


def test_controller_handshake_timeout(cable):
    _host, ctrl = cable
    with pytest.raises(LinkTimeout, match="no HELLO from the host"):
        ControllerSession(ctrl).handshake(timeout_s=0.2)


def test_bad_encoding_name_is_a_link_error(cable):
    with pytest.raises(LinkError, match="encoding 'float64'"):
        HostSession(cable[0], encoding="float64")


def test_seq_tracker_counts():
    t = SeqTracker()
    assert [t.accept(s) for s in (65533, 65534, 65535, 0, 1)] == [True] * 5  # wraps
    assert t.gaps == 0
    assert t.accept(4) and (t.gaps, t.lost) == (1, 2)
    assert not t.accept(4) and t.repeats == 1
    assert not t.accept(3) and t.out_of_order == 1
    assert not t.accept((4 - REORDER_WINDOW) & 0xFFFF) and t.out_of_order == 2
    assert t.accept((4 - REORDER_WINDOW - 1) & 0xFFFF) and t.restarts == 1  # counter restarted
    assert t.accepted == 7 and t.received == 10


def test_recv_command_drops_repeats_late_and_invalid(cable):
    hs, cs, _ = shake(*cable)
    codec = cs.codec
    ctrl = cable[1]
    for seq, cmd in [(0, S.Command()), (1, S.Command()), (1, S.Command()), (0, S.Command()),
                     (2, S.Command(mode=9)), (3, S.Command(bridge_select=5))]:  # fmt: skip
        cmd.seq = seq
        ctrl.send_frame(codec.pack_command(cmd))
    ctrl.send_frame(F.Codec(F.ENC_FLOAT32).pack_command(S.Command(seq=4)))  # wrong encoding
    got = [hs.recv_command(0.5) for _ in range(3)]
    assert [c.seq for c in got if c] == [0, 1]
    st = hs.stats()
    assert (st["seq_repeats"], st["seq_out_of_order"], st["invalid_commands"], st["bad_frames"]) == (1, 1, 2, 1)
    assert "float32" in hs.last_problem


def test_float32_nan_command_is_invalid(cable):
    hs, cs, _ = shake(*cable, host_kw={"encoding": "float32"})
    cs.send_command(S.Command(armature_cmd=float("nan")))
    cs.send_command(S.Command(armature_cmd=91.0))
    cmd = hs.recv_command(T)
    assert cmd.seq == 1 and cmd.armature_cmd == 91.0
    assert hs.stats()["invalid_commands"] == 1 and "not finite" in hs.last_problem


def test_events_trip_and_bye(cable):
    hs, cs, _ = shake(*cable)
    cs.send_command(S.Command())
    cs.send_trip(S.TripReport(trip_code=5, controller_time_us=42, detail=4100.0))
    cs.send_control(S.CTRL_BYE, text="done")
    assert hs.recv_command(T).seq == 0
    assert hs.recv_command(T) is None and hs.bye
    ev = hs.pop_events()
    assert ev[0] == S.TripReport(5, 42, 4100.0) and ev[1].op == S.CTRL_BYE and ev[1].text == "done"
    hs.send_control(S.ControlMessage(S.CTRL_BYE))
    assert cs.recv_feedback(T) is None and cs.bye


def test_controller_answers_a_repeated_host_hello(cable):
    hs, cs, _ = shake(*cable)
    hs.send_feedback(S.Feedback())
    assert cs.recv_feedback(T).seq == 0
    th, box = run_in_thread(lambda: hs.handshake(T))  # the host starts over
    assert cs.recv_feedback(0.5) is None  # nothing periodic, but the HELLO was answered
    join(th, box)
    assert cs.hellos_after_handshake == 1


class FakeClock:
    def __init__(self):
        self.ns = 0

    def __call__(self):
        return self.ns


def test_watchdog_with_fake_clock_latches():
    clk = FakeClock()
    wd = Watchdog(period_us=1000, n_periods=3, clock=clk)
    clk.ns = 3_000_000  # exactly 3 periods: not yet
    assert not wd.expired()
    clk.ns = 3_000_001
    assert wd.expired() and wd.trips == 1
    wd.kick()  # a late command does not clear the latch
    assert wd.expired() and wd.tripped
    wd.reset()
    assert not wd.expired()
    clk.ns += 2_000_000
    wd.kick()
    clk.ns += 2_500_000
    assert not wd.expired()
    assert wd.trips == 1


def test_host_watchdog_kicked_only_by_valid_commands(cable):
    clk = FakeClock()
    host, ctrl = cable
    hs, cs, _ = shake(host, ctrl, host_kw={"watchdog_periods": 2, "clock": clk})
    clk.ns = 1_500_000
    cs.send_command(S.Command())
    assert hs.recv_command(T) is not None
    clk.ns = 3_000_000  # 1.5 ms after the kick, limit 2 ms
    assert not hs.watchdog.expired()
    ctrl.send_frame(cs.codec.pack_command(S.Command(seq=1, mode=7)))  # invalid: no kick
    assert hs.recv_command(0.3) is None
    clk.ns = 3_600_000
    assert hs.watchdog.expired()
    assert hs.stats()["watchdog_trips"] == 1
