"""Byte-stream framing of dcrig: COBS stuffing, the CRC-16 and the streaming deframer.

Owns: how one frame (header + body, see host.link.frames) becomes bytes on the line and back:

    wire = COBS(frame || CRC-16/IBM-3740(frame) as u16 little-endian) || 0x00

COBS is the Consistent Overhead Byte Stuffing of Cheshire & Baker (IEEE/ACM Transactions on
Networking, 1999); the encoder elides the trailing 0x01 code when the data ends exactly on a
full 254-byte block (the same output as the `cobs` PyPI package). Every decoder accepts both
forms. The CRC is computed by binascii.crc_hqx, which is CRC-16 with poly 0x1021, no
reflection, no final xor; seeded with 0xFFFF it is CRC-16/IBM-3740 (check 0x29B1).

Public API (hot path, keep lean):
    cobs_encode(data: bytes) -> bytes
    cobs_decode(data: bytes) -> bytes                     raises CobsError
    crc16(data: bytes, crc: int = 0xFFFF) -> int
    encode_wire(frame: bytes) -> bytes                    frame -> stuffed bytes incl. delimiter
    Deframer(max_payload=MAX_PAYLOAD).feed(chunk) -> list[bytes]   valid frames, CRC removed
        counters: frames, crc_errors, cobs_errors, oversize, runts, garbage_bytes; stats()

Must never import serial, numpy, rtmodel or anything above host.link.
"""

from __future__ import annotations

from binascii import crc_hqx

CRC_INIT = 0xFFFF
CRC_LEN = 2
HEADER_LEN = 3  # version/kind byte + u16 sequence counter, see host.link.frames
MIN_PAYLOAD = HEADER_LEN + CRC_LEN
MAX_PAYLOAD = 1024  # decoded bytes incl. header and CRC; the HELLO frame is the largest


class CobsError(ValueError):
    """The bytes between two delimiters are not a valid COBS encoding."""


def crc16(data: bytes, crc: int = CRC_INIT) -> int:
    """CRC-16/IBM-3740 of data (poly 0x1021, init 0xFFFF, refin/refout false, xorout 0)."""
    return crc_hqx(data, crc)


def cobs_encode(data: bytes) -> bytes:
    """COBS-encode data; the result contains no zero byte and no delimiter."""
    out = bytearray()
    blocks = data.split(b"\x00")
    last = len(blocks) - 1
    for i, block in enumerate(blocks):
        n = len(block)
        if n < 254:  # the common case in our short frames: one code byte per zero
            out.append(n + 1)
            out += block
            continue
        pos = 0
        while n - pos >= 254:
            out.append(0xFF)
            out += block[pos : pos + 254]
            pos += 254
        if pos < n or i != last:
            # a full block at the very end needs no trailing code (nothing follows it)
            out.append(n - pos + 1)
            out += block[pos:]
    return bytes(out)


def cobs_decode(data: bytes) -> bytes:
    """Decode one COBS block sequence (without the delimiter)."""
    out = bytearray()
    i = 0
    n = len(data)
    while i < n:
        code = data[i]
        if code == 0:
            raise CobsError(f"zero code byte at offset {i}")
        j = i + code
        if j > n:
            raise CobsError(f"code {code} at offset {i} runs past the end ({n} bytes)")
        out += data[i + 1 : j]
        if code != 0xFF and j < n:
            out.append(0)
        i = j
    if b"\x00" in data:
        raise CobsError("zero byte inside a COBS block")
    return bytes(out)


def encode_wire(frame: bytes) -> bytes:
    """Append the CRC (u16 LE), COBS-encode and add the 0x00 delimiter."""
    return cobs_encode(frame + crc_hqx(frame, CRC_INIT).to_bytes(2, "little")) + b"\x00"


class Deframer:
    """Turns arbitrary byte chunks into valid frames (header + body, CRC stripped).

    Resynchronises on every 0x00: garbage, a torn frame or a corrupted frame costs only the
    bytes up to the next delimiter. Empty frames (repeated delimiters) are ignored without
    counting: a sender may send a lone 0x00 to flush the receiver. Counters:
        frames         valid frames returned
        crc_errors     COBS-valid but the CRC did not match
        cobs_errors    not a valid COBS sequence
        oversize       more than the encoded maximum without a delimiter
        runts          decoded shorter than header + CRC
        torn           a partial frame dropped when the line was reset (peer disconnected)
        garbage_bytes  bytes thrown away for any of the reasons above
    """

    __slots__ = (
        "max_payload",
        "_max_wire",
        "_buf",
        "_discarding",
        "frames",
        "crc_errors",
        "cobs_errors",
        "oversize",
        "runts",
        "torn",
        "garbage_bytes",
    )

    def __init__(self, max_payload: int = MAX_PAYLOAD):
        self.max_payload = max_payload
        # COBS adds one code byte per started 254-byte block
        self._max_wire = max_payload + (max_payload + 253) // 254
        self._buf = b""
        self._discarding = False
        self.frames = 0
        self.crc_errors = 0
        self.cobs_errors = 0
        self.oversize = 0
        self.runts = 0
        self.torn = 0
        self.garbage_bytes = 0

    def reset(self) -> None:
        """Forget a partial frame (counters stay; a partial frame forgotten counts as torn)."""
        if self._buf:
            self.torn += 1
            self.garbage_bytes += len(self._buf)
        self._buf = b""
        self._discarding = False

    def stats(self) -> dict[str, int]:
        return {
            "frames": self.frames,
            "crc_errors": self.crc_errors,
            "cobs_errors": self.cobs_errors,
            "oversize": self.oversize,
            "runts": self.runts,
            "torn": self.torn,
            "garbage_bytes": self.garbage_bytes,
        }

    def feed(self, chunk: bytes) -> list[bytes]:
        if b"\x00" not in chunk:
            if self._discarding:
                self.garbage_bytes += len(chunk)
                return []
            self._buf += chunk
            if len(self._buf) > self._max_wire:
                self.oversize += 1
                self.garbage_bytes += len(self._buf)
                self._buf = b""
                self._discarding = True
            return []
        parts = (self._buf + chunk).split(b"\x00")
        self._buf = parts.pop()  # bytes after the last delimiter: an unfinished frame
        out = []
        for i, enc in enumerate(parts):
            if i == 0 and self._discarding:
                self._discarding = False
                self.garbage_bytes += len(enc)
                continue
            if not enc:
                continue
            frame = self._check(enc)
            if frame is not None:
                out.append(frame)
        if len(self._buf) > self._max_wire:
            self.oversize += 1
            self.garbage_bytes += len(self._buf)
            self._buf = b""
            self._discarding = True
        return out

    def _check(self, enc: bytes) -> bytes | None:
        if len(enc) > self._max_wire:
            self.oversize += 1
            self.garbage_bytes += len(enc)
            return None
        try:
            dec = cobs_decode(enc)
        except CobsError:
            self.cobs_errors += 1
            self.garbage_bytes += len(enc)
            return None
        if len(dec) < MIN_PAYLOAD:
            self.runts += 1
            self.garbage_bytes += len(enc)
            return None
        if len(dec) > self.max_payload:
            self.oversize += 1
            self.garbage_bytes += len(enc)
            return None
        frame = dec[:-2]
        if crc_hqx(frame, CRC_INIT) != (dec[-2] | (dec[-1] << 8)):
            self.crc_errors += 1
            self.garbage_bytes += len(enc)
            return None
        self.frames += 1
        return frame
