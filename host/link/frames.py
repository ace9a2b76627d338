"""Frame layouts of the dcrig link protocol (version 1) and their Python codec.

Owns: the byte layout of every frame kind in both encodings, the fixed-point scales, the
saturation rule, and the signal table each side announces in its HELLO. docs/protocol.md is
the normative description; tools/fwlib/dcrig_link.c is the C twin. A frame here is the
decoded payload without CRC: header (3 bytes) + body. host.link.wire adds CRC and COBS.

    header  byte 0  (PROTOCOL_VERSION << 4) | (encoding << 3) | kind
            byte 1-2 sequence counter, u16 little-endian

Out-of-range rule (pack side): a value that does not fit its field SATURATES to the field's
limit and is counted in Codec.saturated[name]; NaN packs as 0 in fixed point and is counted
in Codec.saturated too. Counters that wrap by definition (ack_seq, model_time_us,
encoder_count, host_status, and mains_angle_deg modulo 360 deg in fixed point) wrap instead
and are not counted. In float32 every finite value beyond +-FLT_MAX saturates to +-FLT_MAX;
inf and NaN travel as they are. Flags are 1 when the Python value is truthy.

Public API:
    PROTOCOL_VERSION, ENC_FIXED, ENC_FLOAT32, ENCODINGS {"fixed": 0, "float32": 1}
    KIND_HELLO, KIND_COMMAND, KIND_FEEDBACK, KIND_TRIP, KIND_CONTROL, KIND_NAMES
    ROLE_HOST, ROLE_CONTROLLER
    class FrameError(ValueError)
    @dataclass Hello(role, encoding, frame_period_us, max_payload=MAX_PAYLOAD,
                     protocol_version=PROTOCOL_VERSION, signals=None -> signal_table(encoding))
    SignalSpec(kind, name, type, exp10, offset, bit, unit)       (a NamedTuple)
    signal_table(encoding) -> tuple[SignalSpec, ...]
    compare_signal_tables(ours, theirs) -> str | None      first difference, in words
    pack_hello(hello, seq=0) -> bytes;  unpack_hello(frame) -> Hello
    frame_kind(frame) -> int;  frame_seq(frame) -> int
    class Codec(encoding):
        pack_command(cmd) -> bytes         header seq = cmd.seq
        pack_feedback(fb) -> bytes         header seq = fb.seq
        pack_trip(trip, seq) -> bytes;  pack_control(msg, seq) -> bytes
        unpack_command(frame) -> Command;  unpack_feedback(frame) -> Feedback
        unpack_trip(frame) -> TripReport;  unpack_control(frame) -> ControlMessage
        unpack(frame) -> Command | Feedback | TripReport | ControlMessage | Hello
        saturated: dict[str, int]
    command_problem(cmd) -> str | None     why a decoded command must not be applied

Must never import serial, numpy or rtmodel.
"""

from __future__ import annotations

import math
import struct
from dataclasses import dataclass
from typing import NamedTuple

from host import signals as sig
from host.link.wire import MAX_PAYLOAD

PROTOCOL_VERSION = 1
ENC_FIXED = 0
ENC_FLOAT32 = 1
ENCODINGS = {"fixed": ENC_FIXED, "float32": ENC_FLOAT32}
ENCODING_NAMES = {v: k for k, v in ENCODINGS.items()}

KIND_HELLO = 1
KIND_COMMAND = 2
KIND_FEEDBACK = 3
KIND_TRIP = 4
KIND_CONTROL = 5
KIND_NAMES = {
    KIND_HELLO: "hello",
    KIND_COMMAND: "command",
    KIND_FEEDBACK: "feedback",
    KIND_TRIP: "trip",
    KIND_CONTROL: "control",
}

ROLE_HOST = 0
ROLE_CONTROLLER = 1
ROLE_NAMES = {ROLE_HOST: "host", ROLE_CONTROLLER: "controller"}

