"""A second implementation of the dcrig link, controller side, written from docs/protocol.md alone.

It deliberately shares no code with host/link (it never imports host): COBS comes from the
`cobs` PyPI package and the CRC from the `crc` PyPI package (CRC-16/IBM-3740, as the
document names it), the frame layouts are the document's tables, and the HELLO signal table
is read from the document's own table at run time, so a difference between the document and
the host shows up as a refused handshake. Used by tests/test_link_contract.py.
"""

from __future__ import annotations

import os
import re
import select
import struct
import time
from pathlib import Path

from cobs import cobs
from crc import Calculator, Crc16

DOC = Path(__file__).resolve().parents[1] / "docs" / "protocol.md"
CRC = Calculator(Crc16.IBM_3740)

VERSION = 1  # section 4
KIND = {"hello": 1, "command": 2, "feedback": 3, "trip": 4, "control": 5}
TYPE_CODE = {"u8": 1, "u16": 2, "u32": 3, "i32": 4, "f32": 5, "bit": 6, "text": 7}  # section 6.5
ACK_NONE = 0xFFFF  # section 4: ack_seq before anything is applied
HOST_LOCKSTEP = 1 << 3  # section 6.2 host_status bits
HOST_WATCHDOG_TRIPPED = 1 << 1
HOST_COMMAND_REFUSED = 1 << 6


def doc_signal_table(encoding: int) -> list[tuple]:
    """(kind, type, exp10, offset, bit, name, unit) per entry, from the document's table."""
    rows = []
    for line in DOC.read_text(encoding="utf-8").splitlines():
        m = re.match(r"^\| (command|feedback|trip|control) \((\d)\) \| `([a-z_A-Z]+)` \| (\w+) / (\w+) \| "
                     r"(-?\d) / (-?\d) \| (\d+) / (\d+) \| (\d) \| `(.+)` \|$", line)
        if not m:
            continue
        kind = int(m.group(2))
        t = m.group(4 + encoding)
        exp10 = int(m.group(6 + encoding))
        offset = int(m.group(8 + encoding))
        unit = m.group(11).replace("\\|", "|")
        rows.append((kind, TYPE_CODE[t], exp10, offset, int(m.group(10)), m.group(3), unit))
    assert len(rows) == 28, f"the document's HELLO table has {len(rows)} entries, it says 28"
    return rows


def header(kind: str, encoding: int, seq: int) -> bytes:
    enc = 0 if kind == "hello" else encoding
    return struct.pack("<BH", (VERSION << 4) | (enc << 3) | KIND[kind], seq & 0xFFFF)


def to_wire(frame: bytes) -> bytes:
    """Section 2 and 3: COBS(frame || CRC u16 little-endian) || 0x00."""
    return cobs.encode(frame + CRC.checksum(frame).to_bytes(2, "little")) + b"\x00"


def from_wire(chunk: bytes) -> bytes | None:
    """One delimited chunk (without 0x00) -> frame, None when COBS or CRC fail."""
    try:
        dec = cobs.decode(chunk)
    except cobs.DecodeError:
        return None
    if len(dec) < 5 or CRC.checksum(dec[:-2]) != int.from_bytes(dec[-2:], "little"):
        return None
    return dec[:-2]


def pack_hello_controller(encoding: int, period_us: int, seq: int = 0xFFFF) -> bytes:
    body = struct.pack("<BBBBIHH", VERSION, 1, encoding, 28, period_us, 1024, 0)
    for kind, t, exp10, off, bit, name, unit in doc_signal_table(encoding):
        body += struct.pack("<BBbBB", kind, t, exp10, off, bit)
        body += bytes([len(name)]) + name.encode("ascii") + bytes([len(unit)]) + unit.encode("ascii")
    return header("hello", encoding, seq) + body


def parse_hello(frame: bytes) -> dict:
    version, role, enc, n, period, max_payload, _res = struct.unpack_from("<BBBBIHH", frame, 3)
    pos = 15
    table = []
    for _ in range(n):
        kind, t, exp10, off, bit = struct.unpack_from("<BBbBB", frame, pos)
        pos += 5
        ln = frame[pos]
        name = frame[pos + 1: pos + 1 + ln].decode("ascii")
        pos += 1 + ln
        lu = frame[pos]
        unit = frame[pos + 1: pos + 1 + lu].decode("ascii")
        pos += 1 + lu
        table.append((kind, t, exp10, off, bit, name, unit))
    out = {"version": version, "header_version": frame[0] >> 4, "role": role, "encoding": enc,
           "period_us": period, "max_payload": max_payload, "table": table, "sensors": None}
    if role == 0:  # section 6.5: the host's HELLO ends with the 8-byte sensor block
        out["sensors"] = struct.unpack_from("<II", frame, pos)
        pos += 8
    assert pos == len(frame), f"{len(frame) - pos} bytes left in the HELLO"
    return out


