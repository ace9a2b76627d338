"""`dcrig serve`: run the model against a real drive controller on a serial link."""

from __future__ import annotations

import argparse

from ..cli import SAFETY
from . import add_config_args

EXAMPLE = """examples:
  dcrig serve configs/machines/kestrel_f3_stand.toml --converter configs/converters/kestrel_f3_dual.toml \\
      --link /dev/ttyUSB0 --baud 921600 --paced
  dcrig serve configs/machines/kestrel_f3_stand.toml --link accept://127.0.0.1:5020
  dcrig serve configs/machines/kestrel_f3_stand.toml --link socket://127.0.0.1:5020 --lockstep
"""


def add_subparser(sub):
    p = sub.add_parser("serve", help="run the model against a controller on a link",
                       description="Be the machine for a drive controller on a serial port, pyserial URL or TCP "
                       "listening socket: handshake, then exchange one command and one feedback frame per period, "
                       "following the default operator timeline (start, rated speed, load step, stop).",
                       epilog=EXAMPLE + "\n" + SAFETY, formatter_class=argparse.RawDescriptionHelpFormatter)
    add_config_args(p)
    p.add_argument("--link", required=True, metavar="URL", help="port or URL: /dev/ttyUSB0, socket://..., accept://127.0.0.1:PORT, pty://")
    p.add_argument("--baud", type=int, default=921600)
    p.add_argument("--parity", default="N", help="N, E or O")
    p.add_argument("--encoding", choices=("fixed", "float32"), default="fixed")
    mode = p.add_mutually_exclusive_group()
    mode.add_argument("--paced", action="store_true", default=True, help="paced real time (default)")
    mode.add_argument("--lockstep", action="store_true", help="advance one frame per command (deterministic)")
    p.add_argument("--watchdog", type=int, default=10, metavar="N", help="frames without a valid command before a link-loss event")
    p.add_argument("--on-link-loss", choices=("block", "hold"), default="block", help="what the host does on link loss")
    p.add_argument("--load", type=float, default=0.6, metavar="PU", help="load step as a fraction of rated torque")
    p.add_argument("--out", default="dcrig-serve", metavar="DIR")
    p.set_defaults(func=_do_serve)


def _do_serve(args):
    from ..link import open_link
    from ..loop import warm_kernel
    from ..runner import default_timeline, run_closed_loop
    from . import load_plant

    print(SAFETY + "\n")
    plant = load_plant(args)
    timeline = default_timeline(plant, args.load)
    warm_kernel(plant)  # compile before the controller's handshake and before any deadline
    with open_link(args.link, baud=args.baud, parity=args.parity) as link:
        if getattr(link, "latency_timer_ms", None) is not None:
            print(f"USB-serial latency timer: {link.latency_timer_ms} ms")
        if hasattr(link, "wait_connected"):
            print(f"waiting for the controller on {link.url} ...")
            link.wait_connected(60.0)
        run_closed_loop(plant, link, encoding=args.encoding, paced=not args.lockstep, timeline=timeline,
                        out_dir=args.out, watchdog_periods=args.watchdog, on_link_loss=args.on_link_loss)
    return 0