# Wire type codes used in the HELLO signal table
T_U8, T_U16, T_U32, T_I32, T_F32, T_BIT, T_TEXT = 1, 2, 3, 4, 5, 6, 7
TYPE_NAMES = {T_U8: "u8", T_U16: "u16", T_U32: "u32", T_I32: "i32", T_F32: "f32", T_BIT: "bit", T_TEXT: "text"}
_SIZES = {T_U8: 1, T_U16: 2, T_U32: 4, T_I32: 4, T_F32: 4, T_TEXT: 1}
_FMT = {T_U8: "B", T_U16: "H", T_U32: "I", T_I32: "i", T_F32: "f"}
_LIMITS = {T_U8: (0, 0xFF), T_U16: (0, 0xFFFF), T_U32: (0, 0xFFFFFFFF), T_I32: (-(2**31), 2**31 - 1)}
FLT_MAX = 3.4028234663852886e38
CONTROL_TEXT_MAX = 200  # bytes of UTF-8

# Layout per kind: (name or tuple of bit names, fixed type, float32 type, exp10, unit).
# exp10 is the fixed-point scale: value_in_unit = raw * 10**exp10 (float32 carries the value).
_LAYOUT: dict[int, list[tuple]] = {
    KIND_COMMAND: [
        ("mode", T_U8, T_U8, 0, "-"),
        ("bridge_select", T_U8, T_U8, 0, "-"),
        ("field_mode", T_U8, T_U8, 0, "-"),
        (("contactor", "trip"), T_BIT, T_BIT, 0, "-"),
        ("armature_cmd", T_I32, T_F32, -2, "deg|V|A"),
        ("field_cmd", T_I32, T_F32, -2, "deg|V"),
        ("trip_code", T_U16, T_U16, 0, "-"),
    ],
    KIND_FEEDBACK: [
        ("ack_seq", T_U16, T_U16, 0, "-"),
        ("model_time_us", T_U32, T_U32, 0, "us"),
        ("armature_current_A", T_I32, T_F32, -2, "A"),
        ("field_current_A", T_I32, T_F32, -3, "A"),
        ("armature_voltage_V", T_I32, T_F32, -2, "V"),
        ("tacho_voltage_V", T_I32, T_F32, -3, "V"),
        ("encoder_count", T_I32, T_I32, 0, "count"),
        ("mains_angle_deg", T_U16, T_F32, -2, "deg"),
        ("mains_voltage_V", T_I32, T_F32, -2, "V"),
        ("op_speed_ref_rpm", T_I32, T_F32, -2, "rpm"),
        ("host_status", T_U32, T_U32, 0, "-"),
        (("contactor_closed", "op_run", "op_stop"), T_BIT, T_BIT, 0, "-"),
    ],
    KIND_TRIP: [
        ("trip_code", T_U16, T_U16, 0, "-"),
        ("controller_time_us", T_U32, T_U32, 0, "us"),
        ("detail", T_I32, T_F32, -2, "A|rpm|V"),
    ],
    KIND_CONTROL: [
        ("op", T_U8, T_U8, 0, "-"),
        ("value", T_I32, T_F32, -2, "-|rpm"),
        ("text", T_TEXT, T_TEXT, 0, "utf-8"),
    ],
}
_WRAP = {"ack_seq", "model_time_us", "encoder_count", "host_status", "controller_time_us"}


class FrameError(ValueError):
    """A CRC-valid frame whose header or body does not fit this protocol version."""


class SignalSpec(NamedTuple):
    kind: int
    name: str
    type: int
    exp10: int
    offset: int  # byte offset in the body (after the 3-byte header)
    bit: int
    unit: str

    def describe(self) -> str:
        scale = f"10^{self.exp10}" if self.exp10 else "1"
        return (
            f"{TYPE_NAMES.get(self.type, self.type)} at body offset {self.offset}"
            + (f" bit {self.bit}" if self.type == T_BIT else "")
            + f", scale {scale}, unit {self.unit!r}"
        )


def signal_table(encoding: int) -> tuple[SignalSpec, ...]:
    """The signals of every frame kind as this encoding lays them out (HELLO order)."""
    if encoding not in ENCODING_NAMES:
        raise ValueError(f"unknown encoding {encoding}")
    out = []
    for kind in (KIND_COMMAND, KIND_FEEDBACK, KIND_TRIP, KIND_CONTROL):
        offset = 0
        for name, t_fix, t_flt, exp10, unit in _LAYOUT[kind]:
            t = t_fix if encoding == ENC_FIXED else t_flt
            e = exp10 if t != T_F32 else 0
            if t == T_BIT:
                for bit, bname in enumerate(name):
                    out.append(SignalSpec(kind, bname, T_BIT, 0, offset, bit, unit))
                offset += 1
            else:
                out.append(SignalSpec(kind, name, t, e, offset, 0, unit))
                offset += _SIZES[t]
    return tuple(out)


