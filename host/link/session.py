"""Sessions on a dcrig link: handshake, sequence tracking, link-health counters, watchdog.

Owns: the order of frames after a link is open (HELLO exchange, then periodic FEEDBACK from
the host and COMMAND from the controller, event frames TRIP and CONTROL at any time), who
stamps sequence numbers, and what counts as a valid command.

Sequence numbers: each side numbers its periodic frames 0, 1, 2 ... (u16, wraps); the
session stamps them (whatever cmd.seq / fb.seq held is overwritten). HELLO, TRIP and CONTROL
frames carry the seq of the last periodic frame that side sent and do not advance it.
The receiver drops repeats and late frames (behind by 1..REORDER_WINDOW) so an old command
never overrides a newer one; a frame further behind is taken as a restarted counter.

A valid command: CRC good, decodes in the agreed encoding, in order, and
frames.command_problem() finds nothing (known modes, finite values). Only valid commands
kick the watchdog.

Public API:
    REORDER_WINDOW = 64
    class SeqTracker(): accept(seq) -> bool; reset(); counters received, accepted, gaps,
                        lost, repeats, out_of_order, restarts; last: int | None
    class Watchdog(period_us, n_periods, clock=time.perf_counter_ns):
        kick(); expired() -> bool (latches .tripped); reset(); age_ns() -> int; trips: int
    class HostSession(link, *, encoding="fixed", frame_period_us=1000, watchdog_periods=None,
                      clock=time.perf_counter_ns)
        handshake(timeout_s=5.0, retry_s=0.25, peer_exit=None) -> Hello   the controller's HELLO
        send_feedback(fb: Feedback) -> int                        seq used (also fb.seq)
        recv_command(timeout_s: float) -> Command | None          None on timeout or after BYE
        send_control(op_or_msg, value=0.0, text="") -> None
        pop_events() -> list[TripReport | ControlMessage | Hello]
        last_command_seq: int | None;  bye: bool;  watchdog: Watchdog | None
        stats() -> dict[str, int];  last_problem: str
    class ControllerSession(link, *, encoding=None, frame_period_us=None)
        handshake(timeout_s=5.0) -> Hello                         the host's HELLO
        recv_feedback(timeout_s: float) -> Feedback | None         None on timeout or after BYE
        send_command(cmd: Command) -> int;  send_trip(trip: TripReport) -> None
        send_control(op_or_msg, value=0.0, text="") -> None
        pop_events(), bye, stats(), last_problem, frame_period_us, encoding (after handshake)

Handshake failures raise LinkError naming the mismatch; no HELLO in time raises LinkTimeout.

Must never import numpy, numba or rtmodel.
"""

from __future__ import annotations

import time

from host import signals as sig
from host.errors import LinkError, LinkTimeout
from host.link import frames as fr
from host.link.wire import MAX_PAYLOAD, MIN_PAYLOAD

REORDER_WINDOW = 64
_LARGEST_EVENT_FRAME = 3 + 6 + fr.CONTROL_TEXT_MAX + 2  # a CONTROL frame with full text, with CRC


class SeqTracker:
    """Classifies received sequence numbers; accept() says whether to use the frame."""

    __slots__ = ("last", "received", "accepted", "gaps", "lost", "repeats", "out_of_order", "restarts")

    def __init__(self):
        self.reset()
        self.received = self.accepted = self.gaps = self.lost = 0
        self.repeats = self.out_of_order = self.restarts = 0

    def reset(self) -> None:
        """Forget the last seq (a new stream begins); counters stay."""
        self.last: int | None = None

    def accept(self, seq: int) -> bool:
        self.received += 1
        last = self.last
        if last is None:
            self.last = seq
            self.accepted += 1
            return True
        ahead = (seq - last) & 0xFFFF
        if ahead == 1:
            self.last = seq
            self.accepted += 1
            return True
        if ahead == 0:
            self.repeats += 1
            return False
        behind = 0x10000 - ahead
        if behind <= REORDER_WINDOW:
            self.out_of_order += 1
            return False
        if ahead <= 0x8000:
            self.gaps += 1
            self.lost += ahead - 1
        else:
            self.restarts += 1  # far behind: the sender restarted its counter
        self.last = seq
        self.accepted += 1
        return True

    def stats(self) -> dict[str, int]:
        return {name: getattr(self, name) for name in self.__slots__ if name != "last"}


