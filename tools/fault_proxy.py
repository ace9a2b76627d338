"""Fault-injecting proxy between a real drive controller and a dcrig host.

    PYTHONPATH=. python tools/fault_proxy.py --controller /dev/ttyUSB0 --host accept://127.0.0.1:5021 \
        --classes corrupt,loss,repeat --rate 0.02 --seed 7 [--seconds 600]

The controller talks to this proxy as it would to the host; the host (`dcrig serve ... --link
socket://127.0.0.1:5021`, or a pty) talks to the proxy as it would to the controller. Frames
are forwarded both ways unchanged, except controller -> host frames, which meet the faults of
host/link/faults.py at the given rate. At the end (Ctrl-C or --seconds) it prints a table of
faults injected per class; compare it with the host's summary line "link: ..." and its
events, which must show each class detected at least as often.

CAUTION: a proxy in the firing path of a controller wired to a real power stage would feed it
damaged measurements on purpose. Use it on a test bench with no power stage connected; local
electrical codes and a qualified person decide everything else.
"""

from __future__ import annotations

import argparse
import sys
import time

from host.errors import DcrigError
from host.link import open_link
from host.link.faults import CLASSES, FaultProxy, FaultyLink


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--controller", required=True, metavar="URL", help="link to the controller (port, socket://, pty://)")
    ap.add_argument("--host", required=True, metavar="URL", help="link to the host (listening address, port, pty://)")
    ap.add_argument("--classes", default=",".join(CLASSES), help=f"comma-separated, of: {', '.join(CLASSES)}")
    ap.add_argument("--rate", type=float, default=0.01, help="fraction of periodic frames damaged (0..1)")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--seconds", type=float, default=None, help="stop after this long (default: Ctrl-C)")
    args = ap.parse_args(argv)
    classes = tuple(c for c in args.classes.split(",") if c)
    try:
        with open_link(args.controller) as ctl, open_link(args.host) as host:
            for ln in (ctl, host):
                if getattr(ln, "peer_path", None):
                    print(f"{ln.url}: far end {ln.peer_path}", flush=True)
            faulty = FaultyLink(host, classes, rate=args.rate, seed=args.seed)
            proxy = FaultProxy(host, ctl, faulty)
            t_end = None if args.seconds is None else time.monotonic() + args.seconds
            frames = 0
            try:
                while t_end is None or time.monotonic() < t_end:
                    frames += proxy.pump(0.01)
            except KeyboardInterrupt:
                pass
    except (DcrigError, ValueError) as err:
        print(f"error: {err}", file=sys.stderr)
        return 2
    print(f"frames forwarded {frames}")
    print("| class | injected |\n|---|---|")
    for c, n in faulty.injected.items():
        print(f"| {c} | {n} |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
