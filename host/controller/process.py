"""The emulated drive controller as a process on the far end of a dcrig link.

Owns: the controller-side loop - open the link, answer the host's HELLO, then per frame
receive feedback -> DriveController.step -> send command; send a TripReport when a protection
trips; act on CONTROL messages (reset, run/stop, speed reference, bye). Uses host.link
(ControllerSession, open_link) and never frames bytes itself.
Must never import numba or rtmodel.

    python -m host.controller.process LINK SETTINGS.toml [--encoding fixed|float32]
           [--handshake-timeout S] [--idle-timeout S] [--max-frames N]

SAFETY: the emulated controller is for a test bench. Never connect it to a link that carries
firing commands to a real power converter.
"""

from __future__ import annotations

import argparse
import sys
import time

from host import signals as sig
from host.controller.drive import DriveController
from host.controller.protection import trip_label
from host.controller.settings import load_settings
from host.errors import ConfigError, DcrigError, LinkTimeout


class _OperatorOverrides:
    """CONTROL messages that set operator inputs; once set they replace the feedback's own
    op_* fields until the session ends (the host may drive them either way)."""

    __slots__ = ("run", "stop", "speed_ref_rpm")

    def __init__(self):
        self.run = None
        self.stop = None
        self.speed_ref_rpm = None

    def apply(self, fb: sig.Feedback) -> None:
        if self.run is not None:
            fb.op_run = self.run
        if self.stop is not None:
            fb.op_stop = self.stop
        if self.speed_ref_rpm is not None:
            fb.op_speed_ref_rpm = self.speed_ref_rpm


def run_controller(link_url_or_path, settings_path, *, encoding=None, handshake_timeout_s=5.0,
                   idle_timeout_s=2.0, max_frames=None, clock=time.perf_counter_ns,
                   on_frame=None) -> dict:
    """Run the emulated controller until the host says BYE, the link stays silent for
    idle_timeout_s, or max_frames frames have been answered.

    link_url_or_path: a URL or port path for host.link.open_link, or an already open Link
    (e.g. VirtualCable.controller_link()); a Link passed in is not closed here.
    on_frame(fb, cmd, controller): optional callback per frame (logging, tests).
    Returns a summary: frames, trips (list of TripReport), resets, reason, link stats.
    Raises ConfigError for bad settings (before the link opens), LinkError / LinkTimeout.
    """
    from host.link import ControllerSession, open_link  # the link only when a process runs

    for name, val in (("handshake_timeout_s", handshake_timeout_s), ("idle_timeout_s", idle_timeout_s)):
        # nan never expires and inf overflows the wait: both would hang the bench silently
        if isinstance(val, bool) or not isinstance(val, (int, float)) or not (0.0 < val <= 3600.0):
            raise ConfigError(f"controller: {name}: must be a number of seconds > 0 and at most 3600, got {val!r}")
    settings = load_settings(settings_path)
    ctrl = DriveController(settings)
    if isinstance(link_url_or_path, (str, bytes)) or hasattr(link_url_or_path, "__fspath__"):
        link = open_link(str(link_url_or_path))
        owned = True
    else:
        link = link_url_or_path
        owned = False
    try:
        session = ControllerSession(link, encoding=encoding)
        session.handshake(timeout_s=handshake_timeout_s)
        return _loop(session, ctrl, idle_timeout_s, max_frames, clock, on_frame)
    finally:
        if owned:
            link.close()