class Watchdog:
    """Says when no valid command arrived for n_periods frame periods. Latching: once
    expired() has returned True, .tripped stays set until reset(), a late command does not
    clear it (the operator decides when to run again)."""

    def __init__(self, period_us: int, n_periods: int, clock=time.perf_counter_ns):
        if period_us <= 0 or n_periods <= 0:
            raise ValueError("watchdog period_us and n_periods must be positive")
        self.limit_ns = int(period_us) * 1000 * int(n_periods)
        self.clock = clock
        self.trips = 0
        self.reset()

    def reset(self) -> None:
        self.tripped = False
        self._last_ns = self.clock()

    def kick(self) -> None:
        self._last_ns = self.clock()

    def age_ns(self) -> int:
        return self.clock() - self._last_ns

    def expired(self) -> bool:
        if self.tripped:
            return True
        if self.clock() - self._last_ns > self.limit_ns:
            self.tripped = True
            self.trips += 1
        return self.tripped


def _encoding_code(encoding) -> int:
    if isinstance(encoding, str):
        if encoding not in fr.ENCODINGS:
            raise LinkError(f"link encoding {encoding!r}: must be one of {', '.join(fr.ENCODINGS)}")
        return fr.ENCODINGS[encoding]
    if encoding not in fr.ENCODING_NAMES:
        raise LinkError(f"link encoding {encoding!r}: must be one of {', '.join(fr.ENCODINGS)}")
    return encoding


def _hello_problem(ours: fr.Hello, peer: fr.Hello, header_version: int) -> str | None:
    me, them = fr.ROLE_NAMES[ours.role], fr.ROLE_NAMES.get(peer.role, f"role {peer.role}")
    if header_version != fr.PROTOCOL_VERSION or peer.protocol_version != fr.PROTOCOL_VERSION:
        v = peer.protocol_version if header_version == fr.PROTOCOL_VERSION else header_version
        return f"protocol version: the {them} speaks {v}, the {me} {fr.PROTOCOL_VERSION}"
    if peer.encoding != ours.encoding:
        return (
            f"encoding: the {me} uses {fr.ENCODING_NAMES[ours.encoding]}, "
            f"the {them} {fr.ENCODING_NAMES.get(peer.encoding, f'code {peer.encoding}')}"
        )
    if peer.frame_period_us != ours.frame_period_us:
        return f"frame period: the {me} runs {ours.frame_period_us} us, the {them} {peer.frame_period_us} us"
    if peer.max_payload < _LARGEST_EVENT_FRAME:
        return f"max payload: the {them} accepts {peer.max_payload} bytes, frames need {_LARGEST_EVENT_FRAME}"
    diff = fr.compare_signal_tables(ours.signals, peer.signals)
    if diff:
        return f"signal list: {diff}"
    return None