def pack_command(encoding: int, seq: int, mode: int, bridge: int, field_mode: int, contactor: int,
                 armature: float, field: float, trip: int = 0, trip_code: int = 0) -> bytes:
    """Section 6.1. Fixed point: raw = round(value x 100), saturated to i32 (section 5)."""
    flags = (1 if contactor else 0) | (2 if trip else 0)
    if encoding == 0:
        def raw(v):
            r = v * 100.0
            if r != r:  # NaN packs as 0
                return 0
            if r >= 2**31 - 1:  # +inf and everything beyond saturate
                return 2**31 - 1
            if r <= -(2**31):
                return -(2**31)
            return round(r)
        body = struct.pack("<BBBBiiH", mode, bridge, field_mode, flags, raw(armature), raw(field), trip_code)
    else:
        body = struct.pack("<BBBBffH", mode, bridge, field_mode, flags, armature, field, trip_code)
    return header("command", encoding, seq) + body


def pack_control(encoding: int, seq: int, op: int, value: float = 0.0, text: str = "") -> bytes:
    t = text.encode("utf-8")[:200]
    v = struct.pack("<i", int(round(value * 100))) if encoding == 0 else struct.pack("<f", value)
    return header("control", encoding, seq) + bytes([op]) + v + bytes([len(t)]) + t


FEEDBACK_FIELDS = ("ack_seq", "model_time_us", "armature_current_A", "field_current_A", "armature_voltage_V",
                   "tacho_voltage_V", "encoder_count", "mains_angle_deg", "mains_voltage_V", "op_speed_ref_rpm",
                   "host_status", "flags")
_FB_SCALE = (1, 1, 1e-2, 1e-3, 1e-2, 1e-3, 1, 1e-2, 1e-2, 1e-2, 1, 1)


def parse_feedback(frame: bytes, encoding: int) -> dict:
    """Section 6.2: 41-byte (fixed) or 43-byte (float32) body."""
    fmt = "<HIiiiiiHiiIB" if encoding == 0 else "<HIffffifffIB"
    assert len(frame) == 3 + struct.calcsize(fmt), len(frame)
    vals = struct.unpack_from(fmt, frame, 3)
    out = {"seq": frame[1] | frame[2] << 8}
    for name, v, k in zip(FEEDBACK_FIELDS, vals, _FB_SCALE):
        out[name] = v * k if encoding == 0 and k != 1 else v
    out["contactor_closed"] = out["flags"] & 1
    return out


class SpecLine:
    """A raw byte pipe on a file descriptor (a pty slave) with the document's deframing."""

    def __init__(self, fd: int):
        self.fd = fd
        self.buf = b""

    def send(self, frame: bytes) -> None:
        data = to_wire(frame)
        while data:
            n = os.write(self.fd, data)
            data = data[n:]

    def send_raw(self, data: bytes) -> None:
        os.write(self.fd, data)

    def recv(self, timeout_s: float) -> bytes | None:
        deadline = time.monotonic() + timeout_s
        while True:
            while b"\x00" in self.buf:
                chunk, self.buf = self.buf.split(b"\x00", 1)
                if chunk:
                    frame = from_wire(chunk)
                    if frame is not None:
                        return frame
            left = deadline - time.monotonic()
            if left <= 0:
                return None
            r, _, _ = select.select([self.fd], [], [], left)
            if r:
                try:
                    data = os.read(self.fd, 4096)
                except OSError:
                    return None
                if not data:
                    return None
                self.buf += data

    def recv_kind(self, kind: str, timeout_s: float) -> bytes | None:
        deadline = time.monotonic() + timeout_s
        while True:
            f = self.recv(max(0.0, deadline - time.monotonic()))
            if f is None:
                return None
            if f[0] & 0x07 == KIND[kind]:
                return f
