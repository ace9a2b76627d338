"""`dcrig controller`: the emulated drive controller as a process on the far end of a link."""

from __future__ import annotations

import argparse

from ..cli import SAFETY

EXAMPLE = """example:
  dcrig controller --link /dev/pts/7 --settings configs/controllers/kestrel_f3_stand.toml

The controller answers each feedback frame with a command frame until the host says bye or
the link stays silent. It is an emulation for a test bench: never connect it to a port that
fires a real converter.
"""


def add_subparser(sub):
    p = sub.add_parser("controller", help="run the emulated drive controller on a link",
                       description="Run the emulated thyristor drive controller (speed, current and field loops, "
                       "dual-bridge changeover, protections) against a dcrig host on a link.",
                       epilog=EXAMPLE + "\n" + SAFETY, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--link", required=True, metavar="URL", help="port path or URL (pty slave path, socket://127.0.0.1:PORT, ...)")
    p.add_argument("--settings", required=True, metavar="SETTINGS.toml", help="controller settings (docs/controller.md)")
    p.add_argument("--encoding", choices=("fixed", "float32"), help="expected encoding (default: whatever the host offers)")
    p.add_argument("--idle-timeout", type=float, default=5.0, metavar="S", help="give up after this long without feedback")
    p.add_argument("--handshake-timeout", type=float, default=30.0, metavar="S", help="wait this long for the host's HELLO")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    p.set_defaults(func=_do_controller)


def _do_controller(args):
    from ..controller.process import run_controller
    from ..controller.protection import trip_label
    from . import check_seconds

    check_seconds("--handshake-timeout", args.handshake_timeout)
    check_seconds("--idle-timeout", args.idle_timeout)

    summary = run_controller(args.link, args.settings, encoding=args.encoding,
                             handshake_timeout_s=args.handshake_timeout, idle_timeout_s=args.idle_timeout)
    if not args.quiet:
        trips = summary.get("trips") or []
        print(f"controller: {summary.get('frames', 0)} frames, end: {summary.get('reason', '?')}, "
              f"trips: {', '.join(trip_label(t.trip_code) for t in trips) if trips else 'none'}")
    return 0
