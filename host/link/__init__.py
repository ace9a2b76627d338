"""The serial link between the host and a drive controller: framing, frames, transports, sessions.

Owns the dcrig link protocol (docs/protocol.md). Submodules, lowest first:
    wire       COBS, CRC-16/IBM-3740, streaming Deframer
    frames     frame layouts, fixed-point/float32 Codec, HELLO and signal table
    transport  Link base class, pyserial/pty/accept:// (TCP listening) links, open_link()
    session    HostSession, ControllerSession, SeqTracker, Watchdog
Must never import numpy, numba or rtmodel (the link runs in the emulated controller too).
"""

from host.link.frames import ENC_FIXED, ENC_FLOAT32, ENCODINGS, Codec, FrameError, Hello
from host.link.session import ControllerSession, HostSession, SeqTracker, Watchdog
from host.link.transport import AcceptLink, Link, LinkWarning, VirtualCable, open_link
from host.link.wire import Deframer, cobs_decode, cobs_encode, crc16, encode_wire

__all__ = [
    "ENC_FIXED", "ENC_FLOAT32", "ENCODINGS", "Codec", "FrameError", "Hello",
    "ControllerSession", "HostSession", "SeqTracker", "Watchdog",
    "AcceptLink", "Link", "LinkWarning", "VirtualCable", "open_link",
    "Deframer", "cobs_decode", "cobs_encode", "crc16", "encode_wire",
]  # fmt: skip
