"""Frame layouts and the codec (host.link.frames): round trips, byte layout, saturation.

The expected bytes in test_*_layout_* are built by hand from the tables in docs/protocol.md
with int.to_bytes, not with the struct formats the codec uses, so a layout slip shows up.
The float32 expectations use numpy.float32 as the independent IEEE-754 binary32 rounding.
"""

import math

import numpy as np
import pytest

from host import signals as S
from host.link import frames as F


def le(v, n, signed=False):
    return int(v).to_bytes(n, "little", signed=signed)


FB = S.Feedback(
    seq=65535, ack_seq=65534, model_time_us=2**32 - 1, armature_current_A=-3999.99,
    field_current_A=41.257, armature_voltage_V=1049.99, tacho_voltage_V=-299.999,
    encoder_count=-(2**31), mains_angle_deg=359.99, mains_voltage_V=690.5, contactor_closed=1,
    host_status=0x0301_001F, op_run=1, op_stop=1, op_speed_ref_rpm=-1234.56,
)  # fmt: skip
CMD = S.Command(
    seq=4321, mode=S.MODE_CURRENT, bridge_select=S.BRIDGE_REVERSE, armature_cmd=-4000.0,
    field_mode=S.FIELD_MODE_FIRING_ANGLE, field_cmd=149.99, contactor=1, trip=1, trip_code=65535,
)  # fmt: skip


def test_feedback_layout_fixed():
    want = (
        bytes([0x13]) + le(65535, 2) + le(65534, 2) + le(2**32 - 1, 4)
        + le(-399999, 4, True) + le(41257, 4, True) + le(104999, 4, True) + le(-299999, 4, True)
        + le(-(2**31), 4, True) + le(35999, 2) + le(69050, 4, True) + le(-123456, 4, True)
        + le(0x0301_001F, 4) + bytes([0b111])
    )  # fmt: skip
    assert F.Codec(F.ENC_FIXED).pack_feedback(FB) == want
    assert len(want) == 44


def test_command_layout_fixed_and_float32():
    want = bytes([0x12]) + le(4321, 2) + bytes([2, 2, 0, 0b11]) + le(-400000, 4, True) + le(14999, 4, True) + le(65535, 2)
    assert F.Codec(F.ENC_FIXED).pack_command(CMD) == want
    wantf = (
        bytes([0x1A]) + le(4321, 2) + bytes([2, 2, 0, 0b11])
        + np.float32(-4000.0).tobytes() + np.float32(149.99).tobytes() + le(65535, 2)
    )  # fmt: skip
    assert F.Codec(F.ENC_FLOAT32).pack_command(CMD) == wantf


def test_round_trip_fixed_extremes():
    c = F.Codec(F.ENC_FIXED)
    fb = c.unpack_feedback(c.pack_feedback(FB))
    for name in S.Feedback.__slots__:
        assert getattr(fb, name) == pytest.approx(getattr(FB, name), abs=1e-9), name
    cmd = c.unpack_command(c.pack_command(CMD))
    for name in S.Command.__slots__:
        assert getattr(cmd, name) == pytest.approx(getattr(CMD, name), abs=1e-9), name
    assert c.saturated == {}


def test_round_trip_float32_matches_binary32_rounding():
    c = F.Codec(F.ENC_FLOAT32)
    fb = c.unpack_feedback(c.pack_feedback(FB))
    for name in ("armature_current_A", "field_current_A", "armature_voltage_V", "tacho_voltage_V",
                 "mains_angle_deg", "mains_voltage_V", "op_speed_ref_rpm"):  # fmt: skip
        assert getattr(fb, name) == float(np.float32(getattr(FB, name))), name
    for name in ("seq", "ack_seq", "model_time_us", "encoder_count", "host_status", "contactor_closed", "op_run", "op_stop"):
        assert getattr(fb, name) == getattr(FB, name), name
    cmd = c.unpack_command(c.pack_command(CMD))
    assert cmd.armature_cmd == float(np.float32(CMD.armature_cmd))
    assert (cmd.seq, cmd.mode, cmd.trip_code, cmd.trip) == (4321, 2, 65535, 1)


def test_mill_drive_range_is_covered_without_saturation():
    # 4000 A / 1000 V mill drive with 3x fault current headroom must not saturate
    c = F.Codec(F.ENC_FIXED)
    fb = c.unpack_feedback(c.pack_feedback(S.Feedback(armature_current_A=-12000.0, armature_voltage_V=1500.0)))
    assert fb.armature_current_A == -12000.0 and fb.armature_voltage_V == 1500.0
    assert c.saturated == {}


def test_fixed_saturates_and_counts():
    c = F.Codec(F.ENC_FIXED)
    fb = c.unpack_feedback(
        c.pack_feedback(S.Feedback(armature_current_A=1e9, field_current_A=-1e9, tacho_voltage_V=math.nan, mains_voltage_V=math.inf))
    )
    assert fb.armature_current_A == (2**31 - 1) / 100
    assert fb.field_current_A == -(2**31) / 1000
    assert fb.tacho_voltage_V == 0.0  # NaN packs as 0 and is counted
    assert fb.mains_voltage_V == (2**31 - 1) / 100
    assert c.saturated == {"armature_current_A": 1, "field_current_A": 1, "tacho_voltage_V": 1, "mains_voltage_V": 1}
    cmd = c.unpack_command(c.pack_command(S.Command(mode=300, trip_code=70000, armature_cmd=-3e7)))
    assert (cmd.mode, cmd.trip_code, cmd.armature_cmd) == (255, 65535, -(2**31) / 100)
    assert c.saturated["mode"] == 1 and c.saturated["trip_code"] == 1 and c.saturated["armature_cmd"] == 1