class _Session:
    def __init__(self, link, encoding: int, frame_period_us: int):
        self.link = link
        self.encoding = encoding
        self.frame_period_us = frame_period_us
        self.codec = fr.Codec(encoding) if encoding is not None else None
        self.rx = SeqTracker()
        self.tx_seq = 0
        self.peer_hello: fr.Hello | None = None
        self.events: list = []
        self.bye = False
        self.bad_frames = 0  # CRC-valid frames this version cannot read
        self.unexpected = 0  # readable frames of a kind this side does not expect
        self.hellos_after_handshake = 0
        self.last_problem = ""

    def pop_events(self) -> list:
        ev, self.events = self.events, []
        return ev

    def _recv_periodic(self, kind_byte: int, take, timeout_s: float):
        """Wait for the next periodic frame of kind_byte that take(frame) accepts (it returns
        the decoded frame or None); other frames go to _other as events. None on timeout or
        once the peer said BYE."""
        if self.bye:
            return None
        link = self.link
        deadline = time.perf_counter() + timeout_s
        remaining = timeout_s
        while True:
            frame = link.recv_frame(remaining)
            if frame is not None:
                if frame[0] == kind_byte:
                    got = take(frame)
                    if got is not None:
                        return got
                else:
                    self._other(frame)
                    if self.bye:
                        return None
            remaining = deadline - time.perf_counter()
            if remaining <= 0.0:
                return None

    def send_control(self, op_or_msg, value: float = 0.0, text: str = "") -> None:
        msg = op_or_msg if isinstance(op_or_msg, sig.ControlMessage) else sig.ControlMessage(op_or_msg, value, text)
        self.link.send_frame(self.codec.pack_control(msg, (self.tx_seq - 1) & 0xFFFF))

    def stats(self) -> dict[str, int]:
        s = self.link.stats()
        s.update({f"seq_{k}": v for k, v in self.rx.stats().items()})
        s.update(
            bad_frames=self.bad_frames,
            unexpected=self.unexpected,
            hellos_after_handshake=self.hellos_after_handshake,
            saturated=sum(self.codec.saturated.values()) if self.codec else 0,
        )
        return s

    def _problem(self, text: str) -> None:
        self.last_problem = text

    def _event_frame(self, frame: bytes) -> None:
        """TRIP and CONTROL frames between periodic ones."""
        try:
            obj = self.codec.unpack(frame)
        except fr.FrameError as err:
            self.bad_frames += 1
            self._problem(str(err))
            return
        self.events.append(obj)
        if isinstance(obj, sig.ControlMessage) and obj.op == sig.CTRL_BYE:
            self.bye = True