def _body_format(kind: int, encoding: int) -> str:
    fmt = "<BH"
    for _name, t_fix, t_flt, _e, _u in _LAYOUT[kind]:
        t = t_fix if encoding == ENC_FIXED else t_flt
        fmt += "B" if t in (T_BIT, T_TEXT) else _FMT[t]
    return fmt


def compare_signal_tables(ours: tuple, theirs: tuple) -> str | None:
    """None when both tables agree, else the first difference in words."""
    mine = {(s.kind, s.name): s for s in ours}
    peer = {(s.kind, s.name): s for s in theirs}
    for s in ours:
        key = (s.kind, s.name)
        label = f"{KIND_NAMES.get(s.kind, s.kind)}.{s.name}"
        if key not in peer:
            return f"signal {label} is missing at the peer"
        p = peer[key]
        if p != s:
            return f"signal {label}: ours is {s.describe()}, the peer's is {p.describe()}"
    for p in theirs:
        if (p.kind, p.name) not in mine:
            return f"the peer has signal {KIND_NAMES.get(p.kind, p.kind)}.{p.name} we do not know"
    if tuple(ours) != tuple(theirs):
        return "the signal lists hold the same signals in a different order"
    return None


@dataclass(slots=True)
class Hello:
    role: int
    encoding: int
    frame_period_us: int
    max_payload: int = MAX_PAYLOAD
    protocol_version: int = PROTOCOL_VERSION
    signals: tuple | None = None  # None: this side's own table for the encoding
    # host HELLO only: (tachogenerator uV per rpm, encoder counts per revolution), 0 = not given
    sensors: tuple[int, int] = (0, 0)

    def __post_init__(self):
        if self.signals is None:
            self.signals = signal_table(self.encoding)


_HELLO_HEAD = struct.Struct("<BHBBBBIHH")
_ENTRY_HEAD = struct.Struct("<BBbBB")
_SENSOR_BLOCK = struct.Struct("<II")  # after the table, host HELLO only (docs/protocol.md 6.5)


def pack_hello(hello: Hello, seq: int = 0) -> bytes:
    parts = [
        _HELLO_HEAD.pack(
            (PROTOCOL_VERSION << 4) | KIND_HELLO,
            seq & 0xFFFF,
            hello.protocol_version,
            hello.role,
            hello.encoding,
            len(hello.signals),
            hello.frame_period_us,
            hello.max_payload,
            0,
        )
    ]
    for s in hello.signals:
        name = s.name.encode("ascii")
        unit = s.unit.encode("ascii")
        parts.append(_ENTRY_HEAD.pack(s.kind, s.type, s.exp10, s.offset, s.bit))
        parts.append(bytes((len(name),)) + name + bytes((len(unit),)) + unit)
    if hello.role == ROLE_HOST:
        tacho, counts = (min(max(int(v), 0), 0xFFFFFFFF) for v in hello.sensors)
        parts.append(_SENSOR_BLOCK.pack(tacho, counts))
    return b"".join(parts)


def unpack_hello(frame: bytes) -> Hello:
    if len(frame) < _HELLO_HEAD.size:
        raise FrameError(f"hello frame of {len(frame)} bytes is shorter than its {_HELLO_HEAD.size}-byte head")
    kb, _seq, version, role, encoding, n, period_us, max_payload, _res = _HELLO_HEAD.unpack_from(frame)
    if kb & 0x0F != KIND_HELLO:
        raise FrameError("not a hello frame")
    pos = _HELLO_HEAD.size
    specs = []
    try:
        for _ in range(n):
            kind, t, exp10, offset, bit = _ENTRY_HEAD.unpack_from(frame, pos)
            pos += _ENTRY_HEAD.size
            ln = frame[pos]
            name = frame[pos + 1 : pos + 1 + ln].decode("ascii")
            pos += 1 + ln
            lu = frame[pos]
            unit = frame[pos + 1 : pos + 1 + lu].decode("ascii")
            pos += 1 + lu
            specs.append(SignalSpec(kind, name, t, exp10, offset, bit, unit))
    except (IndexError, struct.error, UnicodeDecodeError) as err:
        raise FrameError(f"hello frame signal table is truncated or not ASCII ({err})") from err
    sensors = (0, 0)
    if role == ROLE_HOST:
        if len(frame) - pos != _SENSOR_BLOCK.size:
            raise FrameError(f"host hello frame has {len(frame) - pos} bytes after its signal table, "
                             f"its sensor block is {_SENSOR_BLOCK.size}")
        sensors = _SENSOR_BLOCK.unpack_from(frame, pos)
        pos += _SENSOR_BLOCK.size
    if pos != len(frame):
        raise FrameError(f"hello frame has {len(frame) - pos} bytes after its signal table")
    h = Hello(role, encoding, period_us, max_payload, version, tuple(specs), tuple(sensors))
    return h


