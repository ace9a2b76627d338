"""Link fault injection: a Link wrapper that damages the frames it sends, class by class.

Owns the error classes a channel can commit, as the safety-communication standards list them
for a "black channel" (IEC 61784-3, EN 50159: corruption, unintended repetition, incorrect
sequence, loss, unacceptable delay, insertion, masquerade, addressing), plus truncated
frames and garbage bursts, each injected at a configured rate with a seeded generator, and
counted per class (`injected`). The receiving session must detect every one of them; the
class -> receiver counter map is DETECTED_BY.

    FaultyLink(inner, classes=("corrupt", ...), rate=0.05, seed=1)   a Link; send_frame damages
    FaultProxy(host_side, controller_side, faults)                   forwards both ways, damages
                                                                     controller -> host frames

Must never import numpy, numba or rtmodel.
"""

from __future__ import annotations

import random

from host.link.transport import Link
from host.link.wire import encode_wire

CLASSES = ("corrupt", "repeat", "reorder", "loss", "delay", "insert", "masquerade", "addressing",
           "truncate", "garbage")

# which receiver counters (HostLoop.link_error_counts) detect each class
DETECTED_BY = {
    "corrupt": ("crc_errors", "cobs_errors", "runts", "oversize"),
    "truncate": ("crc_errors", "cobs_errors", "runts"),
    "garbage": ("crc_errors", "cobs_errors", "runts", "oversize"),
    "repeat": ("seq_repeats",),
    "reorder": ("seq_out_of_order",),
    "delay": ("seq_out_of_order",),
    "insert": ("seq_out_of_order", "seq_repeats"),
    "loss": ("seq_lost",),  # frames lost (SeqTracker.lost): two in a row are one gap
    "masquerade": ("unexpected",),
    "addressing": ("bad_frames",),
}


def undetected(injected: dict[str, int], counts: dict[str, int]) -> dict[str, int]:
    """Classes whose injected faults outnumber the receiver counters that detect them.

    Classes that share counters (corruption, truncation and garbage all end as CRC/COBS/runt
    errors; repetition, reorder, delay and insertion as sequence repeats or out-of-order) are
    checked as a group: the group's counters must add up to its injected total. counts must
    hold "seq_lost" (SeqTracker.lost) for the loss class. {} when everything was detected."""
    groups: list[tuple[set, set]] = []
    for cls, n in injected.items():
        keys = set(DETECTED_BY[cls])
        for g in groups:
            if g[1] & keys:
                g[0].add(cls)
                g[1].update(keys)
                break
        else:
            groups.append(({cls}, keys))
    short = {}
    for classes, keys in groups:
        need = sum(injected[c] for c in classes)
        have = sum(counts.get(k, 0) for k in keys)
        if have < need:
            short["+".join(sorted(classes))] = need - have
    return short