class HostSession(_Session):
    """The host's end: sends HELLO and FEEDBACK, receives COMMAND, TRIP and CONTROL."""

    def __init__(
        self, link, *, encoding="fixed", frame_period_us: int = 1000, watchdog_periods: int | None = None,
        clock=time.perf_counter_ns,
    ):  # fmt: skip
        if not isinstance(frame_period_us, int) or not 1 <= frame_period_us <= 0xFFFFFFFF:
            raise LinkError(f"link frame_period_us {frame_period_us!r}: must be a positive whole number of us")
        super().__init__(link, _encoding_code(encoding), frame_period_us)
        self.invalid_commands = 0  # every refused command, whatever its class
        self.refused: dict[str, int] = {}  # per class: malformed, mode_not_applicable, ...
        self.last_refusal = ""  # class and reason of the last refused command
        # command_check(cmd) -> (class, reason) | None: the plant's own rules (modes, bridge
        # selections and value ranges that apply to it); set by the host loop
        self.command_check = None
        self.last_command_seq: int | None = None
        self.handshakes = 0
        self.sensors = (0, 0)  # (tacho uV per rpm, encoder counts per rev) for the HELLO
        self.peer_restarted = False  # a controller HELLO after its commands: it started over
        self.watchdog = Watchdog(frame_period_us, watchdog_periods, clock) if watchdog_periods else None

    def handshake(self, timeout_s: float = 5.0, retry_s: float = 0.25, peer_exit=None) -> fr.Hello:
        """Send HELLO every retry_s until the controller's HELLO arrives; check it agrees.

        peer_exit: for a controller this host started itself, a callable giving its exit status
        (None while it runs, as subprocess.Popen.poll): a controller that died before its HELLO
        ends the wait at the next retry instead of after the whole timeout."""
        ours = fr.Hello(fr.ROLE_HOST, self.encoding, self.frame_period_us, sensors=self.sensors)
        frame = fr.pack_hello(ours, (self.tx_seq - 1) & 0xFFFF)
        link = self.link
        link.send_delimiter()
        deadline = time.perf_counter() + timeout_s
        next_send = 0.0
        while True:
            now = time.perf_counter()
            if now >= deadline:
                raise LinkTimeout(f"link '{link.url}': handshake: no HELLO from the controller within {timeout_s} s")
            if now >= next_send:
                code = peer_exit() if peer_exit is not None else None
                if code is not None:
                    raise LinkError(f"link '{link.url}': handshake: the controller process ended "
                                    f"(exit status {code}) before its HELLO")
                try:
                    link.send_frame(frame)
                except LinkTimeout:
                    pass  # a busy peer or machine: the HELLO is simply repeated at the next retry
                except LinkError as err:
                    if "timed out" not in str(err):
                        raise
                next_send = now + retry_s
            got = link.recv_frame(min(deadline, next_send) - now)
            if got is None:
                continue
            if fr.frame_kind(got) != fr.KIND_HELLO:
                self.unexpected += 1  # leftovers of an earlier session
                continue
            try:
                peer = fr.unpack_hello(got)
            except fr.FrameError as err:
                raise LinkError(f"link '{link.url}': handshake: unreadable HELLO from the controller: {err}") from err
            if peer.role != fr.ROLE_CONTROLLER:
                continue  # our own HELLO on a loopback, or another host
            problem = _hello_problem(ours, peer, got[0] >> 4)
            if problem:
                raise LinkError(f"link '{link.url}': handshake: {problem}")
            self.peer_hello = peer
            self.rx.reset()
            self.bye = False
            # the session starts over: both numberings restart at 0, nothing is applied yet
            self.tx_seq = 0
            self.last_command_seq = None
            self.peer_restarted = False
            self.handshakes += 1
            if self.watchdog:
                self.watchdog.reset()
            return peer

    def send_feedback(self, fb: sig.Feedback) -> int:
        seq = fb.seq = self.tx_seq
        self.tx_seq = (seq + 1) & 0xFFFF
        self.link.send_frame(self.codec.pack_feedback(fb))
        return seq

    def recv_command(self, timeout_s: float) -> sig.Command | None:
        """The next valid, in-order command; other frames are counted or queued as events."""
        return self._recv_periodic(self.codec.kb_command, self._command, timeout_s)

    def _command(self, frame: bytes) -> sig.Command | None:
        try:
            cmd = self.codec.unpack_command(frame)
        except fr.FrameError as err:
            self.bad_frames += 1
            self._problem(str(err))
            return None
        if not self.rx.accept(cmd.seq):
            return None
        problem = fr.command_problem(cmd)
        if problem:
            self._refuse(cmd, "malformed", problem)
            return None
        if self.command_check is not None:
            refusal = self.command_check(cmd)
            if refusal is not None:
                self._refuse(cmd, *refusal)
                return None
        self.last_command_seq = cmd.seq
        if self.watchdog:
            self.watchdog.kick()
        return cmd

    def _refuse(self, cmd: sig.Command, cls: str, reason: str) -> None:
        self.invalid_commands += 1
        self.refused[cls] = self.refused.get(cls, 0) + 1
        self.last_refusal = f"{cls}: {reason}"
        self._problem(f"command {cmd.seq}: {cls}: {reason}")

    def _other(self, frame: bytes) -> None:
        kind = fr.frame_kind(frame)
        if kind == fr.KIND_HELLO:
            self.hellos_after_handshake += 1  # a late duplicate reply, or a restarted controller
            try:
                hello = fr.unpack_hello(frame)
            except fr.FrameError as err:
                self.bad_frames += 1
                self._problem(str(err))
                return
            self.events.append(hello)
            if hello.role == fr.ROLE_CONTROLLER and self.last_command_seq is not None:
                # a late duplicate answer comes before the first command; after commands a
                # controller HELLO means it reset and starts over: the host must handshake again
                self.peer_restarted = True
            self.rx.reset()
        elif kind in (fr.KIND_TRIP, fr.KIND_CONTROL):
            self._event_frame(frame)
        elif kind == fr.KIND_COMMAND:  # the other encoding or protocol version
            self.bad_frames += 1
            self._problem(self.codec._kb_problem(frame[0], fr.KIND_COMMAND))
        else:
            self.unexpected += 1

    def stats(self) -> dict[str, int]:
        s = super().stats()
        s["invalid_commands"] = self.invalid_commands
        s.update({f"refused_{k}": v for k, v in self.refused.items()})
        s["handshakes"] = self.handshakes
        if self.watchdog:
            s["watchdog_trips"] = self.watchdog.trips
        return s


