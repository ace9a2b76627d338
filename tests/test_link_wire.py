"""COBS, CRC and the streaming deframer (host.link.wire) against independent references.

References: the `cobs` PyPI package (cobs.cobs, an independent implementation of Cheshire &
Baker's COBS); the `crc` PyPI package (crc.Crc16.IBM_3740) and the CRC catalogue check value
for "123456789" (reveng CRC catalogue, CRC-16/IBM-3740: check 0x29B1, residue 0x0000).
"""

import random

import pytest
from cobs import cobs as ref_cobs
from crc import Calculator, Crc16

from host.link.wire import CobsError, Deframer, cobs_decode, cobs_encode, crc16, encode_wire

RNG_SEED = 20240611


def _samples():
    rng = random.Random(RNG_SEED)
    fixed = [
        b"",
        b"\x00",
        b"\x00\x00",
        b"\x11\x22\x00\x33",
        b"\x01" * 253,
        b"\x01" * 254,
        b"\x01" * 255,
        b"\x01" * 254 + b"\x00",
        b"\x00" + b"\x01" * 254,
        b"\x01" * 508,
        b"\x01" * 509,
        bytes(range(1, 256)),
        bytes(range(256)) * 4,
    ]
    rand = [bytes(rng.choice((0, 0, rng.randrange(256))) for _ in range(rng.randrange(0, 700))) for _ in range(200)]
    return fixed + rand


@pytest.mark.parametrize("data", _samples())
def test_cobs_matches_reference_package_and_round_trips(data):
    enc = cobs_encode(data)
    assert enc == ref_cobs.encode(data)  # byte-identical with the cobs package
    assert b"\x00" not in enc
    assert cobs_decode(enc) == data
    assert ref_cobs.decode(enc) == data


def test_cobs_254_and_255_byte_runs_exact_bytes():
    # Cheshire & Baker: code 0xFF = 254 data bytes with no zero after them
    run254 = bytes(range(1, 255))
    assert cobs_encode(run254) == b"\xff" + run254  # full last block: no trailing code
    run255 = bytes(range(1, 256))
    assert cobs_encode(run255) == b"\xff" + run255[:254] + b"\x02" + run255[254:]
    assert cobs_encode(run254 + b"\x00") == b"\xff" + run254 + b"\x01\x01"


def test_cobs_decoder_accepts_the_trailing_code_form():
    # the original paper's encoder emits a trailing 0x01 after a full block; both decode alike
    run254 = b"\x07" * 254
    assert cobs_decode(b"\xff" + run254 + b"\x01") == run254


@pytest.mark.parametrize("bad", [b"\x05\x01\x02", b"\xff\x01", b"\x02\x00\x01", b"\x00"])
def test_cobs_decoder_rejects_invalid(bad):
    with pytest.raises(CobsError):
        cobs_decode(bad)
    with pytest.raises(ref_cobs.DecodeError):
        ref_cobs.decode(bad)


def test_crc_catalogue_check_value_and_crc_package():
    assert crc16(b"123456789") == 0x29B1  # CRC catalogue check value, CRC-16/IBM-3740
    calc = Calculator(Crc16.IBM_3740)
    rng = random.Random(RNG_SEED)
    for _ in range(300):
        data = bytes(rng.randrange(256) for _ in range(rng.randrange(0, 300)))
        assert crc16(data) == calc.checksum(data)


def test_crc_residue_when_appended_big_endian():
    # catalogue residue 0x0000: the CRC of data followed by its CRC (MSB first) is zero
    data = b"123456789"
    assert crc16(data + crc16(data).to_bytes(2, "big")) == 0x0000


def _wire(payload: bytes) -> bytes:
    return encode_wire(payload)


def test_encode_wire_layout():
    frame = b"\x13\x01\x00\x00"
    w = encode_wire(frame)
    assert w.endswith(b"\x00") and b"\x00" not in w[:-1]
    dec = ref_cobs.decode(w[:-1])
    assert dec[:-2] == frame
    assert int.from_bytes(dec[-2:], "little") == Calculator(Crc16.IBM_3740).checksum(frame)


def test_deframer_arbitrary_chunks():
    frames = [bytes([0x12, i, 0]) + bytes(range(i)) for i in range(40)]
    stream = b"".join(_wire(f) for f in frames)
    rng = random.Random(RNG_SEED)
    d = Deframer()
    got = []
    pos = 0
    while pos < len(stream):
        n = rng.randrange(1, 9)
        got += d.feed(stream[pos : pos + n])
        pos += n
    assert got == frames
    assert d.frames == 40 and d.crc_errors == d.cobs_errors == d.garbage_bytes == 0


def test_deframer_resyncs_after_leading_garbage():
    d = Deframer()
    garbage = b"\x55\xaa\x13\x37\x99"
    good = b"\x13\x05\x00hello"
    got = d.feed(garbage + b"\x00" + _wire(good))
    assert got == [good]
    assert d.garbage_bytes == len(garbage)
    assert d.crc_errors + d.cobs_errors + d.runts == 1


def test_deframer_resyncs_after_corrupted_frame():
    d = Deframer()
    a, b, c = b"\x13\x01\x00AAAA", b"\x13\x02\x00BBBB", b"\x13\x03\x00CCCC"
    wb = bytearray(_wire(b))
    wb[3] ^= 0x20  # a bit error in the middle of frame b
    got = d.feed(_wire(a) + bytes(wb) + _wire(c))
    assert got == [a, c]
    assert d.crc_errors + d.cobs_errors == 1
    assert d.garbage_bytes == len(wb) - 1


def test_deframer_counts_crc_error():
    d = Deframer()
    frame = b"\x13\x01\x00data"
    raw = frame + (crc16(frame) ^ 0x0001).to_bytes(2, "little")
    assert d.feed(ref_cobs.encode(raw) + b"\x00") == []
    assert d.crc_errors == 1 and d.frames == 0


def test_deframer_oversize_then_recovers():
    d = Deframer(max_payload=64)
    assert d.feed(b"\x01" * 100) == []  # no delimiter for far too long
    assert d.oversize == 1
    assert d.feed(b"\x01" * 50) == []  # still discarding
    good = b"\x13\x09\x00ok"
    assert d.feed(b"\x00" + _wire(good)) == [good]
    assert d.garbage_bytes == 150
    big = b"\x13\x00\x00" + b"x" * 100
    assert d.feed(_wire(big)) == []
    assert d.oversize == 2


def test_deframer_ignores_empty_frames_and_counts_runts():
    d = Deframer()
    assert d.feed(b"\x00\x00\x00") == []
    assert d.garbage_bytes == 0
    assert d.feed(ref_cobs.encode(b"\x13\x01") + b"\x00") == []
    assert d.runts == 1
