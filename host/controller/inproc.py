"""The emulated controller in the host's own process, behind the surface HostLoop uses.

Owns InProcSession: send_feedback / recv_command / pop_events / stats / bye /
last_command_seq / send_control / handshake, like host.link.HostSession, but the command is
computed by stepping a DriveController directly instead of crossing a link. Suites use it:
no pseudo-terminal, no second process, no encoding. Everything else of a run is the same, so a
scenario gives the same record as over the virtual cable up to the fixed-point encoding of
the link (0.01 A, 0.01 V ... in docs/protocol.md).

The frame length the controller is given comes from the feedback's model clock, exactly as
host.controller.process does it. Must never import numba, rtmodel or host.link.

SAFETY: as for the emulated controller - a test-bench emulation, never a safety function.
"""

from __future__ import annotations

from host import signals as sig
from host.controller.drive import DriveController


class InProcSession:
    """A DriveController answering each feedback at once (lockstep only).

    Parameters
    ----------
    controller : the DriveController to step
    frame_period_us : nominal frame period (used for the first frame and after clock jumps)
    """

    url = "inproc://emulated"

    def __init__(self, controller: DriveController, frame_period_us: int):
        self.controller = controller
        self.frame_period_us = int(frame_period_us)
        self._period_s = self.frame_period_us * 1e-6
        self._fb: sig.Feedback | None = None
        self._prev_model_us: int | None = None
        self._events: list = []
        self.bye = False
        self.last_command_seq: int | None = None
        self._tx_seq = 0
        self._rx_seq = 0
        self.frames = 0
        self.trips: list[sig.TripReport] = []
        self.link = self  # the loop and reports ask session.link.url
        self.peer_restarted = False  # no link, so no controller HELLO after its commands (HostLoop asks)

    # the HostSession surface ------------------------------------------------------------------
    def handshake(self, timeout_s: float = 5.0, retry_s: float = 0.25):
        return None

    def send_feedback(self, fb: sig.Feedback) -> int:
        seq = fb.seq = self._tx_seq
        self._tx_seq = (seq + 1) & 0xFFFF
        self._fb = sig.copy_feedback(fb)  # the loop reuses its Feedback object
        return seq

    def recv_command(self, timeout_s: float = 0.0) -> sig.Command | None:
        fb, self._fb = self._fb, None
        if fb is None or self.bye:
            return None
        dt_s = self._period_s
        if self._prev_model_us is not None:
            d = ((fb.model_time_us - self._prev_model_us) & 0xFFFFFFFF) * 1e-6
            if 0.0 < d <= 4.0 * self._period_s:
                dt_s = d
        self._prev_model_us = fb.model_time_us
        cmd = self.controller.step(fb, dt_s)
        cmd.seq = self._rx_seq
        self._rx_seq = (self._rx_seq + 1) & 0xFFFF
        self.last_command_seq = cmd.seq
        report = self.controller.take_trip_report()
        if report is not None:
            self._events.append(report)
            self.trips.append(report)
        self.frames += 1
        return cmd

    def pop_events(self) -> list:
        ev, self._events = self._events, []
        return ev

    def send_control(self, op_or_msg, value: float = 0.0, text: str = "") -> None:
        op = op_or_msg.op if isinstance(op_or_msg, sig.ControlMessage) else op_or_msg
        if isinstance(op_or_msg, sig.ControlMessage):
            value = op_or_msg.value
        if op == sig.CTRL_BYE:
            self.bye = True
        elif op == sig.CTRL_RESET:
            self.controller.reset()
            self._prev_model_us = None
            # as over a link (host.controller.process): a controller that reset tells the host,
            # which clears a latched watchdog reaction (docs/protocol.md section 8)
            self._events.append(sig.ControlMessage(op=sig.CTRL_RESET, value=0.0, text="operator reset"))
        elif op == sig.CTRL_SET_FIELD_ECONOMY:
            self.controller.set_field_economy(bool(value))
        elif op == sig.CTRL_SET_QUICK_STOP:
            self.controller.set_quick_stop(bool(value))

    def stats(self) -> dict[str, int]:
        return {"frames": self.frames, "crc_errors": 0, "bad_frames": 0, "trips": len(self.trips)}