def test_counters_wrap_instead_of_saturating():
    c = F.Codec(F.ENC_FIXED)
    fb = c.unpack_feedback(
        c.pack_feedback(S.Feedback(seq=65536 + 5, ack_seq=-1, model_time_us=2**32 + 7, encoder_count=2**31 + 3, mains_angle_deg=-0.5))
    )
    assert (fb.seq, fb.ack_seq, fb.model_time_us, fb.encoder_count) == (5, 65535, 7, -(2**31) + 3)
    assert fb.mains_angle_deg == 359.5
    assert c.saturated == {}


def test_float32_saturates_beyond_flt_max_and_passes_inf():
    c = F.Codec(F.ENC_FLOAT32)
    fb = c.unpack_feedback(c.pack_feedback(S.Feedback(armature_current_A=1e39, field_current_A=-math.inf)))
    assert fb.armature_current_A == float(np.finfo(np.float32).max)
    assert fb.field_current_A == -math.inf
    assert c.saturated == {"armature_current_A": 1}


def test_trip_and_control_round_trip_both_encodings():
    for enc in (F.ENC_FIXED, F.ENC_FLOAT32):
        c = F.Codec(enc)
        t = c.unpack(c.pack_trip(S.TripReport(trip_code=12, controller_time_us=123456789, detail=4567.25), 7))
        assert t == S.TripReport(12, 123456789, 4567.25)
        m = c.unpack(c.pack_control(S.ControlMessage(S.CTRL_SET_SPEED_REF_RPM, -750.5, "Kestrel Bay F3 ✓"), 9))
        assert m == S.ControlMessage(S.CTRL_SET_SPEED_REF_RPM, -750.5, "Kestrel Bay F3 ✓")


def test_control_text_is_clipped_on_a_character_boundary():
    c = F.Codec(F.ENC_FIXED)
    text = "é" * 150  # 300 bytes of UTF-8
    frame = c.pack_control(S.ControlMessage(S.CTRL_RESET, 0, text), 0)
    m = c.unpack_control(frame)
    assert m.text == "é" * 100 and c.saturated == {"text": 1}


def test_control_layout_fixed():
    c = F.Codec(F.ENC_FIXED)
    want = bytes([0x15]) + le(0xFFFF, 2) + bytes([7]) + le(100, 4, True) + bytes([3]) + b"bye"
    assert c.pack_control(S.ControlMessage(S.CTRL_BYE, 1.0, "bye"), 0xFFFF) == want


def test_unpack_rejects_other_encoding_version_and_length():
    fixed, flt = F.Codec(F.ENC_FIXED), F.Codec(F.ENC_FLOAT32)
    with pytest.raises(F.FrameError, match="float32 encoding"):
        fixed.unpack_command(flt.pack_command(CMD))
    frame = bytearray(fixed.pack_command(CMD))
    frame[0] = (2 << 4) | F.KIND_COMMAND
    with pytest.raises(F.FrameError, match="protocol version 2"):
        fixed.unpack_command(bytes(frame))
    with pytest.raises(F.FrameError, match="bytes, expected"):
        fixed.unpack_command(fixed.pack_command(CMD) + b"\x00")
    with pytest.raises(F.FrameError, match="unknown frame kind"):
        fixed.unpack(b"\x17\x00\x00")


def test_hello_round_trip_and_table_offsets():
    for enc in (F.ENC_FIXED, F.ENC_FLOAT32):
        h = F.Hello(F.ROLE_HOST, enc, 500)
        back = F.unpack_hello(F.pack_hello(h, 3))
        assert back == h
        table = {(s.kind, s.name): s for s in F.signal_table(enc)}
        codec = F.Codec(enc)
        # the announced offsets and sizes must add up to the real body lengths
        for kind, frame in ((F.KIND_COMMAND, codec.pack_command(S.Command())), (F.KIND_FEEDBACK, codec.pack_feedback(S.Feedback()))):
            last = max((s for (k, _), s in table.items() if k == kind), key=lambda s: s.offset)
            assert 3 + last.offset + {F.T_U8: 1, F.T_BIT: 1, F.T_U16: 2}.get(last.type, 4) == len(frame)
    fixed = {s.name: s for s in F.signal_table(F.ENC_FIXED) if s.kind == F.KIND_FEEDBACK}
    assert (fixed["armature_current_A"].exp10, fixed["field_current_A"].exp10, fixed["mains_angle_deg"].type) == (-2, -3, F.T_U16)
    assert fixed["op_stop"].bit == 2 and fixed["op_stop"].offset == 40


def test_compare_signal_tables_names_the_difference():
    ours = F.signal_table(F.ENC_FIXED)
    assert F.compare_signal_tables(ours, ours) is None
    changed = tuple(s._replace(exp10=-3) if s.name == "armature_current_A" else s for s in ours)
    msg = F.compare_signal_tables(ours, changed)
    assert "feedback.armature_current_A" in msg and "10^-2" in msg and "10^-3" in msg
    assert "missing at the peer" in F.compare_signal_tables(ours, ours[:-1])
    extra = ours + (F.SignalSpec(F.KIND_FEEDBACK, "roll_gap_mm", F.T_I32, -3, 41, 0, "mm"),)
    assert "roll_gap_mm" in F.compare_signal_tables(ours, extra)
    assert "unit 'A'" in F.compare_signal_tables(ours, tuple(s._replace(unit="kA") if s.name == "armature_current_A" else s for s in ours))


def test_command_problem():
    assert F.command_problem(S.Command()) is None
    assert "mode 9" in F.command_problem(S.Command(mode=9))
    assert "bridge_select" in F.command_problem(S.Command(bridge_select=3))
    assert "field_mode" in F.command_problem(S.Command(field_mode=2))
    assert "finite" in F.command_problem(S.Command(armature_cmd=math.nan))