class ControllerSession(_Session):
    """The controller's end: answers HELLO, receives FEEDBACK, sends COMMAND and TRIP.
    encoding / frame_period_us None means: take the host's."""

    def __init__(self, link, *, encoding=None, frame_period_us: int | None = None):
        super().__init__(link, None if encoding is None else _encoding_code(encoding), frame_period_us)
        self._want_encoding = self.encoding
        self._want_period = frame_period_us

    def handshake(self, timeout_s: float = 5.0) -> fr.Hello:
        """Wait for the host's HELLO, answer with ours (always, so the host can name a
        mismatch), then check that both agree."""
        link = self.link
        link.send_delimiter()
        deadline = time.perf_counter() + timeout_s
        while True:
            remaining = deadline - time.perf_counter()
            if remaining <= 0:
                raise LinkTimeout(f"link '{link.url}': handshake: no HELLO from the host within {timeout_s} s")
            got = link.recv_frame(remaining)
            if got is None:
                continue
            if fr.frame_kind(got) != fr.KIND_HELLO:
                self.unexpected += 1
                continue
            peer = self._answer_hello(got)
            if peer is not None:
                return peer

    def _answer_hello(self, got: bytes) -> fr.Hello | None:
        link = self.link
        try:
            peer = fr.unpack_hello(got)
        except fr.FrameError as err:
            raise LinkError(f"link '{link.url}': handshake: unreadable HELLO from the host: {err}") from err
        if peer.role != fr.ROLE_HOST:
            return None  # our own HELLO on a loopback
        enc = self._want_encoding
        if enc is None:
            enc = peer.encoding if peer.encoding in fr.ENCODING_NAMES else fr.ENC_FIXED
        period = self._want_period if self._want_period is not None else peer.frame_period_us
        ours = fr.Hello(fr.ROLE_CONTROLLER, enc, period)
        link.send_frame(fr.pack_hello(ours, (self.tx_seq - 1) & 0xFFFF))
        problem = _hello_problem(ours, peer, got[0] >> 4)
        if problem:
            raise LinkError(f"link '{link.url}': handshake: {problem}")
        self.encoding = enc
        self.frame_period_us = period
        self.codec = fr.Codec(enc)
        self.peer_hello = peer
        self.rx.reset()
        self.bye = False
        return peer

    def recv_feedback(self, timeout_s: float) -> sig.Feedback | None:
        return self._recv_periodic(self.codec.kb_feedback, self._feedback, timeout_s)

    def _feedback(self, frame: bytes) -> sig.Feedback | None:
        try:
            fb = self.codec.unpack_feedback(frame)
        except fr.FrameError as err:
            self.bad_frames += 1
            self._problem(str(err))
            return None
        return fb if self.rx.accept(fb.seq) else None

    def _other(self, frame: bytes) -> None:
        kind = fr.frame_kind(frame)
        if kind == fr.KIND_HELLO:
            # the host restarted or retried its HELLO: answer again, the stream starts anew
            self.hellos_after_handshake += 1
            peer = self._answer_hello(frame)
            if peer is not None:
                self.events.append(peer)
        elif kind in (fr.KIND_TRIP, fr.KIND_CONTROL):
            self._event_frame(frame)
        elif kind == fr.KIND_FEEDBACK:
            self.bad_frames += 1
            self._problem(self.codec._kb_problem(frame[0], fr.KIND_FEEDBACK))
        else:
            self.unexpected += 1

    def send_command(self, cmd: sig.Command) -> int:
        seq = cmd.seq = self.tx_seq
        self.tx_seq = (seq + 1) & 0xFFFF
        self.link.send_frame(self.codec.pack_command(cmd))
        return seq

    def send_trip(self, trip: sig.TripReport) -> None:
        self.link.send_frame(self.codec.pack_trip(trip, (self.tx_seq - 1) & 0xFFFF))


__all__ = ["REORDER_WINDOW", "SeqTracker", "Watchdog", "HostSession", "ControllerSession", "MAX_PAYLOAD", "MIN_PAYLOAD"]
