"""`dcrig serve`: run the model against a real drive controller on a serial link."""

from __future__ import annotations

import argparse
import math

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
    p.add_argument("--out", default="dcrig-serve", metavar="DIR",
                   help="run folder: record.sqlite, configs/, frames.csv, events.csv, run.png; when DIR exists "
                   "the run gets DIR-2, DIR-3, ... (a run folder is never overwritten)")
    p.add_argument("--connect-timeout", type=float, default=60.0, metavar="S",
                   help="listening address or pty://: wait this long for the controller to connect "
                   "(pty://: to send its HELLO); default 60 s")
    p.add_argument("--handshake-timeout", type=float, default=20.0, metavar="S",
                   help="wait this long for the controller's HELLO once connected; default 20 s")
    p.add_argument("--peer-timeout", type=float, default=5.0, metavar="S",
                   help="lockstep: end the run when no valid command came for this long (dead or "
                   "disconnected controller); default 5 s")
    p.add_argument("--max-error-rate", type=float, default=0.01, metavar="PER_FRAME",
                   help="mark the run invalid when detected link errors exceed this many per frame "
                   "(after 100 frames); default 0.01")
    p.set_defaults(func=_do_serve)

WATCHDOG_MAX_PERIODS = 10000


def _do_serve(args):
    from ..errors import ConfigError, LinkTimeout
    from ..link import open_link
    from pathlib import Path

    from ..loop import warm_kernel
    from ..outputs import check_output_dir
    from ..record.rundir import discard_if_empty, new_run_dir
    from ..runner import default_timeline, run_closed_loop
    from . import check_load_pu, check_seconds, load_plant

    # arguments and files first: a refusal is one line, before the banner and before any port
    if not 1 <= args.watchdog <= WATCHDOG_MAX_PERIODS:
        raise ConfigError(f"--watchdog: must be a whole number of frames from 1 to {WATCHDOG_MAX_PERIODS}, "
                          f"got {args.watchdog!r}")
    check_load_pu(args.load)
    check_seconds("--connect-timeout", args.connect_timeout)
    check_seconds("--handshake-timeout", args.handshake_timeout)
    check_seconds("--peer-timeout", args.peer_timeout)
    if not (math.isfinite(args.max_error_rate) and 0.0 <= args.max_error_rate <= 1.0):
        raise ConfigError(f"--max-error-rate: must be within [0, 1] errors per frame, got {args.max_error_rate!r}")
    check_output_dir("--out", args.out)
    plant = load_plant(args)
    timeline = default_timeline(plant, args.load)
    # the link before the kernel: a missing port is said at once, not after a minute's compile
    with open_link(args.link, baud=args.baud, parity=args.parity) as link:
        out = Path(args.out)
        run_dir = new_run_dir(out.parent, out.name)  # before the compile: a bad folder is refused first
        try:
            print(SAFETY + "\n")
            if getattr(link, "latency_timer_ms", None) is not None:
                print(f"USB-serial latency timer: {link.latency_timer_ms} ms")
            handshake_s = args.handshake_timeout
            peer_path = getattr(link, "peer_path", None)
            if peer_path:
                print(f"virtual cable: point the controller at {peer_path}  (e.g. dcrig controller --link "
                      f"{peer_path} --settings SETTINGS.toml); waiting up to {args.connect_timeout:g} s for its HELLO",
                      flush=True)
                handshake_s = args.connect_timeout
            warm_kernel(plant)  # compile before the controller's handshake and before any deadline
            if hasattr(link, "wait_connected"):
                print(f"waiting up to {args.connect_timeout:g} s for the controller to connect on {link.url} ...",
                      flush=True)
                if not link.wait_connected(args.connect_timeout):
                    raise LinkTimeout(f"link '{link.url}': no controller connected within {args.connect_timeout:g} s")
            run_closed_loop(plant, link, encoding=args.encoding, paced=not args.lockstep, timeline=timeline,
                            run_dir=run_dir, watchdog_periods=args.watchdog, on_link_loss=args.on_link_loss,
                            handshake_timeout_s=handshake_s, peer_timeout_s=args.peer_timeout,
                            max_error_rate=args.max_error_rate,
                            meta={"run_name": "serve", "controller": f"on {args.link}"})
        finally:
            discard_if_empty(run_dir)
    return 0