def _loop(session, ctrl, idle_timeout_s, max_frames, clock, on_frame) -> dict:
    overrides = _OperatorOverrides()
    period_s = session.frame_period_us * 1e-6 if session.frame_period_us else 1.0 / 300.0
    trips = []
    frames = resets = 0
    prev_model_us = None
    reason = "max_frames"
    last_rx_ns = clock()
    poll_s = min(0.05, idle_timeout_s)
    while max_frames is None or frames < max_frames:
        fb = session.recv_feedback(poll_s)
        for ev in session.pop_events():
            if isinstance(ev, sig.ControlMessage):
                op = ev.op
                if op == sig.CTRL_RESET:
                    ctrl.reset()
                    resets += 1
                    prev_model_us = None
                    # reset done: the host may clear its latched watchdog reaction (section 8)
                    session.send_control(sig.CTRL_RESET, 0.0, "operator reset")
                elif op == sig.CTRL_SET_RUN:
                    overrides.run = 1 if ev.value else 0
                elif op == sig.CTRL_SET_STOP:
                    overrides.stop = 1 if ev.value else 0
                elif op == sig.CTRL_SET_SPEED_REF_RPM:
                    overrides.speed_ref_rpm = float(ev.value)
                elif op == sig.CTRL_SET_FIELD_ECONOMY:
                    ctrl.set_field_economy(bool(ev.value))
                elif op == sig.CTRL_SET_QUICK_STOP:
                    ctrl.set_quick_stop(bool(ev.value))
            elif hasattr(ev, "role"):
                # a new HELLO: the host restarted its stream; start from a clean controller
                ctrl.reset()
                resets += 1
                prev_model_us = None
        if session.bye:
            reason = "bye"
            break
        if fb is None:
            if (clock() - last_rx_ns) * 1e-9 > idle_timeout_s:
                raise LinkTimeout(f"link '{session.link.url}': no feedback from the host for "
                                  f"{idle_timeout_s} s")
            continue
        last_rx_ns = clock()
        # the frame's length from the host's model clock (lockstep or paced); nominal when
        # the clock jumps (restart, lost frames beyond a few periods)
        dt_s = period_s
        if prev_model_us is not None:
            d = ((fb.model_time_us - prev_model_us) & 0xFFFFFFFF) * 1e-6
            if 0.0 < d <= 4.0 * period_s:
                dt_s = d
        prev_model_us = fb.model_time_us
        overrides.apply(fb)
        cmd = ctrl.step(fb, dt_s)
        session.send_command(cmd)
        report = ctrl.take_trip_report()
        if report is not None:
            session.send_trip(report)
            trips.append(report)
        frames += 1
        if on_frame is not None:
            on_frame(fb, cmd, ctrl)
    return {"frames": frames, "trips": trips, "resets": resets, "reason": reason,
            "stats": session.stats(), "first_trip": ctrl.first_trip}


def main(argv=None) -> int:
    from host.cli import SAFETY  # host.cli imports nothing heavy: no link, numba or rtmodel

    ap = argparse.ArgumentParser(prog="python -m host.controller.process",
                                 description="Emulated thyristor DC drive controller on a dcrig link "
                                             "(test bench only: never on a link to a real converter).",
                                 epilog="example:\n  python -m host.controller.process /dev/pts/5 "
                                        "configs/controllers/kestrel_f3_stand.toml\n\n" + SAFETY,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("link", help="port path or link URL (e.g. /dev/pts/5, socket://127.0.0.1:5020)")
    ap.add_argument("settings", help="controller settings TOML (configs/controllers/*.toml)")
    ap.add_argument("--encoding", choices=("fixed", "float32"), default=None,
                    help="frame encoding (default: take the host's)")
    ap.add_argument("--handshake-timeout", type=float, default=5.0, metavar="S")
    ap.add_argument("--idle-timeout", type=float, default=2.0, metavar="S")
    ap.add_argument("--max-frames", type=int, default=None, metavar="N")
    args = ap.parse_args(argv)
    try:
        summary = run_controller(args.link, args.settings, encoding=args.encoding,
                                 handshake_timeout_s=args.handshake_timeout,
                                 idle_timeout_s=args.idle_timeout, max_frames=args.max_frames)
    except DcrigError as err:
        print(f"error: {err}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        return 130
    first = summary["first_trip"]
    trip = f", first trip {trip_label(first[0])} at {first[1]:.4f} s" if first else ""
    print(f"controller: {summary['frames']} frames, {len(summary['trips'])} trips, "
          f"ended by {summary['reason']}{trip}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