def frame_kind(frame: bytes) -> int:
    return frame[0] & 0x07


def frame_seq(frame: bytes) -> int:
    return frame[1] | (frame[2] << 8)


def command_problem(cmd: sig.Command) -> str | None:
    """Why a decoded command must not reach the model (None when it may)."""
    if cmd.mode not in (sig.MODE_FIRING_ANGLE, sig.MODE_VOLTAGE, sig.MODE_CURRENT):
        return f"mode {cmd.mode} is not one of 0, 1, 2"
    if cmd.bridge_select not in (sig.BRIDGE_BLOCKED, sig.BRIDGE_FORWARD, sig.BRIDGE_REVERSE):
        return f"bridge_select {cmd.bridge_select} is not one of 0, 1, 2"
    if cmd.field_mode not in (sig.FIELD_MODE_FIRING_ANGLE, sig.FIELD_MODE_VOLTAGE):
        return f"field_mode {cmd.field_mode} is not one of 0, 1"
    if not (math.isfinite(cmd.armature_cmd) and math.isfinite(cmd.field_cmd)):
        return "armature_cmd or field_cmd is not finite"
    return None


_PACK_ERRORS = (struct.error, ValueError, OverflowError, TypeError)


class Codec:
    """Packs and unpacks COMMAND, FEEDBACK, TRIP and CONTROL frames in one encoding.

    The common case runs one precompiled struct call; only when a value does not fit does
    the slow path apply the saturation rule field by field and count it.
    """

    def __init__(self, encoding: int):
        if encoding not in ENCODING_NAMES:
            raise ValueError(f"unknown encoding {encoding}")
        self.encoding = encoding
        self.fixed = encoding == ENC_FIXED
        self.saturated: dict[str, int] = {}
        kb = (PROTOCOL_VERSION << 4) | (encoding << 3)
        self.kb_command = kb | KIND_COMMAND
        self.kb_feedback = kb | KIND_FEEDBACK
        self.kb_trip = kb | KIND_TRIP
        self.kb_control = kb | KIND_CONTROL
        self._s = {k: struct.Struct(_body_format(k, encoding)) for k in _LAYOUT if k != KIND_CONTROL}
        self._cmd = self._s[KIND_COMMAND]
        self._fb = self._s[KIND_FEEDBACK]
        self._control_head = struct.Struct(_body_format(KIND_CONTROL, encoding))
        self._kb_of = {
            KIND_COMMAND: self.kb_command,
            KIND_FEEDBACK: self.kb_feedback,
            KIND_TRIP: self.kb_trip,
            KIND_CONTROL: self.kb_control,
        }

    # ---- hot path: command and feedback ------------------------------------------------------
    def pack_command(self, c: sig.Command) -> bytes:
        try:
            if self.fixed:
                return self._cmd.pack(
                    self.kb_command, c.seq & 0xFFFF, c.mode, c.bridge_select, c.field_mode,
                    (1 if c.contactor else 0) | (2 if c.trip else 0),
                    round(c.armature_cmd * 100), round(c.field_cmd * 100), c.trip_code,
                )  # fmt: skip
            return self._cmd.pack(
                self.kb_command, c.seq & 0xFFFF, c.mode, c.bridge_select, c.field_mode,
                (1 if c.contactor else 0) | (2 if c.trip else 0),
                c.armature_cmd, c.field_cmd, c.trip_code,
            )  # fmt: skip
        except _PACK_ERRORS:
            return self._pack_slow(KIND_COMMAND, c, c.seq)

    def pack_feedback(self, f: sig.Feedback) -> bytes:
        flags = (1 if f.contactor_closed else 0) | (2 if f.op_run else 0) | (4 if f.op_stop else 0)
        try:
            if self.fixed:
                return self._fb.pack(
                    self.kb_feedback, f.seq & 0xFFFF, f.ack_seq & 0xFFFF, f.model_time_us & 0xFFFFFFFF,
                    round(f.armature_current_A * 100), round(f.field_current_A * 1000),
                    round(f.armature_voltage_V * 100), round(f.tacho_voltage_V * 1000),
                    f.encoder_count, round(f.mains_angle_deg * 100) % 36000,
                    round(f.mains_voltage_V * 100), round(f.op_speed_ref_rpm * 100),
                    f.host_status & 0xFFFFFFFF, flags,
                )  # fmt: skip
            return self._fb.pack(
                self.kb_feedback, f.seq & 0xFFFF, f.ack_seq & 0xFFFF, f.model_time_us & 0xFFFFFFFF,
                f.armature_current_A, f.field_current_A, f.armature_voltage_V, f.tacho_voltage_V,
                f.encoder_count, f.mains_angle_deg, f.mains_voltage_V, f.op_speed_ref_rpm,
                f.host_status & 0xFFFFFFFF, flags,
            )  # fmt: skip
        except _PACK_ERRORS:
            return self._pack_slow(KIND_FEEDBACK, f, f.seq)

    def unpack_command(self, frame: bytes) -> sig.Command:
        try:
            kb, seq, mode, bsel, fmode, flags, acmd, fcmd, tcode = self._cmd.unpack(frame)
        except struct.error as err:
            raise FrameError(f"command frame of {len(frame)} bytes, expected {self._cmd.size}") from err
        if kb != self.kb_command:
            raise FrameError(self._kb_problem(kb, KIND_COMMAND))
        if self.fixed:
            acmd /= 100
            fcmd /= 100
        return sig.Command(seq, mode, bsel, acmd, fmode, fcmd, flags & 1, (flags >> 1) & 1, tcode)

    def unpack_feedback(self, frame: bytes) -> sig.Feedback:
        try:
            kb, seq, ack, t_us, ia, if_, ua, ut, enc, ang, um, nref, status, flags = self._fb.unpack(frame)
        except struct.error as err:
            raise FrameError(f"feedback frame of {len(frame)} bytes, expected {self._fb.size}") from err
        if kb != self.kb_feedback:
            raise FrameError(self._kb_problem(kb, KIND_FEEDBACK))
        if self.fixed:
            ia /= 100
            if_ /= 1000
            ua /= 100
            ut /= 1000
            ang /= 100
            um /= 100
            nref /= 100
        return sig.Feedback(
            seq, ack, t_us, ia, if_, ua, ut, enc, ang, um,
            flags & 1, status, (flags >> 1) & 1, (flags >> 2) & 1, nref,
        )  # fmt: skip

    # ---- event frames: trip and control (not on the hot path) ----------------------------------
    def pack_trip(self, t: sig.TripReport, seq: int) -> bytes:
        return self._pack_slow(KIND_TRIP, t, seq)

    def unpack_trip(self, frame: bytes) -> sig.TripReport:
        s = self._s[KIND_TRIP]
        try:
            kb, _seq, code, t_us, detail = s.unpack(frame)
        except struct.error as err:
            raise FrameError(f"trip frame of {len(frame)} bytes, expected {s.size}") from err
        if kb != self.kb_trip:
            raise FrameError(self._kb_problem(kb, KIND_TRIP))
        return sig.TripReport(code, t_us, detail / 100 if self.fixed else detail)

    def pack_control(self, m: sig.ControlMessage, seq: int) -> bytes:
        return self._pack_slow(KIND_CONTROL, m, seq)

    def unpack_control(self, frame: bytes) -> sig.ControlMessage:
        h = self._control_head
        try:
            kb, _seq, op, value, n = h.unpack_from(frame)
        except struct.error as err:
            raise FrameError(f"control frame of {len(frame)} bytes is shorter than {h.size}") from err
        if kb != self.kb_control:
            raise FrameError(self._kb_problem(kb, KIND_CONTROL))
        if len(frame) != h.size + n:
            raise FrameError(f"control frame of {len(frame)} bytes, text length says {h.size + n}")
        text = frame[h.size :].decode("utf-8", errors="replace")
        return sig.ControlMessage(op, value / 100 if self.fixed else value, text)

    def unpack(self, frame: bytes):
        """Decode any frame kind; raises FrameError for anything this version cannot read."""
        if len(frame) < 3:  # found by the fuzz target: an empty frame raised IndexError
            raise FrameError(f"frame of {len(frame)} bytes is shorter than its 3-byte header")
        kind = frame[0] & 0x07
        if kind == KIND_COMMAND:
            return self.unpack_command(frame)
        if kind == KIND_FEEDBACK:
            return self.unpack_feedback(frame)
        if kind == KIND_HELLO:
            if frame[0] >> 4 != PROTOCOL_VERSION:
                raise FrameError(self._kb_problem(frame[0], KIND_HELLO))
            return unpack_hello(frame)
        if kind == KIND_TRIP:
            return self.unpack_trip(frame)
        if kind == KIND_CONTROL:
            return self.unpack_control(frame)
        raise FrameError(f"unknown frame kind {kind} (header byte 0x{frame[0]:02X})")

    # ---- slow path: the saturation rule, field by field ---------------------------------------
    def _count(self, name: str) -> None:
        self.saturated[name] = self.saturated.get(name, 0) + 1

    def _convert(self, name: str, t: int, exp10: int, value):
        if t == T_F32:
            v = float(value)
            if v > FLT_MAX and v != math.inf:
                self._count(name)
                return FLT_MAX
            if v < -FLT_MAX and v != -math.inf:
                self._count(name)
                return -FLT_MAX
            return v
        lo, hi = _LIMITS[t]
        if exp10:
            v = float(value) * 10.0 ** (-exp10)
            if math.isnan(v):
                self._count(name)
                return 0
            if name == "mains_angle_deg":
                return round(v) % 36000 if math.isfinite(v) else 0
            if v >= hi:
                if v > hi + 0.5:
                    self._count(name)
                return hi
            if v <= lo:
                if v < lo - 0.5:
                    self._count(name)
                return lo
            return round(v)
        v = int(value)
        if name in _WRAP:
            v &= hi if lo == 0 else 0xFFFFFFFF
            return v - 0x100000000 if lo < 0 and v > hi else v
        if v > hi:
            self._count(name)
            return hi
        if v < lo:
            self._count(name)
            return lo
        return v

    def _pack_slow(self, kind: int, obj, seq: int) -> bytes:
        values = [self._kb_of[kind], int(seq) & 0xFFFF]
        text = b""
        for name, t_fix, t_flt, exp10, _unit in _LAYOUT[kind]:
            t = t_fix if self.fixed else t_flt
            if t == T_BIT:
                values.append(sum((1 << i) for i, b in enumerate(name) if getattr(obj, b)))
            elif t == T_TEXT:
                text = _clip_utf8(str(getattr(obj, name)), CONTROL_TEXT_MAX)
                if len(text) < len(str(getattr(obj, name)).encode("utf-8")):
                    self._count(name)
                values.append(len(text))
            else:
                values.append(self._convert(name, t, exp10, getattr(obj, name)))
        if kind == KIND_CONTROL:
            return self._control_head.pack(*values) + text
        return self._s[kind].pack(*values)

    def _kb_problem(self, kb: int, kind: int) -> str:
        if kb >> 4 != PROTOCOL_VERSION:
            return f"{KIND_NAMES[kind]} frame of protocol version {kb >> 4}, ours is {PROTOCOL_VERSION}"
        enc = (kb >> 3) & 1
        return (
            f"{KIND_NAMES[kind]} frame in {ENCODING_NAMES[enc]} encoding, "
            f"the session uses {ENCODING_NAMES[self.encoding]}"
        )


def _clip_utf8(text: str, limit: int) -> bytes:
    raw = text.encode("utf-8")
    if len(raw) <= limit:
        return raw
    # cut on a character boundary so the receiver never sees half a character
    return raw[:limit].decode("utf-8", errors="ignore").encode("utf-8")
