"""`dcrig demo`: host and emulated controller over the virtual cable, start to stop."""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import time
from pathlib import Path

from ..cli import SAFETY
from ..errors import LinkError

ROOT = Path(__file__).resolve().parents[2]
DEFAULT_MACHINE = ROOT / "configs" / "machines" / "kestrel_f3_stand.toml"
DEFAULT_CONVERTER = ROOT / "configs" / "converters" / "kestrel_f3_bridge.toml"
DEFAULT_CONTROLLER = ROOT / "configs" / "controllers" / "kestrel_f3_stand.toml"

EXAMPLE = """examples:
  dcrig demo                       # F3 stand motor, lockstep, outputs in ./dcrig-demo/
  dcrig demo --paced --out /tmp/f3 # the same at the wall-clock frame rate
"""


def add_subparser(sub):
    p = sub.add_parser("demo", help="closed-loop demo: model + emulated controller over a virtual cable",
                       description="Run the host and the emulated drive controller (a separate process) over a "
                       "pseudo-terminal pair: field up, start, accelerate to rated speed, load step, stop. "
                       "Prints a summary and writes the frame record, events and a plot.",
                       epilog=EXAMPLE + "\n" + SAFETY, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--machine", default=str(DEFAULT_MACHINE), metavar="MACHINE.toml")
    p.add_argument("--converter", default=str(DEFAULT_CONVERTER), metavar="CONVERTER.toml")
    p.add_argument("--settings", default=str(DEFAULT_CONTROLLER), metavar="SETTINGS.toml", help="emulated controller settings")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="KEY=VALUE")
    p.add_argument("--encoding", choices=("fixed", "float32"), default="fixed")
    p.add_argument("--paced", action="store_true", help="paced real time instead of lockstep")
    p.add_argument("--load", type=float, default=0.6, metavar="PU", help="load step as a fraction of rated torque")
    p.add_argument("--out", default="dcrig-demo", metavar="DIR", help="output folder")
    p.add_argument("--no-plot", action="store_true")
    p.set_defaults(func=_do_demo)


def _do_demo(args):
    from ..controller.settings import load_settings
    from ..link import HostSession, VirtualCable
    from ..loop import HostLoop
    from ..runner import StatusLine, default_timeline, send_bye, summary_lines, write_outputs
    from . import load_plant

    print(SAFETY)
    print()
    args.machine = args.machine
    plant = load_plant(args)
    load_settings(args.settings)  # validate before spawning anything
    if not 0 <= args.load <= 2:
        from ..errors import ConfigError

        raise ConfigError(f"--load: must be within [0, 2] per unit, got {args.load!r}")
    period_us = int(round(plant.derived["frame_period_us"]))
    timeline = default_timeline(plant, args.load)
    n_frames = int(timeline.end_s / (period_us * 1e-6)) + 1
    with VirtualCable() as cable:
        env = dict(os.environ)
        env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
        proc = subprocess.Popen(
            [sys.executable, "-m", "host.cli", "controller", "--link", cable.slave_path,
             "--settings", args.settings, "--quiet", "--idle-timeout", "10"],
            env=env,
        )
        try:
            session = HostSession(cable.host_link(), encoding=args.encoding, frame_period_us=period_us)
            loop = HostLoop(plant, session, period_us, watchdog_periods=10)
            peer = session.handshake(timeout_s=20.0)
            print(f"{plant.machine['machine.name']} on {plant.converter['converter.name'] if plant.converter else 'DC source'}; "
                  f"controller on {cable.slave_path} (protocol {peer.protocol_version}, {args.encoding}); "
                  f"frame {period_us} us = {loop.n_sub} model steps of {loop.p[0 if False else 0] * 0 + loop.p[__import__('rtmodel.layout', fromlist=['P_DT_S']).P_DT_S] * 1e6:.2f} us; "
                  f"{'paced real time' if args.paced else 'lockstep'}")
            loop.hooks.append(timeline)
            status = StatusLine()
            t0 = time.perf_counter()
            if args.paced:
                loop.run_paced(n_frames, on_frame=status)
            else:
                loop.run_lockstep(n_frames, on_frame=status, command_timeout_s=2.0)
            wall = time.perf_counter() - t0
            status.close()
            send_bye(session)
        finally:
            try:
                proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()
    if loop.stats.frames == 0:
        raise LinkError("demo: the controller answered no command frame")
    print()
    print("summary")
    for line in summary_lines(loop, timeline, wall):
        print("  " + line)
    if args.paced and loop.stats.jitter_ns is not None:
        from ..loop import jitter_table

        j = jitter_table(loop.stats.jitter_ns)
        print(f"  paced: frame start lateness median {j['median_us']:.0f} us, p99 {j['p99_us']:.0f} us, "
              f"max {j['max_us']:.0f} us; deadline misses {loop.stats.deadline_misses}; {loop.stats.granted}")
    files = write_outputs(loop, Path(args.out), plant.machine["machine.name"] + " - closed loop demo")
    print(f"  files: {files['frames']}, {files['events']}, {files['plot']}")
    print()
    print("This was a model. " + SAFETY.splitlines()[0])
    return 0