class FaultyLink(Link):
    """Wraps an open Link; frames sent through it meet the configured faults. Receiving and
    closing go to the inner link unchanged."""

    def __init__(self, inner: Link, classes=CLASSES, rate: float = 0.05, seed: int = 1):
        super().__init__(inner.url + "#faulty")
        unknown = set(classes) - set(CLASSES)
        if unknown:
            raise ValueError(f"unknown fault classes {sorted(unknown)}; known: {', '.join(CLASSES)}")
        if not 0.0 <= rate <= 1.0:
            raise ValueError(f"fault rate must be within [0, 1], got {rate!r}")
        self.inner = inner
        self.classes = tuple(classes)
        self.rate = rate
        self.rng = random.Random(seed)
        self.injected = {c: 0 for c in self.classes}
        self._held: list[tuple[int, bytes]] = []  # (frames to wait, wire bytes) for reorder/delay
        self._history: list[bytes] = []  # recent frames, for insertion of stale ones
        self.deframer = inner.deframer

    # receive and close: the inner link's
    def recv_frame(self, timeout_s: float):
        return self.inner.recv_frame(timeout_s)

    def stats(self):
        return self.inner.stats()

    def _close_raw(self) -> None:
        self.inner.close()

    def send_delimiter(self) -> None:
        self.inner.send_delimiter()

    def _raw(self, data: bytes) -> None:
        self.inner._write_raw(data)

    def send_frame(self, frame: bytes) -> None:
        periodic = frame[0] & 0x07 in (2, 3)  # COMMAND, FEEDBACK: the sequenced stream
        # frames held back for reorder/delay go out once that many later periodic frames have
        # gone (a TRIP or CONTROL in between does not count: it carries no sequence number)
        busy = bool(self._held)  # this frame overtakes a held one: it must arrive undamaged
        due = []
        if periodic:
            for k, (wait, data) in enumerate(self._held):
                self._held[k] = (wait - 1, data)
            due = [d for w, d in self._held if w <= 0]
            self._held = [(w, d) for w, d in self._held if w > 0]
        cls = None
        # one fault at a time: no new one while a frame is held back, or two reorders could
        # cancel out (the second frame overtaking the first one back into order)
        if periodic and self.classes and not busy and self.rng.random() < self.rate:
            cls = self.rng.choice(self.classes)
        self._history = (self._history + [frame])[-8:]
        wire = encode_wire(frame)
        if cls is None:
            self._raw(wire)
        else:
            self.injected[cls] += 1
            getattr(self, f"_f_{cls}")(frame, wire)
        for d in due:
            self._raw(d)
        self.frames_sent += 1

    # ---- the classes ------------------------------------------------------------------------
    def _f_corrupt(self, frame, wire):
        b = bytearray(wire)
        i = self.rng.randrange(len(b) - 1)  # never the delimiter
        b[i] ^= 1 << self.rng.randrange(8)
        if b[i] == 0:  # a flip to 0x00 splits the frame: still two damaged pieces
            b[i] = 0x01 if wire[i] != 0x01 else 0x02
        self._raw(bytes(b))

    def _f_truncate(self, frame, wire):
        cut = self.rng.randrange(1, len(wire) - 1)
        self._raw(wire[:cut] + b"\x00")

    def _f_garbage(self, frame, wire):
        burst = bytes(self.rng.randrange(1, 256) for _ in range(self.rng.randrange(3, 40)))
        self._raw(burst + b"\x00" + wire)

    def _f_repeat(self, frame, wire):
        self._raw(wire + wire)

    def _f_reorder(self, frame, wire):
        self._held.append((1, wire))  # goes out after the next frame

    def _f_delay(self, frame, wire):
        self._held.append((3, wire))  # three frames late

    def _f_loss(self, frame, wire):
        pass

    def _f_insert(self, frame, wire):
        stale = self._history[0] if len(self._history) > 1 else frame
        self._raw(encode_wire(stale) + wire)

    def _f_masquerade(self, frame, wire):
        # a well-formed frame of the other side's periodic kind (as if from the wrong station)
        other = bytes([(frame[0] & 0xF8) | (3 if frame[0] & 0x07 == 2 else 2)]) + frame[1:]
        self._raw(encode_wire(other) + wire)

    def _f_addressing(self, frame, wire):
        # a frame for another protocol version (another "address space") ahead of the real one
        other = bytes([(frame[0] & 0x0F) | (0x2 << 4)]) + frame[1:]
        self._raw(encode_wire(other) + wire)


class FaultProxy:
    """Sits between a real controller and the host: forwards every frame both ways and
    damages those going controller -> host. pump() moves what has arrived; call it in a loop."""

    def __init__(self, host_side: Link, controller_side: Link, faults: FaultyLink | None = None):
        self.host_side = host_side
        self.controller_side = controller_side
        self.to_host = faults if faults is not None else FaultyLink(host_side, ())

    def pump(self, timeout_s: float = 0.001) -> int:
        n = 0
        f = self.controller_side.recv_frame(timeout_s)
        while f is not None:
            self.to_host.send_frame(f)
            n += 1
            f = self.controller_side.recv_frame(0.0)
        f = self.host_side.recv_frame(0.0)
        while f is not None:
            self.controller_side.send_frame(f)
            n += 1
            f = self.host_side.recv_frame(0.0)
        return n


__all__ = ["CLASSES", "DETECTED_BY", "FaultyLink", "FaultProxy", "undetected"]
