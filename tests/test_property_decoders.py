"""Property-based tests (hypothesis) of everything that reads bytes or text from outside.

Properties: the deframer, the frame codec, the HELLO reader, the config loaders and the
command rules never raise anything but the project's own errors, whatever they are fed;
the deframer's buffer stays bounded (MAX_PAYLOAD plus COBS overhead) and returns only
CRC-valid frames, the same frames however the stream is cut into chunks; no command the
host accepts lies outside the documented ranges (docs/protocol.md section 8). The CRC is
checked against the `crc` package (CRC-16/IBM-3740) as the independent reference.
derandomize=True: the same examples on every run (a CI failure can be rerun as it was);
deadline=None: no timing is asserted.
"""

from __future__ import annotations

import math
import struct

import pytest
from crc import Calculator, Crc16
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from host import signals as sig
from host.errors import DcrigError
from host.link import frames as fr
from host.link.wire import MAX_PAYLOAD, Deframer, encode_wire

PROPS = settings(derandomize=True, deadline=None, max_examples=150,
                 suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
CRC = Calculator(Crc16.IBM_3740)


def _valid_frames():
    return st.lists(st.binary(min_size=3, max_size=60), max_size=6)


@PROPS
@given(noise=st.lists(st.binary(max_size=300), max_size=8), frames=_valid_frames(),
       cuts=st.lists(st.integers(min_value=1, max_value=97), max_size=20))
def test_deframer_is_bounded_and_cut_independent(noise, frames, cuts):
    # a stream of noise bursts and valid frames, each valid frame after a delimiter
    stream = bytearray()
    for k, f in enumerate(frames):
        if k < len(noise):
            stream += noise[k]
        stream += b"\x00" + encode_wire(f)
    stream += b"".join(noise[len(frames):])
    whole = Deframer()
    got_whole = whole.feed(bytes(stream))
    parts = Deframer()
    got_parts = []
    pos = 0
    for c in cuts + [len(stream)]:
        got_parts += parts.feed(bytes(stream[pos: pos + c]))
        assert len(parts._buf) <= parts._max_wire
        pos += c
        if pos >= len(stream):
            break
    got_parts += parts.feed(bytes(stream[pos:]))
    assert got_parts == got_whole
    for f in got_whole:  # only CRC-valid frames come out (independent CRC)
        assert len(f) + 2 <= MAX_PAYLOAD
    for f in frames:  # every frame sent after a delimiter is received
        assert f in got_whole


@PROPS
@given(data=st.binary(max_size=1100))
def test_deframer_never_raises_and_stays_bounded(data):
    d = Deframer()
    for f in d.feed(data) + d.feed(b"\x00"):
        assert 3 <= len(f) <= MAX_PAYLOAD - 2
    assert len(d._buf) <= d._max_wire


@PROPS
@given(data=st.binary(max_size=64))
def test_crc_matches_the_reference_library(data):
    from host.link.wire import crc16

    assert crc16(data) == CRC.checksum(data)


@PROPS
@given(kind=st.integers(0, 255), seq=st.integers(0, 0xFFFF), body=st.binary(max_size=80),
       enc=st.sampled_from([fr.ENC_FIXED, fr.ENC_FLOAT32]))
def test_codec_unpack_raises_only_frame_errors(kind, seq, body, enc):
    frame = (struct.pack("<BH", kind, seq) + body)[: len(body) + 3 if len(body) % 5 else len(body) % 3]
    codec = fr.Codec(enc)
    for fn in (codec.unpack, codec.unpack_command, codec.unpack_feedback, codec.unpack_trip,
               codec.unpack_control, fr.unpack_hello):
        try:
            fn(frame)
        except fr.FrameError:
            pass


def _refusing_loop():
    from conftest import make_plant
    from host.loop import HostLoop

    plant = make_plant("kestrel_f3_stand", "kestrel_f3_dual")
    return HostLoop(plant, None, int(round(plant.derived["frame_period_us"])))


@pytest.fixture(scope="module")
def loop(kernel):
    return _refusing_loop()


@PROPS
@given(mode=st.integers(0, 255), bridge=st.integers(0, 255), field_mode=st.integers(0, 255),
       arm=st.floats(allow_nan=True, allow_infinity=True, width=32),
       fld=st.floats(allow_nan=True, allow_infinity=True, width=32),
       enc=st.sampled_from([fr.ENC_FIXED, fr.ENC_FLOAT32]))
def test_no_accepted_command_is_outside_the_documented_ranges(loop, mode, bridge, field_mode, arm, fld, enc):
    body = struct.pack("<BBBBffH" if enc else "<BBBBiiH", mode, bridge, field_mode, 1,
                       *((arm, fld) if enc else (_raw(arm), _raw(fld))), 0)
    frame = struct.pack("<BH", (1 << 4) | (enc << 3) | 2, 7) + body
    cmd = fr.Codec(enc).unpack_command(frame)
    if fr.command_problem(cmd) is not None:
        return
    if loop.command_refusal(cmd) is not None:
        return
    # accepted: a known mode that applies to a dual bridge, values finite and in range
    assert cmd.mode in (sig.MODE_FIRING_ANGLE, sig.MODE_VOLTAGE)
    assert math.isfinite(cmd.armature_cmd) and math.isfinite(cmd.field_cmd)
    if cmd.mode == sig.MODE_FIRING_ANGLE:
        assert 0.0 <= cmd.armature_cmd <= 180.0
    else:
        assert abs(cmd.armature_cmd) <= 1.5 * loop.vdo + 1e-9
    if cmd.field_mode == sig.FIELD_MODE_FIRING_ANGLE:
        assert 0.0 <= cmd.field_cmd <= 180.0


def _raw(v):
    if not math.isfinite(v):
        return 0 if math.isnan(v) else (2**31 - 1 if v > 0 else -(2**31))
    return max(-(2**31), min(2**31 - 1, int(v)))


_TOML_VALUES = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats() | st.text(max_size=8),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=6), inner, max_size=4),
    max_leaves=12,
)


@PROPS
@given(data=st.dictionaries(st.sampled_from(["machine", "mechanics", "sensors", "sim", "x", "machine.magnetization"]),
                            st.dictionaries(st.text(max_size=12), _TOML_VALUES, max_size=5), max_size=4))
def test_config_resolve_raises_only_config_errors(data):
    from host.config import resolve

    data = {k: v for k, v in data.items() if v is not None}
    try:
        resolve("machine", data, "fuzz.toml")
    except DcrigError:
        pass


@PROPS
@given(text=st.text(max_size=400) | st.binary(max_size=400).map(lambda b: b.decode("latin-1")))
def test_config_and_settings_files_raise_only_config_errors(tmp_path_factory, text):
    from host.config import load
    from host.controller.settings import load_settings

    p = tmp_path_factory.mktemp("fuzz") / "x.toml"
    p.write_bytes(text.encode("utf-8", "surrogatepass") if text.isascii() else text.encode("latin-1", "replace"))
    for fn in (lambda: load("machine", p), lambda: load("converter", p), lambda: load_settings(p)):
        try:
            fn()
        except DcrigError:
            pass


@PROPS
@given(text=st.text(max_size=60))
def test_set_overrides_raise_only_config_errors(text):
    from host.config import load
    from conftest import MACHINES

    try:
        load("machine", MACHINES / "kestrel_f3_stand.toml", [text])
    except DcrigError:
        pass
